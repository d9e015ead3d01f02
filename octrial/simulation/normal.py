"""General kernels for normal endpoints: simulated studies summarised by sufficient statistics.

**Data.** A study is never simulated subject by subject. For each arm j and look k the
m = n_k - n_{k-1} new subjects are summarised by their mean and their sum of squared
deviations about it, which for normal data are independent with exact distributions

    mean_kj ~ N(mu_j, sigma^2 / m),    squares_kj ~ sigma^2 chi^2_{m-1}

(Cochran's theorem), drawn as ``mu + sigma z / sqrt(m)`` with ``z = rng.standard_normal``
and ``sigma^2 2 rng.standard_gamma((m - 1) / 2)`` (only when the sd is unknown). Looks are
pooled exactly: n_k xbar_k = n_{k-1} xbar_{k-1} + m mean_kj, and the sums of squares add
with the between-increment term n_{k-1} m / n_k (xbar_{k-1} - mean_kj)^2 (Chan, Golub &
LeVeque 1983). Every number is drawn for every look whether or not the study has stopped
(normals first, shape (studies, looks, arms), then the chi-squares), so a study's data do
not depend on the decision rule: candidates that differ only in thresholds see the same
studies (common random numbers), which calibration relies on. The true sd is
``endpoint.sd`` when known and ``endpoint.true_sd`` when the analysis treats it as unknown.

**Known sd** (this module). On the benefit scale eta = sign x (mean, or difference in
means) with score S = I x estimate and information I (see
:mod:`octrial.endpoints.normal`), the normal-mixture posterior has components of precision
P_j = p_j + I and mean (m_j p_j + S) / P_j, with weights proportional to
w_j N(S; I m_j, I + I^2 / p_j) (a flat prior: p = 0, one component), so

    B = sum_j w'_j Pr(N(M_j, 1 / P_j) > c),
    PP = sum_j w'_j Phi((S + M_j D - u_K) / sqrt(D + D^2 / P_j)) = Pr(S_K >= u_K | S),

with D = I_K - I_k and u_K the final look's bound on the score (where B reaches the
final threshold; B is increasing in S, so success at the end is S_K >= u_K). u_K is
found here by bisection on this module's own B, not taken from
:mod:`octrial.rules.normal`, so the two are independent checks of each other.

**Decisions** are the stop rule of :mod:`octrial.rules.stop`, by its numba twins on the
thresholds of :meth:`~octrial.rules.stop.Rule.arrays`; PP is computed only when
:func:`~octrial.rules.stop.wants_predictive_at` asks for it.

**Unknown sd**: :mod:`octrial.simulation.normal_unknown`.
"""

from __future__ import annotations

import math
from typing import Any

import numba
import numpy as np

from octrial.design.model import Design
from octrial.endpoints.normal import benefit_components
from octrial.rules.stop import (
    CONTINUE,
    DECISION_TOLERANCE,
    EFFICACY,
    Rule,
    look_decision_at,
    predictive_decision_at,
    wants_predictive_at,
)
from octrial.simulation.base import Simulator, Tally
from octrial.simulation.estimates import add_estimate
from octrial.simulation.special import normal_sf, normalise_log_weights

BISECTIONS = 200


def increment_sizes(design: Design) -> np.ndarray:
    """New subjects per look and arm, shape (looks, arms)."""
    n = np.array(design.looks.per_arm, dtype=np.int64)
    return np.diff(n, axis=0, prepend=0)


def draw_increments(
    rng: np.random.Generator, replicates: int, sizes: np.ndarray, mean: np.ndarray,
    sd: np.ndarray, squares: bool,
) -> tuple[np.ndarray, np.ndarray | None]:
    """Each look's new subjects per arm as (mean, sum of squares about it).

    Parameters
    ----------
    sizes : ndarray of int, shape (looks, arms)
        New subjects per look and arm.
    mean, sd : ndarray, shape (arms,) or (replicates, arms)
        True means and sds: one scenario, or one per study (a design prior).
    squares : bool
        Also draw the sums of squares (unknown sd).

    Returns
    -------
    means, squares : ndarray, shape (replicates, looks, arms)
        ``squares`` is ``None`` when not asked for.
    """
    looks, arms = sizes.shape
    mean = np.asarray(mean, dtype=float).reshape(-1, 1, arms)
    sd = np.asarray(sd, dtype=float).reshape(-1, 1, arms)
    z = rng.standard_normal((replicates, looks, arms))
    means = mean + sd * z / np.sqrt(sizes)
    if not squares:
        return means, None
    chi2 = 2.0 * rng.standard_gamma((sizes - 1) / 2.0, size=(replicates, looks, arms))
    return means, sd**2 * chi2


@numba.njit(cache=True, inline="always")
def posterior(s, info, weights, means, precisions, w, m, p):
    """Normal-mixture posterior of eta after score ``s`` with information ``info``, into
    (w, m, p): weights, means, precisions."""
    for j in range(weights.size):
        p[j] = precisions[j] + info
        m[j] = (means[j] * precisions[j] + s) / p[j]
    if weights.size == 1:
        w[0] = 1.0
        return
    for j in range(weights.size):
        var = info + info * info / precisions[j]
        z = s - info * means[j]
        w[j] = math.log(weights[j]) - 0.5 * z * z / var - 0.5 * math.log(var)
    normalise_log_weights(w)


