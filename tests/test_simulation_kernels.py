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
"""

from __future__ import annotations

import numba
import numpy as np
import pytest
from scipy import special, stats

from octrial.simulation.draws import DrawTables, draw
from octrial.simulation.special import betainc_pair, log_beta

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
    from octrial.simulation.binary import prob_difference_exceeds, quadrature_nodes

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
    from octrial.simulation import binary

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
