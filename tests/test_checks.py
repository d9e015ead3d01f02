"""Workflow checks against closed forms, scipy and deliberately wrong computations.

Simulation-based calibration (SBC) runs here with M = 400 to 600 studies instead of the
default 4000 to keep the suite fast. The power is still adequate for what these tests
ask: at M = 400 a posterior computed with another prior than the truths' gives
Holm-adjusted p-values of 1e-98 or smaller, and a grid whose step (0.68 on the logit
scale) is several posterior sds gives 1.5e-6 at the final look and 3e-36 for posterior
draws (measured), while a correct computation passes at the 1% family-wise level by
construction (the seeds are fixed, so each test is deterministic).
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, special, stats

from octrial.checks import CheckSettings, check
from octrial.checks.conflict import _p_values, run_conflict
from octrial.checks.model import model_for
from octrial.checks.prior_predictive import run_prior_predictive
from octrial.checks.sbc import pit_uniformity, rank_uniformity, run_sbc
from octrial.checks.sensitivity import run_sensitivity
from octrial.checks.tail_accuracy import run_tail_accuracy
from octrial.design.load import load_design
from octrial.errors import InputError
from octrial.evaluation import compute
from tests.check_designs import (
    CASES,
    COUNT_ONE,
    LOGIT_NORMAL,
    NIG,
    NORMAL_MIX,
    NORMAL_ONE,
    NORMAL_TWO,
    UNKNOWN_ONE,
)
from tests.helpers import DESIGNS, ONE_ARM, TWO_ARM, build

FAST = {"bins": 10, "draws": 49, "checks": ("sbc",)}


def settings(**kw) -> CheckSettings:
    return CheckSettings(**{"simulations": 400, "seed": 5, **FAST, **kw})


# -- simulation-based calibration ------------------------------------------------------

@pytest.mark.parametrize("case", list(CASES))
def test_sbc_passes_for_every_engine_computation(case) -> None:
    base, changes = CASES[case]
    design = build(base, **changes)
    result = run_sbc(model_for(design), settings(simulations=600))
    record = result.record
    assert record["verdict"] == "pass", [(q["id"], q["p_adjusted"]) for q in
                                         record["quantities"]]
    looks = design.looks.count
    targets = [q for q in record["quantities"] if q["kind"] == "cdf" and
               q["quantity"] == record["quantities"][0]["quantity"]]
    assert [q["look"] for q in targets] == list(range(1, looks + 1))
    assert any(q["kind"] == "rank" for q in record["quantities"])
    assert len(result.values) == 600 * len(record["quantities"])


def test_sbc_fails_when_the_posterior_uses_another_prior() -> None:
    """Truths from Beta(1, 1); the posterior computed with Beta(2, 8)."""
    computed = build(ONE_ARM, arms__treatment__prior={"distribution": "beta", "a": 2,
                                                      "b": 8})
    generating = build(ONE_ARM)
    wrong = run_sbc(model_for(computed), settings(), truth_model=model_for(generating))
    assert wrong.record["verdict"] == "fail"
    for q in wrong.record["quantities"]:
        assert q["p_adjusted"] < 1e-6
        assert q["bins_outside_band"] >= 3  # visibly non-uniform
    # the same posterior with truths from its own prior passes
    assert run_sbc(model_for(computed), settings()).record["verdict"] == "pass"


def test_sbc_fails_for_a_two_arm_quadrature_with_another_control_prior() -> None:
    computed = build(TWO_ARM)
    generating = build(TWO_ARM, arms__control__prior={"distribution": "beta", "a": 2,
                                                      "b": 18})
    wrong = run_sbc(model_for(computed), settings(), truth_model=model_for(generating))
    by_id = {q["id"]: q for q in wrong.record["quantities"]}
    assert by_id["difference@look2"]["p_adjusted"] < 1e-6
    assert by_id["rate_control@look2"]["verdict"] == "fail"


def coarse(design, points: int):
    """The design with a grid of ``points`` nodes (below what design files allow)."""
    return dataclasses.replace(design, simulation=dataclasses.replace(
        design.simulation, grid_points=points))


def test_sbc_fails_for_a_grid_too_coarse_for_the_posterior() -> None:
    """n = 200: posterior sd about 0.18 on the logit scale; 31 nodes give a step of 0.68.
    The posterior CDF (Hermite between nodes) and, more strongly, the draws fail."""
    design = build(ONE_ARM, arms__treatment__prior=LOGIT_NORMAL, looks__n=[50, 100, 200])
    wrong = run_sbc(model_for(coarse(design, 31)), settings())
    assert wrong.record["verdict"] == "fail"
    final = {q["id"]: q for q in wrong.record["quantities"]}
    assert final["rate_treatment@look3"]["p_adjusted"] < 1e-4
    assert final["rate_treatment@look3:rank"]["p_adjusted"] < 1e-6
    assert final["rate_treatment@look3:rank"]["bins_outside_band"] >= 3
    assert run_sbc(model_for(design), settings()).record["verdict"] == "pass"


def test_sbc_is_reproducible_from_the_seed() -> None:
    design = build(TWO_ARM)
    first = run_sbc(model_for(design), settings())
    again = run_sbc(model_for(design), settings())
    other = run_sbc(model_for(design), settings(seed=6))
    pd.testing.assert_frame_equal(first.values, again.values)
    assert not first.values["value"].equals(other.values["value"])


def test_pit_is_exactly_uniform_for_discrete_data() -> None:
    """Pr(F(theta | X) <= u) = u for a beta-binomial model, by quadrature over theta and
    a sum over x (scipy), through the check model's own CDF."""
    design = build(ONE_ARM, looks__n=[4, 8, 12],
                   arms__treatment__prior={"distribution": "beta", "a": 0.7, "b": 2.0})
    model = model_for(design)
    q = model.target()
    n = 12
    data = model.simulate(np.random.default_rng(0), np.full((n + 1, 1), 0.5))
    data.stats[-1, 0] = np.arange(n + 1)
    post = model.posterior(data, 2)
    for u in (0.1, 0.37, 0.8):
        # theta_u(x): the posterior u-quantile after x responses
        cut = stats.beta.ppf(u, 0.7 + np.arange(n + 1), 2.0 + n - np.arange(n + 1))
        assert np.allclose(post.cdf(q, cut), u, atol=1e-10)

        def mass(theta: float, cut: np.ndarray = cut) -> float:
            x = np.arange(n + 1)
            below = theta <= cut
            return float(stats.beta.pdf(theta, 0.7, 2.0)
                         * np.sum(stats.binom.pmf(x, n, theta) * below))
        total = integrate.quad(mass, 0, 1, points=list(cut), limit=200)[0]
        assert total == pytest.approx(u, abs=1e-8)


