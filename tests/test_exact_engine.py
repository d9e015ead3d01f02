"""The exact engine against brute-force enumeration of every outcome path.

The enumeration below shares no code with the engine: it walks every sequence of per-look
outcomes, computes each path's probability from scipy.stats.binom, and applies the rule
with posterior probabilities from scipy.stats.beta (one arm) or scipy.integrate.quad (two
arms) and predictive probabilities from scipy.stats.betabinom.
"""

from __future__ import annotations

import functools
import itertools

import numpy as np
import pytest
from scipy import integrate, stats

from octrial.evaluation import compute
from tests.helpers import ONE_ARM, TWO_ARM, build

# -- independent reference ------------------------------------------------------------


def one_arm_benefit(prior: tuple[float, float], n: int, x: int, p0: float,
                    higher: bool) -> float:
    a, b = prior[0] + x, prior[1] + n - x
    return stats.beta.sf(p0, a, b) if higher else stats.beta.cdf(p0, a, b)


def brute_force_one_arm(prior, looks, efficacy, futility, predictive, p0, truth, higher=True):
    """Per-look (efficacy, futility) probabilities by enumerating every path."""
    n_final = looks[-1]
    final_success = [
        one_arm_benefit(prior, n_final, x, p0, higher) >= efficacy[-1] - 1e-12
        for x in range(n_final + 1)
    ]

    def pp(n: int, x: int) -> float:
        m = n_final - n
        a, b = prior[0] + x, prior[1] + n - x
        return sum(stats.betabinom.pmf(y, m, a, b) for y in range(m + 1) if final_success[x + y])

    eff, fut = np.zeros(len(looks)), np.zeros(len(looks))
    sizes = np.diff([0, *looks])
    for path in itertools.product(*(range(s + 1) for s in sizes)):
        prob = np.prod([stats.binom.pmf(y, s, truth) for y, s in zip(path, sizes, strict=True)])
        x = 0
        for k, (y, n) in enumerate(zip(path, looks, strict=True)):
            x += y
            last = k == len(looks) - 1
            if last:
                (eff if final_success[x] else fut)[k] += prob
                break
            b = one_arm_benefit(prior, n, x, p0, higher)
            if efficacy[k] is not None and b >= efficacy[k]:
                eff[k] += prob
                break
            if (futility[k] is not None and b < futility[k]) or (
                    predictive[k] is not None and pp(n, x) < predictive[k]):
                fut[k] += prob
                break
    return eff, fut


@pytest.mark.parametrize("truth", [0.1, 0.25, 0.45])
@pytest.mark.parametrize("higher", [True, False])
def test_one_arm_matches_enumeration(truth: float, higher: bool) -> None:
    looks = [4, 8, 12]
    efficacy, futility, predictive = [0.99, 0.97, 0.9], [0.1, 0.2, None], [0.15, 0.3, None]
    design = build(
        ONE_ARM,
        endpoint__better="higher" if higher else "lower",
        arms__treatment__prior={"distribution": "beta", "a": 0.7, "b": 1.3},
        hypothesis__benchmark=0.25,
        looks__n=looks, looks__efficacy=efficacy, looks__futility=futility[:2],
        looks__futility_predictive=predictive[:2],
        scenarios__treatment=[truth],
    )
    oc = compute(design).oc
    eff, fut = brute_force_one_arm((0.7, 1.3), looks, efficacy, futility, predictive, 0.25,
                                   truth, higher)
    for k in range(3):
        assert oc[f"look{k + 1}_stop_efficacy"].iloc[0] == pytest.approx(eff[k], abs=1e-13)
        assert oc[f"look{k + 1}_stop_futility"].iloc[0] == pytest.approx(fut[k], abs=1e-13)
    assert oc["prob_success"].iloc[0] == pytest.approx(eff.sum(), abs=1e-13)


@functools.cache
def two_arm_benefit(x_t: int, n_t: int, x_c: int, n_c: int, d: float) -> float:
    """Pr(p_T - p_C > d) under Beta(1, 1) priors by scipy.integrate.quad."""
    a_t, b_t, a_c, b_c = 1 + x_t, 1 + n_t - x_t, 1 + x_c, 1 + n_c - x_c
    lo, hi = max(0.0, -d), min(1.0, 1.0 - d)
    value = integrate.quad(lambda u: stats.beta.pdf(u, a_c, b_c) * stats.beta.sf(u + d, a_t, b_t),
                           lo, hi, epsabs=1e-14, limit=200)[0]
    return value + (stats.beta.cdf(-d, a_c, b_c) if d < 0 else 0.0)


