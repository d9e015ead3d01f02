"""Calibration of the per-arm final threshold of several-arm studies by simulation
(octrial.calibration.arms_simulated over octrial.multiarm.final_values).

Checks, each against something outside the recorded values:

- identity with the simulation engine: the successes counted from the recorded values
  at the design's own threshold equal, count for count, those the several-arm engine
  (octrial.multiarm.engine.simulate_design, an independent tally of the same random
  streams) reports, for fixed allocation (with and without Pr(best) dropping and
  selection) and response-adaptive allocation;
- exact engines: for fixed allocation without coupling, the threshold the exact
  several-arm engine (engines/arms_exact.py) calibrates; with dropping and selection, the
  joint exact engine (engines/arms_joint.py) at the simulated threshold; errors within
  4 Monte Carlo SE (binomial SE);
- a fresh simulation: the family-wise error of the calibrated adaptive design simulated
  with another seed is at most alpha + 4 SE.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from octrial.calibration.arms import (
    calibrate_multiarm,
    controlled_error,
    global_null,
    null_line,
    with_threshold,
)
from octrial.calibration.arms_simulated import calibrate_simulated
from octrial.cli import main
from octrial.engines.arms_exact import run_arms
from octrial.engines.arms_joint import joint_exact
from octrial.multiarm.engine import arm_nulls, simulate_design
from octrial.multiarm.final_values import final_values, successes
from octrial.multiarm.load import load_multiarm
from octrial.rules.lattice import build_rule
from tests.test_arms_exact import THREE_DOSES, multiarm

DEMO = "designs/dose-ranging.toml"
SEEDED = THREE_DOSES.replace("[scenarios]", "[simulation]\nseed = 16\n[scenarios]")
SMALL = SEEDED.replace("n = [24, 48, 72]", "n = [12, 24, 36]")
COUPLED = SMALL.replace("futility = 0.1", "futility = 0.1\ndrop_if_best_below = 0.1").replace(
    "[simulation]", "[selection]\nkeep = 1\n[simulation]")
FINAL = "efficacy = [0.995, 0.99, 0.975]"


def demo_text() -> str:
    with open(DEMO, encoding="utf-8") as handle:
        return handle.read()


def with_final_and_nulls(text: str, old: str, threshold: float, names: tuple[str, ...],
                         rows: np.ndarray) -> str:
    """``text`` with the final threshold replaced and the null rows (treatments, then
    the control) as its scenarios."""
    new = old[:old.rindex(",") + 1] + f" {threshold!r}]"
    head = text.replace(old, new)
    head = head[:head.index("[scenarios]")]
    tail = head_tail(text)
    columns = [rows[:, -1], *(rows[:, t] for t in range(rows.shape[1] - 1))]
    scenarios = "\n".join(f"{name} = {list(map(float, values))}"
                          for name, values in zip(names, columns, strict=True))
    return head + "[scenarios]\n" + scenarios + "\n" + tail


def head_tail(text: str) -> str:
    """What follows the [scenarios] table."""
    rest = text[text.index("[scenarios]") + len("[scenarios]"):]
    return rest[rest.index("\n["):] if "\n[" in rest else ""


@pytest.mark.parametrize("text, replicates", [(SEEDED, 20_000), (COUPLED, 20_000),
                                              (None, 4_000)],
                         ids=["fixed", "fixed-dropping-selection", "adaptive-demo"])
def test_recorded_values_count_as_the_engine(text, replicates):
    design = load_multiarm(DEMO) if text is None else multiarm(text)
    seed = 16
    table = simulate_design(design, replicates=replicates, seed=seed)
    threshold = design.pairs[0].looks.efficacy[-1]
    for i, row in enumerate(design.scenarios.values):
        row = tuple(map(float, row))
        values = final_values(design, row, replicates, seed, i)
        won = successes(values, threshold)
        nulls = arm_nulls(design, row)
        assert won[:, nulls].any(axis=1).sum() == round(table.fwer[i] * replicates)
        for t, name in enumerate(design.treatment_names):
            assert won[:, t].sum() == round(table[f"{name}_prob_success"][i] * replicates)
        # a threshold above every probability leaves the interim successes only
        interim = np.isposinf(values)
        assert np.array_equal(successes(values, 1.5), interim)


@pytest.mark.parametrize("target", ["family-wise", "per-arm"])
def test_against_the_exact_calibration(target):
    design = multiarm(SEEDED)
    alpha, replicates = 0.05, 40_000
    exact = calibrate_multiarm(design, alpha, target=target, null_points=5)
    found = calibrate_simulated(design, alpha, target=target, replicates=replicates,
                                seed=3, null_points=5)
    assert exact.threshold is not None and found.threshold is not None
    nulls = null_line(design, None, 5)

    def exact_error(threshold: float) -> float:
        pairs = [with_threshold(p, threshold) for p in design.pairs]
        return float(controlled_error(run_arms(pairs, nulls), target).max())

    se = np.sqrt(alpha * (1 - alpha) / replicates)
    # the simulated error at the chosen threshold is the exact one up to Monte Carlo error
    assert abs(found.error - exact_error(found.threshold)) <= 4 * found.se
    # within the simulation's resolution: the threshold keeps the exact error near alpha,
    # and the next smaller candidate is not clearly passing
    assert exact_error(found.threshold) <= alpha + 4 * se
    assert found.next_threshold is not None
    assert exact_error(found.next_threshold) >= alpha - 4 * se
    assert found.error <= alpha < found.next_error
    # the recorded probabilities are the exact engine's candidates (lattice values)
    assert np.isin(found.threshold, build_rule(design.pairs[0]).final.benefit)


def test_dropping_and_selection_against_the_joint_exact_engine():
    design = multiarm(COUPLED)
    alpha, replicates = 0.1, 40_000
    found = calibrate_simulated(design, alpha, replicates=replicates, seed=9,
                                null_range=(0.2, 0.5), null_points=3)
    assert found.threshold is not None
    rows = null_line(design, (0.2, 0.5), 3)
    text = with_final_and_nulls(COUPLED, FINAL, found.threshold, design.arm_names, rows)
    calibrated = multiarm(text)
    exact = [joint_exact(calibrated, tuple(map(float, r)))["fwer"]
             for r in calibrated.scenarios.values]
    se = np.sqrt(alpha * (1 - alpha) / replicates)
    assert max(exact) <= alpha + 4 * se
    assert abs(found.error - max(exact)) <= 4 * found.se + 1e-12


def test_adaptive_demo_holds_with_another_seed():
    design = load_multiarm(DEMO)
    alpha, replicates = 0.05, 20_000
    found = calibrate_simulated(design, alpha, replicates=replicates, seed=1,
                                null_range=(0.15, 0.45), null_points=3)
    assert found.threshold is not None and found.error <= alpha
    rows = null_line(design, (0.15, 0.45), 3)
    old = "efficacy = [0.9995, 0.9995, 0.999, 0.98]"
    text = with_final_and_nulls(demo_text(), old, found.threshold, design.arm_names, rows)
    again = simulate_design(multiarm(text), replicates=replicates, seed=2)
    se = np.sqrt(alpha * (1 - alpha) / replicates)
    assert again.fwer.max() <= alpha + 4 * se
    # and with the same seed the engine reproduces the recorded error exactly
    same = simulate_design(multiarm(text), replicates=replicates, seed=1)
    assert same.fwer.max() == pytest.approx(found.error, abs=1e-15)


def test_margin_and_monotone_error():
    design = multiarm(SEEDED)
    plain = calibrate_simulated(design, 0.05, replicates=10_000, seed=4, null_points=3)
    strict = calibrate_simulated(design, 0.05, replicates=10_000, seed=4, null_points=3,
                                 margin=2.0)
    assert strict.goal == pytest.approx(0.05 - 2 * np.sqrt(0.05 * 0.95 / 10_000))
    assert strict.threshold >= plain.threshold and strict.error <= strict.goal
    # the error falls as the threshold rises (counts above a rising threshold)
    assert np.all(np.diff(plain.log.error.to_numpy()) < 0)
    assert global_null(design.pairs, [0.3]).shape == (1, 3)


def test_refusals():
    predictive = SEEDED.replace("futility = 0.1", "futility = 0.1\n"
                                "futility_predictive = [0.05, 0.05, \"none\"]")
    with pytest.raises(ValueError, match="futility_predictive"):
        calibrate_simulated(multiarm(predictive), 0.05, replicates=100, seed=1)
    with pytest.raises(ValueError, match="alpha"):
        calibrate_simulated(multiarm(SEEDED), 1.5, replicates=100, seed=1)


def test_command(tmp_path):
    out = tmp_path / "cal"
    result = CliRunner().invoke(main, ["calibrate", DEMO, "--alpha", "0.05",
                                       "--null-range", "0.15:0.45", "--null-points", "2",
                                       "--replicates", "3000", "--seed", "11",
                                       "--out", str(out)])
    assert result.exit_code == 0, result.output
    record = json.loads((out / "calibration.json").read_text())
    assert record["engine"] == "monte-carlo (several arms)"
    assert (record["seed"], record["replicates"]) == (11, 3000)
    assert record["error"] <= 0.05 and record["error_se"] > 0
    assert "Monte Carlo" in result.output
    calibrated = load_multiarm(out / "dose-ranging.calibrated.toml")
    original = load_multiarm(DEMO)
    new, old = calibrated.pairs[0].looks.efficacy, original.pairs[0].looks.efficacy
    assert new[:-1] == old[:-1] and new[-1] == record["threshold"]
    log = (out / "calibration.csv").read_text().splitlines()
    assert log[0] == "threshold,error,error_se" and len(log) > 10


@pytest.mark.parametrize("extra, message", [
    (["--method", "exact"], "no exact engine"),
    (["--target-se", "0.01"], "--target-se"),
])
def test_command_refuses_on_adaptive(tmp_path, extra, message):
    out = tmp_path / "bad"
    result = CliRunner().invoke(main, ["calibrate", DEMO, "--alpha", "0.05",
                                       "--out", str(out), *extra])
    assert result.exit_code == 2 and message in result.output
    assert not out.exists()


def test_same_numbers_with_workers_and_from_checkpoints(tmp_path, monkeypatch):
    # one seed in, the same numbers out, whatever --jobs; a resumed calibration reads
    # the finished null points back and decides as the uninterrupted one
    from octrial.execution import Execution

    design = load_multiarm(DEMO)
    settings = {"replicates": 2_000, "seed": 5, "null_range": (0.2, 0.4), "null_points": 2}
    alone = calibrate_simulated(design, 0.05, **settings)
    kept = Execution(jobs=2, checkpoints=tmp_path / "partial")
    spread = calibrate_simulated(design, 0.05, execution=kept, **settings)
    saved = list((tmp_path / "partial").rglob("*"))

    def not_again(task):
        raise AssertionError("a finished null point was simulated again")

    monkeypatch.setattr("octrial.calibration.arms_simulated.point_values", not_again)
    resumed = calibrate_simulated(design, 0.05, execution=Execution(
        checkpoints=tmp_path / "partial"), **settings)
    assert any(p.is_file() for p in saved)
    for other in (spread, resumed):
        assert other.threshold == alone.threshold and other.error == alone.error
        assert other.log.equals(alone.log)


def test_command_simulation_options_need_the_simulation(tmp_path):
    design = tmp_path / "three.toml"
    design.write_text(THREE_DOSES)
    out = tmp_path / "bad"
    result = CliRunner().invoke(main, ["calibrate", str(design), "--alpha", "0.05",
                                       "--seed", "3", "--out", str(out)])
    assert result.exit_code == 2 and "--seed" in result.output and not out.exists()
    result = CliRunner().invoke(main, ["calibrate", str(design), "--alpha", "0.05",
                                       "--method", "monte-carlo", "--null-points", "3",
                                       "--out", str(out)])
    assert result.exit_code == 2 and "seed" in result.output and not out.exists()
    result = CliRunner().invoke(main, ["calibrate", str(design), "--alpha", "0.05",
                                       "--method", "monte-carlo", "--seed", "3",
                                       "--replicates", "2000", "--null-points", "3",
                                       "--out", str(out)])
    assert result.exit_code == 0, result.output
    assert json.loads((out / "calibration.json").read_text())["seed"] == 3


def test_arms_against_a_benchmark_against_the_exact_calibration():
    # without a control the arms are independent: the exact engine's family-wise error
    # is 1 - prod(1 - alpha_j) (tests/test_arms_calibration.py checks that identity)
    from tests.test_multiarm import design_data, parse

    design = parse(design_data(control=False, n=(30, 60, 90)))
    alpha, replicates = 0.1, 40_000
    exact = calibrate_multiarm(design, alpha)
    found = calibrate_simulated(design, alpha, replicates=replicates, seed=12)
    assert exact.threshold is not None and found.threshold is not None
    pairs = [with_threshold(p, found.threshold) for p in design.pairs]
    truth = null_line(design)
    assert truth.shape == (1, 3)
    exact_error = float(run_arms(pairs, truth).family_wise.max())
    assert abs(found.error - exact_error) <= 4 * found.se
    assert exact_error <= alpha + 4 * np.sqrt(alpha * (1 - alpha) / replicates)