def test_uniformity_tests_hold_their_level_and_detect_departures() -> None:
    rng = np.random.default_rng(1)
    pit = [pit_uniformity(rng.random(300), 10) for _ in range(200)]
    for key in ("chi_square_p", "ks_p"):
        assert stats.kstest([t[key] for t in pit], "uniform").pvalue > 1e-3
    ranks = [rank_uniformity(rng.integers(0, 50, 300), 49, 10, rng) for _ in range(100)]
    assert stats.kstest([t["chi_square_p"] for t in ranks], "uniform").pvalue > 1e-3
    assert np.mean([t["ks_p"] < 0.05 for t in ranks]) < 0.12
    skewed = rank_uniformity(np.minimum(rng.integers(0, 50, 300), rng.integers(0, 50, 300)),
                             49, 10, rng)
    assert skewed["ks_p"] < 1e-3 and skewed["chi_square_p"] < 1e-6
    # L + 1 = 33 ranks in 10 bins: bins hold 3 or 4 ranks, with exact probabilities
    uneven = rank_uniformity(rng.integers(0, 33, 1000), 32, 10, rng)
    assert uneven["probabilities"].sum() == pytest.approx(1.0)
    assert set(np.round(uneven["probabilities"] * 33).astype(int)) == {3, 4}


# -- sensitivity -----------------------------------------------------------------------

