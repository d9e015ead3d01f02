"""The decisions of event-driven time-to-event studies, in numba: posterior probabilities
of benefit and predictive probabilities of final success from each arm's events and
exposure at a look, for the patient-level kernel (:mod:`octrial.simulation.event_driven`).

* Gamma (mixture) posteriors of one piece's hazard: :func:`benefit_at` (one arm, the
  regularized incomplete gamma; two arms, the beta form of the hazard ratio).
* One arm with several pieces: survival at a landmark, :func:`landmark_benefit` (the
  Moschopoulos series, :func:`gamma_sum_cdf_at`).
* Two arms, the normal approximation on the log hazard ratio: :func:`normal_benefit`.
* Predictive probabilities of final success: :func:`one_arm_predictive`,
  :func:`two_arm_predictive` (the maths in
  :mod:`octrial.endpoints.survival_predictive`) and :func:`normal_predictive`.
* The decision at a look from all of these and the one stop rule: :func:`look_code`,
  shared by the subject-level and the event-level kernels.

Each is checked against scipy in tests/test_event_driven*.py (docs/validation.md).
"""

from __future__ import annotations

import math
from typing import Any

import numba
import numpy as np

from octrial.rules.stop import (
    CONTINUE,
    look_decision_at,
    predictive_decision_at,
    wants_predictive_at,
)
from octrial.simulation.special import betainc, gammainc_pair, normal_sf


@numba.njit(cache=True)
def posterior_into(events: np.ndarray, exposure: np.ndarray, log_w: np.ndarray,
                   a: np.ndarray, b: np.ndarray, post_w: np.ndarray, post_a: np.ndarray,
                   post_b: np.ndarray) -> None:
    """Each arm's gamma-mixture posterior (weights, shapes, rates; rows: arms) from its
    events and exposure, into ``post_w``, ``post_a`` and ``post_b``."""
    arms, width = a.shape
    for j in range(arms):
        top = -np.inf
        for c in range(width):
            post_a[j, c] = a[j, c] + events[j]
            post_b[j, c] = b[j, c] + exposure[j]
            if math.isinf(log_w[j, c]):
                post_w[j, c] = -np.inf
                continue
            # log marginal likelihood of the component (the gamma-Poisson form)
            post_w[j, c] = (log_w[j, c] + a[j, c] * math.log(b[j, c])
                            + math.lgamma(post_a[j, c]) - math.lgamma(a[j, c])
                            - post_a[j, c] * math.log(post_b[j, c]))
            top = max(top, post_w[j, c])
        total = 0.0
        for c in range(width):
            post_w[j, c] = math.exp(post_w[j, c] - top) if not math.isinf(post_w[j, c]) else 0.0
            total += post_w[j, c]
        for c in range(width):
            post_w[j, c] /= total


@numba.njit(cache=True)
def benefit_at(events: np.ndarray, exposure: np.ndarray, log_w: np.ndarray, a: np.ndarray,
               b: np.ndarray, claim: float, lower: bool) -> float:
    """Posterior probability of benefit from each arm's events and exposure (module
    docstring of :mod:`octrial.endpoints.time_to_event`)."""
    arms, width = a.shape
    post_w = np.empty((arms, width))
    post_a = np.empty((arms, width))
    post_b = np.empty((arms, width))
    posterior_into(events, exposure, log_w, a, b, post_w, post_a, post_b)
    below = 0.0
    if arms == 1:
        for c in range(width):
            if post_w[0, c] > 0.0:
                below += post_w[0, c] * gammainc_pair(post_a[0, c], post_b[0, c] * claim)[0]
    else:
        for c in range(width):
            for e in range(width):
                w = post_w[0, c] * post_w[1, e]
                if w > 0.0:
                    k = claim * post_b[0, c] / post_b[1, e]
                    below += w * betainc(post_a[0, c], post_a[1, e], k / (1.0 + k))
    below = min(max(below, 0.0), 1.0)
    return below if lower else 1.0 - below


