"""Posterior predictive adequacy checks: conjugate posteriors against quadrature, predictive
tail probabilities against scipy closed forms, verdicts on data that break the model, and
the per-subject file reader."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from octrial.errors import InputError
from octrial.interim import adequacy as A
from octrial.interim.subjects import read_subjects

DRAWS = 20_000


def within(estimate: float, exact: float, draws: int = DRAWS, k: float = 4.0) -> bool:
    se = max(np.sqrt(exact * (1 - exact) / draws), 1 / draws)
    return abs(estimate - exact) <= k * se


# -- conjugate posteriors against numerical integration (scipy.integrate.quad) ----------

def test_gamma_mixture_posterior_against_quadrature() -> None:
    weights, shape, rate = [0.3, 0.7], [2.0, 0.5], [4.0, 0.25]
    events, exposure = 7, 5.5
    w, a, b = A.gamma_mixture_posterior(weights, shape, rate, events, exposure)

    def prior(lam: float) -> float:
        return sum(wj * stats.gamma.pdf(lam, aj, scale=1 / bj)
                   for wj, aj, bj in zip(weights, shape, rate, strict=True))

    def unnormalised(lam: float) -> float:      # Poisson likelihood of the total count
        return prior(lam) * stats.poisson.pmf(events, lam * exposure)

    total = integrate.quad(unnormalised, 0, np.inf, epsrel=1e-12)[0]
    mean = integrate.quad(lambda x: x * unnormalised(x), 0, np.inf, epsrel=1e-12)[0] / total
    below = integrate.quad(unnormalised, 0, 1.0, epsrel=1e-12)[0] / total
    assert np.sum(w * a / b) == pytest.approx(mean, rel=1e-8)
    assert np.sum(w * stats.gamma.cdf(1.0, a, scale=1 / b)) == pytest.approx(below, rel=1e-8)


def test_normal_mixture_posterior_against_quadrature() -> None:
    weights, means, sds = [0.5, 0.5], [0.0, 2.0], [1.0, 0.3]
    ybar, n, sd = 1.1, 12, 2.0
    w, m, s = A.normal_mixture_posterior(weights, means, sds, ybar, n, sd)

    def unnormalised(mu: float) -> float:
        prior = sum(wj * stats.norm.pdf(mu, mj, sj)
                    for wj, mj, sj in zip(weights, means, sds, strict=True))
        return prior * stats.norm.pdf(ybar, mu, sd / np.sqrt(n))

    total = integrate.quad(unnormalised, -20, 20, points=[0, 2], epsrel=1e-12)[0]
    mean = integrate.quad(lambda x: x * unnormalised(x), -20, 20, points=[0, 2],
                          epsrel=1e-12)[0] / total
    below = integrate.quad(unnormalised, -20, 1.0, points=[0], epsrel=1e-12)[0] / total
    assert np.sum(w * m) == pytest.approx(mean, rel=1e-8)
    assert np.sum(w * stats.norm.cdf(1.0, m, s)) == pytest.approx(below, rel=1e-8)


def test_normal_inverse_gamma_posterior_against_quadrature() -> None:
    y = np.array([1.2, 0.4, 2.2, 1.9, 0.7, 1.5])
    m0, k0, a0, b0 = 0.5, 2.0, 3.0, 2.0
    m_n, k_n, a_n, b_n = A.normal_inverse_gamma_posterior(m0, k0, a0, b0, y)

    # Joint posterior on a fine (mu, log s2) grid, integrated by Simpson's rule (scipy).
    mu = np.linspace(-4.0, 6.0, 1201)
    log_s2 = np.linspace(np.log(0.01), np.log(50.0), 1201)
    s2 = np.exp(log_s2)[:, None]
    log_joint = (stats.norm.logpdf(mu[None, :], m0, np.sqrt(s2 / k0))
                 + stats.invgamma.logpdf(s2, a0, scale=b0)
                 + np.sum(stats.norm.logpdf(y[:, None, None], mu[None, None, :],
                                            np.sqrt(s2)[None]), axis=0)
                 + np.log(s2))                                  # d s2 = s2 d log s2
    joint = np.exp(log_joint - log_joint.max())

    def integral(f: np.ndarray) -> float:
        return integrate.simpson(integrate.simpson(f, x=mu, axis=1), x=log_s2)

    total = integral(joint)
    assert m_n == pytest.approx(integral(joint * mu[None, :]) / total, rel=1e-7)
    assert b_n / (a_n - 1) == pytest.approx(integral(joint * s2) / total, rel=1e-6)
    assert k_n == k0 + y.size and a_n == a0 + y.size / 2


# -- predictive tail probabilities against closed forms --------------------------------

def test_zeros_tail_against_gamma_mixture_of_binomials() -> None:
    # Equal exposure e: given lambda the zeros are Binomial(n, exp(-lambda e)); integrate
    # over the gamma posterior with scipy.
    rng = np.random.default_rng(7)
    counts = rng.poisson(1.2, size=40)
    counts[:4] = 0
    shape, rate = 0.8, 0.5
    (zeros, _) = A.count_checks("treatment", counts, np.ones(40), weights=[1.0],
                                shape=[shape], rate=[rate], seed=1)
    a, b = shape + counts.sum(), rate + 40
    z = int(np.sum(counts == 0))

    def tail(upper: bool) -> float:
        def f(lam: float) -> float:
            p0 = np.exp(-lam)
            t = stats.binom.sf(z - 1, 40, p0) if upper else stats.binom.cdf(z, 40, p0)
            return t * stats.gamma.pdf(lam, a, scale=1 / b)
        return integrate.quad(f, 0, np.inf, epsrel=1e-10)[0]

    assert zeros.observed == z
    assert within(zeros.p_upper, tail(True)) and within(zeros.p_lower, tail(False))


def test_spread_known_sd_against_chi_square() -> None:
    # (n - 1) s^2 / sd^2 ~ chi-square(n - 1) whatever the mean: the exact predictive tail.
    rng = np.random.default_rng(8)
    y = rng.normal(3.0, 1.3, size=25)
    spread, skew = A.normal_known_sd_checks("treatment", y, sd=1.0, weights=[1.0],
                                            means=[0.0], sds=[5.0], seed=2)
    exact = stats.chi2.sf(24 * np.var(y, ddof=1), 24)
    assert spread.observed == pytest.approx(np.std(y, ddof=1))
    assert within(spread.p_upper, exact)
    assert skew.observed == pytest.approx(stats.skew(y))


def test_spread_unknown_sd_against_f_distribution() -> None:
    # s^2_rep = sigma^2 chi2(n-1)/(n-1) with sigma^2 ~ InvGamma(a_n, b_n), so
    # s^2_rep / (b_n / a_n) ~ F(n - 1, 2 a_n).
    rng = np.random.default_rng(9)
    y = rng.normal(0.0, 2.0, size=15)
    m0, k0, a0, b0 = 0.0, 1.0, 2.0, 3.0
    spread, _ = A.normal_unknown_sd_checks("treatment", y, m0=m0, k0=k0, a0=a0, b0=b0,
                                           seed=3)
    _, _, a_n, b_n = A.normal_inverse_gamma_posterior(m0, k0, a0, b0, y)
    exact = stats.f.sf(np.var(y, ddof=1) * a_n / b_n, 14, 2 * a_n)
    assert within(spread.p_upper, exact)


def test_skewness_of_normal_replicates_has_the_known_variance() -> None:
    # Var(g1) = 6 (n - 2) / ((n + 1) (n + 3)) for normal samples (Fisher 1930; given e.g. in
    # Joanes & Gill 1998, The Statistician 47:183-189; recalled from memory).
    n = 20
    y = np.random.default_rng(10).normal(size=n)
    _, skew = A.normal_known_sd_checks("treatment", y, sd=1.0, weights=[1.0], means=[0.0],
                                       sds=[1.0], seed=4)
    var_g1 = 6 * (n - 2) / ((n + 1) * (n + 3))
    half_width = (skew.predictive_upper - skew.predictive_lower) / 2
    # the central 95% range of g1 is close to +-1.96 sd for n = 20 (g1 is near normal)
    assert half_width == pytest.approx(1.96 * np.sqrt(var_g1), rel=0.1)
    assert abs(skew.predictive_mean) < 4 * np.sqrt(var_g1 / DRAWS)


def test_statistics_against_numpy_and_scipy() -> None:
    y = np.array([[0, 3, 1, 0, 5, 2], [1, 1, 1, 1, 1, 1]], dtype=float)
    np.testing.assert_array_equal(A.zeros(y), [2, 0])
    np.testing.assert_allclose(A.variance_to_mean(y), [np.var(y[0], ddof=1) / y[0].mean(), 0])
    np.testing.assert_allclose(A.skewness(y), [stats.skew(y[0]), 0.0])
    np.testing.assert_allclose(A.spread(y), np.std(y, axis=1, ddof=1))
    assert np.isnan(A.variance_to_mean(np.zeros(4)))


# -- verdicts on data that break the model, and on data that fit -----------------------

def test_verdicts_in_plain_words() -> None:
    rng = np.random.default_rng(12)
    flat = {"weights": [1.0], "shape": [0.5], "rate": [0.1]}
    overdispersed = rng.negative_binomial(1, 0.25, size=80)          # mean 3, variance 12
    zeros, ratio = A.count_checks("treatment", overdispersed, np.ones(80), **flat, seed=5)
    assert ratio.flagged and "overdispersed" in ratio.verdict
    inflated = np.where(rng.uniform(size=80) < 0.4, 0, rng.poisson(4.0, size=80))
    zeros, _ = A.count_checks("treatment", inflated, np.ones(80), **flat, seed=5)
    assert zeros.flagged and zeros.verdict.startswith("more zeros than a Poisson model")
    poisson = rng.poisson(2.0, size=80)
    assert not any(c.flagged for c in A.count_checks("treatment", poisson, np.ones(80), **flat,
                                                     seed=5))
    skewed = rng.lognormal(0.0, 0.9, size=60)
    _, skew = A.normal_unknown_sd_checks("treatment", skewed, m0=0, k0=0.01, a0=1, b0=1,
                                         seed=6)
    assert skew.flagged and "skewed to the right" in skew.verdict
    wide = rng.normal(0.0, 2.0, size=60)
    spread, skew = A.normal_known_sd_checks("treatment", wide, sd=1.0, weights=[1.0],
                                            means=[0.0], sds=[10.0], seed=6)
    assert spread.flagged and "more spread out than the assumed standard deviation" in (
        spread.verdict)
    assert not skew.flagged and skew.verdict.startswith("consistent with the model")


def test_same_seed_same_numbers() -> None:
    y = np.random.default_rng(0).poisson(1.0, size=30)
    args = dict(weights=[1.0], shape=[1.0], rate=[1.0], seed=42)
    assert A.count_checks("t", y, np.ones(30), **args) == A.count_checks("t", y, np.ones(30),
                                                                         **args)


# -- the per-subject file --------------------------------------------------------------

def test_read_subjects(tmp_path) -> None:
    path = tmp_path / "subjects.csv"
    path.write_text("# invented\narm,events,exposure\ntreatment,0,1\ncontrol,2,0.5\n"
                    "treatment,3,2\ncontrol,1,1\ntreatment,1,1\ncontrol,0,1\n")
    data = read_subjects(str(path), ("treatment", "control"), "events", whole=True,
                         exposure=1.0)
    np.testing.assert_array_equal(data["treatment"]["events"], [0, 3, 1])
    np.testing.assert_array_equal(data["control"]["exposure"], [0.5, 1, 1])
    one = tmp_path / "one.csv"
    one.write_text("value\n1.5\n-2\n0.25\n")
    assert read_subjects(str(one), ("treatment",), "value", whole=False)["treatment"][
        "value"].tolist() == [1.5, -2.0, 0.25]


@pytest.mark.parametrize(("text", "words"), [
    ("arm,events\ntreatment,-1\ntreatment,1\ntreatment,2\n",
     "line 2, column events: expected a whole number >= 0; got '-1'"),
    ("arm,events\ntreatment,1.5\ntreatment,1\ntreatment,2\n", "got '1.5'"),
    ("arm,events\ntreatmnt,1\ntreatment,1\ntreatment,2\n", "did you mean 'treatment'?"),
    ("arm,event\ntreatment,1\n", "did you mean 'events'?"),
    ("arm,events\ntreatment,1\ntreatment,2\n", "at least 3 subjects"),
    ("arm,events,exposure\ntreatment,1,0\ntreatment,1,1\ntreatment,2,1\n", "positive exposure"),
])
def test_bad_subject_files(tmp_path, text, words) -> None:
    path = tmp_path / "bad.csv"
    path.write_text(text)
    with pytest.raises(InputError, match=None) as info:
        read_subjects(str(path), ("treatment",), "events", whole=True, exposure=1.0)
    assert words in str(info.value) and str(path) in str(info.value)


def test_two_arm_subject_file_needs_arm_column(tmp_path) -> None:
    path = tmp_path / "bad.csv"
    path.write_text("value\n1\n2\n3\n")
    with pytest.raises(InputError, match="expected a column arm"):
        read_subjects(str(path), ("treatment", "control"), "value", whole=False)
