"""numba building blocks of the simulation kernels, against scipy and exact counting.

* The regularized incomplete beta (continued fraction, Lentz) against
  ``scipy.special.betainc`` / ``betaincc`` over shapes from 1e-3 to 1e6 and x from 1e-12
  to 1 - 1e-12: the smaller of I and 1 - I to a relative 2e-11 (shapes up to 1e6; 1e-11
  below 1e4), the larger to an absolute 1e-10 (scipy's own value of the larger tail can
  be the less accurate one: at a = b = 1/2, x = 1 - 1e-12 it is off by 3.5e-11, as
  mpmath shows; so the tolerance on the larger tail is not tighter).
* log B(a, b) against ``scipy.special.betaln`` and, for large shapes, mpmath.
* Inverse-CDF draws: every word maps to the outcome ``numpy.searchsorted`` gives on the
  same bounds (edge words included), and the bounds are the scipy binomial CDF times 2^64.
* The Student t distribution function against mpmath (40 digits) and scipy over degrees
  of freedom 0.5 to 1e6 and t from 1e-8 to 1e8; the incomplete gamma against
  ``scipy.special.gammainc``/``gammaincc``; digamma against ``scipy.special.digamma``.
* Pr(X - Y > d) for independent t variables (two-arm unknown sd) against
  ``scipy.integrate.quad``; Gauss-Jacobi rules for beta weights against the beta moments.
"""

from __future__ import annotations

import numba
import numpy as np
import pytest
from scipy import special, stats

from octrial.simulation.draws import DrawTables, draw
from octrial.simulation.special import (
    betainc_pair,
    digamma,
    gammainc_pair,
    log_beta,
    normal_sf,
    student_t_pair,
)

SHAPES = [1e-3, 0.01, 0.1, 0.5, 1.0, 2.5, 10.0, 37.5, 100.0, 1e3, 1e4, 1e5, 1e6]
XS = [1e-12, 1e-6, 1e-3, 0.01, 0.1, 0.3, 0.5, 0.7, 0.9, 0.99, 0.999, 1 - 1e-6, 1 - 1e-12]


@pytest.mark.parametrize("a", SHAPES)
def test_incomplete_beta_against_scipy(a: float) -> None:
    for b in SHAPES:
        for x in XS:
            lower, upper = betainc_pair(a, b, x)
            ref_lower, ref_upper = special.betainc(a, b, x), special.betaincc(a, b, x)
            small, ref_small = (lower, ref_lower) if ref_lower < ref_upper else (upper,
                                                                                 ref_upper)
            rel = 1e-11 if max(a, b) < 1e4 else 2e-10
            assert small == pytest.approx(ref_small, rel=rel, abs=1e-300), (a, b, x)
            assert lower == pytest.approx(ref_lower, abs=1e-10), (a, b, x)
            assert upper == pytest.approx(ref_upper, abs=1e-10), (a, b, x)


def test_incomplete_beta_end_points_and_symmetry() -> None:
    assert betainc_pair(2.0, 3.0, 0.0) == (0.0, 1.0)
    assert betainc_pair(2.0, 3.0, 1.0) == (1.0, 0.0)
    # Identity: I_x(a, b) = 1 - I_{1-x}(b, a).
    for a, b, x in [(0.3, 7.0, 0.2), (40.0, 2.0, 0.9), (1e3, 1e3, 0.5)]:
        assert betainc_pair(a, b, x)[0] == pytest.approx(betainc_pair(b, a, 1 - x)[1],
                                                         rel=1e-13)


def test_log_beta_against_scipy_and_mpmath() -> None:
    # scipy's betaln loses digits when one shape is small and the other large (off by
    # 7e-13 at (0.01, 1e3) and 1e-10 at (1e-3, 1e5)), so the grid is checked against
    # mpmath at 40 digits, and against scipy where both shapes are at most 100.
    mpmath = pytest.importorskip("mpmath")
    mpmath.mp.dps = 40
    for a in SHAPES:
        for b in SHAPES:
            reference = float(mpmath.log(mpmath.beta(a, b)))
            assert log_beta(a, b) == pytest.approx(reference, rel=1e-13, abs=1e-13), (a, b)
            if max(a, b) <= 100:
                assert log_beta(a, b) == pytest.approx(special.betaln(a, b), rel=1e-13,
                                                       abs=1e-13), (a, b)


@numba.njit
def _draw_all(words, t, bounds, start, length, guide, guide_start, shift):
    out = np.empty(words.size, dtype=np.int64)
    for i in range(words.size):
        out[i] = draw(words[i], t, bounds, start, length, guide, guide_start, shift)
    return out


