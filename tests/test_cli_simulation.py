"""Simulation from the command line: workers, backends, interruption and resumption."""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import time

import pandas as pd
import pytest
from click.testing import CliRunner

from octrial.cli import main
from tests.helpers import DESIGNS, ROOT

DEMO = DESIGNS / "single-arm-response.toml"


@pytest.fixture
def runner() -> CliRunner:
    return CliRunner()


def run(runner: CliRunner, *args: str) -> str:
    result = runner.invoke(main, ["run", *args])
    assert result.exit_code == 0, result.output
    return result.output


def test_identical_tables_for_any_jobs_and_backend(runner, tmp_path) -> None:
    pytest.importorskip("dask.distributed")
    folders = {}
    for label, extra in [("jobs1", ["--jobs", "1"]), ("jobs2", ["--jobs", "2"]),
                         ("dask", ["--backend", "dask", "--jobs", "2"])]:
        folders[label] = tmp_path / label
        run(runner, str(DEMO), "--method", "monte-carlo", "--quiet", "--out",
            str(folders[label]), *extra)
    reference = (folders["jobs1"] / "oc.csv").read_bytes()
    for label in ("jobs2", "dask"):
        assert (folders[label] / "oc.csv").read_bytes() == reference, label
        record = json.loads((folders[label] / "run.json").read_text())
        assert record["seed"] == 20261201


@pytest.mark.parametrize("name", ["single-arm-mean-change", "single-arm-event-rate",
                                  "two-arm-continuous-score"])
def test_identical_tables_for_any_jobs_on_count_and_normal_designs(runner, tmp_path,
                                                                    name) -> None:
    # The general normal kernels (unknown and known sd) and the count table kernel:
    # the same bytes with one and two worker processes.
    text = (DESIGNS / f"{name}.toml").read_text()
    path = tmp_path / f"{name}.toml"
    path.write_text(text.replace("replicates = 20000", "replicates = 3000")
                    + ("" if "replicates" in text else "replicates = 3000\n"))
    tables = []
    for jobs in ("1", "2"):
        out = tmp_path / f"jobs{jobs}"
        run(runner, str(path), "--method", "monte-carlo", "--quiet", "--jobs", jobs, "--out",
            str(out))
        tables.append((out / "oc.csv").read_bytes())
        assert json.loads((out / "run.json").read_text())["seed"] is not None
    assert tables[0] == tables[1]
    assert b"monte-carlo" in tables[0]


def resumable_design(tmp_path):
    text = DEMO.read_text().replace("replicates = 20000", "replicates = 3000000")
    path = tmp_path / "long.toml"
    path.write_text(text)
    return path


def test_killed_run_resumes_to_the_same_tables(runner, tmp_path) -> None:
    design = resumable_design(tmp_path)
    out = tmp_path / "killed"
    process = subprocess.Popen(
        [sys.executable, "-m", "octrial", "run", str(design), "--method", "monte-carlo",
         "--out", str(out), "--quiet"], cwd=ROOT)
    partial = out / ".partial"
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and process.poll() is None:
        if len(list(partial.glob("*/scenario-*.npz"))) >= 2:
            break
        time.sleep(0.02)
    if process.poll() is not None:
        pytest.skip("the run finished before it could be killed")
    process.send_signal(signal.SIGKILL)
    process.wait()
    saved = len(list(partial.glob("*/scenario-*.npz")))
    assert 2 <= saved < 11 and not (out / "oc.csv").exists()

    run(runner, str(design), "--method", "monte-carlo", "--quiet", "--out", str(out))
    record = json.loads((out / "run.json").read_text())
    assert record["scenarios_resumed"] == saved
    assert not partial.exists()
    whole = tmp_path / "whole"
    run(runner, str(design), "--method", "monte-carlo", "--quiet", "--out", str(whole))
    assert (out / "oc.csv").read_bytes() == (whole / "oc.csv").read_bytes()


def test_ctrl_c_says_how_to_resume(runner, tmp_path, monkeypatch) -> None:
    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr("octrial.cli.run.compute", interrupted)
    result = runner.invoke(main, ["run", str(DEMO), "--method", "monte-carlo", "--out",
                                  str(tmp_path / "out")])
    assert result.exit_code == 130
    assert "run the same command again to resume" in result.output
    assert not (tmp_path / "out" / "oc.csv").exists()


def test_missing_dask_is_a_clear_error(runner, tmp_path, monkeypatch) -> None:
    monkeypatch.setitem(sys.modules, "dask.distributed", None)
    result = runner.invoke(main, ["run", str(DEMO), "--method", "monte-carlo", "--backend",
                                  "dask", "--out", str(tmp_path / "out")])
    assert result.exit_code == 2
    assert "pip install 'octrial[dask]'" in result.output
    assert not (tmp_path / "out" / "oc.csv").exists()


@pytest.mark.parametrize("args, words", [
    (["--scheduler", "tcp://127.0.0.1:8786"], "--scheduler needs --backend dask"),
    (["--max-replicates", "100"], "--max-replicates applies only with --target-se"),
    (["--target-se", "0"], "--target-se"),
    (["--jobs", "0"], "--jobs"),
])
def test_bad_options_exit_2(runner, tmp_path, args, words) -> None:
    result = runner.invoke(main, ["run", str(DEMO), "--out", str(tmp_path / "o"), *args])
    assert result.exit_code == 2 and words in result.output
    assert not (tmp_path / "o").exists()


def test_target_se_from_the_command_line(runner, tmp_path) -> None:
    out = tmp_path / "target"
    run(runner, str(DEMO), "--method", "monte-carlo", "--target-se", "0.01",
        "--max-replicates", "400000", "--quiet", "--out", str(out))
    oc = pd.read_csv(out / "oc.csv")
    assert oc["target_se_met"].all() and (oc["prob_success_se"] <= 0.01).all()
    record = json.loads((out / "run.json").read_text())
    assert record["target_se"] == 0.01 and record["max_replicates"] == 400000
    assert record["scenarios_short_of_target"] == []
