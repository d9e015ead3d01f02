"""General kernels for normal endpoints with unknown sd (normal-inverse-gamma priors).

Data are drawn as in :mod:`octrial.simulation.normal` (increment means and sums of
squares, exactly), at the design's ``endpoint.true_sd``.

**Posterior.** Prior mu | sigma^2 ~ N(m0, sigma^2 / k0), sigma^2 ~ InvGamma(a0, b0)
(``mean``, ``mean_n``, ``shape``, ``scale``). After n subjects with mean xbar and sum of
squared deviations SS (Gelman et al., Bayesian Data Analysis, 3rd ed., section 3.3):

    k_n = k0 + n,  m_n = (k0 m0 + n xbar) / k_n,  a_n = a0 + n / 2,
    b_n = b0 + SS / 2 + k0 n (xbar - m0)^2 / (2 k_n),

and mu | data is Student t with 2 a_n degrees of freedom, location m_n and scale
sqrt(b_n / (a_n k_n)). One arm: B = Pr(sign mu > sign mu0) is one t distribution function
(:func:`octrial.simulation.special.student_t_pair`). Two arms (independent priors, so
unequal variances): B = Pr(sign (mu_T - mu_C) > shift), the Behrens-Fisher probability,
by the quadrature of :mod:`octrial.simulation.student_t`.

**Predictive probability of final success (one arm), derived.** At look k (posterior
m_n, k_n, a_n, b_n) the m = N - n future subjects have mean ybar and sum of squares SS_y.
Sequential conjugate updating gives the final posterior exactly:

    k_N = k_n + m,  m_N = m_n + (m / k_N) delta,  a_N = a_n + m / 2,
    b_N = b_n + SS_y / 2 + (k_n m / (2 k_N)) delta^2,      delta = ybar - m_n,

and success is B_N >= gamma, i.e. z_N = sign(m_N - mu0) sqrt(a_N k_N / b_N) >= c with
c = t^{-1}_{2 a_N}(gamma) (the degrees of freedom at the end are known in advance). Under
the posterior predictive, given sigma^2: delta ~ N(0, sigma^2 (1/k_n + 1/m)) and
SS_y ~ sigma^2 chi^2_{m-1}, independent. Integrating sigma^2 out in two steps:

* u = SS_y / (2 b_n + SS_y) ~ Beta((m - 1) / 2, a_n) (a ratio of independent gammas),
* given SS_y, sigma^2 ~ InvGamma(a_n + (m - 1) / 2, B) with B = b_n + SS_y / 2
  = b_n / (1 - u), so delta is Student t with 2 a_n + m - 1 degrees of freedom and scale
  sqrt(B (1/k_n + 1/m) / (a_n + (m - 1) / 2)).

Given u, success is (D + g delta) sqrt(A / (B + h delta^2)) >= c with D = sign(m_n - mu0),
g = m / k_N, h = k_n m / (2 k_N), A = a_N k_N (delta on the benefit scale, whose
distribution is symmetric): the boundary points are the real roots of the quadratic
(A g^2 - c^2 h) delta^2 + 2 A D g delta + (A D^2 - c^2 B), and the success set is the union
of the segments between them where the inequality holds (tested at one point of each),
whose t probability is exact. So

    PP = E_u[ Pr(delta in success set | u) ],

one integral over u, taken by Gauss-Jacobi quadrature for the Beta((m - 1)/2, a_n)
weight with :data:`PREDICTIVE_NODES` nodes (the nodes depend only on the look; built once
with ``scipy.special.roots_jacobi``). With one subject to come SS_y = 0 and no integral
is needed. Checked in tests/test_normal_unknown_sd.py against a plain simulation of the
future data and against the same quadrature with four times the nodes.

**Predictive probability of final success (two arms), derived.** Each arm's final
posterior follows from its own (u, delta) as above, independently of the other arm, so
the predictive integral is four-dimensional: (u_X, delta_X, u_Y, delta_Y), X the arm
that is better when higher (X - Y > shift is the claim). Success at the end is B_N >=
gamma with B_N = F(D), F the distribution function of s_X T_X - s_Y T_Y (final scales
s, final degrees of freedom nu, both t independent and symmetric) and
D = m_N,X - m_N,Y - shift; so success is D >= q(s_X, s_Y), the gamma quantile of
s_X T_X - s_Y T_Y, which scales with the length of (s_X, s_Y):

    q = sqrt(s_X^2 + s_Y^2) W(theta),   theta = atan2(s_Y, s_X) in [0, pi/2],

W(theta) the gamma quantile of cos(theta) T_X - sin(theta) T_Y. The final degrees of
freedom are known in advance, so W is one smooth function per design: it is computed at
Chebyshev points by root finding on the Behrens-Fisher probability of
:func:`octrial.endpoints.unknown_sd.difference_sf`, and tabulated from the Chebyshev
interpolant on :data:`QUANTILE_POINTS` equally spaced angles (linear interpolation in
the kernel; measured error below 1e-9 in tests/test_normal_unknown_sd.py). The
four-dimensional expectation is a fixed quasi-Monte Carlo rule: :data:`PREDICTIVE_POINTS`
points of a scrambled Sobol sequence (scipy.stats.qmc, fixed seed
:data:`PREDICTIVE_SEED`, so PP is one deterministic function of the study's data),
mapped to u by the Beta((m - 1) / 2, a_n) quantile function and to delta's standard t
by the t quantile function, per look and arm. Measured against 16 times the points, the
error is about 1e-3 (tests/test_normal_unknown_sd.py); a study whose PP is that close to
the futility threshold may be decided either way, a share reported by nothing since it
is small beside the Monte Carlo error of the operating characteristics. Checked against
the scipy Monte Carlo reference of ``octrial decide``
(:func:`octrial.endpoints.unknown_sd.predictive_two_arms`).

**Decisions** are the stop rule of :mod:`octrial.rules.stop`, by its numba twins on the
thresholds of :meth:`~octrial.rules.stop.Rule.arrays` (PP only when
:func:`~octrial.rules.stop.wants_predictive_at` asks for it), as in
:mod:`octrial.simulation.normal`.
"""