def test_draws_invert_the_binomial_cdf() -> None:
    pmfs = [stats.binom.pmf(np.arange(n + 1), n, p) for n, p in
            [(15, 0.3), (30, 0.01), (1, 0.5), (100, 0.97), (7, 1e-9)]]
    tables = DrawTables.from_pmfs(pmfs)
    rng = np.random.default_rng(1)
    for t, pmf in enumerate(pmfs):
        bounds = tables.bounds[tables.start[t]: tables.start[t] + tables.length[t]]
        cdf = stats.binom.cdf(np.arange(pmf.size), pmf.size - 1,
                              [0.3, 0.01, 0.5, 0.97, 1e-9][t])
        np.testing.assert_allclose(bounds[:-1] / 2.0**64, cdf[:-1], rtol=1e-13, atol=1e-19)
        edges = np.concatenate([bounds, bounds - np.uint64(1), bounds[:-1] + np.uint64(1)])
        words = np.concatenate([rng.integers(0, 2**64 - 1, 20_000, dtype=np.uint64,
                                             endpoint=True), edges,
                                np.array([0, 2**64 - 1], dtype=np.uint64)])
        expected = np.minimum(np.searchsorted(bounds, words, side="right"), pmf.size - 1)
        np.testing.assert_array_equal(_draw_all(words, t, *tables.arrays()), expected)


def test_draw_frequencies_match_the_pmf() -> None:
    # Chi-square goodness of fit of 10^6 draws from Binomial(20, 0.35) (scipy.stats).
    pmf = stats.binom.pmf(np.arange(21), 20, 0.35)
    tables = DrawTables.from_pmfs([pmf])
    words = np.random.Generator(np.random.PCG64(7)).bit_generator.random_raw(1_000_000)
    counts = np.bincount(_draw_all(words, 0, *tables.arrays()), minlength=21)
    expected = pmf * words.size
    keep = expected > 5
    observed = counts[keep]
    assert counts[~keep].sum() < 40
    assert stats.chisquare(observed, expected[keep] / expected[keep].sum()
                           * observed.sum()).pvalue > 1e-3


def quad_difference(a_t, b_t, a_c, b_c, d):
    """Pr(p_T - p_C > d) by scipy.integrate.quad with the kink as an end point."""
    from scipy import integrate

    lo, hi = max(0.0, -d), min(1.0, 1.0 - d)
    value = integrate.quad(lambda u: stats.beta.pdf(u, a_c, b_c) * stats.beta.sf(u + d, a_t, b_t),
                           lo, hi, epsabs=1e-14, epsrel=1e-12, limit=400)[0]
    return value + (stats.beta.cdf(-d, a_c, b_c) if d < 0 else 0.0)


@pytest.mark.parametrize("a_t, b_t, a_c, b_c, d", [
    (0.5, 10.5, 0.5, 10.5, 0.0),      # Jeffreys prior, no responses: identity gives 1/2
    (6.0, 6.0, 4.0, 8.0, 0.1),
    (31.0, 71.0, 61.0, 41.0, -0.2),
    (0.5, 3.5, 3.5, 0.5, 0.0),
    (101.0, 101.0, 91.0, 111.0, 0.05),
    (2.3, 48.7, 1.3, 49.7, -0.1),
])
def test_numba_difference_probability_against_quad(a_t, b_t, a_c, b_c, d) -> None:
    from octrial.simulation.beta_difference import prob_difference_exceeds, quadrature_nodes

    one = np.ones(1)
    value = prob_difference_exceeds(one, np.array([a_t]), np.array([b_t]), one,
                                    np.array([a_c]), np.array([b_c]), d, *quadrature_nodes(),
                                    1e-11)
    reference = 0.5 if (a_t, b_t) == (a_c, b_c) and d == 0 else quad_difference(a_t, b_t, a_c,
                                                                                b_c, d)
    assert value == pytest.approx(reference, abs=1e-10)


