"""The maths of exponential and piecewise-exponential times to an event.

Model. Time runs from a subject's entry; the hazard is constant within each period
[s_j, s_{j+1}) (``starts`` s_0 = 0 < s_1 < ...; the last period is open). A design states a
relative shape r_j (r_0 = 1) and each arm one multiplier lambda, so that the hazard in
period j is lambda r_j; one period is the exponential model. The cumulative hazard is
Lambda(t) = lambda H0(t) with H0(t) = sum_j r_j |[s_j, s_{j+1}) n [0, t)|.

Sufficient statistics. Per arm and period: the events d_j and the time at risk (exposure)
E_j; the likelihood of the period's hazard h_j is h_j^d_j exp(-h_j E_j) (Poisson form,
any independent censoring; e.g. Ibrahim, Chen & Sinha 2001, Bayesian Survival Analysis,
section 3.1, recalled from memory).

Priors and posteriors. Each period's hazard h_j has a gamma prior (shape a, rate b); a
gamma mixture sum_c w_c prod_j Gamma(h_j; a_c, b_c) shares its component label across
periods (so a robust mixture is "the historical information holds, in every period, or
it does not"). The posterior of component c is prod_j Gamma(a_c + d_j, b_c + E_j) with
weight proportional to w_c prod_j b_c^a_c Gamma(a_c + d_j) / (Gamma(a_c) (b_c + E_j)^(a_c
+ d_j)) (conjugacy; :func:`octrial.endpoints.count.update` per period).

Benefit.
* One period: Pr(h < h0 | data) = sum_c w'_c P(a'_c, b'_c h0), P the regularised lower
  incomplete gamma. For an integer shape a', P(a', x) = Pr(Poisson(x) >= a'), and
  2 b' h ~ chi-square(2 a') (the gamma-Poisson and gamma-chi-square identities).
* Several periods, benchmark at a landmark time L: Pr(S(L) > s0) = Pr(sum_j Delta_j h_j <
  -log s0), Delta_j the time period j overlaps [0, L). Delta_j h_j ~ Gamma(a'_j, b'_j /
  Delta_j), so this is the cdf of a sum of independent gammas of different scales: the
  exact series of Moschopoulos (1985, Ann. Inst. Statist. Math. 37, 541-544), whose
  truncation error is known (:func:`gamma_sum_cdf`).
* Two arms on the hazard ratio (one period): with U = b'_T h_T, V = b'_C h_C,
  U / (U + V) ~ Beta(a'_T, a'_C), so Pr(h_T / h_C < c) = I_{k/(1+k)}(a'_T, a'_C) with
  k = c b'_T / b'_C (:func:`octrial.endpoints.count.prob_ratio`).
* Normal approximation on the log hazard ratio: log(d_T/E_T) - log(d_C/E_C) is close to
  N(log HR, 1/d_T + 1/d_C) (the variance of a log Poisson rate is about 1/d); with an
  allocation ratio q:1 and HR near 1 the arms share the D events in proportion q:1, so
  the information is about D q / (1 + q)^2 (D / 4 for 1:1; Schoenfeld 1981, Biometrika 68,
  316-319).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from scipy import special, stats

SERIES_TOLERANCE = 1e-12
"""Largest truncation error accepted from the series of :func:`gamma_sum_cdf`."""
SHORT_SERIES = 400
"""Series expected to need at most this many terms are summed for all rows together."""
SERIES_TERMS = 200_000
"""Most series terms :func:`gamma_sum_cdf` computes (its error bound says when fewer
would not have done)."""

BENCHMARK_SCALES = ("hazard", "median", "survival")
"""How a one-arm benchmark may be stated: the hazard (per time unit), the median time, or
the survival probability at the landmark time."""


def period_overlap(starts: Sequence[float], t: float | np.ndarray) -> np.ndarray:
    """Time each period overlaps [0, t): shape t.shape + (periods,).

    Examples
    --------
    >>> period_overlap((0.0, 6.0), 10.0).tolist()
    [6.0, 4.0]
    """
    s = np.asarray(starts, dtype=float)
    ends = np.append(s[1:], np.inf)
    t = np.asarray(t, dtype=float)[..., None]
    return np.clip(np.minimum(t, ends) - s, 0.0, None)


def base_cumulative_hazard(starts: Sequence[float], shape: Sequence[float],
                           t: float | np.ndarray) -> np.ndarray:
    """H0(t) = sum_j r_j |period j n [0, t)| (the cumulative hazard at multiplier 1)."""
    return period_overlap(starts, t) @ np.asarray(shape, dtype=float)


def survival(starts: Sequence[float], shape: Sequence[float], multiplier: float,
             t: float | np.ndarray) -> np.ndarray:
    """S(t) = exp(-multiplier H0(t))."""
    return np.exp(-multiplier * base_cumulative_hazard(starts, shape, t))


def median_time(starts: Sequence[float], shape: Sequence[float], multiplier: float) -> float:
    """The t with S(t) = 1/2 (H0 is piecewise linear and increasing)."""
    target = math.log(2.0) / multiplier
    s = np.asarray(starts, dtype=float)
    h_at = base_cumulative_hazard(starts, shape, s)
    j = int(np.searchsorted(h_at, target, side="right")) - 1
    return float(s[j] + (target - h_at[j]) / shape[j])


def benchmark_multiplier(scale: str, value: float, starts: Sequence[float],
                         shape: Sequence[float], landmark: float | None) -> float:
    """The hazard multiplier lambda0 equivalent to a benchmark on ``scale``.

    'hazard': lambda0 = value (the hazard of the first period); 'median' m: lambda0 =
    log 2 / H0(m); 'survival' s at the landmark L: lambda0 = -log(s) / H0(L).

    Examples
    --------
    >>> round(benchmark_multiplier('median', 12.0, (0.0,), (1.0,), None), 6)
    0.057762
    """
    if scale == "hazard":
        return float(value)
    if scale == "median":
        return math.log(2.0) / float(base_cumulative_hazard(starts, shape, value))
    assert landmark is not None  # read_endpoint requires a landmark for survival
    return -math.log(value) / float(base_cumulative_hazard(starts, shape, landmark))


def split_exposure(times: np.ndarray, events: np.ndarray, starts: Sequence[float],
                   ) -> tuple[np.ndarray, np.ndarray]:
    """Per period: (events, exposure) of subjects followed for ``times`` with event
    indicators ``events`` (1 = event at that time, 0 = censored)."""
    times = np.asarray(times, dtype=float)
    exposure = period_overlap(starts, times).sum(axis=0)
    period = np.searchsorted(np.asarray(starts, dtype=float), times, side="right") - 1
    d = np.bincount(period[np.asarray(events) == 1], minlength=len(starts)).astype(float)
    return d, exposure


def gamma_sum_cdf(x: np.ndarray, shapes: np.ndarray, rates: np.ndarray,
                  ) -> tuple[np.ndarray, float]:
    """Pr(sum_j X_j <= x) for independent X_j ~ Gamma(shape_j, rate_j), per row.

    The series of Moschopoulos (1985): with scales beta_j = 1 / rate_j, beta_1 their
    minimum and rho = sum shape_j, the cdf is sum_k p_k P(rho + k, x / beta_1), where the
    weights p_k = C delta_k have the generating function prod_j (beta_1 / beta_j)^a_j
    (1 - c_j z)^(-a_j), c_j = 1 - beta_1 / beta_j: they are the distribution of a sum of
    independent negative binomial counts NB(a_j, 1 - c_j). The weights are computed as
    that convolution (numerically stable, and fast where one period dominates the
    scales, where the plain recursion needs very many terms) and the series is cut
    where the weight left is below :data:`SERIES_TOLERANCE`, which bounds the error.

    Parameters
    ----------
    x : array, shape (m,)
    shapes, rates : arrays, shape (m, J)

    Returns
    -------
    (cdf, error bound)
    """
    x = np.asarray(x, dtype=float)
    shapes = np.atleast_2d(np.asarray(shapes, dtype=float))
    rates = np.atleast_2d(np.asarray(rates, dtype=float))
    beta = 1.0 / rates
    beta1 = beta.min(axis=1, keepdims=True)
    success = beta1 / beta  # 1 - c_j, in (0, 1]
    # mean and sd of the number of terms K: few terms are summed for all rows at once
    odds = (1.0 - success) / success
    mean = np.sum(shapes * odds, axis=1)
    sd = np.sqrt(np.sum(shapes * odds / success, axis=1))
    short = mean + 12.0 * sd + 30.0 <= SHORT_SERIES
    out = np.empty(x.shape)
    worst = 0.0
    if np.any(short):
        out[short], worst = _series_together(x[short], shapes[short], beta[short],
                                             beta1[short])
    for i in np.flatnonzero(~short):
        out[i], error = _series_alone(float(x[i]), shapes[i], success[i], float(beta1[i, 0]))
        worst = max(worst, error)
    return np.clip(out, 0.0, 1.0), max(worst, 0.0)


def _series_together(x: np.ndarray, shapes: np.ndarray, beta: np.ndarray,
                     beta1: np.ndarray) -> tuple[np.ndarray, float]:
    """Moschopoulos's recursion delta_{k+1} = sum_i i gamma_i delta_{k+1-i} / (k + 1),
    vectorised over rows (few terms)."""
    ratio = beta1 / beta
    rho = shapes.sum(axis=1)
    c = np.exp(np.sum(shapes * np.log(ratio), axis=1))
    one_minus = 1.0 - ratio
    scaled = x / beta1[:, 0]
    deltas = [np.ones_like(x)]
    gammas: list[np.ndarray] = []
    cdf = c * special.gammainc(rho, scaled)
    mass = c.copy()
    for k in range(1, SHORT_SERIES + 1):
        if float(np.max(1.0 - mass)) < SERIES_TOLERANCE:
            break
        gammas.append(np.sum(shapes * one_minus**k, axis=1) / k)
        delta = sum(i * gammas[i - 1] * deltas[k - i] for i in range(1, k + 1)) / k
        deltas.append(delta)
        mass += c * delta
        cdf += c * delta * special.gammainc(rho + k, scaled)
    return cdf, float(np.max(np.clip(1.0 - mass, 0.0, None)))


def _series_alone(x: float, shapes: np.ndarray, success: np.ndarray,
                  beta1: float) -> tuple[float, float]:
    """One row: the weights as the convolution of negative binomial pmfs."""
    pmf = np.ones(1)
    share = SERIES_TOLERANCE / shapes.size
    for a, p in zip(shapes, success, strict=True):
        if p >= 1.0:
            continue  # the period with the smallest scale adds no terms
        top = min(int(stats.nbinom.isf(share, a, p)) + 1, SERIES_TERMS)
        pmf = np.convolve(pmf, stats.nbinom.pmf(np.arange(top + 1), a, p))[:SERIES_TERMS]
    # P(rho + k, y) = P(rho, y) - sum_{i<k} y^(rho+i) e^(-y) / Gamma(rho + i + 1): one
    # incomplete gamma and a running sum (absolute error about 1e-16 per term)
    rho, y = float(shapes.sum()), x / beta1
    steps = rho + np.arange(pmf.size - 1)
    terms = np.exp(steps * math.log(y) - y - special.gammaln(steps + 1.0)) if y > 0 else (
        np.zeros(pmf.size - 1))
    lower = np.clip(special.gammainc(rho, y) - np.concatenate(([0.0], np.cumsum(terms))),
                    0.0, 1.0)
    return float(np.sum(pmf * lower)), 1.0 - float(np.sum(pmf))


def log_hazard_ratio_information(events: float | np.ndarray, allocation: float = 1.0,
                                 ) -> float | np.ndarray:
    """Information about log HR from ``events`` in all, allocation q:1 (treatment:control):
    D q / (1 + q)^2 (D / 4 for 1:1)."""
    return events * allocation / (1.0 + allocation) ** 2


def schoenfeld_events(hazard_ratio: float, alpha: float, power: float,
                      allocation: float = 1.0) -> float:
    """Events for a one-sided level-alpha log-rank test to have ``power`` at
    ``hazard_ratio`` (Schoenfeld 1981): (z_a + z_b)^2 (1 + q)^2 / (q log(HR)^2)."""
    z = special.ndtri(1 - alpha) + special.ndtri(power)
    return float(z**2 * (1 + allocation) ** 2 / (allocation * math.log(hazard_ratio) ** 2))


def freedman_events(hazard_ratio: float, alpha: float, power: float) -> float:
    """Events for the log-rank test at 1:1 by Freedman (1982, Stat. Med. 1, 121-129):
    (z_a + z_b)^2 (1 + HR)^2 / (1 - HR)^2."""
    z = special.ndtri(1 - alpha) + special.ndtri(power)
    return float(z**2 * (1 + hazard_ratio) ** 2 / (1 - hazard_ratio) ** 2)