from __future__ import annotations

import functools
import math
from typing import Any

import numba
import numpy as np
from numpy.polynomial import Chebyshev
from scipy import linalg, optimize, stats

from octrial.design.model import Design
from octrial.rules.stop import (
    CONTINUE,
    DECISION_TOLERANCE,
    EFFICACY,
    Rule,
    look_decision_at,
    predictive_decision_at,
    wants_predictive_at,
)
from octrial.simulation import student_t
from octrial.simulation.base import Simulator, Tally
from octrial.simulation.estimates import add_estimate
from octrial.simulation.normal import draw_increments, increment_sizes
from octrial.simulation.special import student_t_pair

PREDICTIVE_NODES = 16
"""Gauss-Jacobi nodes of the predictive integral over u (module docstring)."""

PREDICTIVE_POINTS = 4096
"""Quasi-Monte Carlo points of the two-arm predictive integral (module docstring)."""

PREDICTIVE_SEED = 20261202
"""Seed of the scrambled Sobol points of the two-arm predictive integral: part of the
rule's definition, not of the simulation (the same for every run)."""

QUANTILE_POINTS = 4097
"""Angles of the table of W(theta) (module docstring)."""

QUANTILE_DEGREE = 48
"""Degree of the Chebyshev interpolant of W(theta) behind the table."""

BISECTIONS = 200
DOUBLINGS = 1100
"""Most doublings of a bracket: from 1, 1100 doublings overflow to inf."""


@numba.njit(cache=True)
def pool(n_before, total, squares, m, mean, ss):
    """Add m subjects with mean ``mean`` and sum of squares ``ss`` to (total, squares) of
    ``n_before`` subjects (Chan, Golub & LeVeque 1983); returns the new pair."""
    if n_before > 0:
        gap = total / n_before - mean
        squares += ss + n_before * m / (n_before + m) * gap * gap
    else:
        squares = ss
    return total + m * mean, squares


@numba.njit(cache=True)
def update(m0, k0, a0, b0, n, total, squares):
    """Normal-inverse-gamma posterior (m_n, k_n, a_n, b_n) after n subjects."""
    xbar = total / n
    k = k0 + n
    gap = xbar - m0
    return ((k0 * m0 + total) / k, k, a0 + 0.5 * n,
            b0 + 0.5 * squares + 0.5 * k0 * n * gap * gap / k)


