"""Calibration, assurance and Bayesian operating characteristics of designs with
``[conduct]``: right where they hold, refused plainly (naming ``conduct``) where not.

* Calibrating thresholds by simulation on a design in calendar time: the chosen design's
  type I error, as the calibration reports it, against the exact pipeline engine
  (itself checked against brute-force enumeration in tests/test_pipeline.py) at the same
  true values, within 4 standard errors. Before, any design file asking for Monte Carlo
  stopped with an AssertionError after calibrating (the simulated assessment was held
  to the exact engine's tolerance).
* Sizing (vary n) and stage searches change the looks' counts but not the enrolment of
  ``[conduct]``: exit code 2 naming ``conduct``.
* Assurance and Bayesian operating characteristics by simulation run their studies
  without calendar time: with ``[conduct]`` they are reported unavailable, naming
  ``conduct`` (before: a traceback for a normal design with a design prior on the
  difference, and studies without lag or dropout for one with per-arm design priors).
  Under deterministic timing binary designs keep the exact route (the looks' counts are
  fixed, so the stopping probabilities are those of the design at those counts).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
from click.testing import CliRunner

from octrial.cli import main
from octrial.design.load import load_design
from octrial.engines.exact_lattice import ExactLatticeEngine

BINARY = """
schema = 1
name = "conduct-calibration"
title = "Invented"
[endpoint]
type = "binary"
better = "higher"
[hypothesis]
comparison = "difference"
kind = "superiority"
margin = 0.0
[arms.treatment]
allocation = 1
prior = { distribution = "beta", a = 1, b = 1 }
[arms.control]
allocation = 1
prior = { distribution = "beta", a = 1, b = 1 }
[conduct]
arrivals = "even"
enrolment_rate = 2
max_enrolment = 40
outcome_lag = 6
analyse_pipeline = true
[looks]
n = [20, 40]
efficacy = [0.995, 0.975]
futility = 0.2
[scenarios]
control = [0.3]
effect = [0.0, 0.2]
[simulation]
method = "monte-carlo"
replicates = 4000
seed = 20261205
"""

NORMAL = """
schema = 1
name = "conduct-assurance"
title = "Invented"
[endpoint]
type = "normal"
sd = 12.0
better = "higher"
[hypothesis]
comparison = "difference"
kind = "superiority"
margin = 0.0
prior = { distribution = "normal", mean = 0.0, sd = 6.0 }
design_prior = { distribution = "normal", mean = 3.0, sd = 2.0 }
[arms.treatment]
allocation = 1
[arms.control]
allocation = 1
[conduct]
arrivals = "poisson"
enrolment_rate = 10
max_enrolment = 120
outcome_lag = 3
dropout_proportion = 0.2
dropout_by = 3
[looks]
time = [8, 14]
efficacy = [0.995, 0.975]
[scenarios]
control = [40.0]
effect = [0.0, 3.0]
[simulation]
replicates = 2000
seed = 1
"""


def _write(tmp_path: Path, text: str, name: str = "design.toml") -> Path:
    path = tmp_path / name
    path.write_text(text)
    return path


def test_threshold_calibration_by_simulation_agrees_with_the_exact_engine(tmp_path):
    path = _write(tmp_path, BINARY)
    out = tmp_path / "out"
    result = CliRunner().invoke(main, ["calibrate", str(path), "--alpha", "0.05",
                                       "--null-points", "5", "--quiet", "--out", str(out)])
    assert result.exit_code == 0, result.output
    summary = json.loads((out / "calibration.json").read_text())
    assert summary["method"] == "monte-carlo"
    calibrated = load_design(out / "conduct-calibration.calibrated.toml")
    assert calibrated.conduct is not None
    point = summary["worst_null_point"]
    truths = np.array([[point["treatment"], point["control"]]])
    exact = float(ExactLatticeEngine.run(calibrated, truths, estimate=False)
                  .efficacy.sum())
    se = math.sqrt(exact * (1 - exact) / summary["simulation"]["replicates"])
    assert abs(summary["type1_error"] - exact) <= 4 * se, (summary["type1_error"], exact, se)


def test_sizing_a_design_in_calendar_time_is_refused_naming_conduct(tmp_path):
    path = _write(tmp_path, BINARY.replace('method = "monte-carlo"', 'method = "auto"'))
    result = CliRunner().invoke(main, [
        "calibrate", str(path), "--alpha", "0.05", "--vary", "n", "--n-range", "30:40:10",
        "--power", "0.8", "--alternative", "0.6,0.3", "--out", str(tmp_path / "out")])
    assert result.exit_code == 2
    assert ": conduct: expected a design without [conduct]" in result.output
    assert not (tmp_path / "out").exists()


def test_assurance_by_simulation_is_unavailable_with_conduct(tmp_path):
    path = _write(tmp_path, NORMAL)
    out = tmp_path / "run"
    result = CliRunner().invoke(main, ["run", str(path), "--quiet", "--out", str(out)])
    assert result.exit_code == 0, result.output
    record = json.loads((out / "run.json").read_text())
    assert "conduct" in record["assurance"]["unavailable"]
    assert "conduct" in record["bayesian_operating_characteristics"]["unavailable"]


def test_deterministic_binary_design_keeps_exact_assurance(tmp_path):
    text = BINARY.replace('method = "monte-carlo"', 'method = "auto"').replace(
        '[arms.control]', 'design_prior = { distribution = "beta", a = 9, b = 11 }\n'
        '[arms.control]').replace(
        '[conduct]', 'design_prior = { distribution = "beta", a = 6, b = 14 }\n[conduct]')
    path = _write(tmp_path, text)
    out = tmp_path / "run"
    result = CliRunner().invoke(main, ["run", str(path), "--quiet", "--out", str(out)])
    assert result.exit_code == 0, result.output
    record = json.loads((out / "run.json").read_text())
    assert record["assurance"]["method"] == "exact"
    # the same design without [conduct] has the same looks' counts and decisions
    plain = _write(tmp_path, text[:text.index("[conduct]")] + text[text.index("[looks]"):],
                   "plain.toml")
    result = CliRunner().invoke(main, ["run", str(plain), "--quiet", "--out",
                                       str(tmp_path / "plain")])
    assert result.exit_code == 0, result.output
    other = json.loads((tmp_path / "plain" / "run.json").read_text())
    assert record["assurance"]["probability"] == other["assurance"]["probability"]