def test_shrinkage_and_z_against_beta_binomial_closed_forms() -> None:
    a, b = 2.0, 6.0
    design = build(ONE_ARM, arms__treatment__prior={"distribution": "beta", "a": a, "b": b})
    found = run_sensitivity(model_for(design), settings(simulations=2000))
    prior_var = stats.beta.var(a, b)
    assert found.record["prior_variance"] == pytest.approx(prior_var, rel=1e-12)
    for k, n in enumerate(design.looks.n):
        part = found.points[found.points["look"] == k + 1]
        x = part["posterior_mean"] * (a + b + n) - a  # the responses behind each study
        assert np.allclose(x, np.round(x), atol=1e-9)
        post = stats.beta(a + np.round(x), b + n - np.round(x))
        assert np.allclose(part["posterior_sd"], post.std(), rtol=1e-10)
        assert np.allclose(part["shrinkage"], 1 - post.var() / prior_var, rtol=1e-10)
        assert np.allclose(part["z"], (post.mean() - part["truth"]) / post.std(), rtol=1e-9)
        row = found.record["looks"][k]
        assert row["share_abs_z_above_2"] == np.mean(np.abs(part["z"]) > 2)
        assert row["share_shrinkage_below_0.1"] == np.mean(part["shrinkage"] < 0.1)
    assert found.record["truths_from"].startswith("analysis prior")


def test_shrinkage_and_z_against_normal_closed_forms() -> None:
    """Known sd, prior N(m0, s0^2): shrinkage is n s0^2 / (sd^2 + n s0^2) at every study;
    with truths from the analysis prior z is exactly N(0, 1); with truths from a design
    prior N(mu_d, tau^2), z is normal with mean v (m0 - mu_d) / (s0^2 s) and variance
    (v / (s0^2 s))^2 tau^2 + v^2 I / s^2 (v, s: posterior variance and sd, I: information)."""
    m0, s0, sd = 0.2, 0.5, 2.0
    design = build(NORMAL_ONE)
    found = run_sensitivity(model_for(design), settings(simulations=4000))
    for k, n in enumerate(design.looks.n):
        part = found.points[found.points["look"] == k + 1]
        assert np.allclose(part["shrinkage"], n * s0**2 / (sd**2 + n * s0**2), rtol=1e-12)
        assert stats.kstest(part["z"], "norm").pvalue > 1e-3
    mu_d, tau = 0.8, 0.3
    shifted = build(NORMAL_ONE, arms__treatment__design_prior={
        "distribution": "normal", "mean": mu_d, "sd": tau})
    found = run_sensitivity(model_for(shifted), settings(simulations=4000))
    assert found.record["truths_from"] == "design prior"
    for k, n in enumerate(design.looks.n):
        z = found.points.loc[found.points["look"] == k + 1, "z"]
        info = n / sd**2
        v = 1 / (1 / s0**2 + info)
        s = math.sqrt(v)
        mean = v * (m0 - mu_d) / (s0**2 * s)
        var = (v / (s0**2 * s)) ** 2 * tau**2 + v**2 * info / s**2
        assert z.mean() == pytest.approx(mean, abs=4 * math.sqrt(var / z.size))
        assert z.var() == pytest.approx(var, rel=4 * math.sqrt(2 / z.size))


def test_sensitivity_flags_a_confidently_wrong_prior() -> None:
    design = build(NORMAL_ONE, arms__treatment__design_prior={
        "distribution": "normal", "mean": 3.0, "sd": 0.2})
    found = run_sensitivity(model_for(design), settings(simulations=1000))
    assert found.record["verdict"] == "flag"
    assert found.record["looks"][0]["share_abs_z_above_2"] > 0.5


# -- prior predictive -------------------------------------------------------------------

def predictive(design, source="analysis"):
    return {p.name: p for p in model_for(design).predictive(source)}


def test_binary_prior_predictive_is_the_beta_binomial() -> None:
    design = load_design(DESIGNS / "single-arm-response.toml")
    found = predictive(design)
    n = 45
    expected = stats.betabinom.pmf(np.arange(n + 1), n, 0.4, 1.6)
    assert np.allclose(found["responses_treatment"].weights, expected, rtol=1e-10, atol=0)
    record = run_prior_predictive(model_for(design), settings()).record
    outcome = record["analysis"]["outcomes"][0]
    assert outcome["all_or_none"] == pytest.approx(expected[0] + expected[-1], rel=1e-10)
    assert outcome["mean"] == pytest.approx(stats.betabinom.mean(n, 0.4, 1.6), rel=1e-10)
    assert outcome["q50"] == stats.betabinom.ppf(0.5, n, 0.4, 1.6)
    assert record["analysis"]["verdict"] == "flag"
    assert "24.2%" in record["analysis"]["flags"][0]