@numba.njit(cache=True)
def t_quantile(p, nu):
    """c with Pr(T_nu <= c) = p, by bisection on :func:`student_t_pair` (-inf for p <= 0,
    +inf for p >= 1)."""
    if p <= 0.0:
        return -np.inf
    if p >= 1.0:
        return np.inf
    lo, hi = -1.0, 1.0
    # bounded: 1100 doublings reach +-inf, where the loops stop for any nu (also nan)
    for _ in range(DOUBLINGS):
        if not student_t_pair(lo, nu)[0] > p:
            break
        lo *= 2.0
    for _ in range(DOUBLINGS):
        if not student_t_pair(hi, nu)[0] < p:
            break
        hi *= 2.0
    for _ in range(BISECTIONS):
        mid = 0.5 * (lo + hi)
        if mid == lo or mid == hi:
            break
        if student_t_pair(mid, nu)[0] >= p:
            hi = mid
        else:
            lo = mid
    return hi


@numba.njit(cache=True)
def t_mass(lo, hi, scale, nu):
    """Pr(lo < scale T_nu < hi), from whichever tails keep the accuracy."""
    if lo == -np.inf and hi == np.inf:
        return 1.0
    if lo == -np.inf:
        return student_t_pair(hi / scale, nu)[0]
    if hi == np.inf:
        return student_t_pair(lo / scale, nu)[1]
    if lo >= 0.0:
        return max(student_t_pair(lo / scale, nu)[1] - student_t_pair(hi / scale, nu)[1], 0.0)
    if hi <= 0.0:
        return max(student_t_pair(hi / scale, nu)[0] - student_t_pair(lo / scale, nu)[0], 0.0)
    return max(1.0 - student_t_pair(lo / scale, nu)[0] - student_t_pair(hi / scale, nu)[1],
               0.0)


@numba.njit(cache=True, inline="always")
def _succeeds(delta, d, big_b, g, h, a, c):
    return (d + g * delta) * math.sqrt(a / (big_b + h * delta * delta)) >= c


@numba.njit(cache=True)
def success_mass(d, big_b, g, h, a, c, scale, nu):
    """Pr((d + g delta) sqrt(a / (big_b + h delta^2)) >= c) for delta = scale T_nu."""
    p = a * g * g - c * c * h
    q = 2.0 * a * d * g
    r = a * d * d - c * c * big_b
    # the boundary points: real roots x1 <= x2 of p x^2 + q x + r (count of them)
    count = 0
    x1 = x2 = 0.0
    if p == 0.0:
        if q != 0.0:
            x1 = -r / q
            count = 1
    else:
        disc = q * q - 4.0 * p * r
        if disc >= 0.0:
            root = math.sqrt(disc)
            qq = -0.5 * (q + (root if q >= 0.0 else -root))
            if qq == 0.0:
                count = 1
            else:
                x1, x2 = min(qq / p, r / qq), max(qq / p, r / qq)
                count = 2
    if count == 0:
        return 1.0 if _succeeds(0.0, d, big_b, g, h, a, c) else 0.0
    # segments (-inf, x1), (x1, x2), (x2, inf) (the middle one only with two roots),
    # each tested at one inner point
    total = 0.0
    if _succeeds(x1 - (1.0 + abs(x1)), d, big_b, g, h, a, c):
        total += t_mass(-np.inf, x1, scale, nu)
    if count == 2 and _succeeds(0.5 * (x1 + x2), d, big_b, g, h, a, c):
        total += t_mass(x1, x2, scale, nu)
    top = x2 if count == 2 else x1
    if _succeeds(top + (1.0 + abs(top)), d, big_b, g, h, a, c):
        total += t_mass(top, np.inf, scale, nu)
    return min(total, 1.0)


@numba.njit(cache=True, inline="always")
def predictive(d, b_n, constants, nodes, weights):
    """PP from the posterior's (D, b_n) and the look's constants (g, h, A, c, nu of delta,
    (1/k_n + 1/m) / (a_n + (m - 1)/2)) with its Gauss-Jacobi nodes and weights in u."""
    g, h, a, c, nu, spread = (constants[0], constants[1], constants[2], constants[3],
                              constants[4], constants[5])
    if c == np.inf:
        return 0.0
    if c == -np.inf:
        return 1.0
    total = 0.0
    for i in range(nodes.size):
        big_b = b_n / (1.0 - nodes[i])
        total += weights[i] * success_mass(d, big_b, g, h, a, c, math.sqrt(big_b * spread),
                                           nu)
    return min(max(total, 0.0), 1.0)


