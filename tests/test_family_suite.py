"""The common family suite (tests/family_suite.py) over every registered endpoint family
and the test-only toy family (tests/toy_exponential.py).

Every family in :data:`octrial.endpoints.FAMILIES` must have a small design here: a
registered family without one fails :func:`test_every_family_has_a_suite_design`.
"""

from __future__ import annotations

import tomllib
from collections.abc import Iterator
from typing import Any

import numpy as np
import pytest

from octrial.design.load import parse_design
from octrial.design.model import Source
from octrial.endpoints import FAMILIES
from tests import family_suite
from tests.helpers import build
from tests.toy_exponential import ToyExponentialFamily

TOY = ToyExponentialFamily.name

SUITE_DESIGNS: dict[str, dict[str, Any]] = {
    "binary": {
        "schema": 1, "name": "suite-binary",
        "endpoint": {"type": "binary", "better": "lower"},
        "hypothesis": {"benchmark": 0.25},
        "arms": {"treatment": {"prior": {"distribution": "beta-mixture", "components": [
            {"weight": 0.7, "a": 2, "b": 6}, {"weight": 0.3, "a": 1, "b": 1}]}}},
        "looks": {"n": [6, 12, 18], "efficacy": [0.99, 0.97, 0.9], "futility": [0.1, 0.2],
                  "futility_predictive": [0.15, 0.3]},
        "scenarios": {"treatment": [0.1, 0.25, 0.45]},
    },
    "count": {
        "schema": 1, "name": "suite-count",
        "endpoint": {"type": "count", "exposure": 0.5, "better": "lower"},
        "hypothesis": {"benchmark": 1.2},
        "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 2.0,
                                         "rate": 2.5}}},
        "looks": {"n": [4, 8, 12], "efficacy": [0.99, 0.97, 0.9], "futility": [0.1, 0.2],
                  "futility_predictive": [0.15, 0.3]},
        "scenarios": {"treatment": [0.6, 1.2]},
    },
    "normal": {
        "schema": 1, "name": "suite-normal",
        "endpoint": {"type": "normal", "sd": 1.0, "better": "higher"},
        "hypothesis": {"benchmark": 0.0},
        "arms": {"treatment": {"prior": {"distribution": "normal-mixture", "components": [
            {"weight": 0.6, "mean": 0.0, "sd": 0.5}, {"weight": 0.4, "mean": 0.3,
                                                      "sd": 2.0}]}}},
        "looks": {"n": [10, 25], "efficacy": [0.995, 0.975], "futility": [0.1]},
        "scenarios": {"treatment": [0.0, 0.4]},
    },
    "time-to-event": {
        "schema": 1, "name": "suite-time-to-event",
        "endpoint": {"type": "time-to-event", "benchmark_scale": "median"},
        "hypothesis": {"benchmark": 6.0},
        "arms": {"treatment": {"prior": {"distribution": "gamma-mixture", "components": [
            {"weight": 0.7, "shape": 2.0, "rate": 20.0},
            {"weight": 0.3, "shape": 1.0, "rate": 5.0}]}}},
        "looks": {"n": [10, 20, 30], "efficacy": [0.99, 0.98, 0.95], "futility": 0.1,
                  "futility_predictive": [0.15, 0.3]},
        "scenarios": {"treatment": [0.1155, 0.06]},
    },
    TOY: {
        "schema": 1, "name": "suite-toy",
        "endpoint": {"type": TOY, "better": "lower"},
        "hypothesis": {"benchmark": 0.5},
        "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 2, "rate": 4}}},
        "looks": {"n": [10, 20, 30], "efficacy": [0.99, 0.98, 0.95], "futility": 0.1},
        "scenarios": {"treatment": [0.5, 0.3]},
    },
}
"""One small one-arm design per family (with predictive futility where the family offers
a predictive probability)."""

