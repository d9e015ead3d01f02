"""The command line: outputs, exit codes, and agreement with the Python API."""

from __future__ import annotations

import json
import shutil

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

import octrial
from octrial.cli import main
from tests.helpers import DESIGNS, single_design_demos

DEMOS = single_design_demos()


@pytest.fixture
def runner() -> CliRunner:
    return CliRunner()


@pytest.mark.parametrize("path", DEMOS, ids=lambda p: p.stem)
def test_run_writes_the_contract_and_matches_the_api(runner, tmp_path, path) -> None:
    result = runner.invoke(main, ["run", str(path), "--out", str(tmp_path)])
    assert result.exit_code == 0, result.output
    oc = pd.read_csv(tmp_path / "oc.csv")
    contract = ["scenario", "is_null", "prob_success", "prob_success_se", "prob_stop_efficacy",
                "prob_stop_futility", "expected_n", "sd_n", "method", "replicates"]
    assert set(contract) <= set(oc.columns)
    design = octrial.load_design(path)
    api = octrial.evaluate(design)
    numeric = api.select_dtypes("number").columns
    # The CSV keeps 17 significant digits, so the numbers round-trip exactly (simulated
    # ones too: the design's seed fixes them).
    np.testing.assert_array_equal(oc[numeric].to_numpy(float), api[numeric].to_numpy(float))
    if design.conduct is not None:
        # calendar time: simulated study by study (time-to-event: no boundary table yet)
        assert (oc["method"] == "monte-carlo").all()
        assert (oc["replicates"] == design.simulation.replicates).all()
        assert "expected_duration" in oc
        return
    if design.family.name == "normal" and not design.endpoint.known_sd:
        # no exact engine: 'auto' simulates; the bounds are tabulated per sample sd
        assert (oc["method"] == "monte-carlo").all()
        assert (oc["replicates"] == design.simulation.replicates).all()
        assert "sample_sd" in pd.read_csv(tmp_path / "boundaries.csv")
        assert "Maximum type I error" in result.output
        return
    assert (oc["method"] == "exact").all() and (oc["replicates"] == 0).all()
    record = json.loads((tmp_path / "run.json").read_text())
    assert record["design"]["sha256"] == octrial.load_design(path).source.sha256
    assert record["octrial_version"] == octrial.__version__
    assert "regulat" in record["caution"]
    assert (tmp_path / "boundaries.csv").exists()
    assert "Maximum type I error" in result.output


def test_default_output_folder(runner, tmp_path, monkeypatch) -> None:
    design = tmp_path / "single-arm-response.toml"
    shutil.copy(DESIGNS / "single-arm-response.toml", design)
    monkeypatch.chdir(tmp_path)
    result = runner.invoke(main, ["run", str(design), "--quiet"])
    assert result.exit_code == 0 and result.output == ""
    assert (tmp_path / "reports" / "single-arm-response" / "oc.csv").exists()


def test_bad_design_exits_2_and_writes_nothing(runner, tmp_path) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text((DESIGNS / "single-arm-response.toml").read_text()
                   .replace("benchmark = 0.20", "benchmark = 1.20"))
    out = tmp_path / "out"
    result = runner.invoke(main, ["run", str(bad), "--out", str(out)])
    assert result.exit_code == 2
    assert f"error: {bad}: hypothesis.benchmark: expected a rate in (0, 1); got 1.2" in (
        result.output)
    assert not out.exists()


def test_monte_carlo_from_the_command_line(runner, tmp_path) -> None:
    result = runner.invoke(main, ["run", str(DEMOS[0]), "--method", "monte-carlo", "--out",
                                  str(tmp_path)])
    assert result.exit_code == 0, result.output
    oc = pd.read_csv(tmp_path / "oc.csv")
    design = octrial.load_design(DEMOS[0])
    assert (oc["method"] == "monte-carlo").all()
    assert (oc["replicates"] == design.simulation.replicates).all()
    assert (oc["prob_success_se"] > 0).any() and {"bias", "rmse", "coverage"} <= set(oc)
    record = json.loads((tmp_path / "run.json").read_text())
    assert record["engine"] == "monte-carlo" and record["seed"] == design.simulation.seed
    assert record["kernel"] == "table" and not record["seed_drawn"]
    assert not (tmp_path / ".partial").exists()
    api = octrial.evaluate(design, "monte-carlo")
    numeric = api.select_dtypes("number").columns
    np.testing.assert_array_equal(oc[numeric].to_numpy(float), api[numeric].to_numpy(float))


