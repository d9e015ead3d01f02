"""Special functions compiled with numba, for kernels that evaluate posteriors per study.

The regularized incomplete beta I_x(a, b) by its continued fraction (evaluated with the
modified Lentz method; Press et al., Numerical Recipes, 3rd ed., section 6.4; Didonato &
Morris 1992 discuss the regions), with the prefactor x^a (1 - x)^b / (a B(a, b)) computed in
logarithms. Both I and its complement 1 - I are returned: whichever is computed directly
from the continued fraction keeps full relative accuracy, so tail probabilities near 0
and near 1 are both accurate. Checked against ``scipy.special.betainc`` in
tests/test_simulation_kernels.py.

Built on it: the Student t distribution function (Abramowitz & Stegun 26.7.1: with
x = nu / (nu + t^2), Pr(|T| > |t|) = I_x(nu / 2, 1 / 2)), evaluated through whichever of
x and 1 - x = t^2 / (nu + t^2) is small so that neither is formed by cancellation. Also
the regularized incomplete gamma P(a, x) and Q(a, x) (series below x = a + 1, Lentz's
continued fraction above; Numerical Recipes, 3rd ed., section 6.2), the digamma function
(recurrence to x >= 10, then the asymptotic series; Abramowitz & Stegun 6.3.5, 6.3.18) and
the normal tail. Each is checked against scipy in tests/test_simulation_kernels.py.
"""

from __future__ import annotations

import math

import numba

TINY = 1e-300
EPS = 1e-16
MAX_TERMS = 100_000


LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)
STIRLING = (1.0 / 12.0, -1.0 / 360.0, 1.0 / 1260.0, -1.0 / 1680.0, 1.0 / 1188.0,
            -691.0 / 360360.0, 1.0 / 156.0, -3617.0 / 122400.0)
"""Coefficients B_2k / (2k (2k - 1)) of Stirling's series for log Gamma."""


@numba.njit(cache=True)
def _stirling_remainder(x: float) -> float:
    """log Gamma(x) - ((x - 1/2) log x - x + log sqrt(2 pi)), for x >= 10."""
    inv2 = 1.0 / (x * x)
    total = 0.0
    power = 1.0 / x
    for c in STIRLING:
        total += c * power
        power *= inv2
    return total


@numba.njit(cache=True)
def log_beta(a: float, b: float) -> float:
    """log B(a, b), without the cancellation of lgamma differences at large shapes.

    For shapes of 10 or more the leading Stirling terms are combined analytically and
    only the small remainders are subtracted (the approach of TOMS 708, Didonato & Morris
    1992, and R's ``lbeta``).
    """
    p, q = min(a, b), max(a, b)
    if q < 10.0:
        return math.lgamma(p) + math.lgamma(q) - math.lgamma(p + q)
    s = p + q
    if p >= 10.0:
        corr = _stirling_remainder(p) + _stirling_remainder(q) - _stirling_remainder(s)
        return (-0.5 * math.log(q) + LOG_SQRT_2PI + corr + (p - 0.5) * math.log(p / s)
                + q * math.log1p(-p / s))
    corr = _stirling_remainder(q) - _stirling_remainder(s)
    return math.lgamma(p) + corr + p - p * math.log(s) + (q - 0.5) * math.log1p(-p / s)


@numba.njit(cache=True, inline="always")
def _lentz_step(aa: float, c: float, d: float) -> tuple[float, float]:
    """One modified-Lentz update of (C, 1/D) for the partial numerator ``aa``."""
    d = 1.0 + aa * d
    if abs(d) < TINY:
        d = TINY
    c = 1.0 + aa / c
    if abs(c) < TINY:
        c = TINY
    return c, 1.0 / d


@numba.njit(cache=True)
def _continued_fraction(a: float, b: float, x: float) -> float:
    """The continued fraction of I_x(a, b) (converges fast for x < (a + 1) / (a + b + 2))."""
    qab, qap, qam = a + b, a + 1.0, a - 1.0
    c = 1.0
    d = 1.0 - qab * x / qap
    if abs(d) < TINY:
        d = TINY
    d = 1.0 / d
    h = d
    for m in range(1, MAX_TERMS + 1):
        m2 = 2.0 * m
        c, d = _lentz_step(m * (b - m) * x / ((qam + m2) * (a + m2)), c, d)
        h *= d * c
        c, d = _lentz_step(-(a + m) * (qab + m) * x / ((a + m2) * (qap + m2)), c, d)
        delta = d * c
        h *= delta
        if abs(delta - 1.0) < EPS:
            break
    return h


@numba.njit(cache=True)
def betainc_pair(a: float, b: float, x: float) -> tuple[float, float]:
    """(I_x(a, b), 1 - I_x(a, b)), each accurate where it is small.

    Examples
    --------
    >>> lower, upper = betainc_pair(2.0, 3.0, 0.4)
    >>> round(lower, 12), round(upper, 12)
    (0.5248, 0.4752)
    """
    if x <= 0.0:
        return 0.0, 1.0
    if x >= 1.0:
        return 1.0, 0.0
    log_front = a * math.log(x) + b * math.log1p(-x) - log_beta(a, b)
    if x < (a + 1.0) / (a + b + 2.0):
        lower = math.exp(log_front) * _continued_fraction(a, b, x) / a
        return lower, 1.0 - lower
    upper = math.exp(log_front) * _continued_fraction(b, a, 1.0 - x) / b
    return 1.0 - upper, upper


