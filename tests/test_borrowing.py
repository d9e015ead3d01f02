"""Historical borrowing and effective sample size: identities and scipy."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from octrial.endpoints import binary, count, normal
from octrial.evaluation import compute
from tests.helpers import DESIGNS, ONE_ARM, TWO_ARM, build
from tests.test_count_maths import COUNT_ONE_ARM
from tests.test_normal_engine import ONE_ARM as NORMAL_ONE_ARM

BETA = {"distribution": "beta", "a": 1.5, "b": 2.5}
BETA_MIX = {"distribution": "beta-mixture",
            "components": [{"weight": 0.7, "a": 4, "b": 16}, {"weight": 0.3, "a": 1, "b": 1}]}
GAMMA = {"distribution": "gamma", "shape": 1.2, "rate": 0.8}
NORMAL = {"distribution": "normal", "mean": 0.1, "sd": 0.5}

# (base design, prior key path, initial prior, historical data, how to build the pooled
#  posterior from the initial prior: (prior, historical, current n, current statistic))
CASES = {
    "binary": (ONE_ARM, BETA, {"responses": 12, "n": 40}, 30, 9),
    "binary mixture": (ONE_ARM, BETA_MIX, {"responses": 12, "n": 40}, 30, 9),
    "count": (COUNT_ONE_ARM, GAMMA, {"events": 30, "exposure": 25.0}, 20, 14),
    "normal": (NORMAL_ONE_ARM, NORMAL, {"mean": 0.4, "sd": 1.0, "n": 50}, 100, 30.0),
}


def with_power(case: str, a0: float):
    base, prior, data, _, _ = CASES[case]
    return build(base, arms__treatment__prior={**prior, "historical": data,
                                               "borrowing": {"method": "power", "a0": a0}})


@pytest.mark.parametrize("case", list(CASES))
def test_power_prior_with_zero_weight_is_no_borrowing(case: str) -> None:
    # Identity: the historical likelihood to the power 0 is 1.
    base, prior, _, _, _ = CASES[case]
    plain = compute(build(base, arms__treatment__prior=prior)).oc
    borrowed = compute(with_power(case, 0.0)).oc
    columns = [c for c in plain.columns if c.startswith(("prob_", "look", "expected"))]
    np.testing.assert_allclose(borrowed[columns].to_numpy(float),
                               plain[columns].to_numpy(float), rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("case", list(CASES))
def test_power_prior_with_unit_weight_is_pooling(case: str) -> None:
    # Identity: with a0 = 1 the posterior after the current data equals the posterior from
    # the initial prior after the historical and current data pooled.
    base, prior, data, n, stat = CASES[case]
    design = with_power(case, 1.0)
    initial = build(base, arms__treatment__prior=prior).arms[0].prior
    if case.startswith("binary"):
        got = binary.update(design.arms[0].prior, n, np.array([stat]))
        pooled = binary.update(initial, n + data["n"], np.array([stat + data["responses"]]))
        assert got.sf(0.3)[0] == pytest.approx(pooled.sf(0.3)[0], rel=1e-12)
        np.testing.assert_allclose(got.weights, pooled.weights, rtol=1e-10)
    elif case == "count":
        e = design.endpoint.exposure
        got = count.update(design.arms[0].prior, n * e, np.array([stat]))
        pooled = count.update(initial, n * e + data["exposure"], np.array([stat + data["events"]]))
        assert got.cdf(1.2)[0] == pytest.approx(pooled.cdf(1.2)[0], rel=1e-12)
    else:
        # historical sd equals the endpoint's, so the historical mean is n0 more subjects
        info_now, info_all = n, n + data["n"]
        score_all = stat + data["n"] * data["mean"]
        got = normal.update(design.arms[0].prior, 1, info_now, np.array([stat]))
        pooled = normal.update(initial, 1, info_all, np.array([score_all]))
        assert got.sf(0.2)[0] == pytest.approx(pooled.sf(0.2)[0], rel=1e-12)


def test_robust_mixture_weights_against_quad() -> None:
    # Source: scipy.integrate.quad of each component's prior density x the binomial
    # likelihood of the current data gives the posterior component weights. With data in
    # conflict with the historical rate the weight moves to the vague component.
    design = build(ONE_ARM, arms__treatment__prior={
        "distribution": "beta", "a": 1, "b": 1, "historical": {"responses": 30, "n": 100},
        "borrowing": {"method": "robust-mixture", "vague_weight": 0.2}})
    prior = design.arms[0].prior
    assert prior.weights == pytest.approx((0.8, 0.2))
    assert (prior.a, prior.b) == ((31.0, 1.0), (71.0, 1.0))
    for x, n in ((9, 30), (21, 30)):
        marginal = [w * integrate.quad(lambda p, a=a, b=b, x=x, n=n: stats.beta.pdf(p, a, b)
                                       * stats.binom.pmf(x, n, p), 0, 1, epsabs=1e-15)[0]
                    for w, a, b in zip(prior.weights, prior.a, prior.b, strict=True)]
        post = binary.update(prior, n, np.array([x]))
        np.testing.assert_allclose(post.weights[0], np.array(marginal) / sum(marginal),
                                   rtol=1e-8)
    agree = binary.update(prior, 30, np.array([9])).weights[0, 1]
    conflict = binary.update(prior, 30, np.array([21])).weights[0, 1]
    assert conflict > 0.9 > 0.1 > agree


@pytest.mark.parametrize("case, simple", [
    ("binary", 1.5 + 2.5), ("count", 0.8 / 0.5), ("normal", 1.0 / 0.5**2)])
def test_effective_sample_size(case: str, simple: float) -> None:
    # Identities: the simple summaries are a + b, b / exposure and sd^2 / s0^2; the FDA
    # (2010) n V1 / V2 - n at data equal to their prior expectation reproduces them
    # exactly for gamma and normal priors and as n(a + b)/(n + 1) for a beta prior
    # (V1 = m(1 - m)/(n + 1), V2 = m(1 - m)/(n + a + b + 1)).
    base, prior, _, _, _ = CASES[case]
    design = build(base, arms__treatment__prior=prior)
    summary = compute(design).info["prior_effective_sample_size"]["treatment"]
    assert summary["simple"] == pytest.approx(simple, rel=1e-12)
    n = summary["fda"]["n"]
    expected = n * simple / (n + 1) if case == "binary" else simple
    assert summary["fda"]["ess"] == pytest.approx(expected, rel=1e-9)


def test_power_prior_adds_a0_n0_to_the_effective_sample_size() -> None:
    # Identity: Beta(a + a0 x0, b + a0 (n0 - x0)) has a + b + a0 n0.
    design = with_power("binary", 0.5)
    summary = compute(design).info["prior_effective_sample_size"]["treatment"]
    assert summary["simple"] == pytest.approx(4.0 + 0.5 * 40)
    assert summary["borrowing"]["historical"] == {"responses": 12, "n": 40}


def test_drift_moves_type1_error_in_the_borrowing_demo() -> None:
    # The demo borrows a historical control rate of 0.30: the drift column is the true
    # control rate minus 0.30, and the type I error rises as the current control rate
    # drifts above the historical one (the borrowed data pull its estimate down).
    oc = compute(DESIGNS / "borrowed-control-response.toml").oc
    np.testing.assert_allclose(oc["drift_control"], oc["true_control"] - 0.30, atol=1e-12)
    null = oc[oc["is_null"]].sort_values("drift_control")
    above = null[null["drift_control"] >= 0]["prob_success"].to_numpy()
    assert np.all(np.diff(above) > 0)


def test_two_arm_borrowing_of_the_control_changes_only_the_control_prior() -> None:
    design = build(TWO_ARM, arms__control__prior={
        "distribution": "beta", "a": 1, "b": 1, "historical": {"responses": 30, "n": 100},
        "borrowing": {"method": "power", "a0": 0.5}})
    assert design.arms[1].prior.a == (16.0,) and design.arms[1].prior.b == (36.0,)
    assert design.arms[0].prior.borrowing is None
    oc = compute(design).oc
    assert "drift_control" in oc.columns and "drift_treatment" not in oc.columns
