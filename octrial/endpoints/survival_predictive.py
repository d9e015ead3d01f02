"""Predictive probability of final success for gamma time-to-event analyses (one period).

The final analysis of an event-driven study is at a fixed number of events D (per arm
when nobody is censored, in total otherwise); what the data still to come can change is
the time at risk (exposure) and, for two arms, how the events split between the arms.

Future exposure. With a constant hazard lambda, the events counted against the
accumulated exposure form a Poisson process of rate lambda (the random time change of a
counting process by its compensator; Aalen, Borgan & Gjessing 2008, Survival and Event
History Analysis, section 2.2, recalled from memory),
whatever the staggered entry and independent censoring. So the exposure still to come
until m more events is Gamma(m, rate lambda), and with lambda ~ Gamma(a', b') a
posteriori, Y / (Y + b') ~ Beta(m, a') (the compound gamma, or beta prime, law):
Pr(Y >= y) = I_{b' / (b' + y)}(a', m). This ignores a final analysis held early because
the events run out (too few subjects, or losses).

* One arm: the final posterior probability of benefit is monotone in the final exposure
  (the likelihood lambda^D exp(-lambda t) has a monotone likelihood ratio in t, so the
  posterior is stochastically decreasing in t for any prior), so final success is
  t >= t* (lower hazard better) or t <= t*, with t* found once per design
  (:func:`exposure_bound`). PP = Pr(x + Y >= t*), a closed form (:func:`one_arm`).
* Two arms, every subject's event observed (no censoring: the events per arm are fixed):
  the arms' future exposures are independent beta-prime variables; final success is
  t_T >= tau(t_C) with tau found by root finding; PP is a one-dimensional integral over
  the control arm's future exposure (Gauss-Legendre in its quantiles:
  :func:`two_arm_fixed_events`).
* Two arms, event-driven with censoring: the split of the m future events between the
  arms depends on who is at risk when. The approximation used: the arms' future exposures
  keep a fixed ratio rho; then, given the hazards, the control arm's future exposure S
  until m events is Gamma(m, rho lambda_T + lambda_C), the treatment's rho S, and the
  treatment's share J of the events Binomial(m, rho lambda_T / (rho lambda_T +
  lambda_C)), independent of S (a Poisson process split by its marks). rho is the ratio
  of the arms' posterior rates b'_T / b'_C (prior rate plus exposure so far; with a
  mixture, weighted by the posterior weights), close to the ratio of the exposures so
  far. With one gamma component per arm this choice makes the predictive law closed:
  integrating the hazards out, J ~ BetaBinomial(m, a'_T, a'_C) and S / (b'_C + S) ~
  Beta(m, a'_T + a'_C) independently (substitute z = S / (b'_C + S) in the joint density
  of (J, S)), and the final ratio of posterior rates is (b'_T + rho S) / (b'_C + S) = rho,
  the current one, so final success depends on J only: PP = sum_j BetaBinomial(j; m,
  a'_T, a'_C) 1[B_final(j) >= threshold] (:func:`two_arm_split_single`), as Lee & Liu's
  predictive probability for two binomial arms. With mixtures PP is the mean of final
  success over draws of (component, hazards, J, S) (:func:`two_arm_split`).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
from scipy import optimize, special, stats

from octrial.rules.stop import DECISION_TOLERANCE

GAUSS_NODES = 96
"""Gauss-Legendre nodes of :func:`two_arm_fixed_events` (per control component)."""


def exposure_tail(w: np.ndarray, a: np.ndarray, b: np.ndarray, m: float,
                  y: np.ndarray) -> np.ndarray:
    """Pr(Y >= y) for the exposure Y until ``m`` more events when the hazard has the
    gamma mixture posterior (weights ``w``, shapes ``a``, rates ``b``: shape (studies,
    components)); ``y`` one value per study."""
    y = np.asarray(y, dtype=float)
    if m <= 0:
        return (y <= 0).astype(float)
    safe = np.maximum(y, 0.0)[:, None]
    tail = np.sum(w * special.betainc(a, m, b / (b + safe)), axis=1)
    return np.where(y <= 0, 1.0, np.clip(tail, 0.0, 1.0))


def exposure_bound(benefit: Callable[[float], float], threshold: float, lower: bool,
                   scale: float) -> float:
    """t*: the final exposure at which the final posterior probability of benefit
    (``benefit(t)``, monotone in t) reaches ``threshold`` (less the stop rule's
    tolerance). Lower hazards better: success iff t >= t* (0 when any exposure
    succeeds, inf when none does); higher: success iff t <= t* (-inf when none does).
    ``scale`` is a typical exposure, where the search starts."""
    target = threshold - DECISION_TOLERANCE

    def gap(t: float) -> float:
        b = benefit(t)
        return b - target if lower else target - b  # increasing in t

    if gap(0.0) >= 0:
        return 0.0 if lower else math.inf
    hi = max(scale, 1e-12)
    for _ in range(200):
        if gap(hi) >= 0:
            break
        hi *= 2.0
    else:
        return math.inf if lower else -math.inf
    return float(optimize.brentq(gap, 0.0, hi, xtol=1e-13 * hi, rtol=1e-15, maxiter=500))


def one_arm(w: np.ndarray, a: np.ndarray, b: np.ndarray, exposure: np.ndarray, m: float,
            bound: float, lower: bool) -> np.ndarray:
    """PP of one arm: Pr(x + Y >= t*) (lower better) or Pr(x + Y <= t*), with the
    posterior (``w``, ``a``, ``b``: (studies, components)), the exposure so far ``x``,
    ``m`` events still to come and t* = ``bound`` (:func:`exposure_bound`)."""
    x = np.asarray(exposure, dtype=float)
    if math.isinf(bound):
        reach = 1.0 if (bound > 0) != lower else 0.0
        return np.full(x.shape, reach)
    tail = exposure_tail(w, a, b, m, bound - x)
    if lower:
        return tail
    # Y is continuous for m > 0; with m = 0 success is x <= t*
    return 1.0 - tail if m > 0 else (x <= bound).astype(float)


def two_arm_fixed_events(posts: tuple[tuple[np.ndarray, np.ndarray, np.ndarray], ...],
                         exposure: tuple[np.ndarray, np.ndarray], future: tuple[int, int],
                         final_benefit: Callable[[np.ndarray, np.ndarray], np.ndarray],
                         threshold: float, lower: bool) -> np.ndarray:
    """PP of two arms whose future events per arm are fixed (``future`` = (m_T, m_C)).

    ``posts`` are the arms' posteriors (w, a, b) of shape (studies, components);
    ``final_benefit(t_T, t_C)`` the final posterior probability of benefit at final
    exposures (arrays, one per study). For each control component the control's future
    exposure runs over :data:`GAUSS_NODES` Gauss-Legendre nodes in its quantiles (the
    Beta(m_C, a') quantile v gives y = b' v / (1 - v)); at each node the treatment's
    final exposure must pass tau(t_C), found by bisection (final benefit is increasing in
    t_T when lower hazards are better), and the treatment's beta-prime tail gives the
    probability."""
    (w_t, a_t, b_t), (w_c, a_c, b_c) = posts
    x_t, x_c = (np.asarray(v, dtype=float) for v in exposure)
    m_t, m_c = future
    studies = x_t.size
    if m_c > 0:
        u, weight = np.polynomial.legendre.leggauss(GAUSS_NODES)
        u, weight = 0.5 * (u + 1.0), 0.5 * weight
    else:
        u, weight = np.array([0.0]), np.array([1.0])
    out = np.zeros(studies)
    for c in range(w_c.shape[1]):
        if m_c > 0:
            v = special.betaincinv(m_c, a_c[:, c][:, None], u[None, :])
            y_c = b_c[:, c][:, None] * v / (1.0 - v)
        else:
            y_c = np.zeros((studies, 1))
        t_c = x_c[:, None] + y_c
        tau = _treatment_bound(final_benefit, t_c, x_t, threshold, lower)
        flat = (tau - x_t[:, None]).ravel()
        rows = np.repeat(np.arange(studies), t_c.shape[1])
        tail = exposure_tail(w_t[rows], a_t[rows], b_t[rows], m_t, flat)
        if not lower:
            tail = 1.0 - tail if m_t > 0 else (flat >= 0).astype(float)
        tail = np.where(np.isposinf(flat), 0.0 if lower else 1.0, tail)
        tail = np.where(np.isneginf(flat), 1.0 if lower else 0.0, tail)
        out += w_c[:, c] * (tail.reshape(t_c.shape) @ weight)
    return np.clip(out, 0.0, 1.0)


def _treatment_bound(final_benefit: Callable[[np.ndarray, np.ndarray], np.ndarray],
                     t_c: np.ndarray, x_t: np.ndarray, threshold: float,
                     lower: bool) -> np.ndarray:
    """tau(t_C) per (study, node): the treatment's final exposure at which the final
    benefit reaches the threshold (bisection on t / (t + s), s a scale per study);
    +inf / -inf where no exposure, or every exposure, succeeds."""
    target = threshold - DECISION_TOLERANCE
    shape = t_c.shape
    scale = np.broadcast_to(np.maximum(x_t, 1e-9)[:, None], shape).ravel()
    tc = t_c.ravel()

    def ok(t: np.ndarray) -> np.ndarray:
        b = final_benefit(t, tc)
        return b >= target

    lo, hi = np.zeros(tc.size), np.ones(tc.size)  # v = t / (t + s) in [0, 1)
    at_zero = ok(np.zeros(tc.size))
    at_far = ok(scale * 1e12)
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        passed = ok(scale * mid / (1.0 - mid))
        # lower better: success above tau; higher: success below tau
        go_up = ~passed if lower else passed
        lo = np.where(go_up, mid, lo)
        hi = np.where(go_up, hi, mid)
    v = 0.5 * (lo + hi)
    tau = scale * v / (1.0 - v)
    if lower:
        tau = np.where(at_zero, -np.inf, np.where(at_far, tau, np.inf))
    else:
        tau = np.where(~at_zero, -np.inf, np.where(at_far, np.inf, tau))
    return tau.reshape(shape)


def split_ratio(posts: tuple[tuple[np.ndarray, np.ndarray, np.ndarray], ...]) -> float:
    """rho of the split approximation: the ratio of the arms' posterior rates (prior rate
    plus exposure so far), each weighted by its posterior weights (``posts``: (w, a, b)
    with one row)."""
    (w_t, _, b_t), (w_c, _, b_c) = posts
    return float(np.sum(w_t[0] * b_t[0]) / np.sum(w_c[0] * b_c[0]))


def two_arm_split_single(a_t: float, b_t: float, a_c: float, b_c: float, m: int,
                         claim: float, threshold: float, lower: bool) -> float:
    """PP of two event-driven arms with one gamma posterior each (shapes ``a_t``,
    ``a_c``, rates ``b_t``, ``b_c``) and ``m`` events to come, under the split
    approximation with rho = b_t / b_c (module docstring): the beta-binomial law of the
    treatment's share of the events, final success by the beta form at the unchanged
    rate ratio k = c b_t / b_c."""
    j = np.arange(m + 1)
    k = claim * b_t / b_c
    below = np.clip(special.betainc(a_t + j, a_c + m - j, k / (1.0 + k)), 0.0, 1.0)
    final = below if lower else 1.0 - below
    pmf = stats.betabinom.pmf(j, m, a_t, a_c)
    return float(min(np.sum(pmf[final >= threshold - DECISION_TOLERANCE]), 1.0))


def two_arm_split(posts: tuple[tuple[np.ndarray, np.ndarray, np.ndarray], ...],
                  events: tuple[float, float], exposure: tuple[float, float], m: int,
                  final_benefit: Callable[[np.ndarray, np.ndarray, np.ndarray, np.ndarray],
                                          np.ndarray],
                  threshold: float, rng: np.random.Generator, draws: int) -> float:
    """PP of one two-arm event-driven study under the split approximation (module
    docstring), by ``draws`` Monte Carlo draws: component and hazard per arm from the
    posterior (``posts``: (w, a, b) with one row), the treatment's share of the ``m``
    future events, the control's future exposure S; success when
    ``final_benefit(d_T, d_C, x_T, x_C)`` (arrays) reaches the threshold."""
    x_t, x_c = exposure
    rho = split_ratio(posts)
    hazards = []
    for w, a, b in posts:
        c = rng.choice(w.shape[1], size=draws, p=w[0] / w[0].sum())
        hazards.append(rng.gamma(a[0, c], 1.0 / b[0, c]))
    lam_t, lam_c = hazards
    rate = rho * lam_t + lam_c
    share = rng.binomial(m, rho * lam_t / rate)
    s = rng.gamma(m, 1.0 / rate) if m > 0 else np.zeros(draws)
    b = final_benefit(events[0] + share, events[1] + m - share, x_t + rho * s, x_c + s)
    return float(np.mean(b >= threshold - DECISION_TOLERANCE))


def design_predictive(design: Any, events: tuple[np.ndarray, ...],
                      exposure: tuple[np.ndarray, ...], *, seed: int = 0,
                      draws: int = 200_000) -> np.ndarray:
    """Predictive probability of final success per study of a gamma time-to-event design
    (one period) from each arm's events and exposure (arrays of shape (studies, 1)):
    :func:`one_arm` (exact), :func:`two_arm_fixed_events` without ``[conduct]`` (exact
    to quadrature) and for two event-driven arms the split approximation,
    :func:`two_arm_split_single` with one prior component per arm, else
    :func:`two_arm_split` (``draws`` draws from ``seed``). The family's posterior and
    final benefit are :meth:`~octrial.endpoints.time_to_event.TimeToEventFamily.posterior` and
    :meth:`~octrial.endpoints.time_to_event.TimeToEventFamily.benefit_from`."""
    family = design.family
    looks, h = design.looks, design.hypothesis
    lower = h.better == "lower"
    threshold = float(looks.efficacy[-1])
    d = [np.atleast_2d(np.asarray(v, dtype=float))[:, 0] for v in events]
    x = [np.atleast_2d(np.asarray(v, dtype=float))[:, 0] for v in exposure]
    posts = tuple(family.posterior(arm.prior, dj[:, None], xj[:, None])
                  for arm, dj, xj in zip(design.arms, d, x, strict=True))
    posts = tuple((w, a[..., 0], b[..., 0]) for w, a, b in posts)
    event_driven = design.conduct is not None
    if event_driven:
        final: tuple[float, ...] = (float(family.event_targets(design)[-1]),)
    else:
        final = tuple(float(v) for v in looks.per_arm[-1])
    if not design.two_arm:
        (w, a, b), = posts
        total = final[0]

        def benefit(t: float) -> float:
            return float(family.benefit_from(design, (np.array([[total]]),),
                                           (np.array([[t]]),))[0])

        bound = exposure_bound(benefit, threshold, lower, total / design.arms[0]
                                  .prior.mean)
        out = np.empty(d[0].size)
        for m in np.unique(np.maximum(total - d[0], 0.0)):
            rows = np.maximum(total - d[0], 0.0) == m
            out[rows] = one_arm(w[rows], a[rows], b[rows], x[0][rows], float(m),
                                   bound, lower)
        return out

    if not event_driven:
        def fixed(t_t: np.ndarray, t_c: np.ndarray) -> np.ndarray:
            full = tuple(np.full((t_t.size, 1), v) for v in final)
            return family.benefit_from(design, full, (t_t[:, None], t_c[:, None]))

        out = np.empty(d[0].size)
        future = np.maximum(np.array(final)[None, :] - np.stack(d, axis=1), 0.0)
        for row in np.unique(future, axis=0):
            rows = np.all(future == row, axis=1)
            out[rows] = two_arm_fixed_events(
                tuple((w[rows], a[rows], b[rows]) for w, a, b in posts),
                (x[0][rows], x[1][rows]), (int(row[0]), int(row[1])), fixed,
                threshold, lower)
        return out

    def split(d_t: np.ndarray, d_c: np.ndarray, t_t: np.ndarray,
              t_c: np.ndarray) -> np.ndarray:
        return family.benefit_from(design, (d_t[:, None].astype(float),
                                          d_c[:, None].astype(float)),
                                 (t_t[:, None], t_c[:, None]))

    rng = np.random.default_rng(np.random.SeedSequence(seed))
    out = np.empty(d[0].size)
    single = all(len(arm.prior.weights) == 1 for arm in design.arms)
    for i in range(out.size):
        m = int(max(final[0] - d[0][i] - d[1][i], 0))
        if single:
            (_, a_t, b_t), (_, a_c, b_c) = posts
            out[i] = two_arm_split_single(float(a_t[i, 0]), float(b_t[i, 0]),
                                          float(a_c[i, 0]), float(b_c[i, 0]), m,
                                          float(h.threshold), threshold, lower)
            continue
        out[i] = two_arm_split(
            tuple((w[i:i + 1], a[i:i + 1], b[i:i + 1]) for w, a, b in posts),
            (float(d[0][i]), float(d[1][i])), (float(x[0][i]), float(x[1][i])), m,
            split, threshold, rng, draws)
    return out
