"""Design files: every accepted form reads as documented; every bad input is reported."""

from __future__ import annotations

import pytest

from octrial.design.load import load_design
from octrial.errors import DesignError
from tests.helpers import ONE_ARM, TWO_ARM, build, single_design_demos

MIXTURE = {"distribution": "beta-mixture",
           "components": [{"weight": 0.7, "a": 4, "b": 16}, {"weight": 0.3, "a": 1, "b": 1}]}


@pytest.mark.parametrize("path", single_design_demos(), ids=lambda p: p.stem)
def test_demo_designs_load(path) -> None:
    design = load_design(path)
    assert design.name == path.stem
    assert len(design.scenarios) > 0
    assert len(design.source.sha256) == 64


def test_threshold_forms() -> None:
    constant = build(ONE_ARM, looks__efficacy=0.97, looks__futility=0.1)
    assert constant.looks.efficacy == (0.97, 0.97, 0.97)
    assert constant.looks.futility == (0.1, 0.1, None)
    listed = build(ONE_ARM, looks__efficacy=["none", 0.99, 0.95], looks__futility=[0.05, "none"])
    assert listed.looks.efficacy == (None, 0.99, 0.95)
    assert listed.looks.futility == (0.05, None, None)
    # 1 - lambda * t^eta at t = 1/3, 2/3, 1 (Zhou, Lee & Yuan 2017 shape)
    shaped = build(ONE_ARM, looks__efficacy={"lambda": 0.06, "eta": 2},
                   looks__futility={"function": "lambda * t^eta", "lambda": 0.3, "eta": 1})
    assert shaped.looks.efficacy == pytest.approx((1 - 0.06 / 9, 1 - 0.06 * 4 / 9, 0.94))
    assert shaped.looks.futility == pytest.approx((0.1, 0.2, None))


def test_scenario_forms() -> None:
    ranged = build(ONE_ARM, scenarios__treatment={"from": 0.1, "to": 0.3, "step": 0.05})
    assert [v for (v,) in ranged.scenarios.values] == [0.1, 0.15, 0.2, 0.25, 0.3]
    grid = build(TWO_ARM, scenarios={"control": [0.2, 0.4], "treatment": [0.3, 0.5, 0.7]})
    assert len(grid.scenarios) == 6 and grid.scenarios.arms == ("treatment", "control")
    shifted = build(TWO_ARM, scenarios={"control": [0.5, 0.9], "effect": [0.0, 0.2]})
    assert shifted.scenarios.values == ((0.5, 0.5), (0.7, 0.5), (0.9, 0.9))
    assert shifted.scenarios.dropped == 1


def test_mixture_prior_and_count_rule_read() -> None:
    mixed = build(ONE_ARM, arms__treatment__prior=MIXTURE,
                  arms__treatment__design_prior={"distribution": "beta", "a": 3, "b": 7})
    assert mixed.arms[0].prior.weights == (0.7, 0.3)
    assert mixed.arms[0].design_prior.a == (3.0,)
    assert build(ONE_ARM).arms[0].design_prior is None
    counts = build(ONE_ARM, arms__treatment__prior=None,
                   looks={"n": [10, 20], "futility_count": [1, "none"],
                          "efficacy_count": ["none", 5]})
    assert counts.looks.uses_counts and counts.looks.efficacy_count == (None, 5)