@numba.njit(cache=True, inline="always")
def _quantile_at(theta, table):
    """W(theta) by linear interpolation in the table over [0, pi/2]."""
    x = theta * (table.size - 1) / (0.5 * math.pi)
    i = min(int(x), table.size - 2)
    f = x - i
    return table[i] * (1.0 - f) + table[i + 1] * f


@numba.njit(cache=True)
def two_arm_predictive(means_now, b_now, shift, constants, points, table):
    """Two-arm PP (module docstring) from each oriented arm's (X, Y) posterior mean and
    b_n now; ``constants`` rows (g, h, A, spread) per oriented arm, ``points`` rows
    (u_X, t_X, u_Y, t_Y), ``table`` W over [0, pi/2]."""
    hits = 0
    for r in range(points.shape[0]):
        d = -shift
        var_x = var_y = 0.0
        for j in range(2):
            big_b = b_now[j] / (1.0 - points[r, 2 * j])
            delta = points[r, 2 * j + 1] * math.sqrt(big_b * constants[j, 3])
            m_end = means_now[j] + constants[j, 0] * delta
            var = (big_b + constants[j, 1] * delta * delta) / constants[j, 2]
            if j == 0:
                d += m_end
                var_x = var
            else:
                d -= m_end
                var_y = var
        sx, sy = math.sqrt(var_x), math.sqrt(var_y)
        if d >= math.sqrt(var_x + var_y) * _quantile_at(math.atan2(sy, sx), table):
            hits += 1
    return hits / points.shape[0]


@numba.njit(cache=True)
def one_arm_studies(means, squares, sizes, n, prior, sign, benchmark, efficacy, futility,
                    predictive_threshold, constants, nodes, weights, has_estimate, truth,
                    tail, tol, stops_efficacy, stops_futility, sums):
    """Simulate one-arm unknown-sd studies from increment means and sums of squares
    (studies, looks); add stops per look and error sums; return the covered count."""
    n_studies, n_looks = means.shape
    m0, k0, a0, b0 = prior[0], prior[1], prior[2], prior[3]
    last = n_looks - 1
    covered = 0
    for r in range(n_studies):
        total, ss = 0.0, 0.0
        for k in range(n_looks):
            total, ss = pool(n[k] - sizes[k], total, ss, sizes[k], means[r, k], squares[r, k])
            mean, kn, an, bn = update(m0, k0, a0, b0, n[k], total, ss)
            scale = math.sqrt(bn / (an * kn))
            d = sign * (mean - benchmark)
            b = student_t_pair(d / scale, 2.0 * an)[0]
            code = look_decision_at(efficacy[k], futility[k], k == last, b, tol)
            if code == CONTINUE and wants_predictive_at(predictive_threshold[k], k == last):
                pp = predictive(d, bn, constants[k], nodes[k], weights[k])
                code = predictive_decision_at(predictive_threshold[k], pp, tol)
            if code == CONTINUE:
                continue
            (stops_efficacy if code == EFFICACY else stops_futility)[k] += 1
            if has_estimate:
                cdf = student_t_pair((truth - mean) / scale, 2.0 * an)[0]
                covered += add_estimate(mean - truth, cdf, tail, sums)
            break
    return covered


