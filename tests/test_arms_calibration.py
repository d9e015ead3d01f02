"""Calibration of the per-arm final threshold of several-arm studies.

References: against a benchmark the arms are independent, so the family-wise error is
1 - prod(1 - alpha_j) (identity) with alpha_j from the one-arm exact engine, and the
smallest passing threshold is found by scanning every candidate with that engine (no
bisection, no several-arm engine). With a shared control the family-wise error is at
least every per-arm error (a union contains each event), so its threshold is at least the
per-arm one.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from octrial.calibration.arms import calibrate_arms, global_null, with_threshold
from octrial.engines.arms_exact import run_arms
from octrial.engines.exact_lattice import ExactLatticeEngine
from octrial.rules.lattice import build_rule
from tests.helpers import ONE_ARM, TWO_ARM, build


def one_arm_error(design, threshold: float) -> float:
    changed = with_threshold(design, threshold)
    truth = np.array([[changed.hypothesis.benchmark]])
    return float(ExactLatticeEngine.run(changed, truth, estimate=False).efficacy.sum())


@pytest.mark.parametrize("target, arms", [("family-wise", 3), ("per-arm", 3)])
def test_benchmark_arms_against_one_arm_scan(target, arms):
    design = build(ONE_ARM, looks__n=[10, 20], looks__efficacy=[0.999, 0.95],
                   looks__futility=0.05)
    pairs = [design] * arms
    alpha = 0.05
    found = calibrate_arms(pairs, alpha, global_null(pairs, []), target=target)
    benefit = build_rule(design).final.benefit
    candidates = np.unique(benefit[benefit >= 0.5])

    def error(t: float) -> float:
        a = one_arm_error(design, t)
        return 1 - (1 - a) ** arms if target == "family-wise" else a

    passing = [t for t in candidates if error(t) <= alpha]
    assert found.threshold == pytest.approx(min(passing), abs=0)
    assert found.error == pytest.approx(error(found.threshold), abs=1e-13)
    below = candidates[candidates < found.threshold]
    assert below.size and error(below.max()) > alpha  # the threshold is the smallest


def test_shared_control_family_wise_at_least_per_arm():
    pair = build(TWO_ARM, looks__n=[16, 32], looks__efficacy=[0.999, 0.975],
                 looks__futility=0.1)
    pairs = [pair, pair]
    nulls = global_null(pairs, [0.2, 0.35, 0.5])
    assert nulls.shape == (3, 3)
    np.testing.assert_allclose(nulls[:, 0], nulls[:, 2], rtol=0, atol=1e-14)
    fw = calibrate_arms(pairs, 0.1, nulls, target="family-wise")
    per = calibrate_arms(pairs, 0.1, nulls, target="per-arm")
    assert fw.threshold is not None and per.threshold is not None
    assert fw.threshold >= per.threshold
    assert fw.error <= 0.1 and per.error <= 0.1
    # the reported error is the several-arm engine's at the worst null point
    again = run_arms(fw.pairs, nulls)
    assert fw.error == pytest.approx(again.family_wise.max(), abs=1e-15)
    # one step below the chosen threshold fails (the log holds the failing neighbour)
    failing = fw.log[fw.log.error > 0.1]
    assert not failing.empty and failing.threshold.max() < fw.threshold


def test_bad_settings():
    pairs = [build(ONE_ARM)]
    with pytest.raises(ValueError, match="target"):
        calibrate_arms(pairs, 0.05, global_null(pairs, []), target="any")
    with pytest.raises(ValueError, match="alpha"):
        calibrate_arms(pairs, 1.5, global_null(pairs, []))


def test_calibrate_command_on_a_several_arm_file(tmp_path):
    # the written design reads back with only the final threshold changed, and the exact
    # engine gives it a family-wise error at most alpha on the null line (union bound:
    # then every arm's own type I error is at most alpha too)
    from click.testing import CliRunner

    from octrial.cli import main
    from octrial.multiarm import load_multiarm
    from tests.test_arms_exact import THREE_DOSES

    design = tmp_path / "three.toml"
    design.write_text(THREE_DOSES)
    out = tmp_path / "cal"
    result = CliRunner().invoke(main, ["calibrate", str(design), "--alpha", "0.05",
                                       "--null-points", "9", "--out", str(out)])
    assert result.exit_code == 0, result.output
    calibrated = load_multiarm(out / "three-doses.calibrated.toml")
    original = load_multiarm(design)
    new, old = calibrated.pairs[0].looks.efficacy, original.pairs[0].looks.efficacy
    assert new[:-1] == old[:-1] and new[-1] != old[-1]
    nulls = global_null(calibrated.pairs, np.linspace(0.1, 0.9, 9))
    fwer = run_arms(calibrated.pairs, nulls).family_wise
    assert fwer.max() <= 0.05
    assert fwer.max() == pytest.approx(
        json.loads((out / "calibration.json").read_text())["error"], abs=1e-15)
    # options of the one- and two-arm calibration do not apply
    bad = CliRunner().invoke(main, ["calibrate", str(design), "--alpha", "0.05",
                                    "--power", "0.8", "--out", str(tmp_path / "bad")])
    assert bad.exit_code == 2 and "--power" in bad.output
    assert not (tmp_path / "bad").exists()


def test_null_boundary_on_other_scales():
    # margin 0.1 on the difference scale: treatment = control + 0.1; rate ratio with
    # lower better and superiority margin 0.2: effect -(t/c - 1) - 0.2 = 0 at t = 0.8 c
    # (the effect's definition in endpoints/base.py, solved by hand)
    from tests.test_arms_exact import COUNT_TWO

    diff = build(TWO_ARM, hypothesis__margin=0.1)
    rows = global_null([diff, diff], [0.2, 0.85, 0.95])
    np.testing.assert_allclose(rows, [[0.3, 0.3, 0.2], [0.95, 0.95, 0.85]], atol=1e-13)
    count = build(COUNT_TWO, hypothesis__margin=0.2, endpoint__better="lower")
    rows = global_null([count, count], [1.0, 2.5])
    np.testing.assert_allclose(rows, [[0.8, 0.8, 1.0], [2.0, 2.0, 2.5]], rtol=1e-13)
