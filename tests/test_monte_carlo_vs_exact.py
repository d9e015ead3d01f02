"""The Monte Carlo engine against the exact engines on every binary, count and known-sd
normal design in the tests.

The exact engines are themselves checked against path enumeration with scipy
(tests/test_exact_engine.py, tests/test_count_engine.py) and, for normal endpoints, against
published group-sequential constants and scipy integration (tests/test_normal_engine.py),
so agreement here checks the simulation: its draws, its use of the decision tables or
its per-study posterior and predictive probabilities (normal endpoints: the general
kernel, whose numbers share no code with the recursion's bounds), its stopping counts and
its standard errors.

Criteria (fixed seeds, so each run is reproducible):

* every estimated probability (success, early stops, each look's efficacy and futility,
  coverage) within 4 standard errors of the exact value, the SE being
  sqrt(p (1 - p) / R) at the exact p; where R p (1 - p) < 5 the normal approximation is
  poor and the exact two-sided binomial test (``scipy.stats.binomtest``) at the same
  level (6.3e-5, the normal two-sided tail beyond 4) is used instead. A probability that
  is exactly 0 or 1 must be estimated as exactly 0 or 1.
* bias and RMSE of the posterior mean within 4 Monte Carlo SEs of the exact values;
* over all scenarios, the z-scores of P(success) (independent across scenarios) must look
  standard normal: Kolmogorov-Smirnov test against N(0, 1) and the chi-square test of
  sum z^2 ~ chi2(m), each at p >= 0.001 (``scipy.stats``; common practice).
"""

from __future__ import annotations

import functools

import numpy as np
import pytest
from scipy import stats

from octrial.design.load import load_design
from octrial.engines import MonteCarloSettings
from octrial.evaluation import compute
from tests.helpers import DESIGNS, ONE_ARM, TWO_ARM, build
from tests.test_count_engine import ONE_ARM as COUNT_ONE_ARM
from tests.test_count_engine import TWO_ARM as COUNT_TWO_ARM
from tests.test_normal_engine import MIXTURE
from tests.test_normal_engine import ONE_ARM as NORMAL_ONE_ARM
from tests.test_normal_engine import TWO_ARM as NORMAL_TWO_ARM
from tests.test_simon_designs import SIMON, bayesian_design, count_design

REPLICATES = 20_000
LEVEL = 6.334e-5  # two-sided normal tail beyond 4


