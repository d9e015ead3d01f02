"""The Monte Carlo engine against the exact engine on every binary design in the tests.

The exact engine is itself checked against path enumeration with scipy
(tests/test_exact_engine.py), so agreement here checks the simulation: its draws, its
use of the decision tables, its stopping counts and its standard errors.

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
