"""Test reference: the former general numba kernel for count endpoints (gamma-Poisson
posteriors evaluated per study); the library uses the generic study loop
(:mod:`octrial.simulation.generic`).

Where the table kernel looks decisions up on the (truncated) event-count lattice, this
kernel computes them for each simulated study as the analysis would, with the formulas
of :mod:`octrial.endpoints.count` compiled with numba:

* gamma-mixture posterior after x events in exposure t: components Gamma(a_j + x, b_j + t),
  weights proportional to w_j b_j^a_j Gamma(a_j + x) / (Gamma(a_j) (b_j + t)^(a_j + x));
* one arm: B = sum_j w'_j P(a'_j, b'_j lambda0) (regularized incomplete gamma,
  :func:`~octrial.simulation.special.gammainc_pair`; Q when higher is better);
* two arms: the Beta identity Pr(lambda_T / lambda_C < c) = I_{k/(1+k)}(a'_T, a'_C) with
  k = c b'_T / b'_C, over component pairs;
* predictive probability (one arm): the Poisson likelihood has a monotone likelihood
  ratio in the count, so the final posterior probability is monotone in the final count
  and final success is a count bound s_N, found once per design from this module's own B.
  The future count is a mixture of negative binomials (size a'_j, probability
  b'_j / (b'_j + t')), and PP = Pr(x + Y <= s_N) (lower better) = sum_j w'_j
  I_{p_j}(a'_j, s_N - x + 1), the negative binomial distribution function as an
  incomplete beta; Pr(x + Y >= s_N) when higher is better.

It draws the same increments from the same random words as the table kernel (the same
inverse-CDF tables, sized as the lattice is), so on any design both reach the same
decision in every study; the tests hold them to that. Grid posteriors (negative binomial
counts, log-normal priors) and two-arm predictive futility are left to the table kernel.
"""

from __future__ import annotations

import math
from typing import Any

import numba
import numpy as np

from octrial.design.model import Design
from octrial.rules.lattice import DECISION_TOLERANCE
from octrial.simulation.base import Simulator, Tally
from octrial.simulation.draws import DrawTables, draw
from octrial.simulation.estimates import add_estimate
from octrial.simulation.special import (
    betainc_pair,
    digamma,
    gammainc_pair,
    normalise_log_weights,
)
from tests.references.binary_kernel import NONE, _counts, _thresholds


def unsupported(design: Design) -> str | None:
    """Why the general count kernel cannot simulate ``design``, or ``None``."""
    family = design.family
    if family.on_grid(design):
        return ("the general count kernel needs Poisson counts with gamma or gamma-mixture "
                "priors (posteriors on a grid: the table kernel simulates these designs)")
    if design.two_arm and any(v is not None for v in design.looks.futility_predictive):
        return ("the general count kernel has no two-arm predictive futility (the table "
                "kernel has)")
    return None


@numba.njit(cache=True, inline="always")
def posterior(weights, a, b, x, t, w, a_post, b_post):
    """Gamma-mixture posterior after x events in exposure t, into (w, a_post, b_post)."""
    for j in range(weights.size):
        a_post[j] = a[j] + x
        b_post[j] = b[j] + t
        w[j] = (math.log(weights[j]) + a[j] * math.log(b[j]) + math.lgamma(a_post[j])
                - math.lgamma(a[j]) - a_post[j] * math.log(b_post[j]))
    normalise_log_weights(w)


@numba.njit(cache=True, inline="always")
def rate_cdf(w, a_post, b_post, value, upper):
    """Pr(lambda <= value) (or > value when ``upper``) under the posterior mixture."""
    total = 0.0
    for j in range(w.size):
        lower, up = gammainc_pair(a_post[j], b_post[j] * value)
        total += w[j] * (up if upper else lower)
    return total


@numba.njit(cache=True, inline="always")
def benefit(weights, a, b, x, t, benchmark, lower, w, a_post, b_post):
    """B = Pr(lambda < benchmark | x events in exposure t) (> when higher is better)."""
    posterior(weights, a, b, x, t, w, a_post, b_post)
    return rate_cdf(w, a_post, b_post, benchmark, not lower)


@numba.njit(cache=True)
def final_bound(weights, a, b, t, benchmark, lower, target):
    """The final count bound s_N: the largest count whose B reaches ``target`` when lower
    is better (-1 when none does), else the smallest (B is monotone in the count)."""
    w, ap, bp = np.empty(weights.size), np.empty(weights.size), np.empty(weights.size)

    def ok(x):
        return benefit(weights, a, b, x, t, benchmark, lower, w, ap, bp) >= target

    if lower:
        if not ok(0):
            return -1
        hi = 1
        while ok(hi):
            hi *= 2
        lo = hi // 2  # ok(lo), not ok(hi)
    else:
        if ok(0):
            return 0
        hi = 1
        while not ok(hi):
            hi *= 2
        lo = hi // 2  # not ok(lo), ok(hi)
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if ok(mid) == lower:
            lo = mid
        else:
            hi = mid
    return lo if lower else hi


