"""Normal endpoints (known sd): identities, published group-sequential constants, scipy."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from octrial.endpoints.normal import NormalMixture, update
from octrial.evaluation import compute
from octrial.rules.normal import predictive
from tests.helpers import build

ONE_ARM = {
    "schema": 1,
    "name": "normal-one-arm",
    "endpoint": {"type": "normal", "sd": 1.0, "better": "higher"},
    "hypothesis": {"benchmark": 0.0},
    "arms": {"treatment": {"prior": {"distribution": "flat"}}},
    "looks": {"n": [100], "efficacy": 0.975},
    "scenarios": {"treatment": [0.0]},
}
TWO_ARM = {
    "schema": 1,
    "name": "normal-two-arm",
    "endpoint": {"type": "normal", "sd": 12.0, "better": "higher"},
    "hypothesis": {"comparison": "difference", "margin": 0.0,
                   "prior": {"distribution": "flat"}},
    "arms": {"treatment": {"allocation": 1}, "control": {"allocation": 1}},
    "looks": {"n": [200], "efficacy": 0.975},
    "scenarios": {"control": [10.0], "effect": [0.0]},
}
MIXTURE = {"distribution": "normal-mixture",
           "components": [{"weight": 0.6, "mean": 0.0, "sd": 0.3},
                          {"weight": 0.4, "mean": 0.5, "sd": 2.0}]}


@pytest.mark.parametrize("gamma", [0.9, 0.95, 0.975, 0.995])
@pytest.mark.parametrize("case", ["one arm", "one arm, lower better", "two arms, 2:1",
                                  "non-inferiority, lower better"])
def test_flat_prior_single_look_is_the_z_test(gamma: float, case: str) -> None:
    # Identity: with a flat prior the posterior of the mean is N(estimate, se^2), so
    # B >= gamma is the one-sided z-test at level 1 - gamma: at the null boundary the type I
    # error is exactly 1 - gamma and the efficacy bound in z is Phi^{-1}(gamma) (up to the
    # 1e-12 decision tolerance on thresholds, which moves z by 1e-12 / phi(z)).
    if case == "one arm":
        design = build(ONE_ARM, looks__efficacy=gamma, hypothesis__benchmark=0.3,
                       scenarios__treatment=[0.3])
    elif case == "one arm, lower better":
        design = build(ONE_ARM, looks__efficacy=gamma, endpoint__better="lower",
                       hypothesis__benchmark=-1.0, scenarios__treatment=[-1.0])
    elif case == "two arms, 2:1":
        design = build(TWO_ARM, looks__efficacy=gamma, arms__treatment__allocation=2,
                       looks__n=[150], hypothesis__margin=1.5,
                       scenarios={"control": [10.0], "effect": [1.5]})
    else:
        design = build(TWO_ARM, looks__efficacy=gamma, endpoint__better="lower",
                       hypothesis__kind="non-inferiority", hypothesis__margin=2.0,
                       scenarios={"control": [10.0], "effect": [2.0]})
    ev = compute(design)
    assert bool(ev.oc["is_null"].iloc[0])
    assert ev.oc["prob_success"].iloc[0] == pytest.approx(1 - gamma, abs=1e-10)
    assert ev.boundaries["efficacy_z"].iloc[0] == pytest.approx(stats.norm.ppf(gamma), abs=1e-9)


def test_flat_prior_single_look_power_is_the_z_test_power() -> None:
    # Identity: power of the one-sided z-test, Phi(delta sqrt(n) / sd - z_gamma).
    design = build(ONE_ARM, scenarios__treatment=[0.1, 0.2, 0.3])
    oc = compute(design).oc
    expected = stats.norm.cdf(np.array([0.1, 0.2, 0.3]) * 10 - stats.norm.ppf(0.975))
    np.testing.assert_allclose(oc["prob_success"], expected, rtol=1e-10)


# Jennison & Turnbull (2000), Tables 2.1 (Pocock 1977) and 2.3 (O'Brien & Fleming 1979):
# constants for two-sided tests with alpha = 0.05 and K equally spaced looks.
# VALUES RECALLED FROM MEMORY (three decimals as tabulated).
POCOCK = {1: 1.960, 2: 2.178, 3: 2.289, 4: 2.361, 5: 2.413}
OBRIEN_FLEMING = {2: 1.977, 3: 2.004, 4: 2.024, 5: 2.040}


def group_sequential(bounds: list[float], two_arm: bool = False):
    """A flat-prior design whose per-look thresholds are the z bounds: efficacy
    Phi(c_k), futility below Phi(-c_k) (the lower boundary of the two-sided test)."""
    k = len(bounds)
    efficacy = [float(stats.norm.cdf(c)) for c in bounds]
    futility = [float(stats.norm.cdf(-c)) for c in bounds[:-1]]
    looks = {"efficacy": efficacy, **({"futility": futility} if k > 1 else {})}
    if two_arm:
        return build(TWO_ARM, looks={"n": [60 * (i + 1) for i in range(k)], **looks})
    return build(ONE_ARM, looks={"n": [20 * (i + 1) for i in range(k)], **looks})


def shape(kind: str, c: float, k: int) -> list[float]:
    if kind == "Pocock":
        return [c] * k
    return [c * math.sqrt(k / (i + 1)) for i in range(k)]  # O'Brien & Fleming: c sqrt(K/k)


@pytest.mark.parametrize("kind, k, c", [("Pocock", k, c) for k, c in POCOCK.items()]
                         + [("O'Brien-Fleming", k, c) for k, c in OBRIEN_FLEMING.items()])
def test_published_group_sequential_constants(kind: str, k: int, c: float) -> None:
    # At the null the two-sided test rejects with probability 0.05 and, by symmetry,
    # crosses the upper boundary with probability 0.025. The constants are rounded to
    # three decimals, so 0.025 must lie between the crossing probabilities at c +- 0.0005.
    design = group_sequential(shape(kind, c, k), two_arm=(k == 3))
    ev = compute(design)
    value = ev.oc["prob_success"].iloc[0]
    strict = compute(group_sequential(shape(kind, c + 0.0005, k))).oc["prob_success"].iloc[0]
    loose = compute(group_sequential(shape(kind, c - 0.0005, k))).oc["prob_success"].iloc[0]
    slack = 10 * ev.info["quadrature_error_estimate"]
    assert strict - slack <= 0.025 <= loose + slack
    assert value == pytest.approx(0.025, abs=2e-4)
    assert ev.info["quadrature_error_estimate"] < 1e-6


def reference_three_looks(rule, eta: float) -> tuple[np.ndarray, np.ndarray]:
    """Per-look stopping probabilities by scipy.integrate (quad / dblquad), from the
    rule's bounds on the score: independent of octrial's recursion."""
    info = [look.information for look in rule.looks]
    up = [look.upper for look in rule.looks]
    lo = [look.lower for look in rule.looks]
    d2, d3 = info[1] - info[0], info[2] - info[1]
    f1 = lambda s: stats.norm.pdf(s, eta * info[0], math.sqrt(info[0]))  # noqa: E731
    f2 = lambda s2, s1: stats.norm.pdf(s2, s1 + eta * d2, math.sqrt(d2))  # noqa: E731
    eff = [stats.norm.sf(up[0], eta * info[0], math.sqrt(info[0]))]
    fut = [stats.norm.cdf(lo[0], eta * info[0], math.sqrt(info[0]))]
    opts = {"epsabs": 1e-13, "epsrel": 1e-11, "limit": 200}
    eff.append(integrate.quad(lambda s: f1(s) * stats.norm.sf(up[1], s + eta * d2,
                                                             math.sqrt(d2)), lo[0], up[0],
                              **opts)[0])
    fut.append(integrate.quad(lambda s: f1(s) * stats.norm.cdf(lo[1], s + eta * d2,
                                                              math.sqrt(d2)), lo[0], up[0],
                              **opts)[0])
    for bucket, tail in ((eff, stats.norm.sf), (fut, stats.norm.cdf)):
        inner = lambda s2, s1, tail=tail: f1(s1) * f2(s2, s1) * tail(  # noqa: E731
            up[2], s2 + eta * d3, math.sqrt(d3))
        bucket.append(integrate.dblquad(inner, lo[0], up[0], lo[1], up[1],
                                        epsabs=1e-12, epsrel=1e-10)[0])
    return np.array(eff), np.array(fut)


@pytest.mark.parametrize("effect", [0.0, 2.5, 5.0])
def test_recursion_against_scipy_integration(effect: float) -> None:
    # Source: scipy.integrate.quad / dblquad over the score at looks 1 and 2, using the
    # bounds octrial computed (mixture prior, posterior and predictive futility, 2:1).
    design = build(TWO_ARM, hypothesis__prior=MIXTURE | {"components": [
        {"weight": 0.6, "mean": 0.0, "sd": 3.0}, {"weight": 0.4, "mean": 2.0, "sd": 10.0}]},
        arms__treatment__allocation=2, looks={"n": [60, 120, 180],
                                              "efficacy": [0.999, 0.995, 0.975],
                                              "futility": 0.2, "futility_predictive": 0.1},
        scenarios={"control": [50.0], "effect": [effect]})
    ev = compute(design)
    rule = design.family.decision_rule(design)
    eff, fut = reference_three_looks(rule, effect)
    for k in range(3):
        assert ev.oc[f"look{k + 1}_stop_efficacy"].iloc[0] == pytest.approx(eff[k], abs=1e-8)
        assert ev.oc[f"look{k + 1}_stop_futility"].iloc[0] == pytest.approx(fut[k], abs=1e-8)


@pytest.mark.parametrize("score, information", [(-3.0, 4.0), (0.7, 25.0), (40.0, 100.0)])
def test_mixture_posterior_against_quad(score: float, information: float) -> None:
    # Source: scipy.integrate.quad of the mixture prior density x the normal likelihood of
    # the score, S ~ N(theta I, I).
    prior = NormalMixture((0.6, 0.4), (0.0, 0.5), (0.3, 2.0))

    def density(theta: float) -> float:
        p = sum(w * stats.norm.pdf(theta, m, s) for w, m, s in zip(
            prior.weights, prior.mean, prior.sd, strict=True))
        return p * stats.norm.pdf(score, theta * information, math.sqrt(information))

    total = integrate.quad(density, -np.inf, np.inf, epsabs=1e-300, limit=400)[0]
    above = integrate.quad(density, 0.2, np.inf, epsabs=1e-300, limit=400)[0]
    post = update(prior, 1, information, np.array([score]))
    assert post.sf(0.2)[0] == pytest.approx(above / total, rel=1e-7, abs=1e-12)


def test_predictive_against_quad() -> None:
    # Source: scipy.integrate.quad over the posterior of theta of
    # Pr(S_K >= u | S_k, theta) = Phi((S_k + theta D - u) / sqrt(D)).
    prior = NormalMixture((0.6, 0.4), (0.0, 0.5), (0.3, 2.0))
    info_now, info_end, u, score = 30.0, 90.0, 25.0, 6.0
    post = update(prior, 1, info_now, np.array([score]))
    d = info_end - info_now

    def integrand(theta: float) -> float:
        dens = sum(w * stats.norm.pdf(theta, m, 1 / math.sqrt(p)) for w, m, p in zip(
            post.weights[0], post.mean[0], post.precision[0], strict=True))
        return dens * stats.norm.sf(u, score + theta * d, math.sqrt(d))

    expected = integrate.quad(integrand, -np.inf, np.inf, epsabs=1e-14, limit=400)[0]
    got = predictive(prior, 1, info_now, info_end, u, np.array([score]))[0]
    assert got == pytest.approx(expected, abs=1e-10)


def test_lower_better_mirrors_higher() -> None:
    # Symmetry: negating the outcome (values, benchmark, prior means) and the direction
    # leaves every operating characteristic unchanged.
    looks = {"n": [30, 60, 90], "efficacy": [0.999, 0.99, 0.975], "futility": 0.1,
             "futility_predictive": 0.05}
    higher = build(ONE_ARM, hypothesis__benchmark=0.2, arms__treatment__prior=MIXTURE,
                   looks=looks, scenarios__treatment=[0.2, 0.5])
    lower = build(ONE_ARM, endpoint__better="lower", hypothesis__benchmark=-0.2,
                  arms__treatment__prior=MIXTURE | {"components": [
                      {"weight": 0.6, "mean": 0.0, "sd": 0.3},
                      {"weight": 0.4, "mean": -0.5, "sd": 2.0}]},
                  looks=looks, scenarios__treatment=[-0.2, -0.5])
    a, b = compute(higher).oc, compute(lower).oc
    columns = [c for c in a.columns if c.startswith(("prob_", "look", "expected", "sd_"))]
    np.testing.assert_allclose(a[columns].to_numpy(float), b[columns].to_numpy(float),
                               atol=1e-12)


def test_quadrature_accuracy_is_measured_and_probabilities_sum_to_one() -> None:
    design = build(ONE_ARM, arms__treatment__prior=MIXTURE,
                   looks={"n": [20, 40, 60, 80, 100], "efficacy": 0.99, "futility": 0.05},
                   scenarios__treatment={"from": -0.2, "to": 0.6, "step": 0.1})
    ev = compute(design)
    error = ev.info["quadrature_error_estimate"]
    assert 0 < error < 1e-6
    assert ev.info["quadrature"]["points_per_sd"] == 2 * ev.info["quadrature"][
        "check_points_per_sd"]
    looks = [c for c in ev.oc.columns if c.startswith("look")]
    np.testing.assert_allclose(ev.oc[looks].sum(axis=1), 1.0, atol=error)


def test_unknown_sd_prior_probability_against_draws() -> None:
    # Source: Monte Carlo draws of (sigma^2, mu) from the normal-inverse-gamma prior
    # (numpy), within 5 standard errors: checks the Student-t marginal used for it.
    design = build(ONE_ARM, endpoint={"type": "normal", "sd": "unknown", "true_sd": 2.0,
                                      "better": "higher"},
                   hypothesis__benchmark=0.5,
                   arms__treatment__prior={"distribution": "normal-inverse-gamma",
                                           "mean": 0.2, "mean_n": 2.0, "shape": 3.0,
                                           "scale": 4.0})
    value = design.family.prior_probability_of_claim(design)
    rng = np.random.default_rng(5)
    sigma2 = 4.0 / rng.gamma(3.0, 1.0, size=1_000_000)
    mu = rng.normal(0.2, np.sqrt(sigma2 / 2.0))
    estimate = np.mean(mu > 0.5)
    assert abs(value - estimate) < 5 * math.sqrt(estimate * (1 - estimate) / mu.size)


def test_assurance_by_quadrature_against_closed_form() -> None:
    # Identity: one look, flat analysis prior, design prior N(m, s^2) on the mean: the
    # sample mean is N(m, s^2 + sd^2 / n) marginally, so
    # assurance = Pr(z >= z_gamma) = Phi((m sqrt(n) / sd - z_gamma) / sqrt(1 + n s^2 / sd^2)).
    from octrial.design_prior import assurance

    m, s, n, gamma = 0.2, 0.15, 100, 0.975
    design = build(ONE_ARM, looks__n=[n], looks__efficacy=gamma,
                   arms__treatment__design_prior={"distribution": "normal", "mean": m, "sd": s})
    got = assurance(design)
    expected = stats.norm.cdf((m * math.sqrt(n) - stats.norm.ppf(gamma))
                              / math.sqrt(1 + n * s**2))
    assert got.method == "quadrature"
    assert got.probability == pytest.approx(expected, abs=1e-6)


def test_boundaries_command_on_a_normal_design(tmp_path) -> None:
    # The committee text gives each look's bound on the difference in sample means with
    # its z value; under the flat prior the final z bound is Phi^{-1}(0.975).
    from click.testing import CliRunner

    from octrial.cli import main
    from tests.helpers import DESIGNS

    result = CliRunner().invoke(main, ["boundaries", str(DESIGNS / "two-arm-continuous-score.toml"),
                                       "--out", str(tmp_path)])
    assert result.exit_code == 0, result.output
    assert "success if difference >= " in result.output and "(z >= " in result.output
    assert (tmp_path / "boundaries.csv").exists()


@pytest.mark.parametrize("prior", ["flat", "normal"])
@pytest.mark.parametrize("better", ["higher", "lower"])
@pytest.mark.parametrize("level", [0.95, 0.8])
def test_single_look_bias_rmse_coverage_in_closed_form(prior: str, better: str,
                                                       level: float) -> None:
    # Identity (normal-normal conjugacy): one look, n subjects, known sd sigma, prior
    # N(m0, s0^2) (precision p0 = 1/s0^2; flat: p0 = 0), information I = n / sigma^2. The
    # posterior mean is (p0 m0 + I xbar) / (p0 + I) with xbar ~ N(theta, 1/I), so its error
    # is normal with mean b = p0 (m0 - theta) / (p0 + I) and sd v = sqrt(I) / (p0 + I); the
    # equal-tailed interval is mean +- z / sqrt(p0 + I), which covers theta with probability
    # Phi((h - b) / v) - Phi((-h - b) / v), h = z / sqrt(p0 + I). Flat prior: b = 0,
    # RMSE = sigma / sqrt(n), coverage = level.
    sigma, n, m0, s0 = 2.0, 40, 0.3, 0.5
    spec = {"distribution": "flat"} if prior == "flat" else {
        "distribution": "normal", "mean": m0, "sd": s0}
    truths = [-0.4, 0.0, 0.25, 0.9]
    design = build(ONE_ARM, endpoint={"type": "normal", "sd": sigma, "better": better},
                   arms__treatment__prior=spec, looks={"n": [n], "efficacy": 0.975},
                   scenarios__treatment=truths, simulation={"interval_level": level})
    oc = compute(design).oc
    p0 = 0.0 if prior == "flat" else 1 / s0**2
    info = n / sigma**2
    theta = np.array(truths)
    b = p0 * (m0 - theta) / (p0 + info)
    v = math.sqrt(info) / (p0 + info)
    h = stats.norm.ppf((1 + level) / 2) / math.sqrt(p0 + info)
    np.testing.assert_allclose(oc["bias"], b, atol=1e-9)
    np.testing.assert_allclose(oc["rmse"], np.sqrt(b**2 + v**2), atol=1e-9)
    np.testing.assert_allclose(oc["coverage"],
                               stats.norm.cdf((h - b) / v) - stats.norm.cdf((-h - b) / v),
                               atol=1e-9)
    if prior == "flat":
        np.testing.assert_allclose(oc["coverage"], level, atol=1e-9)
    assert (oc["bias_se"] == 0).all() and (oc["coverage_se"] == 0).all()


def reference_two_look_estimation(design, eta: float, level: float) -> np.ndarray:
    """(E[e], E[e^2], coverage) at the stopping look of a two-look design, integrating
    over the score: scipy.integrate.quad over look 1 and, for look 2, quad over S_1 of a
    Gauss-Hermite sum (scipy.special.roots_hermite, 80 nodes) over S_2 | S_1. The posterior
    is :func:`update` (checked against quad above); the interval's end points come from
    scipy.optimize.brentq on the posterior CDF, and the scores where they cross the truth
    (between them the interval covers) from brentq again."""
    from scipy import optimize, special

    rule = design.family.decision_rule(design)
    prior = design.family.analysis_prior(design)
    sign = rule.sign
    info = [look.information for look in rule.looks]
    up0, lo0 = rule.looks[0].upper, rule.looks[0].lower
    d = info[1] - info[0]
    tail = (1 - level) / 2
    x, w = special.roots_hermite(80)

    def errors(s: np.ndarray, i: float) -> np.ndarray:
        post = update(prior, sign, i, np.atleast_1d(s))
        return np.sum(post.weights * post.mean, axis=1) - eta

    def end(s: float, i: float, p: float) -> float:
        post = update(prior, sign, i, np.array([s]))

        def cdf(v: float) -> float:
            return float(np.sum(post.weights * stats.norm.cdf(
                (v - post.mean) * np.sqrt(post.precision))))
        return optimize.brentq(lambda v: cdf(v) - p, -100, 100, xtol=1e-14)

    def covered_scores(i: float) -> tuple[float, float]:
        span = 100 * i
        low = optimize.brentq(lambda s: end(s, i, 1 - tail) - eta, -span, span, xtol=1e-12)
        high = optimize.brentq(lambda s: end(s, i, tail) - eta, -span, span, xtol=1e-12)
        return low, high

    f1 = lambda s: stats.norm.pdf(s, eta * info[0], math.sqrt(info[0]))  # noqa: E731
    opts = {"epsabs": 1e-12, "epsrel": 1e-11, "limit": 200}
    total = np.zeros(3)
    # look 1: the stopping region outside [lo0, up0)
    centre, width = eta * info[0], 12 * math.sqrt(info[0])
    c_lo, c_hi = covered_scores(info[0])
    for a, b in ((centre - width, lo0), (up0, centre + width)):
        if b <= a:
            continue
        total[0] += integrate.quad(lambda s: f1(s) * sign * errors(s, info[0])[0], a, b,
                                   **opts)[0]
        total[1] += integrate.quad(lambda s: f1(s) * errors(s, info[0])[0] ** 2, a, b,
                                   **opts)[0]
        a, b = max(a, c_lo), min(b, c_hi)
        if b > a:
            total[2] += integrate.quad(f1, a, b, **opts)[0]

    # look 2: S_2 | S_1 ~ N(S_1 + eta d, d); E[g(S_2)] = sum_j w_j g(mean + sqrt(2 d) x_j)
    def inner(s1: float, power: int) -> float:
        e = errors(s1 + eta * d + math.sqrt(2 * d) * x, info[1])
        values = sign * e if power == 1 else e**2
        return float(w @ values) / math.sqrt(math.pi)

    c_lo, c_hi = covered_scores(info[1])
    for m, integrand in enumerate((lambda s: f1(s) * inner(s, 1),
                                   lambda s: f1(s) * inner(s, 2),
                                   lambda s: f1(s) * (stats.norm.cdf(c_hi, s + eta * d,
                                                                     math.sqrt(d))
                                                      - stats.norm.cdf(c_lo, s + eta * d,
                                                                       math.sqrt(d))))):
        total[m] += integrate.quad(integrand, lo0, up0, **opts)[0]
    return total


@pytest.mark.parametrize("effect", [0.0, 4.0])
def test_two_look_bias_rmse_coverage_against_scipy_integration(effect: float) -> None:
    # Source: scipy.integrate over the score at looks 1 and 2 (reference above), for a
    # mixture prior on the difference, lower better, with posterior futility.
    level = 0.9
    design = build(TWO_ARM, endpoint__better="lower", hypothesis__prior=MIXTURE | {
        "components": [{"weight": 0.7, "mean": 0.0, "sd": 2.0},
                       {"weight": 0.3, "mean": -3.0, "sd": 8.0}]},
        looks={"n": [80, 160], "efficacy": [0.995, 0.975], "futility": 0.2},
        scenarios={"control": [20.0], "effect": [-effect]},
        simulation={"interval_level": level})
    ev = compute(design)
    eta = effect  # benefit scale: lower better, difference -effect
    bias, second, coverage = reference_two_look_estimation(design, eta, level)
    oc = ev.oc
    assert oc["bias"].iloc[0] == pytest.approx(bias, abs=1e-6)
    assert oc["rmse"].iloc[0] == pytest.approx(math.sqrt(second), abs=1e-6)
    assert oc["coverage"].iloc[0] == pytest.approx(coverage, abs=1e-6)
    errors = ev.info["estimation_error_estimate"]
    assert max(errors.values()) < 1e-6
