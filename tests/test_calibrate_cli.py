"""``octrial calibrate`` and ``octrial boundaries``: files, exit codes, and the round trip of
the calibrated design file through ``octrial run``."""

from __future__ import annotations

import json
import tomllib

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy import stats

import octrial
from octrial.cli import main
from octrial.design.write import dumps
from tests.helpers import DESIGNS, ONE_ARM, changed

DEMO = DESIGNS / "single-arm-response.toml"
TWO = DESIGNS / "two-arm-randomised.toml"


@pytest.fixture
def runner() -> CliRunner:
    return CliRunner()


CASES = {
    "threshold": ["--alpha", "0.05"],
    "sizing": ["--alpha", "0.05", "--power", "0.8", "--alternative", "0.4", "--vary", "n,final",
               "--n-range", "25:60"],
    "search-counts": ["--alpha", "0.05", "--power", "0.8", "--alternative", "0.4",
                      "--search", "optimal", "--rule", "counts", "--stages", "2",
                      "--n-range", "25:45"],
}


@pytest.mark.parametrize("case", CASES)
def test_calibrated_file_runs_as_is(runner, tmp_path, case) -> None:
    out = tmp_path / "cal"
    result = runner.invoke(main, ["calibrate", str(DEMO), *CASES[case], "--out", str(out),
                                  "--null-points", "20"])
    assert result.exit_code == 0, result.output
    written = out / "single-arm-response.calibrated.toml"
    assert (out / "calibration.csv").exists() and (out / "calibration.json").exists()
    assert (out / "sizing.csv").exists() == (case == "sizing")
    text = written.read_text()
    assert text.startswith("# Calibrated by octrial")
    # comments of the original survive (the file was edited, not rewritten)
    assert "# weak prior centred on the benchmark" in text
    record = json.loads((out / "calibration.json").read_text())
    assert record["caution"] == octrial.caution.CAUTION

    run = runner.invoke(main, ["run", str(written), "--out", str(tmp_path / "run")])
    assert run.exit_code == 0, run.output
    oc = pd.read_csv(tmp_path / "run" / "oc.csv")
    at = dict(zip(oc["true_treatment"], oc["prob_success"], strict=True))
    # the run of the written file gives the calibration's figures
    assert at[0.2] == pytest.approx(record["type1_error"], abs=1e-14)
    assert oc[oc["is_null"]]["prob_success"].max() <= 0.05
    if case != "threshold":
        assert at[0.4] == pytest.approx(record["power"], abs=1e-14) and at[0.4] >= 0.8
    loaded = octrial.load_design(written)
    assert loaded.name == "single-arm-response.calibrated"
    assert record["calibrated_design"]["name"] == loaded.name
    assert tuple(loaded.looks.n) == tuple(record["looks_n"])


def test_calibrate_summary_and_candidates(runner, tmp_path) -> None:
    result = runner.invoke(main, ["calibrate", str(DEMO), "--alpha", "0.05", "--power", "0.8",
                                  "--alternative", "0.4", "--out", str(tmp_path)])
    assert result.exit_code == 0, result.output
    assert "chosen: final success threshold = " in result.output
    assert "largest at treatment = 0.2" in result.output
    assert "regulatory agency" in result.output  # caution on stderr (mixed in CliRunner)
    candidates = pd.read_csv(tmp_path / "calibration.csv")
    assert candidates["chosen"].sum() == 1
    assert {"type1_error", "power", "expected_n_null", "passes", "efficacy"} <= set(candidates)


def test_boundaries_command(runner, tmp_path) -> None:
    result = runner.invoke(main, ["boundaries", str(DEMO), "--out", str(tmp_path)])
    assert result.exit_code == 0, result.output
    table = pd.read_csv(tmp_path / "boundaries.csv")
    text = (tmp_path / "boundaries.txt").read_text()
    assert "success if responses >= 14" in result.output and text.startswith("Decision rule")
    assert "regulatory agency" in text
    # the posterior probability at and one short of each bound, against scipy (Beta(0.4, 1.6))
    design = octrial.load_design(DEMO)
    for _, row in table.dropna(subset=["efficacy_bound"]).iterrows():
        n, e = int(row["n"]), int(row["efficacy_bound"])
        at = stats.beta.sf(0.2, 0.4 + e, 1.6 + n - e)
        short = stats.beta.sf(0.2, 0.4 + e - 1, 1.6 + n - e + 1)
        assert row["posterior_at_efficacy_bound"] == pytest.approx(at, rel=1e-12)
        assert row["posterior_before_efficacy_bound"] == pytest.approx(short, rel=1e-12)
        threshold = design.looks.efficacy[int(row["look"]) - 1]
        assert short < threshold <= at
    assert table["efficacy_threshold"].tolist()[1:] == [0.995, 0.95]


def test_boundaries_two_arms(runner, tmp_path) -> None:
    result = runner.invoke(main, ["boundaries", str(TWO), "--out", str(tmp_path)])
    assert result.exit_code == 0, result.output
    table = pd.read_csv(tmp_path / "boundaries.csv")
    assert {"control_responses", "posterior_before_efficacy_bound"} <= set(table)
    assert "control responses" in result.output


def test_bad_input_exits_2_and_writes_nothing(runner, tmp_path) -> None:
    out = tmp_path / "out"
    for args, words in [
        (["--alpha", "1.2"], "command line: --alpha: expected a type I error strictly between"),
        (["--alpha", "0.05", "--power", "0.8", "--alternative", "0.1"],
         "command line: --alternative: expected a point outside the null"),
        (["--alpha", "0.05", "--power", "0.99", "--alternative", "0.3", "--vary", "n",
          "--n-range", "20:30"], "command line: --n-range: expected a range containing"),
        # the library names settings (`vary`, `search`); the command line its options
        (["--alpha", "0.05", "--power", "0.8", "--alternative", "0.4", "--search", "optimal",
          "--vary", "final", "--n-range", "20:30"],
         "command line: --vary: expected no --vary with --search"),
    ]:
        result = runner.invoke(main, ["calibrate", str(DEMO), *args, "--out", str(out)])
        assert result.exit_code == 2, result.output
        assert words in result.output
        assert not out.exists()


def test_count_design_written_from_a_posterior_design_drops_the_probability_keys(
        runner, tmp_path) -> None:
    result = runner.invoke(main, ["calibrate", str(DEMO), "--alpha", "0.05", "--power", "0.8",
                                  "--alternative", "0.4", "--search", "minimax", "--rule",
                                  "counts", "--stages", "2", "--n-range", "20:40", "--out",
                                  str(tmp_path)])
    assert result.exit_code == 0, result.output
    data = tomllib.loads((tmp_path / "single-arm-response.calibrated.toml").read_text())
    assert set(data["looks"]) == {"n", "efficacy_count", "futility_count"}


def test_design_without_name_key_gets_the_calibrated_name(runner, tmp_path) -> None:
    data = changed(ONE_ARM, name=None)
    path = tmp_path / "plain.toml"
    path.write_text(dumps(data))
    result = runner.invoke(main, ["calibrate", str(path), "--alpha", "0.1", "--out",
                                  str(tmp_path / "o")])
    assert result.exit_code == 0, result.output
    written = tmp_path / "o" / "plain.calibrated.toml"
    assert octrial.load_design(written).name == "plain.calibrated"
    assert np.isclose(octrial.load_design(written).looks.efficacy[-1],
                      json.loads((tmp_path / "o" / "calibration.json").read_text())[
                          "chosen"]["final"]["value"])
