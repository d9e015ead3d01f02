"""Binary endpoint maths against identities, scipy and independent computations."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, special, stats

from octrial.endpoints.binary import (
    BetaMixture,
    predictive_pmf,
    prob_difference_exceeds,
    update,
)

MIXTURE = BetaMixture((0.6, 0.4), (2.0, 1.0), (8.0, 1.0))


@pytest.mark.parametrize("n", [1, 7, 30, 200])
@pytest.mark.parametrize("p0", [0.05, 0.2, 0.5, 0.9])
def test_flat_prior_tail_is_binomial_cdf(n: int, p0: float) -> None:
    # Identity: with a Beta(1, 1) prior the posterior is Beta(x + 1, n - x + 1) and
    # Pr(p > p0 | x) = 1 - I_p0(x + 1, n - x + 1) = Pr(Binomial(n + 1, p0) <= x).
    x = np.arange(n + 1)
    post = update(BetaMixture.single(1, 1), n, x)
    expected = stats.binom.cdf(x, n + 1, p0)
    np.testing.assert_allclose(post.sf(p0), expected, rtol=1e-12, atol=1e-300)
    np.testing.assert_allclose(post.cdf(p0), 1 - expected, rtol=1e-10, atol=1e-14)


@pytest.mark.parametrize("n, x", [(10, 0), (10, 3), (25, 20), (60, 11)])
def test_mixture_weights_against_numerical_integration(n: int, x: int) -> None:
    # Source: direct numerical integration (scipy.integrate.quad) of each component's
    # prior density times the binomial likelihood gives its marginal likelihood.
    post = update(MIXTURE, n, np.array([x]))
    marginal = [
        w * integrate.quad(lambda p, a=a, b=b: stats.beta.pdf(p, a, b)
                           * stats.binom.pmf(x, n, p), 0, 1, epsabs=1e-15, limit=200)[0]
        for w, a, b in zip(MIXTURE.weights, MIXTURE.a, MIXTURE.b, strict=True)
    ]
    np.testing.assert_allclose(post.weights[0], np.array(marginal) / sum(marginal), rtol=1e-8)


@pytest.mark.parametrize("x", [0, 4, 12])
def test_mixture_tail_against_numerical_integration(x: int) -> None:
    # Source: Pr(p > p0 | x) by scipy.integrate.quad of the unnormalised posterior density.
    n, p0 = 20, 0.3
    density = lambda p: sum(  # noqa: E731
        w * stats.beta.pdf(p, a, b) for w, a, b in zip(MIXTURE.weights, MIXTURE.a, MIXTURE.b,
                                                        strict=True)
    ) * stats.binom.pmf(x, n, p)
    total = integrate.quad(density, 0, 1, epsabs=1e-16, limit=200)[0]
    upper = integrate.quad(density, p0, 1, epsabs=1e-16, limit=200)[0]
    post = update(MIXTURE, n, np.array([x]))
    assert post.sf(p0)[0] == pytest.approx(upper / total, rel=1e-8)


@pytest.mark.parametrize("prior", [BetaMixture.single(0.5, 0.5), BetaMixture.single(3, 7)])
@pytest.mark.parametrize("m", [1, 10, 45])
def test_predictive_pmf_against_scipy_betabinom(prior: BetaMixture, m: int) -> None:
    # Source: scipy.stats.betabinom.
    n = 15
    x = np.arange(n + 1)
    post = update(prior, n, x)
    got = predictive_pmf(post, m)
    y = np.arange(m + 1)
    expected = stats.betabinom.pmf(y[None, :], m, post.a, post.b)
    np.testing.assert_allclose(got, expected, rtol=1e-10, atol=1e-300)


def test_mixture_predictive_is_weighted_betabinom() -> None:
    # Source: scipy.stats.betabinom mixed with weights from direct integration above.
    n, m = 12, 20
    post = update(MIXTURE, n, np.arange(n + 1))
    expected = sum(
        post.weights[:, j, None] * stats.betabinom.pmf(np.arange(m + 1)[None, :], m,
                                                       post.a[:, j, None], post.b[:, j, None])
        for j in range(2))
    np.testing.assert_allclose(predictive_pmf(post, m), expected, rtol=1e-10)
    np.testing.assert_allclose(predictive_pmf(post, m).sum(axis=1), 1.0, rtol=1e-12)


def integer_beta_closed_form(a1: int, b1: int, a2: float, b2: float) -> float:
    """Pr(X > Y) for X ~ Beta(a1, b1) with integer shapes and Y ~ Beta(a2, b2).

    Identity: for integer shapes, Pr(X > y) = Pr(Binomial(a1 + b1 - 1, y) <= a1 - 1); taking
    the expectation over Y term by term gives
    sum_{i < a1} C(a1 + b1 - 1, i) B(a2 + i, b2 + a1 + b1 - 1 - i) / B(a2, b2).
    """
    m = a1 + b1 - 1
    i = np.arange(a1)
    log_terms = (special.gammaln(m + 1) - special.gammaln(i + 1) - special.gammaln(m - i + 1)
                 + special.betaln(a2 + i, b2 + m - i) - special.betaln(a2, b2))
    return float(np.exp(log_terms).sum())


@pytest.mark.parametrize("a1, b1, a2, b2", [
    (1, 1, 1, 1), (3, 8, 5, 6), (31, 1, 1, 31), (12, 50, 20, 42), (1, 61, 61, 1),
    (150, 350, 160, 340), (7, 3, 2.5, 0.5),
])
def test_two_arm_against_integer_closed_form(a1: int, b1: int, a2: float, b2: float) -> None:
    first = update(BetaMixture.single(a1, b1), 0, np.zeros(1))
    second = update(BetaMixture.single(a2, b2), 0, np.zeros(1))
    value, error = prob_difference_exceeds(first, second, 0.0)
    expected = integer_beta_closed_form(a1, b1, a2, b2)
    assert value[0, 0] == pytest.approx(expected, rel=1e-10, abs=1e-13)
    assert error < 1e-10


def quad_difference(a1: float, b1: float, a2: float, b2: float, d: float) -> float:
    """Pr(X - Y > d) by adaptive quadrature (scipy.integrate.quad, break at the kink)."""
    lo, hi = max(0.0, -d), min(1.0, 1.0 - d)
    f = lambda u: stats.beta.pdf(u, a2, b2) * stats.beta.sf(u + d, a1, b1)  # noqa: E731
    value = integrate.quad(f, lo, hi, epsabs=1e-14, epsrel=1e-12, limit=500)[0]
    return value + (stats.beta.cdf(-d, a2, b2) if d < 0 else 0.0)


@pytest.mark.parametrize("a1, b1, a2, b2, d", [
    (1, 1, 1, 1, 0.1), (3, 8, 5, 6, -0.2), (0.5, 30.5, 0.5, 30.5, 0.05),
    (300, 200, 250, 250, -0.05), (0.2, 0.3, 0.4, 0.2, 0.1), (20.5, 10.5, 12.5, 18.5, 0.15),
    (2, 40, 1.5, 45, -0.1),
])
def test_two_arm_with_margin_against_quad(a1: float, b1: float, a2: float, b2: float,
                                          d: float) -> None:
    # Source: scipy.integrate.quad with the kink at u = -d or 1 - d as an end point.
    first = update(BetaMixture.single(a1, b1), 0, np.zeros(1))
    second = update(BetaMixture.single(a2, b2), 0, np.zeros(1))
    value, _ = prob_difference_exceeds(first, second, d)
    assert value[0, 0] == pytest.approx(quad_difference(a1, b1, a2, b2, d), abs=1e-10)


def test_two_arm_jeffreys_corner_is_one_half() -> None:
    # Symmetry: identical posteriors (Jeffreys prior, zero responses, shape 0.5 < 1, the
    # case where plain Gauss-Legendre fails) give Pr(X - Y > 0) = 1/2 exactly.
    post = update(BetaMixture.single(0.5, 0.5), 40, np.array([0, 40]))
    value, _ = prob_difference_exceeds(post, post, 0.0)
    np.testing.assert_allclose(np.diag(value), 0.5, atol=1e-12)


def test_two_arm_mixture_against_monte_carlo_draws() -> None:
    # Source: Monte Carlo draws from the two mixture posteriors (numpy Generator), within
    # 5 standard errors.
    n, x_t, x_c, d = 30, 14, 8, 0.05
    post_t = update(MIXTURE, n, np.array([x_t]))
    post_c = update(BetaMixture.single(1, 1), n, np.array([x_c]))
    value, _ = prob_difference_exceeds(post_t, post_c, d)
    rng = np.random.default_rng(7)
    draws = 2_000_000
    comp = rng.choice(2, size=draws, p=post_t.weights[0])
    p_t = rng.beta(post_t.a[0][comp], post_t.b[0][comp])
    p_c = rng.beta(post_c.a[0, 0], post_c.b[0, 0], size=draws)
    estimate = np.mean(p_t - p_c > d)
    se = np.sqrt(estimate * (1 - estimate) / draws)
    assert abs(value[0, 0] - estimate) < 5 * se
