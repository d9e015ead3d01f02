"""Normal endpoint with unknown sd (octrial.endpoints.unknown_sd): the posterior against
the per-subject conjugate update, B against Student t draws and scipy quadrature, and the
predictive probability of final success against brute-force simulation of the future
subjects (drawn one by one with numpy, the final posterior and B computed with scipy)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, special, stats

from octrial.endpoints import unknown_sd as U


def within(estimate: float, exact: float, se: float, k: float = 4.0) -> bool:
    return abs(estimate - exact) <= k * se


def quad_difference_sf(t: U.StudentPosterior, c: U.StudentPosterior, d: float) -> float:
    """Pr(eta_T - eta_C > d) = int f_C(u) S_T(u + d) du by adaptive scipy quad."""
    ft, fc = t.distribution(), c.distribution()
    cuts = sorted((c.mean, t.mean - d))
    pieces = [(-np.inf, cuts[0]), (cuts[0], cuts[1]), (cuts[1], np.inf)]
    return sum(integrate.quad(lambda u: fc.pdf(u) * ft.sf(u + d), lo, hi, epsabs=1e-15,
                              epsrel=1e-13, limit=400)[0] for lo, hi in pieces)


def final_b_by_simulation(post: U.StudentPosterior, future: int, claim: float, rng,
                          draws: int) -> np.ndarray:
    """B at the final analysis for ``draws`` simulated continuations: sigma^2 and mu from
    the posterior, ``future`` subjects from N(mu, sigma^2), the conjugate update, and
    scipy's Student t (Gelman et al. 2013, sec. 3.3)."""
    s2 = post.scale / rng.gamma(post.shape, 1.0, draws)
    mu = rng.normal(post.mean, np.sqrt(s2 / post.mean_n))
    y = mu[:, None] + np.sqrt(s2)[:, None] * rng.standard_normal((draws, future))
    ybar, ss = y.mean(axis=1), ((y - y.mean(axis=1, keepdims=True)) ** 2).sum(axis=1)
    k, m, a, b = post.mean_n, post.mean, post.shape, post.scale
    k_n = k + future
    m_n = (k * m + future * ybar) / k_n
    a_n = a + future / 2
    b_n = b + ss / 2 + k * future * (ybar - m) ** 2 / (2 * k_n)
    return m_n, np.sqrt(b_n / (a_n * k_n)), 2 * a_n


def test_update_in_two_batches_equals_one_batch() -> None:
    # Identity (Bayes' rule is sequential): the posterior after the first batch, used as
    # the prior for the second, gives the posterior of all the data at once. (The
    # one-batch update is checked against a Simpson integration of the joint posterior in
    # test_adequacy.py::test_normal_inverse_gamma_posterior_against_quadrature.)
    y = np.array([1.2, 0.4, 2.2, 1.9, 0.7, 1.5, -0.3])

    def on(values: np.ndarray, prior: tuple) -> U.StudentPosterior:
        return U.update(*prior, n=values.size, ybar=values.mean(), sd=values.std(ddof=1))

    first = on(y[:3], (0.5, 2.0, 3.0, 2.0))
    second = on(y[3:], (first.mean, first.mean_n, first.shape, first.scale))
    whole = on(y, (0.5, 2.0, 3.0, 2.0))
    assert (second.mean, second.mean_n, second.shape, second.scale) == pytest.approx(
        (whole.mean, whole.mean_n, whole.shape, whole.scale), rel=1e-13)


def test_one_arm_benefit_against_draws() -> None:
    # Source: numpy draws of (sigma^2, mu) from the normal-inverse-gamma posterior.
    post = U.update(0.2, 2.0, 3.0, 4.0, n=12, ybar=0.9, sd=1.6)
    rng = np.random.default_rng(11)
    s2 = post.scale / rng.gamma(post.shape, 1.0, 1_000_000)
    mu = rng.normal(post.mean, np.sqrt(s2 / post.mean_n))
    for claim in (0.0, 0.5, 1.2):
        estimate = float(np.mean(mu > claim))
        se = math.sqrt(estimate * (1 - estimate) / mu.size)
        assert within(U.benefit_one_arm(post, claim), estimate, se)


CASES = {
    "equal df": ((0, 1, 2, 4, 15, 1.1, 2.1), (0, 1, 2, 4, 15, 0.2, 1.7)),
    "few df treatment": ((0, 1, 1, 1, 3, 1.1, 2.1), (0, 1, 0.5, 1, 40, 0.2, 1.7)),
    "narrow treatment": ((0, 1, 1, 1, 200, 1.1, 0.3), (0, 1, 0.5, 1, 2, 0.2, 5)),
    "narrow control": ((0, 1, 1, 1, 2, 1.1, 5.0), (0, 1, 0.5, 1, 300, 0.2, 0.3)),
}


def posterior(row) -> U.StudentPosterior:
    m0, k0, a0, b0, n, ybar, sd = row
    return U.update(m0, k0, a0, b0, n=n, ybar=ybar, sd=sd)