def test_run_seed_overrides_the_design_file(runner, tmp_path) -> None:
    """Issue 12: ``run --seed`` as ``check --seed`` and ``verify --seed``: --seed 7 gives
    the bytes a design file with simulation.seed = 7 gives, another seed other numbers, and
    run.json records the seed used."""
    text = (DESIGNS / "single-arm-response.toml").read_text().replace(
        "replicates = 20000", "replicates = 2000")
    path = tmp_path / "design.toml"
    path.write_text(text)
    seeded = tmp_path / "seeded.toml"
    seeded.write_text(text.replace("seed = 20261201", "seed = 7"))
    tables = {}
    for label, design, extra in [("option", path, ["--seed", "7"]), ("file", seeded, []),
                                 ("other", path, ["--seed", "8"])]:
        out = tmp_path / label
        result = runner.invoke(main, ["run", str(design), "--method", "monte-carlo", "--quiet",
                                      "--out", str(out), *extra])
        assert result.exit_code == 0, result.output
        tables[label] = (out / "oc.csv").read_bytes()
        record = json.loads((out / "run.json").read_text())
        assert record["seed"] == {"option": 7, "file": 7, "other": 8}[label]
        assert not record["seed_drawn"]
    assert tables["option"] == tables["file"] != tables["other"]
    exact = runner.invoke(main, ["run", str(path), "--seed", "9", "--quiet", "--out",
                                 str(tmp_path / "exact")])
    assert exact.exit_code == 0, exact.output
    assert json.loads((tmp_path / "exact" / "run.json").read_text())["seed"] == 9
    bad = runner.invoke(main, ["run", str(path), "--seed", "-1"])
    assert bad.exit_code == 2 and "--seed" in bad.output


def test_auto_prefers_exact(runner, tmp_path) -> None:
    result = runner.invoke(main, ["run", str(DEMOS[0]), "--method", "auto", "--out",
                                  str(tmp_path)])
    assert result.exit_code == 0
    assert (pd.read_csv(tmp_path / "oc.csv")["method"] == "exact").all()


def test_version_and_help(runner) -> None:
    assert octrial.__version__ in runner.invoke(main, ["--version"]).output
    text = runner.invoke(main, ["--help"]).output
    assert "run" in text and "regulatory agency" in text
    assert "--out" in runner.invoke(main, ["run", "--help"]).output


def test_written_files_have_ordinary_permissions(runner, tmp_path) -> None:
    import os
    import stat

    runner.invoke(main, ["run", str(DEMOS[0]), "--out", str(tmp_path), "--quiet"])
    umask = os.umask(0)
    os.umask(umask)
    mode = stat.S_IMODE((tmp_path / "oc.csv").stat().st_mode)
    assert mode == 0o666 & ~umask


def test_settings_errors_name_the_options_of_the_command() -> None:
    """Library errors key settings by name (null_range) and mention others in backquotes;
    the command line shows its options instead (issue 13: library errors name no option)."""
    from octrial.cli.common import in_option_names
    from octrial.errors import Problem, SettingsError

    error = SettingsError("command line", [
        Problem("null_range", "LOW:HIGH", "'x'"),
        Problem("vary", "no `vary` with `search`", "`search` optimal", "see `band`"),
    ])
    assert "--" not in str(error)
    shown = str(in_option_names(error, {"null_range": "--null-range", "vary": "--vary",
                                        "search": "--search"}))
    assert shown.splitlines() == [
        "command line: --null-range: expected LOW:HIGH; got 'x'",
        "command line: --vary: expected no --vary with --search; got --search optimal "
        "(see band)",
    ]