@numba.njit(cache=True)
def one_arm_predictive(d: float, x: float, final: float, log_w: np.ndarray, a: np.ndarray,
                       b: np.ndarray, bound: float, lower: bool) -> float:
    """Predictive probability of final success of one arm with ``d`` events in exposure
    ``x`` and ``final`` events at the final analysis: Pr(x + Y >= t*) (lower hazards
    better; Pr(x + Y <= t*) otherwise), the exposure Y until the remaining events
    compound gamma (:mod:`octrial.endpoints.survival_predictive`), t* = ``bound``."""
    width = a.shape[1]
    post_w = np.empty((1, width))
    post_a = np.empty((1, width))
    post_b = np.empty((1, width))
    posterior_into(np.array([d]), np.array([x]), log_w, a, b, post_w, post_a, post_b)
    m = final - d
    if math.isinf(bound):
        return 1.0 if (bound > 0.0) != lower else 0.0
    y = bound - x
    if m <= 0.0 or y <= 0.0:
        tail = 1.0 if y <= 0.0 else 0.0
    else:
        tail = 0.0
        for c in range(width):
            if post_w[0, c] > 0.0:
                tail += post_w[0, c] * betainc(post_a[0, c], m, post_b[0, c]
                                               / (post_b[0, c] + y))
        tail = min(max(tail, 0.0), 1.0)
    if lower:
        return tail
    return 1.0 - tail if m > 0.0 else (1.0 if x <= bound else 0.0)


@numba.njit(cache=True)
def two_arm_predictive(rng: Any, d: np.ndarray, x: np.ndarray, final: float,
                       log_w: np.ndarray, a: np.ndarray, b: np.ndarray, claim: float,
                       lower: bool, target: float, quantiles: np.ndarray,
                       draws: int) -> float:
    """Predictive probability of final success of two arms with events ``d`` and
    exposure ``x`` and ``final`` events in total at the final analysis, under the split
    approximation (:mod:`octrial.endpoints.survival_predictive`: the arms' future
    exposures in the ratio rho of their posterior rates, the treatment's share of the
    future events binomial given the hazards). One prior component per arm (``quantiles``
    given: success iff k / (1 + k) is at least, or with higher hazards better at most,
    the entry of the treatment's final events; k = c b_T / b_C): exactly, the
    treatment's share being beta-binomial and k unchanged. Mixtures: ``draws`` draws of
    (component, hazards, share, the control's future exposure S) from ``rng``, final
    success by :func:`benefit_at` against ``target`` (the final threshold less the stop
    rule's tolerance)."""
    width = a.shape[1]
    post_w = np.empty((2, width))
    post_a = np.empty((2, width))
    post_b = np.empty((2, width))
    posterior_into(d, x, log_w, a, b, post_w, post_a, post_b)
    m = int(final - d[0] - d[1])
    if quantiles.size > 0:
        a_t, a_c = post_a[0, 0], post_a[1, 0]
        k = claim * post_b[0, 0] / post_b[1, 0]
        z = k / (1.0 + k)
        # beta-binomial pmf from its value at 0 by the ratio of successive terms, in logs
        log_p = (math.lgamma(a_c + m) + math.lgamma(a_t + a_c) - math.lgamma(a_c)
                 - math.lgamma(a_t + a_c + m))
        total = 0.0
        for j in range(m + 1):
            q = quantiles[int(d[0]) + j]
            if (z >= q) if lower else (z <= q):
                total += math.exp(log_p)
            if j < m:
                log_p += math.log((m - j) * (a_t + j)) - math.log((j + 1) * (a_c + m - j - 1))
        return min(total, 1.0)
    rate_t = 0.0
    rate_c = 0.0
    for c in range(width):
        rate_t += post_w[0, c] * post_b[0, c]
        rate_c += post_w[1, c] * post_b[1, c]
    rho = rate_t / rate_c
    hits = 0
    fd = np.empty(2)
    fx = np.empty(2)
    lam = np.empty(2)
    for _ in range(draws):
        for j in range(2):
            c = 0
            if width > 1:
                u = rng.random()
                while c < width - 1 and u >= post_w[j, c]:
                    u -= post_w[j, c]
                    c += 1
            lam[j] = rng.gamma(post_a[j, c], 1.0 / post_b[j, c])
        rate = rho * lam[0] + lam[1]
        share = rng.binomial(m, rho * lam[0] / rate) if m > 0 else 0
        s = rng.gamma(m, 1.0 / rate) if m > 0 else 0.0
        fd[0] = d[0] + share
        fd[1] = d[1] + m - share
        fx[0] = x[0] + rho * s
        fx[1] = x[1] + s
        hits += benefit_at(fd, fx, log_w, a, b, claim, lower) >= target
    return hits / draws