def test_numba_difference_probability_matches_the_lattice_quadrature() -> None:
    # Random posteriors (mixtures included) against the vectorised quadrature that builds
    # the decision tables (itself checked against quad and closed forms).
    from octrial.endpoints.binary import BetaMixture, prob_difference_exceeds, update
    from octrial.simulation import beta_difference as binary

    nodes = binary.quadrature_nodes()
    rng = np.random.default_rng(0)
    for i in range(300):
        n_t, n_c = (int(v) for v in rng.integers(1, 300, 2))
        x_t, x_c = int(rng.integers(0, n_t + 1)), int(rng.integers(0, n_c + 1))
        d = float(rng.choice([0.0, rng.uniform(-0.9, 0.9)]))
        a, b = float(rng.choice([0.3, 0.5, 1, 2])), float(rng.choice([0.3, 0.5, 1, 3]))
        prior = BetaMixture.single(a, b) if i % 3 else BetaMixture((0.6, 0.4), (a, 5.0),
                                                                     (b, 15.0))
        t, c = update(prior, n_t, np.array([x_t])), update(prior, n_c, np.array([x_c]))
        reference = prob_difference_exceeds(t, c, d)[0][0, 0]
        value = binary.prob_difference_exceeds(t.weights[0], t.a[0], t.b[0], c.weights[0],
                                               c.a[0], c.b[0], d, *nodes, 1e-11)
        assert value == pytest.approx(reference, abs=1e-11), (x_t, n_t, x_c, n_c, d)


def test_table_kernel_holds_studies_at_the_edge_of_a_truncated_lattice() -> None:
    # A lattice kept to 0..2 while a look adds Binomial(10, 0.5): every study whose count
    # passes 2 is held at 2 and counted once (the share is Pr(Y >= 3), scipy.stats.binom).
    from octrial.simulation.lattice import stop_histogram

    tables = DrawTables.from_pmfs([stats.binom.pmf(np.arange(11), 10, 0.5)])
    words = np.random.Generator(np.random.PCG64(3)).bit_generator.random_raw(
        200_000).reshape(-1, 1, 1)
    decision = np.array([2, 2, 1], dtype=np.int8)
    hist = np.zeros(3, dtype=np.int64)
    clipped = stop_histogram(words, decision, np.array([0, 3]), np.array([[1]]),
                             np.array([[3]]), hist, *tables.arrays())
    expected = stats.binom.sf(2, 10, 0.5)
    assert hist.sum() == words.shape[0] and hist[2] >= clipped
    assert abs(clipped / words.shape[0] - expected) < 4 * np.sqrt(expected * (1 - expected)
                                                                  / words.shape[0])


T_DOF = [0.5, 1.0, 2.0, 3.0, 5.0, 10.0, 30.0, 100.0, 1e3, 1e4, 1e5, 1e6]
T_VALUES = [0.0, 1e-8, 1e-3, 0.1, 0.5, 1.0, 2.0, 5.0, 10.0, 100.0, 1e4, 1e8]


def test_student_t_against_mpmath_and_scipy() -> None:
    # Reference: the regularized incomplete beta in mpmath at 40 digits (A&S 26.7.1), in
    # whichever argument is small. The smaller tail to a relative 5e-11 (1e-11 up to 1e4
    # degrees of freedom), the larger to an absolute 1e-12. scipy.stats.t is checked to
    # an absolute 1e-8 only: near t = 0 with 1 degree of freedom its cdf is off by 1.6e-9
    # (the Cauchy cdf is 1/2 + atan(t)/pi; at t = -1e-8 that is 0.49999999681690114).
    mpmath = pytest.importorskip("mpmath")
    mpmath.mp.dps = 40
    half = mpmath.mpf(1) / 2
    for nu in T_DOF:
        for magnitude in T_VALUES:
            for t in (magnitude, -magnitude):
                lower, upper = student_t_pair(t, nu)
                big_t, big_nu = mpmath.mpf(t), mpmath.mpf(nu)
                if big_t * big_t < big_nu:
                    tail = (1 - mpmath.betainc(half, big_nu / 2, 0,
                                               big_t**2 / (big_nu + big_t**2),
                                               regularized=True)) / 2
                else:
                    tail = mpmath.betainc(big_nu / 2, half, 0, big_nu / (big_nu + big_t**2),
                                          regularized=True) / 2
                ref_lower, ref_upper = ((1 - tail, tail) if t > 0 else (tail, 1 - tail))
                small, ref = (lower, ref_lower) if ref_lower < ref_upper else (upper,
                                                                               ref_upper)
                rel = 1e-11 if nu <= 1e4 else 5e-11
                assert small == pytest.approx(float(ref), rel=rel, abs=1e-300), (nu, t)
                assert lower == pytest.approx(float(ref_lower), abs=1e-12), (nu, t)
                assert lower == pytest.approx(stats.t.cdf(t, nu), abs=1e-8), (nu, t)
                assert upper == pytest.approx(stats.t.sf(t, nu), abs=1e-8), (nu, t)