TWO_ARM_DESIGNS: dict[str, dict[str, Any]] = {
    "binary": {
        "schema": 1, "name": "suite-binary-two-arm",
        "endpoint": {"type": "binary", "better": "higher"},
        "hypothesis": {"comparison": "difference", "margin": 0.05,
                       "kind": "non-inferiority"},
        "arms": {"treatment": {"prior": {"distribution": "beta", "a": 1, "b": 1}},
                 "control": {"prior": {"distribution": "beta-mixture", "components": [
                     {"weight": 0.5, "a": 3, "b": 7}, {"weight": 0.5, "a": 1, "b": 1}]}}},
        "looks": {"n": [30, 60], "efficacy": [0.99, 0.975], "futility": 0.1},
        "scenarios": {"control": [0.3], "effect": [0.0, 0.2]},
    },
    "count": {
        "schema": 1, "name": "suite-count-two-arm",
        "endpoint": {"type": "count", "exposure": 1.0, "better": "lower"},
        "hypothesis": {"comparison": "ratio", "margin": 0.1, "kind": "superiority"},
        "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1, "rate": 1}},
                 "control": {"prior": {"distribution": "gamma", "shape": 2, "rate": 1.5}}},
        "looks": {"n": [20, 40], "efficacy": [0.99, 0.975], "futility": 0.1},
        "scenarios": {"control": [1.0], "ratio": [1.0, 0.6]},
    },
    "time-to-event": {
        "schema": 1, "name": "suite-time-to-event-two-arm",
        "endpoint": {"type": "time-to-event"},
        "hypothesis": {"comparison": "ratio", "margin": 0.0},
        "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1, "rate": 10}},
                 "control": {"prior": {"distribution": "gamma-mixture", "components": [
                     {"weight": 0.5, "shape": 3, "rate": 30},
                     {"weight": 0.5, "shape": 1, "rate": 10}]}}},
        "looks": {"n": [20, 40], "efficacy": [0.995, 0.975], "futility": 0.1},
        "scenarios": {"control": [0.1], "ratio": [1.0, 0.5]},
    },
    TOY: {
        "schema": 1, "name": "suite-toy-two-arm",
        "endpoint": {"type": TOY, "better": "lower"},
        "hypothesis": {"comparison": "ratio", "margin": 0.0},
        "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 2, "rate": 4}},
                 "control": {"prior": {"distribution": "gamma", "shape": 1, "rate": 1}}},
        "looks": {"n": [20, 40], "efficacy": [0.995, 0.975], "futility": 0.1},
        "scenarios": {"control": [0.5], "ratio": [1.0, 0.5]},
    },
}
"""Two-arm designs for the two-arm checks (families with a prior per arm)."""

BAD_INPUTS: dict[str, list[tuple[str, Any, str]]] = {
    "binary": [("scenarios__treatment", [1.5], "scenarios.treatment"),
               ("arms__treatment__prior__a", -1, "arms.treatment.prior")],
    "count": [("endpoint__exposure", 0, "endpoint.exposure"),
              ("endpoint__model", "zero-inflated", "endpoint.model"),
              ("scenarios__treatment", [-0.5], "scenarios.treatment")],
    "normal": [("endpoint__sd", -1, "endpoint.sd"),
               ("arms__treatment__prior__components", [], "arms.treatment.prior")],
    "time-to-event": [("endpoint__periods", [0, 6, 3], "endpoint.periods"),
                      ("endpoint__relative_hazard", [1, -0.5], "endpoint.relative_hazard"),
                      ("scenarios__treatment", [-0.1], "scenarios.treatment"),
                      ("arms__treatment__prior__rate", 0, "arms.treatment.prior.rate")],
    TOY: [("arms__treatment__prior__shape", 0, "arms.treatment.prior.shape"),
          ("scenarios__treatment", [0.0], "scenarios.treatment")],
}
"""Family-specific bad values: (dotted key, value, key path the message must name)."""


@pytest.fixture
def toy_family() -> Iterator[ToyExponentialFamily]:
    """The toy family registered for one test (the one registry line), then removed."""
    family = ToyExponentialFamily()
    FAMILIES[family.name] = family
    try:
        yield family
    finally:
        del FAMILIES[family.name]


FAMILY_NAMES = [*FAMILIES, TOY]


@pytest.fixture(params=FAMILY_NAMES)
def family_name(request: pytest.FixtureRequest) -> Iterator[str]:
    if request.param == TOY:
        request.getfixturevalue("toy_family")
    yield request.param


def test_every_family_has_a_suite_design() -> None:
    assert set(FAMILIES) <= set(SUITE_DESIGNS), set(FAMILIES) - set(SUITE_DESIGNS)


@pytest.mark.parametrize("check", family_suite.CHECKS, ids=lambda c: c.__name__)
def test_family_passes_check(family_name: str, check: Any) -> None:
    design = build(SUITE_DESIGNS[family_name])
    check(FAMILIES[family_name], design)


@pytest.mark.parametrize("check", family_suite.TWO_ARM_CHECKS, ids=lambda c: c.__name__)
def test_two_arm_family_passes_check(family_name: str, check: Any) -> None:
    if family_name not in TWO_ARM_DESIGNS:
        pytest.skip(f"no two-arm suite design for {family_name} (prior on the effect)")
    check(FAMILIES[family_name], build(TWO_ARM_DESIGNS[family_name]))


def test_family_refuses_bad_input(family_name: str) -> None:
    family_suite.check_bad_inputs(FAMILIES[family_name], SUITE_DESIGNS[family_name],
                                  BAD_INPUTS[family_name])