def test_mixture_and_logit_normal_predictives_against_scipy() -> None:
    mixture = build(ONE_ARM, arms__treatment__prior={
        "distribution": "beta-mixture", "components": [{"weight": 0.3, "a": 1, "b": 4},
                                                       {"weight": 0.7, "a": 5, "b": 5}]})
    x = np.arange(31)
    expected = (0.3 * stats.betabinom.pmf(x, 30, 1, 4) + 0.7 * stats.betabinom.pmf(x, 30, 5, 5))
    assert np.allclose(predictive(mixture)["responses_treatment"].weights, expected,
                       rtol=1e-10, atol=0)
    grid = build(ONE_ARM, arms__treatment__prior=LOGIT_NORMAL)
    found = predictive(grid)["responses_treatment"].weights

    def pmf(k: int) -> float:
        return integrate.quad(lambda t: stats.norm.pdf(t, -1.4, 1.0)
                              * stats.binom.pmf(k, 30, special.expit(t)), -12, 10,
                              epsabs=1e-13, limit=200)[0]
    assert np.allclose(found, [pmf(k) for k in x], atol=1e-9)


def test_count_prior_predictive_is_the_negative_binomial() -> None:
    """Gamma(1.5, 1) on the rate, 40 subjects of exposure 0.5: events ~ NB(1.5, 1 / 21)."""
    design = build(COUNT_ONE)
    found = predictive(design)["events_treatment"]
    t = 40 * 0.5
    expected = stats.nbinom.pmf(found.values, 1.5, 1.0 / (1.0 + t))
    assert np.allclose(found.weights, expected, rtol=1e-9, atol=0)
    assert 1 - found.weights.sum() < 1e-10
    rate = predictive(design)["observed_event_rate"]
    assert rate.mean() == pytest.approx(1.5, rel=1e-8)


def test_normal_prior_predictives_against_scipy() -> None:
    design = build(NORMAL_ONE, arms__treatment__prior=NORMAL_MIX)
    mean = predictive(design)["sample_mean"]
    n, sd = 50, 2.0
    comps = [(0.6, stats.norm(0.0, math.sqrt(0.3**2 + sd**2 / n))),
             (0.4, stats.norm(0.5, math.sqrt(1.0 + sd**2 / n)))]
    for q in (0.01, 0.3, 0.5, 0.99):
        x = mean.quantile(q)
        assert sum(w * d.cdf(x) for w, d in comps) == pytest.approx(q, abs=1e-10)
    two = predictive(build(NORMAL_TWO))["observed_difference"]
    spread = math.sqrt(4.0**2 + 10.0**2 * (1 / 60 + 1 / 60))
    assert two.quantile(0.975) == pytest.approx(stats.norm.ppf(0.975, -1.0, spread), rel=1e-9)
    nig = predictive(build(UNKNOWN_ONE))["sample_mean_treatment"]
    a, b, k = NIG["shape"], NIG["scale"], NIG["mean_n"]
    t = stats.t(2 * a, NIG["mean"], math.sqrt(b / a * (1 / k + 1 / 25)))
    assert nig.quantile(0.05) == pytest.approx(t.ppf(0.05), rel=1e-9)


def test_two_arm_observed_difference_is_the_convolution() -> None:
    design = build(TWO_ARM)  # Beta(1, 1) on each arm, 20 subjects each at the end
    found = predictive(design)["observed_difference"]
    x = np.arange(21)
    brute: dict[float, float] = {}
    for xt in x:
        for xc in x:
            key = round((xt - xc) / 20, 12)
            brute[key] = brute.get(key, 0.0) + 1 / 21**2
    assert np.allclose(found.values, sorted(brute))
    assert np.allclose(found.weights, [brute[k] for k in sorted(brute)], atol=1e-14)
    record = run_prior_predictive(model_for(design), settings()).record
    effect = record["analysis"]["outcomes"][-1]
    beyond = sum(p for d, p in brute.items() if abs(d) > 0.5)
    assert effect["outside_plausible_range"] == pytest.approx(beyond, abs=1e-12)


def test_outcome_range_flags_impossible_means() -> None:
    model = model_for(build(NORMAL_ONE))
    found = run_prior_predictive(model, settings(outcome_range=(0.0, 10.0))).record
    mean = found["analysis"]["outcomes"][0]
    expected = stats.norm.cdf(0.0, 0.2, math.sqrt(0.25 + 4 / 50))
    assert mean["outside_possible_range"] == pytest.approx(expected, rel=1e-9)
    assert any(f.startswith("impossible") for f in found["analysis"]["flags"])