@numba.njit(cache=True)
def two_arm_studies(means, squares, sizes, n, priors, sign, shift, efficacy, futility,
                    predictive_threshold, pp_constants, pp_points, pp_table,
                    has_estimate, truth, tail, tol, nodes, weights, start,
                    stops_efficacy, stops_futility, sums):
    """Simulate two-arm unknown-sd studies (increments shaped (studies, looks, 2)); the
    t rule of look k and arm j is row 2 k + j of the packed rules; the predictive rule
    of look k is ``pp_constants[k]`` and ``pp_points[k]`` (see
    :func:`two_arm_predictive_rules`)."""
    n_studies, n_looks, _ = means.shape
    last = n_looks - 1
    covered = 0
    total = np.zeros(2)
    ss = np.zeros(2)
    loc = np.zeros(2)
    scale = np.zeros(2)
    nu = np.zeros(2)
    b_post = np.zeros(2)
    oriented_means = np.zeros(2)
    oriented_b = np.zeros(2)
    # benefit orientation: X - Y > shift with X the arm that is better when higher
    x_arm = 0 if sign > 0 else 1
    y_arm = 1 - x_arm
    for r in range(n_studies):
        total[:] = 0.0
        ss[:] = 0.0
        for k in range(n_looks):
            for j in range(2):
                total[j], ss[j] = pool(n[k, j] - sizes[k, j], total[j], ss[j], sizes[k, j],
                                       means[r, k, j], squares[r, k, j])
                mean, kn, an, bn = update(priors[j, 0], priors[j, 1], priors[j, 2],
                                          priors[j, 3], n[k, j], total[j], ss[j])
                loc[j], scale[j], nu[j] = mean, math.sqrt(bn / (an * kn)), 2.0 * an
                b_post[j] = bn
            b = student_t.prob_difference_exceeds(
                loc[x_arm], scale[x_arm], nu[x_arm], 2 * k + x_arm,
                loc[y_arm], scale[y_arm], nu[y_arm], 2 * k + y_arm, shift,
                nodes, weights, start)
            code = look_decision_at(efficacy[k], futility[k], k == last, b, tol)
            if code == CONTINUE and wants_predictive_at(predictive_threshold[k], k == last):
                oriented_means[0], oriented_means[1] = loc[x_arm], loc[y_arm]
                oriented_b[0], oriented_b[1] = b_post[x_arm], b_post[y_arm]
                pp = two_arm_predictive(oriented_means, oriented_b, shift, pp_constants[k],
                                        pp_points[k], pp_table)
                code = predictive_decision_at(predictive_threshold[k], pp, tol)
            if code == CONTINUE:
                continue
            (stops_efficacy if code == EFFICACY else stops_futility)[k] += 1
            if has_estimate:
                cdf = 1.0 - student_t.prob_difference_exceeds(
                    loc[0], scale[0], nu[0], 2 * k, loc[1], scale[1], nu[1], 2 * k + 1,
                    truth, nodes, weights, start)
                covered += add_estimate(loc[0] - loc[1] - truth, cdf, tail, sums)
            break
    return covered