LANDMARK_TAIL = 1e-13
"""Probability mass of the Moschopoulos weights left out by :func:`gamma_sum_cdf_at`
(the bound on its truncation error)."""


@numba.njit(cache=True)
def _nb_support(a: float, c: float) -> tuple[int, int]:
    """Indices k that hold all but a negligible mass of NegativeBinomial(a, 1 - c)
    (mean a c / (1 - c)): 14 standard deviations each side, and 40 more."""
    mean = a * c / (1.0 - c)
    sd = math.sqrt(mean / (1.0 - c))
    return max(0, int(mean - 14.0 * sd - 40.0)), int(mean + 14.0 * sd + 40.0) + 1


@numba.njit(cache=True)
def gamma_sum_cdf_at(x: float, shapes: np.ndarray, rates: np.ndarray) -> float:
    """Pr(sum_j X_j <= x), X_j ~ Gamma(shapes[j], rates[j]) independent: the series of
    Moschopoulos (1985) as in :func:`octrial.endpoints.survival_maths.gamma_sum_cdf`,
    sum_k p_k P(rho + k, x / beta_1), its weights p_k the distribution of a sum of
    independent NegativeBinomial(a_j, beta_1 / beta_j) counts: each pmf from its log
    (math.lgamma) over its bulk, convolved, and P(rho + k, y) by the upward recurrence
    P(s + 1, y) = P(s, y) - y^s e^-y / Gamma(s + 1) from one incomplete gamma (absolute
    error about 1e-16 per term). The mass
    left out is below :data:`LANDMARK_TAIL` (14 standard deviations of each count)."""
    count = shapes.size
    beta1 = np.inf
    for j in range(count):
        beta1 = min(beta1, 1.0 / rates[j])
    rho = 0.0
    for j in range(count):
        rho += shapes[j]
    # the weights: start with a point mass at 0, convolve each count's pmf
    lo, hi = 0, 1
    pmf = np.ones(1)
    for j in range(count):
        c = 1.0 - beta1 * rates[j]  # 1 - beta_1 / beta_j
        if c <= 0.0:
            continue
        a = shapes[j]
        first, last = _nb_support(a, c)
        one = np.empty(last - first)
        base = a * math.log(1.0 - c) - math.lgamma(a)
        for k in range(first, last):
            one[k - first] = math.exp(base + math.lgamma(a + k) - math.lgamma(k + 1.0)
                                      + k * math.log(c))
        joined = np.zeros(pmf.size + one.size - 1)
        for i in range(pmf.size):
            if pmf[i] == 0.0:
                continue
            for k in range(one.size):
                joined[i + k] += pmf[i] * one[k]
        pmf = joined
        lo, hi = lo + first, lo + first + pmf.size
    y = x / beta1
    if y <= 0.0:
        return 0.0
    lower = gammainc_pair(rho + lo, y)[0]
    log_y = math.log(y)
    total = 0.0
    for i in range(hi - lo):
        total += pmf[i] * max(lower, 0.0)
        # each term from its log: a running product would start from an underflow
        s = rho + lo + i
        lower -= math.exp(s * log_y - y - math.lgamma(s + 1.0))
    return min(max(total, 0.0), 1.0)