@numba.njit(cache=True, inline="always")
def predictive(w, a_post, b_post, x, t_more, bound, lower):
    """Pr(final success) from x events now with exposure t_more still to come (module
    docstring); the posterior (w, a_post, b_post) already computed."""
    if lower:
        room = bound - x
        if room < 0:
            return 0.0
    else:
        room = bound - x
        if room <= 0:
            return 1.0
    total = 0.0
    for j in range(w.size):
        p = b_post[j] / (b_post[j] + t_more)
        if lower:  # Pr(Y <= room) = I_p(a, room + 1)
            total += w[j] * betainc_pair(a_post[j], room + 1.0, p)[0]
        else:  # Pr(Y >= room) = 1 - I_p(a, room)
            total += w[j] * betainc_pair(a_post[j], float(room), p)[1]
    return total


@numba.njit(cache=True)
def one_arm_studies(words, n, exposure, weights, a, b, benchmark, lower, efficacy, futility,
                    predictive_threshold, efficacy_count, futility_count, uses_counts,
                    has_prior, bound, truth, tail, tol, bounds, t_start, t_length, guide,
                    guide_start, shift, stops_efficacy, stops_futility, sums):
    """Simulate one-arm count studies; add stops per look and error sums; return the
    covered count. Thresholds are NaN (counts: -1) where a look has none."""
    n_studies, n_looks, _ = words.shape
    size = weights.size
    w, ap, bp = np.empty(size), np.empty(size), np.empty(size)
    covered = 0
    last = n_looks - 1
    for r in range(n_studies):
        x = 0
        for k in range(n_looks):
            x += draw(words[r, k, 0], k, bounds, t_start, t_length, guide, guide_start, shift)
            t = n[k] * exposure
            if uses_counts:
                e, f = efficacy_count[k], futility_count[k]
                eff = e != NONE and ((x <= e) if lower else (x >= e))
                fut = f != NONE and ((x >= f) if lower else (x <= f))
            else:
                bk = benefit(weights, a, b, x, t, benchmark, lower, w, ap, bp)
                eff = not math.isnan(efficacy[k]) and bk >= efficacy[k] - tol
                fut = not math.isnan(futility[k]) and bk < futility[k] - tol
                if k < last and not eff and not fut and not math.isnan(
                        predictive_threshold[k]):
                    pp = predictive(w, ap, bp, x, (n[last] - n[k]) * exposure, bound, lower)
                    fut = pp < predictive_threshold[k] - tol
            if k == last:
                fut = not eff
            if not (eff or fut):
                continue
            if eff:
                stops_efficacy[k] += 1
            else:
                stops_futility[k] += 1
            if has_prior:
                posterior(weights, a, b, x, t, w, ap, bp)
                mean = 0.0
                for j in range(size):
                    mean += w[j] * ap[j] / bp[j]
                cdf = rate_cdf(w, ap, bp, truth, False)
                covered += add_estimate(mean - truth, cdf, tail, sums)
            break
    return covered


@numba.njit(cache=True, inline="always")
def ratio_below(wt, at, bt, wc, ac, bc, c, upper):
    """Pr(lambda_T / lambda_C < c) (or > c when ``upper``) by the Beta identity."""
    total = 0.0
    for i in range(wt.size):
        for j in range(wc.size):
            k = c * bt[i] / bc[j]
            lower, up = betainc_pair(at[i], ac[j], k / (1.0 + k))
            total += wt[i] * wc[j] * (up if upper else lower)
    return min(max(total, 0.0), 1.0)