def predictive_rules(design: Design) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per interim look: the constants of :func:`predictive` and its nodes and weights in
    u (one arm; rows of zeros where no predictive threshold applies)."""
    prior = design.arms[0].prior
    looks = design.looks
    n = [per[0] for per in looks.per_arm]
    big_n = n[-1]
    a_end, k_end = prior.shape + big_n / 2, prior.mean_n + big_n
    final = looks.efficacy[-1]
    c = math.inf if final is None else float(t_quantile(final - DECISION_TOLERANCE,
                                                        2 * a_end))
    constants = np.zeros((looks.count, 6))
    nodes = np.zeros((looks.count, PREDICTIVE_NODES))
    weights = np.zeros((looks.count, PREDICTIVE_NODES))
    for k in range(looks.count - 1):
        if looks.futility_predictive[k] is None:
            continue
        m = big_n - n[k]
        k_now, a_now = prior.mean_n + n[k], prior.shape + n[k] / 2
        half = a_now + (m - 1) / 2
        constants[k] = (m / k_end, k_now * m / (2 * k_end), a_end * k_end, c, 2 * half,
                        (1 / k_now + 1 / m) / half)
        if m == 1:
            weights[k, 0] = 1.0  # SS_y = 0: the one node u = 0 carries everything
            continue
        nodes[k], weights[k] = beta_quadrature(PREDICTIVE_NODES, (m - 1) / 2, a_now)
    return constants, nodes, weights


def two_arm_predictive_rules(
    design: Design, points: int = PREDICTIVE_POINTS,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The two-arm predictive rule (module docstring): per look, the constants (g, h, A,
    spread) and the quasi-Monte Carlo points (u, t) of each oriented arm (X first), and
    the table of W; empty when the design has no predictive futility threshold."""
    looks = design.looks
    interim = [k for k in range(looks.count - 1) if looks.futility_predictive[k] is not None]
    constants = np.zeros((looks.count, 2, 4))
    if not interim:
        return constants, np.zeros((looks.count, 0, 4)), np.zeros(2)
    order = (0, 1) if design.hypothesis.sign > 0 else (1, 0)
    priors = [design.arms[j].prior for j in order]
    end = [looks.per_arm[-1][j] for j in order]
    a_end = [prior.shape + n / 2 for prior, n in zip(priors, end, strict=True)]
    k_end = [prior.mean_n + n for prior, n in zip(priors, end, strict=True)]
    uniform = stats.qmc.Sobol(4, scramble=True, seed=PREDICTIVE_SEED).random(points)
    uniform = np.clip(uniform, 1e-16, 1.0 - 1e-16)
    draws = np.zeros((looks.count, points, 4))
    for k in interim:
        for i, (prior, j) in enumerate(zip(priors, order, strict=True)):
            n_now = looks.per_arm[k][j]
            m = end[i] - n_now
            k_now, a_now = prior.mean_n + n_now, prior.shape + n_now / 2
            if m == 0:
                constants[k, i] = (0.0, 0.0, a_end[i] * k_end[i], 0.0)
                continue
            half = a_now + (m - 1) / 2
            constants[k, i] = (m / k_end[i], k_now * m / (2 * k_end[i]), a_end[i] * k_end[i],
                               (1 / k_now + 1 / m) / half)
            if m > 1:
                draws[k, :, 2 * i] = stats.beta.ppf(uniform[:, 2 * i], (m - 1) / 2, a_now)
            draws[k, :, 2 * i + 1] = stats.t.ppf(uniform[:, 2 * i + 1], 2 * half)
    final = looks.efficacy[-1]
    assert final is not None  # the last look always has an efficacy threshold (load.py)
    gamma = final - DECISION_TOLERANCE
    return constants, draws, quantile_table(2 * a_end[0], 2 * a_end[1], gamma)


@functools.lru_cache(maxsize=32)
def quantile_table(nu_x: float, nu_y: float, gamma: float,
                   points: int = QUANTILE_POINTS) -> np.ndarray:
    """W(theta), the gamma quantile of cos(theta) T_nu_x - sin(theta) T_nu_y, at
    ``points`` equally spaced angles over [0, pi/2] (module docstring)."""
    from octrial.endpoints.unknown_sd import difference_sf

    def at(theta: float) -> float:
        c, s = math.cos(theta), math.sin(theta)

        def below(w: float) -> float:  # Pr(c T_x - s T_y <= w) - gamma
            return 1.0 - float(np.ravel(difference_sf(0.0, c, nu_x, 0.0, s, nu_y, w))[0]) - gamma
        lo, hi = -1.0, 1.0
        for _ in range(DOUBLINGS):  # bounded, as in t_quantile
            if not below(lo) > 0:
                break
            lo *= 2.0
        for _ in range(DOUBLINGS):
            if not below(hi) < 0:
                break
            hi *= 2.0
        return optimize.brentq(below, lo, hi, xtol=1e-14, rtol=1e-14)

    fit = Chebyshev.interpolate(np.vectorize(at), QUANTILE_DEGREE, domain=[0, math.pi / 2])
    theta = np.linspace(0.0, math.pi / 2, points)
    table = fit(theta)
    # the end points exactly: one t distribution alone
    table[0] = stats.t.ppf(gamma, nu_x)
    table[-1] = stats.t.ppf(gamma, nu_y)
    return table