# -- tail accuracy -----------------------------------------------------------------------

def test_tail_accuracy_against_the_beta_posterior() -> None:
    design = load_design(DESIGNS / "single-arm-response.toml")
    record = run_tail_accuracy(model_for(design), settings(repeats=100))
    post = stats.beta(0.4 + 9, 1.6 + 36)  # data at the prior mean: 9 of 45
    for row in record["draws_needed"]:
        q = row["quantile"]
        assert row["exact"] == pytest.approx(post.ppf(q), rel=1e-8)
        assert row["density"] == pytest.approx(post.pdf(post.ppf(q)), rel=1e-5)
        need = q * (1 - q) / (post.pdf(post.ppf(q)) * 0.01 * post.std()) ** 2
        assert row["draws_for_se_1pct_of_sd"] == pytest.approx(need, rel=1e-4)
    assert record["formula_agrees"]


def test_tails_need_more_draws_than_the_median_normal_closed_form() -> None:
    """Normal posterior: L(q) / L(0.5) = q (1 - q) / (0.25 phi(z_q)^2 / phi(0)^2)."""
    record = run_tail_accuracy(model_for(build(NORMAL_ONE)), settings(repeats=100))
    need = {r["quantile"]: r for r in record["draws_needed"]}
    assert need[0.5]["draws_for_se_1pct_of_sd"] == pytest.approx(0.25 * 2 * math.pi / 1e-4,
                                                                 rel=1e-4)
    for q in (0.025, 0.975):
        ratio = q * (1 - q) / stats.norm.pdf(stats.norm.ppf(q)) ** 2 / (0.25 * 2 * math.pi)
        assert need[q]["relative_to_median"] == pytest.approx(ratio, rel=1e-4)
        assert need[q]["relative_to_median"] > 4
    table = pd.DataFrame(record["table"])
    checked = table[table["draws"].isin([1000, 10_000])]  # 100 repeats each: sd within 7%
    assert ((checked["ratio"] > 0.75) & (checked["ratio"] < 1.3)).all()


# -- prior-data conflict ---------------------------------------------------------------------

def test_conflict_against_beta_binomial_p_values_and_the_engine() -> None:
    design = load_design(DESIGNS / "borrowed-control-response.toml")
    record = run_conflict(design)
    arm = record["arms"][0]
    assert arm["arm"] == "control"
    pred = stats.betabinom(60, 37, 85)  # Beta(1, 1) updated with 36 of 120, a0 = 1
    pmf = pred.pmf(np.arange(61))
    p = np.array([pmf[pmf <= pmf[x] * (1 + 1e-9)].sum() for x in range(61)])
    conflict = p < 0.05
    for row in arm["by_true_value"]:
        expected = stats.binom.pmf(np.arange(61), 60, row["true_value"]) @ conflict
        assert row["look2_conflict"] == pytest.approx(expected, abs=1e-12)
        assert row["drift"] == pytest.approx(row["true_value"] - 0.3)
    # vague-component weight after x of 60: 0.2 BB(x; 1, 1) / (0.2 BB(x; 1, 1) + 0.8 BB(x; 37, 85))
    x = np.arange(61)
    vague = 0.2 * stats.betabinom.pmf(x, 60, 1, 1)
    weight = vague / (vague + 0.8 * pmf)
    row = arm["by_true_value"][0]
    expected = stats.binom.pmf(x, 60, row["true_value"]) @ weight
    assert row["look2_vague_weight"] == pytest.approx(expected, rel=1e-9)
    with_borrowing = compute(design).oc["prob_success"].to_numpy()
    flat = build(TWO_ARM, looks__n=[90, 180], looks__efficacy=[0.995, 0.975],
                 looks__futility=0.1, arms__treatment__allocation=2,
                 scenarios={"control": {"from": 0.2, "to": 0.45, "step": 0.05},
                            "effect": [0.0, 0.15]})
    without = compute(flat).oc["prob_success"].to_numpy()
    decision = pd.DataFrame(record["decision"])
    assert np.allclose(decision["prob_success_borrowing"], with_borrowing, atol=0)
    assert np.allclose(decision["prob_success_no_borrowing"], without, atol=1e-14)


