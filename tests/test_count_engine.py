"""The exact engine on count endpoints against brute-force enumeration of outcome paths.

The enumeration shares no code with octrial: it walks every sequence of per-look event
counts up to a cut-off beyond which the Poisson mass is below 1e-16, weighs each path by
scipy.stats.poisson, and applies the rule with posterior probabilities from
scipy.stats.gamma (one arm) or scipy.integrate.quad (two arms) and predictive
probabilities from scipy.stats.nbinom.
"""

from __future__ import annotations

import functools
import itertools

import numpy as np
import pytest
from scipy import integrate, special, stats

from octrial.engines.exact_lattice import ExactLatticeEngine
from octrial.evaluation import compute
from tests.helpers import build

PRIOR = (1.5, 1.0)  # gamma shape, rate
EXPOSURE = 0.5
ONE_ARM = {
    "schema": 1,
    "name": "count-one-arm",
    "endpoint": {"type": "count", "exposure": EXPOSURE, "better": "lower"},
    "hypothesis": {"benchmark": 1.2},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": PRIOR[0],
                                     "rate": PRIOR[1]}}},
    "looks": {"n": [4, 8, 12], "efficacy": [0.99, 0.97, 0.9], "futility": [0.1, 0.2],
              "futility_predictive": [0.15, 0.3]},
    "scenarios": {"treatment": [0.6]},
}
TWO_ARM = {
    "schema": 1,
    "name": "count-two-arm",
    "endpoint": {"type": "count", "exposure": EXPOSURE},
    "hypothesis": {"comparison": "ratio", "kind": "superiority", "margin": 0.0},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1, "rate": 1}},
             "control": {"prior": {"distribution": "gamma", "shape": 1, "rate": 1}}},
    "looks": {"n": [6, 12], "efficacy": [0.95, 0.9], "futility": 0.2,
              "futility_predictive": 0.2},
    "scenarios": {"control": [1.0], "ratio": [1.0]},
}


def cutoff(mean: float) -> int:
    return int(stats.poisson.isf(1e-16, mean)) + 1


def one_arm_benefit(n: int, x: int, rate0: float, lower: bool) -> float:
    a, b = PRIOR[0] + x, PRIOR[1] + n * EXPOSURE
    return stats.gamma.cdf(rate0, a, scale=1 / b) if lower else stats.gamma.sf(
        rate0, a, scale=1 / b)


def brute_force_one_arm(looks, efficacy, futility, predictive, rate0, truth, lower):
    n_final = looks[-1]

    @functools.cache
    def final_success(x: int) -> bool:
        return one_arm_benefit(n_final, x, rate0, lower) >= efficacy[-1] - 1e-12

    @functools.cache
    def pp(n: int, x: int) -> float:
        a, b, t_more = PRIOR[0] + x, PRIOR[1] + n * EXPOSURE, (n_final - n) * EXPOSURE
        y = np.arange(400)
        pmf = stats.nbinom.pmf(y, a, b / (b + t_more))
        return float(sum(p for p, yy in zip(pmf, y, strict=True) if final_success(x + yy)))

    sizes = np.diff([0, *looks])
    means = [truth * EXPOSURE * s for s in sizes]
    tables = [stats.poisson.pmf(np.arange(cutoff(m)), m) for m in means]
    eff, fut = np.zeros(len(looks)), np.zeros(len(looks))
    for path in itertools.product(*(range(t.size) for t in tables)):
        prob = np.prod([t[y] for t, y in zip(tables, path, strict=True)])
        x = 0
        for k, (y, n) in enumerate(zip(path, looks, strict=True)):
            x += y
            if k == len(looks) - 1:
                (eff if final_success(x) else fut)[k] += prob
                break
            b = one_arm_benefit(n, x, rate0, lower)
            if efficacy[k] is not None and b >= efficacy[k]:
                eff[k] += prob
                break
            if b < futility[k] or pp(n, x) < predictive[k]:
                fut[k] += prob
                break
    return eff, fut


@pytest.mark.parametrize("truth", [0.6, 1.2, 2.0])
@pytest.mark.parametrize("better", ["lower", "higher"])
def test_one_arm_matches_enumeration(truth: float, better: str) -> None:
    design = build(ONE_ARM, endpoint__better=better, scenarios__treatment=[truth])
    ev = compute(design)
    oc = ev.oc
    looks = ONE_ARM["looks"]
    eff, fut = brute_force_one_arm(looks["n"], looks["efficacy"], looks["futility"],
                                   looks["futility_predictive"], 1.2, truth,
                                   better == "lower")
    for k in range(3):
        assert oc[f"look{k + 1}_stop_efficacy"].iloc[0] == pytest.approx(eff[k], abs=1e-9)
        assert oc[f"look{k + 1}_stop_futility"].iloc[0] == pytest.approx(fut[k], abs=1e-9)
    assert 0 < ev.info["max_neglected_mass"] <= ev.info["truncation_epsilon"] == 1e-10


@functools.cache
def two_arm_benefit(x_t: int, x_c: int, n: int) -> float:
    """Pr(rate_T < rate_C) under Gamma(1, 1) priors by scipy.integrate.quad (integrand
    written with scipy.special: the gamma density and regularized incomplete gamma)."""
    b, a_t, a_c = 1 + n * EXPOSURE, 1 + x_t, 1 + x_c
    log_norm = a_c * np.log(b) - special.gammaln(a_c)

    def f(u: float) -> float:  # gamma density of the control rate x cdf of the treatment's
        return np.exp(log_norm + (a_c - 1) * np.log(u) - b * u) * special.gammainc(a_t, b * u)
    return integrate.quad(f, 0, np.inf, epsabs=1e-14, limit=200)[0]