def beta_quadrature(size: int, p: float, q: float) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Jacobi nodes and weights (summing to 1) for the Beta(p, q) distribution.

    Golub & Welsch (1969): the nodes are the eigenvalues of the Jacobi matrix of the
    Jacobi polynomials P^(q-1, p-1) on [-1, 1] (mapped by u = (1 + x) / 2), and the weights
    the squared first components of its eigenvectors. Computed here rather than with
    ``scipy.special.roots_jacobi``, whose weights overflow for shapes in the hundreds
    (the total 2^(alpha + beta + 1) B(...) is formed explicitly).
    """
    alpha, beta = q - 1.0, p - 1.0
    i = np.arange(size, dtype=float)
    s = 2.0 * i + alpha + beta
    with np.errstate(divide="ignore", invalid="ignore"):
        diagonal = np.where(s * (s + 2.0) != 0.0, (beta**2 - alpha**2) / (s * (s + 2.0)),
                            (beta - alpha) / (alpha + beta + 2.0))
    j = i[1:]
    t = 2.0 * j + alpha + beta
    # (j + alpha + beta) / (t - 1) is 1 at j = 1: cancelled there (0 / 0 when p + q = 1)
    ratio = np.ones_like(j)
    ratio[1:] = (j[1:] + alpha + beta) / (t[1:] - 1.0)
    off = np.sqrt(4.0 * j * (j + alpha) * (j + beta) * ratio / (t**2 * (t + 1.0)))
    x, vectors = linalg.eigh_tridiagonal(diagonal, off)
    w = vectors[0] ** 2
    return (1.0 + x) / 2.0, w / w.sum()


class UnknownSdSimulator(Simulator):
    """Normal studies with unknown sd by the general kernel (see module docstring)."""

    kernel = "general"

    def __init__(self, design: Design, truth: tuple[float, ...], level: float) -> None:
        h = design.hypothesis
        looks = design.looks
        self.looks = looks.count
        self.two_arm = design.two_arm
        self.sizes = increment_sizes(design)
        self.truth = np.array(truth, dtype=float)
        self.sd = np.full(len(truth), float(design.endpoint.true_sd))
        self.target = float(design.family.target_value(h, tuple(truth)))
        self.tail = (1.0 - level) / 2.0
        priors = np.array([[a.prior.mean, a.prior.mean_n, a.prior.shape, a.prior.scale]
                           for a in design.arms])
        *rule, self.tolerance = Rule.of(looks).arrays()
        if self.two_arm:
            n = np.array(looks.per_arm, dtype=float)
            nus = [2 * (priors[j, 2] + n[k, j] / 2) for k in range(looks.count)
                   for j in range(2)]
            self.arguments: tuple[Any, ...] = (
                self.sizes.astype(float), n, priors, float(h.sign), float(h.shift), *rule,
                *two_arm_predictive_rules(design))
            self.quadrature = student_t.rules(nus)
        else:
            n = np.array([per[0] for per in looks.per_arm], dtype=float)
            self.arguments = (
                self.sizes[:, 0].astype(float), n, priors[0], float(h.sign),
                h.null_value, *rule, *predictive_rules(design))

    def draw(self, rng: np.random.Generator, replicates: int, mean: np.ndarray | None = None,
             sd: np.ndarray | None = None) -> tuple[np.ndarray, ...]:
        """This batch's increment means and sums of squares (the only use of ``rng``); see
        :meth:`octrial.simulation.normal.NormalSimulator.draw`."""
        mean = self.truth if mean is None else mean
        sd = self.sd if sd is None else sd
        means, squares = draw_increments(rng, replicates, self.sizes, mean, sd, True)
        assert squares is not None  # asked for
        return means, squares

    def simulate(self, rng: np.random.Generator, replicates: int) -> Tally:
        return self.run(self.draw(rng, replicates), replicates, True)

    def run(self, data: tuple[np.ndarray, ...], replicates: int, estimate: bool) -> Tally:
        """The tally of studies with the given increments (see
        :meth:`octrial.simulation.normal.NormalSimulator.run`)."""
        means, squares = data
        efficacy = np.zeros(self.looks, dtype=np.int64)
        futility = np.zeros(self.looks, dtype=np.int64)
        sums = np.zeros(3)
        common = (estimate, self.target, self.tail, self.tolerance)
        # numba's Dispatcher type does not carry the compiled functions' parameters
        if self.two_arm:
            covered = two_arm_studies(  # type: ignore[call-arg]
                means, squares, *self.arguments, *common, *self.quadrature, efficacy,
                futility, sums)
        else:
            covered = one_arm_studies(  # type: ignore[call-arg]
                means[:, :, 0], squares[:, :, 0], *self.arguments, *common, efficacy,
                futility, sums)
        if not estimate:
            return Tally(replicates, efficacy, futility)
        return Tally(replicates, efficacy, futility, sums, int(covered))