def _designs() -> dict:
    mixture = {"distribution": "beta-mixture", "components": [
        {"weight": 0.7, "a": 6, "b": 24}, {"weight": 0.3, "a": 1, "b": 1}]}
    simon = SIMON[2]
    return {
        "demo-one-arm": lambda: load_design(DESIGNS / "single-arm-response.toml"),
        "demo-two-arm": lambda: load_design(DESIGNS / "two-arm-randomised.toml"),
        "one-arm": lambda: build(ONE_ARM, scenarios__treatment={"from": 0.05, "to": 0.6,
                                                                 "step": 0.05}),
        "one-arm-lower-predictive": lambda: build(
            ONE_ARM, endpoint__better="lower", hypothesis__benchmark=0.25,
            arms__treatment__prior={"distribution": "beta", "a": 0.7, "b": 1.3},
            looks__n=[4, 8, 12], looks__efficacy=[0.99, 0.97, 0.9],
            looks__futility=[0.1, 0.2], looks__futility_predictive=[0.15, 0.3],
            scenarios__treatment=[0.1, 0.25, 0.45]),
        "one-arm-mixture-predictive": lambda: build(
            ONE_ARM, arms__treatment__prior=mixture, looks__futility_predictive=0.1,
            scenarios__treatment=[0.15, 0.2, 0.3, 0.45]),
        "two-arm": lambda: build(TWO_ARM),
        "two-arm-non-inferiority-predictive": lambda: build(
            TWO_ARM, hypothesis__kind="non-inferiority", hypothesis__margin=0.1,
            looks__futility_predictive=0.2, scenarios={"control": [0.3, 0.6],
                                                       "effect": [-0.1, 0.1]}),
        "two-arm-2-to-1": lambda: build(TWO_ARM, arms__treatment__allocation=2,
                                        looks__n=[30, 60]),
        "simon-counts": lambda: count_design(simon[0], simon[1], *simon[5:9]),
        "simon-posterior": lambda: bayesian_design(simon[0], simon[1], *simon[5:9]),
        # a posterior on a grid (logit-normal prior): the table kernel reads the grid's tables
        "one-arm-logit-normal": lambda: build(
            ONE_ARM, arms__treatment__prior={"distribution": "logit-normal",
                                             "logit_mean": -1.0, "logit_sd": 1.5},
            looks__futility_predictive=0.1, scenarios__treatment=[0.2, 0.35]),
        # count endpoints (table kernel on the truncated lattice)
        "demo-event-rate": lambda: load_design(DESIGNS / "single-arm-event-rate.toml"),
        "count-one-arm-predictive": lambda: build(
            COUNT_ONE_ARM, scenarios__treatment=[0.6, 1.2, 2.0]),
        "count-one-arm-higher-mixture": lambda: build(
            COUNT_ONE_ARM, endpoint__better="higher", hypothesis__benchmark=0.8,
            arms__treatment__prior={"distribution": "gamma-mixture", "components": [
                {"weight": 0.6, "shape": 4, "rate": 5}, {"weight": 0.4, "shape": 1,
                                                         "rate": 1}]},
            scenarios__treatment=[0.8, 1.3]),
        "count-two-arm": lambda: build(COUNT_TWO_ARM, scenarios={"control": [1.0, 2.0],
                                                                 "ratio": [1.0, 0.5]}),
        "count-negative-binomial": lambda: build(
            COUNT_ONE_ARM, endpoint={"type": "count", "exposure": 0.5, "better": "lower",
                                     "model": "negative-binomial", "dispersion": 0.8},
            looks__futility_predictive=None, scenarios__treatment=[0.6, 1.2]),
        # normal endpoints with a known sd (general kernel against the recursion)
        "demo-continuous-score": lambda: load_design(DESIGNS / "two-arm-continuous-score.toml"),
        "normal-one-arm-flat": lambda: build(
            NORMAL_ONE_ARM, looks={"n": [30, 60, 100], "efficacy": [0.999, 0.99, 0.975],
                                   "futility": [0.1, 0.2]},
            scenarios__treatment=[0.0, 0.15, 0.3]),
        "normal-one-arm-mixture-predictive": lambda: build(
            NORMAL_ONE_ARM, endpoint__better="lower", hypothesis__benchmark=0.2,
            arms__treatment__prior=MIXTURE,
            looks={"n": [20, 40, 60], "efficacy": [0.995, 0.98, 0.95],
                   "futility_predictive": [0.1, 0.2]},
            scenarios__treatment=[0.2, 0.0, -0.2]),
        "normal-two-arm-2-to-1-non-inferiority": lambda: build(
            NORMAL_TWO_ARM, arms__treatment__allocation=2, hypothesis__kind="non-inferiority",
            hypothesis__margin=3.0, hypothesis__prior={"distribution": "normal", "mean": 0.0,
                                                       "sd": 5.0},
            looks={"n": [90, 180], "efficacy": [0.995, 0.975], "futility": 0.2,
                   "futility_predictive": 0.1},
            scenarios={"control": [10.0], "effect": [-3.0, 0.0, 2.0]}),
    }


DESIGN_MAKERS = _designs()


@functools.cache
def paired(name: str, seed: int = 20261203):
    design = DESIGN_MAKERS[name]()
    exact = compute(design, "exact").oc
    mc = compute(design, "monte-carlo", MonteCarloSettings(replicates=REPLICATES,
                                                           seed=seed)).oc
    return exact, mc


def probability_columns(oc) -> list[str]:
    return [c for c in oc.columns if (c.startswith(("prob_", "look")) or c == "coverage")
            and not c.endswith("_se")]