@numba.njit(cache=True, inline="always")
def benefit(s, info, claim, weights, means, precisions, w, m, p):
    """B = Pr(eta > claim | score s)."""
    posterior(s, info, weights, means, precisions, w, m, p)
    total = 0.0
    for j in range(weights.size):
        total += w[j] * normal_sf((claim - m[j]) * math.sqrt(p[j]))
    return total


@numba.njit(cache=True, inline="always")
def predictive(s, d, final_upper, w, m, p):
    """Pr(S_K >= final_upper | score s now), the posterior (w, m, p) already computed, with
    d = I_K - I_k information still to come."""
    if math.isinf(final_upper):
        return 0.0 if final_upper > 0 else 1.0
    total = 0.0
    for j in range(w.size):
        total += w[j] * normal_sf((final_upper - s - m[j] * d) / math.sqrt(d + d * d / p[j]))
    return total


@numba.njit(cache=True)
def score_bound(target, info, claim, weights, means, precisions):
    """The score where B reaches ``target`` (B is increasing in the score), by bisection;
    -inf when every score reaches it."""
    if target <= 0.0:
        return -np.inf
    w, m, p = np.empty(weights.size), np.empty(weights.size), np.empty(weights.size)
    scale = math.sqrt(info) + info * (abs(claim) + 1.0)
    for j in range(weights.size):
        scale += abs(means[j]) * precisions[j] + math.sqrt(precisions[j] + info)
    lo, hi = -scale, scale
    while benefit(lo, info, claim, weights, means, precisions, w, m, p) >= target:
        lo *= 2.0
        if lo < -1e300:
            return -np.inf
    while benefit(hi, info, claim, weights, means, precisions, w, m, p) < target:
        hi *= 2.0
        if hi > 1e300:
            return np.inf
    for _ in range(BISECTIONS):
        mid = 0.5 * (lo + hi)
        if mid == lo or mid == hi:
            break
        if benefit(mid, info, claim, weights, means, precisions, w, m, p) >= target:
            hi = mid
        else:
            lo = mid
    return hi


@numba.njit(cache=True)
def known_sd_studies(means, sizes, n, info, sign, claim, weights, prior_means, precisions,
                     efficacy, futility, predictive_threshold, final_upper, has_estimate,
                     truth, tail, tol, stops_efficacy, stops_futility, sums):
    """Simulate known-sd studies from their increment means (studies, looks, arms); add
    stops per look and error sums; return the covered count. Thresholds are NaN where a
    look has none; ``truth`` is the true target (mean, or difference in means).

    A one-component prior (normal or flat) is computed with scalars: passing the
    component arrays to a helper costs more than its arithmetic (reference counting)."""
    n_studies, n_looks, n_arms = means.shape
    size = weights.size
    single = size == 1
    m0, p0 = prior_means[0], precisions[0]
    w, m, p = np.empty(size), np.empty(size), np.empty(size)
    total = np.zeros(n_arms)
    last = n_looks - 1
    covered = 0
    for r in range(n_studies):
        for j in range(n_arms):
            total[j] = 0.0
        for k in range(n_looks):
            for j in range(n_arms):
                total[j] += sizes[k, j] * means[r, k, j]
            estimate = total[0] / n[k, 0]
            if n_arms == 2:
                estimate -= total[1] / n[k, 1]
            s = sign * info[k] * estimate
            if single:
                big_p = p0 + info[k]
                big_m = (m0 * p0 + s) / big_p
                b = normal_sf((claim - big_m) * math.sqrt(big_p))
            else:
                b = benefit(s, info[k], claim, weights, prior_means, precisions, w, m, p)
            code = look_decision_at(efficacy[k], futility[k], k == last, b, tol)
            if code == CONTINUE and wants_predictive_at(predictive_threshold[k], k == last):
                d = info[last] - info[k]
                if not single:
                    pp = predictive(s, d, final_upper, w, m, p)
                elif math.isinf(final_upper):
                    pp = 0.0 if final_upper > 0 else 1.0
                else:
                    pp = normal_sf((final_upper - s - big_m * d)
                                   / math.sqrt(d + d * d / big_p))
                code = predictive_decision_at(predictive_threshold[k], pp, tol)
            if code == CONTINUE:
                continue
            if code == EFFICACY:
                stops_efficacy[k] += 1
            else:
                stops_futility[k] += 1
            if has_estimate:
                if single:
                    w[0], m[0], p[0] = 1.0, big_m, big_p
                mean = 0.0
                cdf = 0.0
                for j in range(size):
                    mean += w[j] * m[j]
                    # Pr(target <= truth): target = sign x eta
                    if sign > 0:
                        cdf += w[j] * normal_sf((m[j] - truth) * math.sqrt(p[j]))
                    else:
                        cdf += w[j] * normal_sf((-truth - m[j]) * math.sqrt(p[j]))
                covered += add_estimate(sign * mean - truth, cdf, tail, sums)
            break
    return covered