def brute_force_two_arm(per_arm, efficacy, futility, predictive, d, truth):
    n_final = per_arm[-1]
    success = np.array([[two_arm_benefit(t, n_final, c, n_final, d) >= efficacy[-1] - 1e-12
                         for c in range(n_final + 1)] for t in range(n_final + 1)])

    def pp(n: int, x_t: int, x_c: int) -> float:
        m = n_final - n
        pt = stats.betabinom.pmf(np.arange(m + 1), m, 1 + x_t, 1 + n - x_t)
        pc = stats.betabinom.pmf(np.arange(m + 1), m, 1 + x_c, 1 + n - x_c)
        return float(pt @ success[x_t:x_t + m + 1, x_c:x_c + m + 1] @ pc)

    sizes = np.diff([0, *per_arm])
    eff, fut = np.zeros(len(per_arm)), np.zeros(len(per_arm))
    ranges = [range(s + 1) for s in sizes for _ in (0, 1)]
    for path in itertools.product(*ranges):
        incs = np.array(path).reshape(len(sizes), 2)
        prob = np.prod([stats.binom.pmf(incs[k, 0], s, truth[0]) * stats.binom.pmf(
            incs[k, 1], s, truth[1]) for k, s in enumerate(sizes)])
        x_t = x_c = 0
        for k, n in enumerate(per_arm):
            x_t, x_c = x_t + incs[k, 0], x_c + incs[k, 1]
            if k == len(per_arm) - 1:
                (eff if success[x_t, x_c] else fut)[k] += prob
                break
            b = two_arm_benefit(x_t, n, x_c, n, d)
            if b >= efficacy[k]:
                eff[k] += prob
                break
            if b < futility[k] or pp(n, x_t, x_c) < predictive[k]:
                fut[k] += prob
                break
    return eff, fut


@pytest.mark.parametrize("truth", [(0.3, 0.3), (0.6, 0.2)])
@pytest.mark.parametrize("kind, margin", [("superiority", 0.0), ("non-inferiority", 0.1)])
def test_two_arm_matches_enumeration(truth, kind, margin) -> None:
    per_arm = [3, 6]
    efficacy, futility, predictive = [0.95, 0.9], [0.2], [0.2]
    design = build(
        TWO_ARM, looks__n=[6, 12], looks__efficacy=efficacy, looks__futility=futility,
        looks__futility_predictive=predictive, hypothesis__kind=kind, hypothesis__margin=margin,
        scenarios={"control": [truth[1]], "treatment": [truth[0]]},
    )
    oc = compute(design).oc
    d = margin if kind == "superiority" else -margin
    eff, fut = brute_force_two_arm(per_arm, efficacy, futility, predictive, d, truth)
    for k in range(2):
        assert oc[f"look{k + 1}_stop_efficacy"].iloc[0] == pytest.approx(eff[k], abs=1e-10)
        assert oc[f"look{k + 1}_stop_futility"].iloc[0] == pytest.approx(fut[k], abs=1e-10)


def test_look_probabilities_sum_to_one_and_n_moments() -> None:
    # Identity: every study ends at exactly one look for exactly one reason.
    design = build(ONE_ARM, looks__futility_predictive=0.1,
                   scenarios__treatment={"from": 0.05, "to": 0.6, "step": 0.05})
    oc = compute(design).oc
    looks = [c for c in oc.columns if c.startswith("look")]
    np.testing.assert_allclose(oc[looks].sum(axis=1), 1.0, atol=1e-13)
    stop = [oc[f"look{k}_stop_efficacy"] + oc[f"look{k}_stop_futility"] for k in (1, 2, 3)]
    expected_n = sum(p * n for p, n in zip(stop, (10, 20, 30), strict=True))
    np.testing.assert_allclose(oc["expected_n"], expected_n, rtol=1e-13)


def test_lower_is_better_mirrors_higher() -> None:
    # Symmetry: relabelling response as non-response (p -> 1 - p, Beta(a, b) -> Beta(b, a),
    # benchmark p0 -> 1 - p0) must leave every operating characteristic unchanged.
    higher = build(ONE_ARM, arms__treatment__prior={"distribution": "beta", "a": 0.6, "b": 2.4},
                   looks__futility_predictive=0.2)
    lower = build(ONE_ARM, endpoint__better="lower", hypothesis__benchmark=0.8,
                  arms__treatment__prior={"distribution": "beta", "a": 2.4, "b": 0.6},
                  looks__futility_predictive=0.2,
                  scenarios__treatment=[0.8, 0.7, 0.6])
    a, b = compute(higher).oc, compute(lower).oc
    columns = [c for c in a.columns if c.startswith(("prob_", "look", "expected", "sd_"))]
    np.testing.assert_allclose(a[columns].to_numpy(float), b[columns].to_numpy(float),
                               atol=1e-12)
    assert list(a["is_null"]) == list(b["is_null"]) == [True, False, False]


def test_two_arm_lower_is_better_mirrors_higher() -> None:
    higher = build(TWO_ARM, hypothesis__margin=0.05, scenarios={"control": [0.3, 0.5],
                                                                 "treatment": [0.3, 0.5]})
    lower = build(TWO_ARM, endpoint__better="lower", hypothesis__margin=0.05,
                  scenarios={"control": [0.7, 0.5], "treatment": [0.7, 0.5]})
    a, b = compute(higher).oc, compute(lower).oc
    columns = [c for c in a.columns if c.startswith(("prob_", "look"))]
    np.testing.assert_allclose(a[columns].to_numpy(float), b[columns].to_numpy(float),
                               atol=1e-10)


def test_allocation_two_to_one() -> None:
    # 2:1 allocation: 30 subjects in all at the interim are 20 treatment and 10 control.
    design = build(TWO_ARM, arms__treatment__allocation=2, looks__n=[30, 60])
    assert design.looks.per_arm == ((20, 10), (40, 20))
    boundaries = compute(design).boundaries
    first = boundaries[boundaries["look"] == 1]
    assert set(first["n_treatment"]) == {20} and len(first) == 11