@pytest.mark.parametrize("case", CASES)
def test_two_arm_benefit_against_quadrature(case: str) -> None:
    t, c = (posterior(row) for row in CASES[case])
    for d in (-1.0, 0.0, 0.7, 3.0):
        assert U.benefit_two_arms(t, c, d) == pytest.approx(quad_difference_sf(t, c, d),
                                                            abs=1e-12)
        coarse = U.difference_sf(t.mean, t.t_scale, t.df, c.mean, c.t_scale, c.df, d,
                                 U.PREDICTIVE_STEP)
        assert float(coarse) == pytest.approx(quad_difference_sf(t, c, d), abs=1e-10)


def test_two_arm_benefit_against_draws_and_vectorised() -> None:
    # Source: differences of numpy Student t draws; and the vectorised call equals the
    # one-at-a-time calls.
    t, c = (posterior(row) for row in CASES["equal df"])
    rng = np.random.default_rng(3)
    x = (t.mean + t.t_scale * rng.standard_t(t.df, 1_000_000)
         - c.mean - c.t_scale * rng.standard_t(c.df, 1_000_000))
    estimate = float(np.mean(x > 0.4))
    assert within(U.benefit_two_arms(t, c, 0.4), estimate,
                  math.sqrt(estimate * (1 - estimate) / x.size))
    locs = np.array([0.1, 0.8, 1.5])
    many = U.difference_sf(locs, np.full(3, t.t_scale), t.df, c.mean, c.t_scale, c.df, 0.0)
    single = [U.benefit_two_arms(U.StudentPosterior(m, t.mean_n, t.shape, t.scale), c, 0.0)
              for m in locs]
    np.testing.assert_allclose(many, single, atol=1e-14)


@pytest.mark.parametrize(("gamma", "future"), [(0.975, 25), (0.9, 8), (0.3, 25), (0.95, 1)],
                         ids=["0.975, 25 to come", "0.9, 8 to come", "0.3 (q < 0)",
                              "one to come"])
def test_one_arm_predictive_against_simulated_subjects(gamma: float, future: int) -> None:
    post = U.update(0.2, 2.0, 3.0, 4.0, n=20, ybar=0.6, sd=1.8)
    claim = 0.0
    exact = U.predictive_one_arm(post, future, claim, gamma)
    rng = np.random.default_rng(int(gamma * 1000) + future)
    draws = 200_000
    loc, scale, df = final_b_by_simulation(post, future, claim, rng, draws)
    estimate = float(np.mean(stats.t.sf((claim - loc) / scale, df) >= gamma))
    se = math.sqrt(estimate * (1 - estimate) / draws)
    assert within(exact, estimate, se), (exact, estimate, se)


def test_one_arm_predictive_limits() -> None:
    post = U.update(0.0, 1.0, 2.0, 2.0, n=30, ybar=0.5, sd=1.0)
    # nothing to come: success now or not
    assert U.predictive_one_arm(post, 0, 0.0, 0.9) == float(U.benefit_one_arm(post, 0.0) >= 0.9)
    # gamma = 0.5 (q = 0): success iff the final mean passes the claim; the final mean is
    # Student t with 2a df, location m and scale sqrt(b v / a) (closed form)
    m_future = 10
    v = m_future / (post.mean_n * (post.mean_n + m_future))
    expected = stats.t.sf(0.3, 2 * post.shape, post.mean, math.sqrt(post.scale * v / post.shape))
    assert U.predictive_one_arm(post, m_future, 0.3, 0.5) == pytest.approx(expected, rel=1e-12)
    # more certain data now: PP moves towards 0 or 1
    far = U.update(0.0, 1.0, 2.0, 2.0, n=30, ybar=1.5, sd=1.0)
    assert U.predictive_one_arm(far, 10, 0.0, 0.975) > 0.999


def test_two_arm_predictive_against_simulated_subjects() -> None:
    t, c = (posterior(row) for row in CASES["equal df"])
    future = (20, 20)
    draws = 10_000
    pp, se = U.predictive_two_arms(t, c, future, 0.0, 0.975, seed=5, draws=draws)
    rng = np.random.default_rng(17)
    lt, st, dft = final_b_by_simulation(t, future[0], 0.0, rng, draws)
    lc, sc, dfc = final_b_by_simulation(c, future[1], 0.0, rng, draws)
    # B at the final look by Gauss-Legendre in v = F_C(u) with 400 nodes (about 1e-7)
    v, w = np.polynomial.legendre.leggauss(400)
    q = special.stdtrit(dfc, 0.5 * (v + 1))
    b_end = special.stdtr(dft, (lt[:, None] - lc[:, None] - sc[:, None] * q)
                          / st[:, None]) @ (0.5 * w)
    estimate = float(np.mean(b_end >= 0.975))
    assert within(pp, estimate, math.hypot(se, math.sqrt(estimate * (1 - estimate) / draws)))
    assert U.predictive_two_arms(t, c, future, 0.0, 0.975, seed=5, draws=draws) == (pp, se)