TOY_TOML = f"""
schema = 1
name = "toy-two-arm"

[endpoint]
type = "{TOY}"
better = "lower"

[hypothesis]
comparison = "ratio"
margin = 0.0

[arms.treatment.prior]
distribution = "gamma"
shape = 2
rate = 4

[arms.control.prior]
distribution = "gamma"
shape = 2
rate = 4

[looks]
n = [40, 80]
efficacy = [0.995, 0.975]
futility = 0.1

[scenarios]
control = [0.5]
ratio = [1.0, 0.5]

[simulation]
replicates = 2000
seed = 3
"""


def _toy_design(text: str = TOY_TOML) -> Any:
    return parse_design(tomllib.loads(text), Source("toy.toml", "", text))


def test_toy_family_is_evaluated_by_monte_carlo(toy_family: ToyExponentialFamily) -> None:
    # The whole path from a TOML design to operating characteristics with the toy
    # registered and nothing else changed. Checks against outside facts: under the null
    # (ratio 1, a symmetric design) the success rate of a 97.5% final threshold with an
    # early 99.5% look lies well below 5%; at ratio 0.5 with 40 per arm (80 in all) the
    # power is near that of the z test on the log rate ratio, whose sd with 40 events per
    # arm is about sqrt(2 / 40): z = log 2 / 0.224 = 3.1, power Phi(3.1 - 1.96) = 0.87
    # (normal approximation, common practice); coverage of 95% intervals near 0.95.
    import octrial

    oc = octrial.evaluate(_toy_design())
    assert list(oc["method"]) == ["monte-carlo"] * 2
    null, alternative = oc.iloc[0], oc.iloc[1]
    assert null["is_null"] and not alternative["is_null"]
    assert null["prob_success"] < 0.05
    assert 0.75 < alternative["prob_success"] < 0.97
    assert np.all(np.abs(oc["coverage"] - 0.95) < 4 * oc["coverage_se"] + 0.01)
    again = octrial.evaluate(_toy_design())
    np.testing.assert_array_equal(oc.to_numpy(), again.to_numpy())


def test_toy_family_refuses_predictive_futility(toy_family: ToyExponentialFamily) -> None:
    # The toy offers no predictive probability: a plain reason, no traceback.
    from octrial.errors import InputError

    text = TOY_TOML.replace("futility = 0.1", "futility = 0.1\nfutility_predictive = [0.1]")
    design = _toy_design(text)
    with pytest.raises(InputError, match="no predictive probability"):
        __import__("octrial").evaluate(design)


def test_toy_family_runs_from_the_command_line(toy_family: ToyExponentialFamily,
                                               tmp_path: Any) -> None:
    # `octrial run` on a toy design file writes oc.csv equal to the library's numbers.
    import pandas as pd
    from click.testing import CliRunner

    import octrial
    from octrial.cli import main

    path = tmp_path / "toy.toml"
    path.write_text(TOY_TOML)
    result = CliRunner().invoke(main, ["run", str(path), "--out", str(tmp_path / "out")])
    assert result.exit_code == 0, result.output
    written = pd.read_csv(tmp_path / "out" / "oc.csv")
    expected = octrial.evaluate(_toy_design())
    np.testing.assert_allclose(written["prob_success"], expected["prob_success"], rtol=1e-12)


def test_default_sampler_draws_from_the_increment_distribution() -> None:
    # A family that writes only increment_distribution gets Family.draw_statistics
    # (scipy's rvs with the batch generator); the suite's sampler check holds for it.
    from octrial.endpoints.base import Family

    class PlainToy(ToyExponentialFamily):
        draw_statistics = Family.draw_statistics

    family = PlainToy()
    design = build(SUITE_DESIGNS["binary"])  # any design: the toy reads only its arms
    draws = family.draw_statistics(design, 0, 0.5, 10, np.random.default_rng(1), 3000)
    from scipy import stats

    assert stats.kstest(draws, stats.gamma(10, scale=2.0).cdf).pvalue > 1e-3


def test_toy_family_without_workflow_checks_is_refused_plainly(
        toy_family: ToyExponentialFamily, tmp_path: Any) -> None:
    # `octrial check` on a family that offers no check model: exit 2 naming the design
    # file and endpoint.type, not a traceback.
    from click.testing import CliRunner

    from octrial.cli import main

    path = tmp_path / "toy.toml"
    path.write_text(TOY_TOML)
    result = CliRunner().invoke(main, ["check", str(path), "--out", str(tmp_path / "c")])
    assert result.exit_code == 2, result.output
    assert "endpoint.type" in result.output and "workflow checks" in result.output
    assert ("workflow checks (binary, count, normal, time-to-event); "
            "got 'toy-exponential'") in result.output
    assert not (tmp_path / "c").exists()
