"""Count endpoint maths against identities, scipy and Monte Carlo draws."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from octrial.endpoints.count import GammaMixture, predictive_pmf, prob_ratio, update
from tests.helpers import build

MIXTURE = GammaMixture((0.7, 0.3), (3.0, 0.8), (2.0, 0.5))
COUNT_ONE_ARM = {
    "schema": 1,
    "name": "count-test",
    "endpoint": {"type": "count", "exposure": 0.5},
    "hypothesis": {"benchmark": 1.2},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1, "rate": 1}}},
    "looks": {"n": [10, 20], "efficacy": [0.99, 0.95]},
    "scenarios": {"treatment": [0.8, 1.2]},
}


@pytest.mark.parametrize("a", [1, 2, 5])
@pytest.mark.parametrize("b, t", [(1.0, 10.0), (0.5, 42.5), (3.0, 200.0)])
@pytest.mark.parametrize("rate0", [0.3, 1.0, 2.5])
def test_gamma_tail_is_poisson_cdf_for_integer_shape(a: int, b: float, t: float,
                                                     rate0: float) -> None:
    # Identity (waiting times of a Poisson process): for integer shape k,
    # Pr(Gamma(k, rate r) < y) = Pr(Poisson(r y) >= k). The posterior after x events in
    # exposure t is Gamma(a + x, b + t), so Pr(rate < rate0 | x) = Pr(Poisson((b + t) rate0)
    # >= a + x).
    x = np.arange(0, 60)
    post = update(GammaMixture.single(a, b), t, x)
    expected = stats.poisson.sf(a + x - 1, (b + t) * rate0)
    np.testing.assert_allclose(post.cdf(rate0), expected, rtol=1e-12, atol=1e-300)
    np.testing.assert_allclose(post.sf(rate0), stats.poisson.cdf(a + x - 1, (b + t) * rate0),
                               rtol=1e-11, atol=1e-300)


@pytest.mark.parametrize("x, t", [(0, 5.0), (4, 10.0), (30, 12.0)])
def test_mixture_weights_and_tail_against_quad(x: int, t: float) -> None:
    # Source: scipy.integrate.quad of prior density x Poisson likelihood.
    def density(lam: float) -> float:
        prior = sum(w * stats.gamma.pdf(lam, a, scale=1 / b)
                    for w, a, b in zip(MIXTURE.weights, MIXTURE.a, MIXTURE.b, strict=True))
        return prior * stats.poisson.pmf(x, lam * t)

    post = update(MIXTURE, t, np.array([x]))
    marginals = [w * integrate.quad(lambda lam, a=a, b=b: stats.gamma.pdf(lam, a, scale=1 / b)
                                    * stats.poisson.pmf(x, lam * t), 0, np.inf,
                                    epsabs=1e-300, limit=200)[0]
                 for w, a, b in zip(MIXTURE.weights, MIXTURE.a, MIXTURE.b, strict=True)]
    np.testing.assert_allclose(post.weights[0], np.array(marginals) / sum(marginals), rtol=1e-7)
    total = integrate.quad(density, 0, np.inf, epsabs=1e-300, limit=200)[0]
    below = integrate.quad(density, 0, 1.1, epsabs=1e-300, limit=200)[0]
    assert post.cdf(1.1)[0] == pytest.approx(below / total, rel=1e-7)


def quad_ratio(a_t: float, b_t: float, a_c: float, b_c: float, c: float) -> float:
    """Pr(lambda_T < c lambda_C) = int f_C(u) F_T(c u) du by scipy.integrate.quad."""
    f = lambda u: stats.gamma.pdf(u, a_c, scale=1 / b_c) * stats.gamma.cdf(  # noqa: E731
        c * u, a_t, scale=1 / b_t)
    return integrate.quad(f, 0, np.inf, epsabs=1e-14, epsrel=1e-12, limit=500)[0]


@pytest.mark.parametrize("a_t, b_t, a_c, b_c, c", [
    (1, 1, 1, 1, 1.0), (12.5, 40.0, 20.5, 40.0, 0.8), (0.5, 3.0, 7.0, 3.0, 1.25),
    (150.0, 100.0, 170.0, 100.0, 1.0), (3.0, 5.0, 0.7, 2.0, 0.5),
])
def test_rate_ratio_against_quad(a_t, b_t, a_c, b_c, c) -> None:
    # Source: scipy.integrate.quad over the control rate.
    treatment = update(GammaMixture.single(a_t, b_t), 0.0, np.zeros(1))
    control = update(GammaMixture.single(a_c, b_c), 0.0, np.zeros(1))
    below = prob_ratio(treatment, control, c, below=True)[0, 0]
    above = prob_ratio(treatment, control, c, below=False)[0, 0]
    expected = quad_ratio(a_t, b_t, a_c, b_c, c)
    assert below == pytest.approx(expected, abs=1e-11)
    assert above == pytest.approx(1 - expected, abs=1e-11)


def test_rate_ratio_mixture_against_monte_carlo_draws() -> None:
    # Source: Monte Carlo draws from the two gamma-mixture posteriors (numpy Generator),
    # within 5 standard errors.
    post_t = update(MIXTURE, 20.0, np.array([18]))
    post_c = update(GammaMixture.single(1.0, 1.0), 20.0, np.array([30]))
    c = 0.9
    value = prob_ratio(post_t, post_c, c, below=True)[0, 0]
    rng = np.random.default_rng(11)
    draws = 2_000_000
    comp = rng.choice(2, size=draws, p=post_t.weights[0])
    lam_t = rng.gamma(post_t.a[0][comp], 1 / post_t.b[0][comp])
    lam_c = rng.gamma(post_c.a[0, 0], 1 / post_c.b[0, 0], size=draws)
    estimate = np.mean(lam_t / lam_c < c)
    se = np.sqrt(estimate * (1 - estimate) / draws)
    assert abs(value - estimate) < 5 * se


@pytest.mark.parametrize("exposure", [0.5, 12.0])
def test_predictive_is_negative_binomial(exposure: float) -> None:
    # Source: scipy.stats.nbinom (size a', success probability b' / (b' + exposure)).
    post = update(MIXTURE, 8.0, np.arange(10))
    got = predictive_pmf(post, exposure, 80)
    y = np.arange(80)
    expected = sum(post.weights[:, j, None] * stats.nbinom.pmf(
        y[None, :], post.a[:, j, None], post.b[:, j, None] / (post.b[:, j, None] + exposure))
        for j in range(2))
    np.testing.assert_allclose(got, expected, rtol=1e-10, atol=1e-300)


@pytest.mark.parametrize("model", [{}, {"model": "negative-binomial", "dispersion": 0.6}])
def test_increment_pmf_against_scipy(model) -> None:
    # Source: scipy.stats.poisson; for negative binomial counts the n-fold convolution of
    # one subject's scipy.stats.nbinom pmf (size 1/dispersion, mean rate x exposure).
    design = build(COUNT_ONE_ARM, endpoint={"type": "count", "exposure": 0.5, **model})
    family, rate, n = design.family, 1.7, 6
    got = family.increment_pmf(design, rate, n, 60)
    mean = rate * 0.5
    if not model:
        expected = stats.poisson.pmf(np.arange(60), mean * n)
    else:
        size = 1 / 0.6
        one = stats.nbinom.pmf(np.arange(60), size, size / (size + mean))
        expected = one
        for _ in range(n - 1):
            expected = np.convolve(expected, one)[:60]
    np.testing.assert_allclose(got, expected, rtol=1e-10, atol=1e-300)
    # vectorised over true values
    both = family.increment_pmf(design, np.array([rate, 0.4]), n, 60)
    np.testing.assert_allclose(both[0], got)