def test_p_values_order_outcomes_by_predictive_probability() -> None:
    pmf = np.array([0.05, 0.2, 0.5, 0.2, 0.04, 0.01])
    assert np.allclose(_p_values(pmf), [0.10, 0.5, 1.0, 0.5, 0.05, 0.01])


def test_conflict_for_normal_and_count_borrowing() -> None:
    normal = build(NORMAL_ONE, arms__treatment__prior={
        "distribution": "normal", "mean": 0.0, "sd": 2.0, "historical": {
            "mean": 0.4, "sd": 2.0, "n": 40}, "borrowing": {"method": "robust-mixture",
                                                           "vague_weight": 0.5}},
        scenarios={"treatment": [0.4, 2.0]})
    record = run_conflict(normal)
    rows = {r["true_value"]: r for r in record["arms"][0]["by_true_value"]}
    # informative N(m, s^2) from prior N(0, 4) and 40 observations of mean 0.4, sd 2
    s2 = 1 / (1 / 4 + 40 / 4)
    m = s2 * (40 * 0.4 / 4)
    se = math.sqrt(s2 + 4 / 50)  # predictive sd of the final sample mean
    z = stats.norm.ppf(0.975)
    for truth, row in rows.items():
        expected = (stats.norm.cdf(m - z * se, truth, 2 / math.sqrt(50))
                    + stats.norm.sf(m + z * se, truth, 2 / math.sqrt(50)))
        assert row["look2_conflict"] == pytest.approx(expected, abs=2e-3)
    assert rows[2.0]["look2_vague_weight"] > rows[0.4]["look2_vague_weight"]
    count = build(COUNT_ONE, arms__treatment__prior={
        "distribution": "gamma", "shape": 1, "rate": 1, "historical": {
            "events": 30, "exposure": 25.0}, "borrowing": {"method": "power", "a0": 0.5}})
    found = run_conflict(count)["arms"][0]
    assert found["informative_prior"].startswith("Gamma(shape 16, rate 13.5)")
    assert "look2_vague_weight" not in found["by_true_value"][0]


def test_designs_without_borrowing_say_so() -> None:
    assert "not_applicable" in run_conflict(build(ONE_ARM))


# -- the whole check ----------------------------------------------------------------------

def test_check_record_is_reproducible_and_json_ready() -> None:
    design = build(TWO_ARM)
    options = {"simulations": 200, "bins": 10, "draws": 49, "seed": 3, "repeats": 20}
    first = check(design, CheckSettings(**options))
    again = check(design, CheckSettings(**options))
    strip = ("timings_seconds", "seconds", "seconds_simulating")

    def numbers(record):
        if isinstance(record, dict):
            return {k: numbers(v) for k, v in record.items() if k not in strip}
        if isinstance(record, list):
            return [numbers(v) for v in record]
        return record
    assert numbers(first.record) == numbers(again.record)
    text = json.dumps(first.record, allow_nan=False)
    assert "verdicts" in json.loads(text)
    checks = {v["check"] for v in first.record["verdicts"]}
    assert checks == {"prior predictive", "simulation-based calibration", "sensitivity",
                      "tail accuracy", "prior-data conflict", "design-prior sensitivity"}


def test_flat_prior_uses_the_design_prior_where_it_can() -> None:
    design = build(NORMAL_ONE, arms__treatment__prior={"distribution": "flat"},
                   arms__treatment__design_prior={"distribution": "normal", "mean": 0.3,
                                                  "sd": 0.4})
    out = check(design, CheckSettings(simulations=200, bins=10, draws=49, seed=1,
                                      repeats=20))
    assert "improper" in out.record["sbc"]["not_applicable"]
    assert out.record["sensitivity"]["truths_from"] == "design prior"
    assert all(np.asarray(out.sensitivity["shrinkage"]) == 1.0)
    assert "design" in out.predictive and "analysis" not in out.predictive


@pytest.mark.parametrize("bad", [{"simulations": 10}, {"bins": 1}, {"draws": 0},
                                 {"alpha": 1.5}, {"plausible": (2.0, 1.0)},
                                 {"checks": ("sbc", "nonsense")}])
def test_bad_settings_are_input_errors(bad) -> None:
    with pytest.raises(InputError) as caught:
        CheckSettings(**bad)
    name = next(iter(bad))
    # the setting's own name; the command line maps it to its option (test_check_cli.py)
    assert f"{name}: expected" in str(caught.value) and "--" not in str(caught.value)