@numba.njit(cache=True)
def betainc(a: float, b: float, x: float) -> float:
    """I_x(a, b), the regularized incomplete beta (the Beta(a, b) CDF at x)."""
    return betainc_pair(a, b, x)[0]


@numba.njit(cache=True)
def betaincc(a: float, b: float, x: float) -> float:
    """1 - I_x(a, b), the Beta(a, b) survival function at x, accurate near 0."""
    return betainc_pair(a, b, x)[1]


@numba.njit(cache=True)
def student_t_pair(t: float, nu: float) -> tuple[float, float]:
    """(Pr(T <= t), Pr(T > t)) for Student t with ``nu`` degrees of freedom, each accurate
    where it is small.

    Examples
    --------
    >>> lower, upper = student_t_pair(2.0, 5.0)
    >>> round(upper, 12)
    0.050969739414
    """
    if t == 0.0:
        return 0.5, 0.5
    t2 = t * t
    if t2 < nu:
        # 1 - x = t^2 / (nu + t^2) is the small one: I_{1-x}(1/2, nu/2) = Pr(|T| <= |t|)
        tail = 0.5 * betainc_pair(0.5, 0.5 * nu, t2 / (nu + t2))[1]
    else:
        tail = 0.5 * betainc_pair(0.5 * nu, 0.5, nu / (nu + t2))[0]
    if t > 0.0:
        return 1.0 - tail, tail
    return tail, 1.0 - tail


@numba.njit(cache=True)
def normal_sf(z: float) -> float:
    """Pr(Z > z) for a standard normal Z (erfc keeps the upper tail's relative accuracy)."""
    return 0.5 * math.erfc(z / math.sqrt(2.0))


@numba.njit(cache=True)
def gammainc_pair(a: float, x: float) -> tuple[float, float]:
    """(P(a, x), Q(a, x)): the regularized lower and upper incomplete gamma, each accurate
    where it is small (the Gamma(a, 1) CDF and survival function at x)."""
    if x <= 0.0:
        return 0.0, 1.0
    if math.isinf(x):
        return 1.0, 0.0
    log_front = a * math.log(x) - x - math.lgamma(a)
    if x < a + 1.0:
        term = 1.0 / a
        total = term
        ap = a
        for _ in range(MAX_TERMS):
            ap += 1.0
            term *= x / ap
            total += term
            if abs(term) < abs(total) * EPS:
                break
        lower = math.exp(log_front) * total
        return lower, 1.0 - lower
    # Q by the continued fraction (modified Lentz)
    b = x + 1.0 - a
    c = 1.0 / TINY
    d = 1.0 / b
    h = d
    for i in range(1, MAX_TERMS + 1):
        an = -i * (i - a)
        b += 2.0
        d = an * d + b
        if abs(d) < TINY:
            d = TINY
        c = b + an / c
        if abs(c) < TINY:
            c = TINY
        d = 1.0 / d
        delta = d * c
        h *= delta
        if abs(delta - 1.0) < EPS:
            break
    upper = math.exp(log_front) * h
    return 1.0 - upper, upper


@numba.njit(cache=True)
def digamma(x: float) -> float:
    """psi(x) = d log Gamma(x) / dx, as scipy.special.digamma: -inf at +0, +inf at -0,
    nan at negative integers and -inf; negative non-integers by the reflection formula
    psi(x) = psi(1 - x) - pi / tan(pi x) (Abramowitz & Stegun 6.3.7), so the upward
    recurrence below runs at most 10 times for any argument."""
    if x == 0.0:
        return -math.inf if math.copysign(1.0, x) > 0 else math.inf
    if x < 0.0:
        if x == math.floor(x):  # poles (and -inf)
            return math.nan
        # tan has period pi: reduce to the nearest integer first (exact), as pi x loses
        # the digits that matter near a pole
        return digamma_positive(1.0 - x) - math.pi / math.tan(
            math.pi * (x - math.floor(x + 0.5)))
    return digamma_positive(x)


@numba.njit(cache=True)
def digamma_positive(x: float) -> float:
    """psi(x) for x > 0 (or nan): recurrence up to 10, then the asymptotic series."""
    total = 0.0
    while x < 10.0:
        total -= 1.0 / x
        x += 1.0
    inv2 = 1.0 / (x * x)
    series = inv2 * (1.0 / 12.0 - inv2 * (1.0 / 120.0 - inv2 * (
        1.0 / 252.0 - inv2 * (1.0 / 240.0 - inv2 * (1.0 / 132.0)))))
    return total + math.log(x) - 0.5 / x - series


@numba.njit(cache=True, inline="always")
def normalise_log_weights(w) -> None:
    """Turn log mixture weights in ``w`` into weights summing to 1, in place (the largest
    is subtracted before exponentiating, so no weight overflows)."""
    top = -math.inf
    for j in range(w.size):
        top = max(top, w[j])
    total = 0.0
    for j in range(w.size):
        w[j] = math.exp(w[j] - top)
        total += w[j]
    for j in range(w.size):
        w[j] /= total