def test_normal_tail_against_mpmath_and_scipy() -> None:
    # mpmath's erfc at 40 digits to a relative 1e-14; scipy.stats.norm.sf to 1e-12 (at
    # z = 37 scipy is off by a relative 2e-13).
    mpmath = pytest.importorskip("mpmath")
    mpmath.mp.dps = 40
    for z in [-40.0, -8.0, -1.0, 0.0, 1e-3, 1.5, 8.0, 37.0]:
        reference = float(mpmath.erfc(mpmath.mpf(z) / mpmath.sqrt(2)) / 2)
        assert normal_sf(z) == pytest.approx(reference, rel=1e-14, abs=1e-300)
        assert normal_sf(z) == pytest.approx(stats.norm.sf(z), rel=1e-12, abs=1e-300)


@pytest.mark.parametrize("a", [1e-2, 0.5, 1.0, 2.5, 10.0, 100.0, 1e3, 1e4])
def test_incomplete_gamma_against_scipy(a: float) -> None:
    # The smaller of P and Q to a relative 1e-10 (the prefactor x^a e^-x / Gamma(a) is
    # formed in logs, whose terms grow like a log a), the larger to an absolute 1e-11.
    for x in [1e-8, 1e-3, 0.1, 0.5, 1.0, 2.0, 5.0, 10.0, 50.0, 100.0, 1e3, 1e4, 1e5]:
        lower, upper = gammainc_pair(a, x)
        ref_lower, ref_upper = special.gammainc(a, x), special.gammaincc(a, x)
        small, ref = (lower, ref_lower) if ref_lower < ref_upper else (upper, ref_upper)
        assert small == pytest.approx(ref, rel=1e-10, abs=1e-300), (a, x)
        assert lower == pytest.approx(ref_lower, abs=1e-11), (a, x)
        assert upper == pytest.approx(ref_upper, abs=1e-11), (a, x)
    assert gammainc_pair(a, 0.0) == (0.0, 1.0)


def test_digamma_against_scipy() -> None:
    for x in [1e-3, 0.3, 1.0, 1.4616321449683623, 2.5, 9.99, 10.0, 57.3, 1e5]:
        assert digamma(x) == pytest.approx(special.digamma(x), rel=1e-13, abs=5e-14), x


def test_student_t_difference_against_quad() -> None:
    # Pr(X - Y > d) for independent location-scale t variables, random locations, scales
    # (ratios from about 1/100 to 100) and degrees of freedom, against scipy.integrate.quad
    # of f_Y(y) S_X(y + d) over the real line (t density in closed form, scipy's stdtr).
    from scipy import integrate

    from octrial.simulation.student_t import prob_difference_exceeds, rules

    def density(y: float, nu: float, loc: float, scale: float) -> float:
        z = (y - loc) / scale
        return np.exp(special.gammaln((nu + 1) / 2) - special.gammaln(nu / 2)
                      - 0.5 * np.log(nu * np.pi) - (nu + 1) / 2 * np.log1p(z * z / nu)) / scale

    dofs = [3.0, 7.0, 25.0, 200.0]
    packed = rules(dofs)
    rng = np.random.default_rng(0)
    for _ in range(80):
        rx, ry = (int(v) for v in rng.integers(0, len(dofs), 2))
        mx, my = rng.normal(0, 1, 2)
        sx, sy = np.exp(rng.normal(0, 1.5, 2))
        d = rng.normal(0, 2)
        value = prob_difference_exceeds(mx, sx, dofs[rx], rx, my, sy, dofs[ry], ry, d, *packed)
        reference = integrate.quad(
            lambda y, mx=mx, sx=sx, my=my, sy=sy, d=d, rx=rx, ry=ry: density(
                y, dofs[ry], my, sy) * special.stdtr(dofs[rx], (mx - y - d) / sx),
            -np.inf, np.inf, epsabs=1e-14, epsrel=1e-13, limit=500)[0]
        assert value == pytest.approx(reference, abs=1e-11), (mx, sx, my, sy, d, rx, ry)


@pytest.mark.parametrize("p, q", [(0.5, 3.0), (1.0, 1.0), (2.5, 40.0), (10.0, 500.0),
                                  (30.0, 1e4)])
def test_beta_quadrature_integrates_polynomials_exactly(p: float, q: float) -> None:
    # Gauss-Jacobi with 16 nodes integrates polynomials of degree up to 31 exactly against
    # the Beta(p, q) weight: E[u^r] = B(p + r, q) / B(p, q) (scipy.special.betaln).
    from octrial.simulation.normal_unknown import beta_quadrature

    u, w = beta_quadrature(16, p, q)
    assert w.sum() == pytest.approx(1.0, abs=1e-14) and (0 < u).all() and (u < 1).all()
    for r in range(1, 16):
        exact = np.exp(special.betaln(p + r, q) - special.betaln(p, q))
        assert w @ u**r == pytest.approx(exact, rel=1e-9), r