# (changes to a valid design, the key the message must name, words it must contain)
BAD = [
    ({"looks__efficacyy": 0.9}, "looks.efficacyy", "did you mean 'efficacy'"),
    ({"hypothesis__benchmark": None}, "hypothesis.benchmark", "the key is missing"),
    ({"scenarios__treatment": [0.2, 1.2]}, "scenarios.treatment[2]", "a rate in (0, 1)"),
    ({"scenarios__treatment": [0.0]}, "scenarios.treatment[1]", "a rate in (0, 1)"),
    ({"hypothesis__benchmark": 1.5}, "hypothesis.benchmark", "a rate in (0, 1)"),
    ({"looks__n": [10, 10, 30]}, "looks.n", "strictly increasing"),
    ({"looks__efficacy": [0.99, 1.2, 0.95]}, "looks.efficacy[2]", "[0, 1]"),
    ({"looks__futility": -0.1}, "looks.futility", "[0, 1]"),
    ({"looks__efficacy": {"lambda": 2, "eta": 1}}, "looks.efficacy", "at look 2"),
    ({"looks__futility": [0.05, 0.995]}, "looks.futility", "below the efficacy threshold"),
    ({"looks__efficacy": [0.99, 0.99, "none"]}, "looks.efficacy", "at the last look"),
    ({"looks__efficacy": None}, "looks.efficacy", "final success threshold"),
    ({"looks__efficacy": [0.99, 0.95]}, "looks.efficacy", "3 entries"),
    ({"arms__treatment__prior": {"distribution": "beta", "a": 0, "b": 1}},
     "arms.treatment.prior.a", "> 0"),
    ({"arms__treatment__prior": {"distribution": "beta", "a": 1}},
     "arms.treatment.prior.b", "missing"),
    ({"arms__treatment__prior": {**MIXTURE, "components": [{"weight": 0.7, "a": 1, "b": 1},
                                                           {"weight": 0.4, "a": 2, "b": 2}]}},
     "arms.treatment.prior.components", "weights summing to 1"),
    ({"arms__treatment__prior": {"distribution": "betta", "a": 1, "b": 1}},
     "arms.treatment.prior.distribution", "did you mean 'beta'"),
    ({"arms__treatment__prior": None}, "arms.treatment.prior", "analysis prior"),
    ({"scenarios__treatment": []}, "scenarios.treatment", "non-empty"),
    ({"scenarios__treatment": {"from": 0.5, "to": 0.1, "step": 0.1}}, "scenarios.treatment.to",
     ">= from"),
    ({"schema": 2}, "schema", "1 (the only schema"),
    ({"endpoint__type": "binry"}, "endpoint.type", "did you mean 'binary'"),
    ({"endpoint__better": None}, "endpoint.better", "missing"),
    ({"simulation": {"method": "montecarlo"}}, "simulation.method", "did you mean"),
    ({"simulation": {"replicates": 0}}, "simulation.replicates", "from 1 to 10000000"),
    ({"name": "has space"}, "name", "letters, digits"),
]


@pytest.mark.parametrize("changes, key, words", BAD, ids=[b[1] for b in BAD])
def test_bad_one_arm_input(changes, key, words) -> None:
    with pytest.raises(DesignError) as info:
        build(ONE_ARM, **changes)
    message = str(info.value)
    assert f"test.toml: {key}: expected" in message
    assert words in message


BAD_TWO_ARM = [
    ({"arms__treatment__allocation": 2}, "looks.n[1]", "whole per-arm sample sizes"),
    ({"arms__control__allocation": -1}, "arms.control.allocation", "positive"),
    ({"hypothesis__kind": "non-inferiority"}, "hypothesis.margin", "margin > 0"),
    ({"hypothesis__margin": 1.5}, "hypothesis.margin", "[0, 1)"),
    ({"scenarios": {"control": [0.3], "effect": [0.1], "treatment": [0.3]}},
     "scenarios.treatment", "exactly one"),
    ({"scenarios": {"control": [0.9], "effect": [0.2]}}, "scenarios.effect",
     "no valid combination"),
    ({"looks": {"n": [20, 40], "efficacy_count": [5, 10]}}, "looks.efficacy_count",
     "one-arm design"),
]


@pytest.mark.parametrize("changes, key, words", BAD_TWO_ARM, ids=[b[1] for b in BAD_TWO_ARM])
def test_bad_two_arm_input(changes, key, words) -> None:
    with pytest.raises(DesignError) as info:
        build(TWO_ARM, **changes)
    assert f"test.toml: {key}: expected" in str(info.value)
    assert words in str(info.value)


def test_every_problem_reported_at_once() -> None:
    with pytest.raises(DesignError) as info:
        build(ONE_ARM, looks__efficacyy=1, hypothesis__benchmark=2.0, scenarios__treatment=[])
    assert len(info.value.problems) == 3


def test_malformed_toml_names_file_and_position(tmp_path) -> None:
    path = tmp_path / "broken.toml"
    path.write_text("schema = 1\n[looks\nn = [1, 2]\n")
    with pytest.raises(DesignError) as info:
        load_design(path)
    assert str(path) in str(info.value) and "line 2" in str(info.value)


def test_missing_file() -> None:
    with pytest.raises(DesignError, match="no such file"):
        load_design("does/not/exist.toml")