def brute_force_two_arm(per_arm, efficacy, futility, predictive, truth):
    n_final = per_arm[-1]
    t_more = lambda n: (n_final - n) * EXPOSURE  # noqa: E731

    @functools.cache
    def final_success(x_t: int, x_c: int) -> bool:
        return two_arm_benefit(x_t, x_c, n_final) >= efficacy[-1] - 1e-12

    y = np.arange(40)
    # Final success is increasing in the control count (lower is better): find each
    # treatment count's threshold by bisection instead of evaluating every cell.
    size = 2 * y.size
    hits = np.zeros((size, size), dtype=bool)
    for i in range(size):
        lo, hi = 0, size
        while lo < hi:
            mid = (lo + hi) // 2
            lo, hi = (lo, mid) if final_success(i, mid) else (mid + 1, hi)
        hits[i, lo:] = True

    @functools.cache
    def pp(n: int, x_t: int, x_c: int) -> float:
        b = 1 + n * EXPOSURE
        p_t = stats.nbinom.pmf(y, 1 + x_t, b / (b + t_more(n)))
        p_c = stats.nbinom.pmf(y, 1 + x_c, b / (b + t_more(n)))
        return float(p_t @ hits[x_t:x_t + y.size, x_c:x_c + y.size] @ p_c)

    sizes = np.diff([0, *per_arm])
    means = [truth[j] * EXPOSURE * s for s in sizes for j in (0, 1)]
    tables = [stats.poisson.pmf(np.arange(cutoff(m)), m) for m in means]
    eff, fut = np.zeros(len(per_arm)), np.zeros(len(per_arm))
    for path in itertools.product(*(range(t.size) for t in tables)):
        incs = np.array(path).reshape(len(sizes), 2)
        prob = np.prod([t[v] for t, v in zip(tables, path, strict=True)])
        x_t = x_c = 0
        for k, n in enumerate(per_arm):
            x_t, x_c = x_t + incs[k, 0], x_c + incs[k, 1]
            if k == len(per_arm) - 1:
                (eff if final_success(x_t, x_c) else fut)[k] += prob
                break
            b = two_arm_benefit(x_t, x_c, n)
            if b >= efficacy[k]:
                eff[k] += prob
                break
            if b < futility or pp(n, x_t, x_c) < predictive:
                fut[k] += prob
                break
    return eff, fut


@pytest.mark.parametrize("truth", [(1.0, 1.0), (0.4, 1.2)])
def test_two_arm_ratio_matches_enumeration(truth) -> None:
    design = build(TWO_ARM, scenarios={"control": [truth[1]], "treatment": [truth[0]]})
    oc = compute(design).oc
    eff, fut = brute_force_two_arm([3, 6], [0.95, 0.9], 0.2, 0.2, truth)
    for k in range(2):
        assert oc[f"look{k + 1}_stop_efficacy"].iloc[0] == pytest.approx(eff[k], abs=1e-9)
        assert oc[f"look{k + 1}_stop_futility"].iloc[0] == pytest.approx(fut[k], abs=1e-9)


def test_rule_is_rebuilt_for_truths_beyond_its_lattice() -> None:
    # The lattice is sized for the design's scenarios; asking about a larger rate must
    # not silently lose mass (the engine rebuilds the rule for the new truths).
    design = build(ONE_ARM, scenarios__treatment=[0.5])
    rule = design.family.decision_rule(design)
    assert not rule.covers(np.array([[3.0]]))
    out = ExactLatticeEngine.run(design, np.array([[3.0]]), rule=rule)
    assert out.info["max_neglected_mass"] <= 1e-10
    np.testing.assert_allclose(out.efficacy.sum() + out.futility.sum(), 1.0, atol=1e-9)


def test_ratio_scenarios_null_and_columns() -> None:
    # Non-inferiority on the ratio, lower better, margin 0.25: success needs ratio < 1.25;
    # the null region is ratio >= 1.25.
    design = build(TWO_ARM, hypothesis={"comparison": "ratio", "kind": "non-inferiority",
                                        "margin": 0.25},
                   scenarios={"control": [0.8], "ratio": [1.0, 1.25, 1.5]})
    oc = compute(design).oc
    np.testing.assert_allclose(oc["true_ratio"], [1.0, 1.25, 1.5])
    np.testing.assert_allclose(oc["true_treatment"], [0.8, 1.0, 1.2])
    assert list(oc["is_null"]) == [False, True, True]
    assert design.hypothesis.threshold == pytest.approx(1.25)


def test_assurance_on_a_truncated_lattice() -> None:
    # The exact assurance programme (design-prior predictive increments on the count
    # lattice, sized for the design prior's 1 - 1e-12 quantile) against Gauss-Legendre
    # quadrature over the design prior's quantiles of the exact Pr(success | rate).
    from octrial.design_prior import assurance

    design = build(ONE_ARM, arms__treatment__design_prior={
        "distribution": "gamma-mixture", "components": [
            {"weight": 0.5, "shape": 10, "rate": 12}, {"weight": 0.5, "shape": 3, "rate": 2}]})
    exact = assurance(design)
    assert sum(exact.stop_efficacy) + sum(exact.stop_futility) == pytest.approx(1, abs=1e-9)
    assert exact.probability == pytest.approx(
        assurance(design, method="quadrature").probability, abs=1e-5)