@numba.njit(cache=True)
def landmark_benefit(events: np.ndarray, exposure: np.ndarray, log_w: np.ndarray,
                     a: np.ndarray, b: np.ndarray, overlap: np.ndarray, limit: float,
                     lower: bool) -> float:
    """One arm, several pieces: Pr(S(L) > S0(L) | data) = Pr(sum_j Delta_j h_j <
    ``limit``), the pieces' hazards with gamma priors ``a[j, c]``, ``b[j, c]`` sharing
    the mixture component c (log prior weights ``log_w``); each component's posterior
    gives a sum of independent Gamma(a + d_j, (b + E_j) / Delta_j)
    (:func:`gamma_sum_cdf_at`), mixed by the components' posterior weights (module
    docstring of :mod:`octrial.endpoints.survival_maths`). ``lower``: lower hazards
    better, so the benefit is that probability (else its complement)."""
    pieces, width = a.shape
    used = 0
    for j in range(pieces):
        if overlap[j] > 0.0:
            used += 1
    shapes = np.empty(used)
    rates = np.empty(used)
    log_post = np.full(width, -np.inf)
    top = -np.inf
    for c in range(width):
        if math.isinf(log_w[c]):
            continue
        value = log_w[c]
        for j in range(pieces):
            post_a = a[j, c] + events[j]
            value += (a[j, c] * math.log(b[j, c]) + math.lgamma(post_a)
                      - math.lgamma(a[j, c]) - post_a * math.log(b[j, c] + exposure[j]))
        log_post[c] = value
        top = max(top, value)
    total = 0.0
    below = 0.0
    for c in range(width):
        if math.isinf(log_post[c]):
            continue
        weight = math.exp(log_post[c] - top)
        total += weight
        u = 0
        for j in range(pieces):
            if overlap[j] > 0.0:
                shapes[u] = a[j, c] + events[j]
                rates[u] = (b[j, c] + exposure[j]) / overlap[j]
                u += 1
        below += weight * gamma_sum_cdf_at(limit, shapes, rates)
    below = min(max(below / total, 0.0), 1.0)
    return below if lower else 1.0 - below


@numba.njit(cache=True)
def log_hazard_ratio_score(events: np.ndarray, exposure: np.ndarray, shape: np.ndarray,
                           sign: float, factor: float) -> tuple[float, float]:
    """(score S = sign I log HR-hat, information I) of two arms: each arm's multiplier
    estimated by d / sum_j r_j E_j over the pieces, I = D q / (1 + q)^2 = D ``factor``
    from the D events of both arms (Schoenfeld 1981)."""
    d = np.zeros(2)
    weighted = np.zeros(2)
    for j in range(2):
        for p in range(shape.size):
            d[j] += events[j, p]
            weighted[j] += shape[p] * exposure[j, p]
    information = (d[0] + d[1]) * factor
    estimate = math.log(d[0] / weighted[0]) - math.log(d[1] / weighted[1])
    return sign * information * estimate, information