def design_prior_draws(design: Design, rng: np.random.Generator,
                       replicates: int) -> tuple[np.ndarray, np.ndarray]:
    """True (mean, sd) per study and arm, shape (replicates, arms), drawn from the arms'
    design priors: normal-inverse-gamma, sigma^2 = scale / Gamma(shape) then
    mu ~ N(mean, sigma^2 / mean_n) (the sd varies between studies); a normal mixture
    (known sd), a component then a normal draw."""
    from octrial.endpoints.normal import NormalInverseGamma

    means, sds = [], []
    for arm in design.arms:
        prior = arm.design_prior
        if isinstance(prior, NormalInverseGamma):
            variance = prior.scale / rng.standard_gamma(prior.shape, replicates)
            means.append(prior.mean + np.sqrt(variance / prior.mean_n)
                         * rng.standard_normal(replicates))
            sds.append(np.sqrt(variance))
        else:
            component = rng.choice(len(prior.weights), size=replicates, p=prior.weights)
            means.append(np.asarray(prior.mean)[component] + np.asarray(prior.sd)[component]
                         * rng.standard_normal(replicates))
            sds.append(np.full(replicates, float(design.endpoint.sd)))
    return np.column_stack(means), np.column_stack(sds)


def unsupported(design: Design) -> str | None:
    """Why the normal kernels cannot simulate ``design``, or ``None``."""
    if design.looks.uses_counts:
        return "a rule stated in counts needs a count or binary endpoint"
    if any(prior is None for prior in _priors(design)):
        return "an analysis prior"
    return None


def _priors(design: Design) -> list[Any]:
    if design.endpoint.known_sd:
        return [design.family.analysis_prior(design)]
    return [arm.prior for arm in design.arms]


class NormalSimulator(Simulator):
    """Normal studies with a known sd by the general kernel (see module docstring);
    constructing one for an unknown-sd design gives the matching simulator of
    :mod:`octrial.simulation.normal_unknown`."""

    kernel = "general"

    # returns the unknown-sd simulator, a sibling class, for unknown-sd designs
    def __new__(  # type: ignore[misc]
            cls, design: Design, truth: tuple[float, ...], level: float) -> Simulator:
        if cls is NormalSimulator and not design.endpoint.known_sd:
            from octrial.simulation.normal_unknown import UnknownSdSimulator

            return UnknownSdSimulator(design, truth, level)
        return super().__new__(cls)

    def __init__(self, design: Design, truth: tuple[float, ...], level: float) -> None:
        family = design.family
        h = design.hypothesis
        looks = design.looks
        self.looks = looks.count
        self.sizes = increment_sizes(design)
        self.truth = np.array(truth, dtype=float)
        self.sd = np.full(len(truth), float(design.endpoint.sd))
        info = np.array([family.information(design, n) for n in looks.per_arm])
        weights, means, precisions = benefit_components(family.analysis_prior(design), h.sign)
        claim = float(family.claim_value(design))
        final = looks.efficacy[-1]
        final_upper = score_bound(final - DECISION_TOLERANCE, info[-1], claim, weights, means,
                                  precisions) if final is not None else math.inf
        self.final_upper = final_upper
        efficacy, futility, predictive_threshold, self.tolerance = Rule.of(looks).arrays()
        self.arguments: tuple[Any, ...] = (
            self.sizes.astype(float), np.array(looks.per_arm, dtype=float), info,
            float(h.sign), claim, weights, means, precisions,
            efficacy, futility, predictive_threshold, final_upper,
        )
        self.target = float(family.target_value(h, tuple(truth)))
        self.tail = (1.0 - level) / 2.0

    def draw(self, rng: np.random.Generator, replicates: int, mean: np.ndarray | None = None,
             sd: np.ndarray | None = None) -> tuple[np.ndarray, ...]:
        """This batch's increments (the only use of ``rng``), at the scenario's truth or
        at per-study true ``mean`` and ``sd`` of shape (replicates, arms)."""
        mean = self.truth if mean is None else mean
        sd = self.sd if sd is None else sd
        return draw_increments(rng, replicates, self.sizes, mean, sd, False)[:1]

    def simulate(self, rng: np.random.Generator, replicates: int) -> Tally:
        return self.run(self.draw(rng, replicates), replicates, True)

    def run(self, data: tuple[np.ndarray, ...], replicates: int, estimate: bool) -> Tally:
        """The tally of studies with the given increments (``estimate``: with bias, RMSE
        and coverage sums, which need one true value for every study)."""
        efficacy = np.zeros(self.looks, dtype=np.int64)
        futility = np.zeros(self.looks, dtype=np.int64)
        sums = np.zeros(3)
        # numba's Dispatcher type does not carry the compiled function's parameters
        covered = known_sd_studies(  # type: ignore[call-arg]
            data[0], *self.arguments, estimate, self.target, self.tail, self.tolerance,
            efficacy, futility, sums)
        if not estimate:
            return Tally(replicates, efficacy, futility)
        return Tally(replicates, efficacy, futility, sums, int(covered))