@numba.njit(cache=True)
def two_arm_studies(words, n_t, n_c, exposure, weights_t, a_t, b_t, weights_c, a_c, b_c,
                    threshold, lower, efficacy, futility, truth, tail, tol, bounds, t_start,
                    t_length, guide, guide_start, shift, stops_efficacy, stops_futility, sums):
    """Simulate two-arm count studies (rate ratio); see :func:`one_arm_studies`. The
    summaries are about the log rate ratio."""
    n_studies, n_looks, _ = words.shape
    wt, at, bt = np.empty(weights_t.size), np.empty(weights_t.size), np.empty(weights_t.size)
    wc, ac, bc = np.empty(weights_c.size), np.empty(weights_c.size), np.empty(weights_c.size)
    covered = 0
    last = n_looks - 1
    for r in range(n_studies):
        x_t = 0
        x_c = 0
        for k in range(n_looks):
            x_t += draw(words[r, k, 0], 2 * k, bounds, t_start, t_length, guide, guide_start,
                        shift)
            x_c += draw(words[r, k, 1], 2 * k + 1, bounds, t_start, t_length, guide,
                        guide_start, shift)
            posterior(weights_t, a_t, b_t, x_t, n_t[k] * exposure, wt, at, bt)
            posterior(weights_c, a_c, b_c, x_c, n_c[k] * exposure, wc, ac, bc)
            bk = ratio_below(wt, at, bt, wc, ac, bc, threshold, not lower)
            eff = not math.isnan(efficacy[k]) and bk >= efficacy[k] - tol
            fut = not math.isnan(futility[k]) and bk < futility[k] - tol
            if k == last:
                fut = not eff
            if not (eff or fut):
                continue
            (stops_efficacy if eff else stops_futility)[k] += 1
            mean = 0.0
            for i in range(wt.size):
                mean += wt[i] * (digamma(at[i]) - math.log(bt[i]))
            for j in range(wc.size):
                mean -= wc[j] * (digamma(ac[j]) - math.log(bc[j]))
            cdf = ratio_below(wt, at, bt, wc, ac, bc, math.exp(truth), False)
            covered += add_estimate(mean - truth, cdf, tail, sums)
            break
    return covered


def draw_tables(design: Design, truth: tuple[float, ...]) -> DrawTables:
    """Each look's increment tables per arm, truncated as the table kernel truncates them
    (so that both kernels draw the same increments from the same words)."""
    family = design.family
    n = np.array(design.looks.per_arm, dtype=np.int64)
    increments = np.diff(n, axis=0, prepend=0)
    pmfs = []
    for k in range(n.shape[0]):
        for j, theta in enumerate(truth):
            m = int(increments[k, j])
            size = min(family.lattice_size(design, j, m),
                       family.lattice_size(design, j, int(n[k, j])))
            pmfs.append(family.increment_pmf(design, theta, m, size))
    return DrawTables.from_pmfs(pmfs)


def _mixture(prior: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    return (np.array(prior.weights, dtype=float), np.array(prior.a, dtype=float),
            np.array(prior.b, dtype=float))


class CountSimulator(Simulator):
    """Count studies by the general kernel (see module docstring)."""

    kernel = "general"

    def __init__(self, design: Design, truth: tuple[float, ...], level: float) -> None:
        h = design.hypothesis
        looks = design.looks
        self.looks = looks.count
        self.two_arm = design.two_arm
        self.tables = draw_tables(design, truth)
        exposure = float(design.endpoint.exposure)
        lower = h.better == "lower"
        rule = (_thresholds(looks.efficacy), _thresholds(looks.futility))
        target = float(design.family.target_value(h, tuple(truth)))
        tail = (1.0 - level) / 2.0
        if self.two_arm:
            n = np.array(looks.per_arm, dtype=float)
            self.has_prior = True
            self.arguments: tuple[Any, ...] = (
                n[:, 0].copy(), n[:, 1].copy(), exposure, *_mixture(design.arms[0].prior),
                *_mixture(design.arms[1].prior), float(h.threshold), lower, *rule, target,
                tail, DECISION_TOLERANCE)
            return
        n = np.array([per[0] for per in looks.per_arm], dtype=float)
        prior = design.arms[0].prior
        self.has_prior = prior is not None
        mixture = _mixture(prior) if self.has_prior else (np.ones(1), np.ones(1), np.ones(1))
        bound = NONE
        final = looks.efficacy[-1]
        if self.has_prior and final is not None and not looks.uses_counts:
            bound = int(final_bound(*mixture, n[-1] * exposure, float(h.benchmark), lower,
                                    final - DECISION_TOLERANCE))
        self.arguments = (
            n, exposure, *mixture, float(h.benchmark), lower, *rule,
            _thresholds(looks.futility_predictive), _counts(looks.efficacy_count, looks.count),
            _counts(looks.futility_count, looks.count), looks.uses_counts, self.has_prior,
            bound, target, tail, DECISION_TOLERANCE)

    def simulate(self, rng: np.random.Generator, replicates: int) -> Tally:
        arms = 2 if self.two_arm else 1
        words = rng.bit_generator.random_raw(replicates * self.looks * arms).reshape(
            replicates, self.looks, arms)
        efficacy = np.zeros(self.looks, dtype=np.int64)
        futility = np.zeros(self.looks, dtype=np.int64)
        sums = np.zeros(3)
        kernel = two_arm_studies if self.two_arm else one_arm_studies
        covered = kernel(words, *self.arguments, *self.tables.arrays(), efficacy, futility,
                         sums)
        if not self.has_prior:
            return Tally(replicates, efficacy, futility)
        return Tally(replicates, efficacy, futility, sums, int(covered))