@numba.njit(cache=True)
def _normal_posterior(score: float, information: float, w: np.ndarray, m: np.ndarray,
                      p0: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The normal mixture posterior of eta after score S with information I (as
    :func:`octrial.endpoints.normal.update`): precision p0 + I, mean (m p0 + S) /
    precision, weights by the marginal N(S; I m, I + I^2 / p0); returns the weights,
    means and precisions."""
    post_w = np.empty(w.size)
    post_m = np.empty(w.size)
    post_p = np.empty(w.size)
    top = -np.inf
    for j in range(w.size):
        post_p[j] = p0[j] + information
        post_m[j] = (m[j] * p0[j] + score) / post_p[j]
        if w.size == 1:
            post_w[j] = 0.0
            top = 0.0
            continue
        var = information + information * information / p0[j]
        gap = score - information * m[j]
        post_w[j] = math.log(w[j]) - 0.5 * math.log(var) - 0.5 * gap * gap / var
        top = max(top, post_w[j])
    total = 0.0
    for j in range(w.size):
        post_w[j] = math.exp(post_w[j] - top)
        total += post_w[j]
    for j in range(w.size):
        post_w[j] /= total
    return post_w, post_m, post_p


@numba.njit(cache=True)
def normal_benefit(score: float, information: float, w: np.ndarray, m: np.ndarray,
                   p0: np.ndarray, claim: float) -> float:
    """B = Pr(eta > claim | S) = sum_j w'_j Phi((M_j - claim) sqrt(P_j)) (module
    docstring of :mod:`octrial.rules.normal`); an infinite score (no events in an arm)
    gives 0 or 1."""
    if not math.isfinite(score):
        return 1.0 if score > 0 else 0.0
    post_w, post_m, post_p = _normal_posterior(score, information, w, m, p0)
    out = 0.0
    for j in range(w.size):
        out += post_w[j] * normal_sf(-(post_m[j] - claim) * math.sqrt(post_p[j]))
    return min(max(out, 0.0), 1.0)


@numba.njit(cache=True)
def normal_predictive(score: float, information: float, final_information: float,
                      final_upper: float, w: np.ndarray, m: np.ndarray,
                      p0: np.ndarray) -> float:
    """Pr(S_K >= S* | S): S_K - S given the posterior component j is N(M_j D, D + D^2 /
    P_j), D = I_K - I (as :func:`octrial.rules.normal.predictive`)."""
    if not math.isfinite(final_upper):
        return 0.0 if final_upper > 0 else 1.0
    if not math.isfinite(score):
        return 1.0 if score > 0 else 0.0
    post_w, post_m, post_p = _normal_posterior(score, information, w, m, p0)
    gap = max(final_information - information, 0.0)
    out = 0.0
    for j in range(w.size):
        spread = math.sqrt(gap + gap * gap / post_p[j])
        if spread == 0.0:
            out += post_w[j] * (1.0 if score >= final_upper else 0.0)
        else:
            out += post_w[j] * normal_sf(-(score + post_m[j] * gap - final_upper) / spread)
    return min(max(out, 0.0), 1.0)


@numba.njit(cache=True)
def look_code(rng: Any, k: int, final: bool, arms: int, looks: int, targets: np.ndarray,
              events: np.ndarray, exposure: np.ndarray, d: np.ndarray, e: np.ndarray,
              log_w: np.ndarray, a: np.ndarray, b: np.ndarray, claim: float, lower: bool,
              efficacy: np.ndarray, futility: np.ndarray, tol: float,
              predictive: np.ndarray, bound: float, quantiles: np.ndarray, draws: int,
              overlap: np.ndarray, limit: float, piece_a: np.ndarray, piece_b: np.ndarray,
              normal_w: np.ndarray, normal_m: np.ndarray, normal_p: np.ndarray,
              normal: np.ndarray, shape: np.ndarray) -> int:
    """The stop rule's code (:mod:`octrial.rules.stop`) at look ``k`` from each arm's
    events and exposure: ``events``/``exposure`` per arm and analysis piece, ``d``/``e``
    the decision piece's. The benefit is the normal approximation on the log hazard
    ratio when ``normal_w`` is non-empty, the landmark survival when ``overlap`` is,
    else the gamma posterior of the hazard (ratio); a continuing study then meets the
    predictive futility threshold of the look, if any."""
    score = 0.0
    information = 0.0
    if normal_w.size > 0:
        score, information = log_hazard_ratio_score(events, exposure, shape, normal[0],
                                                    normal[2])
        benefit = normal_benefit(score, information, normal_w, normal_m, normal_p,
                                 normal[1])
    elif overlap.size > 0:
        benefit = landmark_benefit(events[0], exposure[0], log_w[0], piece_a, piece_b,
                                   overlap, limit, lower)
    else:
        benefit = benefit_at(d, e, log_w, a, b, claim, lower)
    threshold = efficacy[looks - 1] if final else efficacy[k]
    code = look_decision_at(threshold, futility[k], final, benefit, tol)
    if code == CONTINUE and wants_predictive_at(predictive[k], final):
        if normal_w.size > 0:
            pp = normal_predictive(score, information, normal[3], normal[4], normal_w,
                                   normal_m, normal_p)
        elif arms == 1:
            pp = one_arm_predictive(d[0], e[0], targets[looks - 1], log_w, a, b, bound,
                                    lower)
        else:
            pp = two_arm_predictive(rng, d, e, targets[looks - 1], log_w, a, b, claim,
                                    lower, efficacy[looks - 1] - tol, quantiles, draws)
        code = predictive_decision_at(predictive[k], pp, tol)
    return code