def agrees(estimate: float, p: float, r: int) -> bool:
    if p in (0.0, 1.0):
        return estimate == p
    if r * p * (1 - p) >= 5:
        return abs(estimate - p) <= 4 * np.sqrt(p * (1 - p) / r)
    count = round(estimate * r)
    return stats.binomtest(count, r, p).pvalue >= LEVEL


@pytest.mark.parametrize("name", list(DESIGN_MAKERS))
def test_each_probability_within_four_standard_errors(name: str) -> None:
    exact, mc = paired(name)
    assert (mc["method"] == "monte-carlo").all() and (mc["replicates"] == REPLICATES).all()
    for column in probability_columns(exact):
        for i in range(len(exact)):
            p, estimate = float(exact[column].iloc[i]), float(mc[column].iloc[i])
            assert agrees(estimate, p, REPLICATES), (name, column, i + 1, estimate, p)
    if "bias" in exact:
        for column in ("bias", "rmse"):
            z = (mc[column] - exact[column]) / mc[f"{column}_se"]
            assert (z.abs() <= 4).all(), (name, column, z.tolist())


def test_z_scores_across_scenarios_look_standard_normal() -> None:
    z = []
    for name in DESIGN_MAKERS:
        exact, mc = paired(name)
        p = exact["prob_success"].to_numpy()
        keep = REPLICATES * p * (1 - p) >= 25
        z.extend((mc["prob_success"].to_numpy()[keep] - p[keep])
                 / np.sqrt(p[keep] * (1 - p[keep]) / REPLICATES))
    z = np.array(z)
    assert z.size >= 40
    assert stats.kstest(z, "norm").pvalue >= 1e-3
    chi2 = stats.chi2(z.size)
    square = float(np.sum(z**2))
    assert min(chi2.cdf(square), chi2.sf(square)) * 2 >= 1e-3


def test_look_columns_and_identities_hold_for_simulation() -> None:
    _, mc = paired("demo-one-arm")
    looks = [c for c in mc.columns if c.startswith("look") and not c.endswith("_se")]
    np.testing.assert_allclose(mc[looks].sum(axis=1), 1.0, rtol=0, atol=1e-12)
    np.testing.assert_allclose(
        mc["prob_success"], mc[[c for c in looks if c.endswith("efficacy")]].sum(axis=1),
        atol=1e-12)


@pytest.mark.parametrize("arms", ["one arm", "one arm, lower better", "two arms"])
def test_normal_summaries_under_a_flat_prior_are_the_frequentist_ones(arms: str) -> None:
    # Identity: with a flat prior and one look the posterior mean is the estimate (sample
    # mean or difference), unbiased with RMSE = its standard error, and the equal-tailed
    # 95% credible interval is the 95% confidence interval, so coverage is 0.95 exactly.
    # (The exact recursion is held to the same identity in tests/test_normal_engine.py.)
    if arms.startswith("one arm"):
        better = "lower" if arms.endswith("better") else "higher"
        design = build(NORMAL_ONE_ARM, endpoint__better=better,
                       looks={"n": [40], "efficacy": 0.975}, scenarios__treatment=[0.0, 0.3])
        se = 1.0 / np.sqrt(40)
    else:
        design = build(NORMAL_TWO_ARM, arms__treatment__allocation=2,
                       looks={"n": [90], "efficacy": 0.975},
                       scenarios={"control": [10.0], "effect": [0.0, 4.0]})
        se = 12.0 * np.sqrt(1 / 60 + 1 / 30)
    oc = compute(design, "monte-carlo", MonteCarloSettings(replicates=REPLICATES, seed=9)).oc
    assert (np.abs(oc["bias"] / oc["bias_se"]) <= 4).all()
    assert (np.abs(oc["rmse"] - se) <= 4 * oc["rmse_se"]).all()
    assert (np.abs(oc["coverage"] - 0.95) <= 4 * np.sqrt(0.95 * 0.05 / REPLICATES)).all()
