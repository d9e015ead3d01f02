"""``octrial check``: files, exit codes, reproducibility, and the report that shows them.

Simulation sizes are small here (300 studies, 10 bins); the maths is tested in
tests/test_checks.py.
"""

from __future__ import annotations

import base64
import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from matplotlib import image

import octrial.checks.core as core
from octrial.checks.files import sbc_file
from octrial.checks.model import model_for
from octrial.checks.sbc import run_sbc
from octrial.cli import main
from tests.helpers import DESIGNS, build
from tests.report_pages import parse, table_rows, text

BORROWED = DESIGNS / "borrowed-control-response.toml"
SMALL = ("--simulations", "300", "--bins", "10", "--draws", "49")


def invoke(*args: str):
    return CliRunner().invoke(main, [str(a) for a in args])


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    """The borrowing demo checked, run and reported in one folder."""
    out = tmp_path_factory.mktemp("checked")
    result = invoke("check", BORROWED, "--out", out, *SMALL)
    assert result.exit_code == 0, result.output
    assert invoke("run", BORROWED, "--out", out, "--quiet").exit_code == 0
    result = invoke("report", out, "--quiet")
    assert result.exit_code == 0, result.output
    return out


def test_check_writes_every_output(folder) -> None:
    record = json.loads((folder / "checks.json").read_text())
    assert record["kind"] == "octrial-checks/1"
    assert record["seed"] == 20261205  # the design's simulation.seed
    sbc = pd.read_csv(folder / "sbc.csv")
    quantities = record["sbc"]["quantities"]
    assert len(sbc) == 300 * len(quantities)
    for entry in quantities:
        assert (folder / sbc_file(entry)).is_file()
        values = sbc[(sbc["quantity"] == entry["quantity"]) & (sbc["look"] == entry["look"])
                     & (sbc["statistic"] == entry["kind"])]["value"]
        edges = np.linspace(0, 1, 11) if entry["kind"] == "cdf" else None
        if edges is not None:
            assert np.histogram(values, edges)[0].tolist() == entry["counts"]
    points = pd.read_csv(folder / "sensitivity.csv")
    assert len(points) == 300 * 2  # two looks
    for name in ("prior-predictive.png", "sensitivity.png", "tail-accuracy.png"):
        assert (folder / name).is_file()
    assert {v["check"] for v in record["verdicts"]} >= {"prior-data conflict"}
    assert record["command"] and record["started"] <= record["finished"]


def test_check_figures_are_grey(folder) -> None:
    for png in folder.glob("*.png"):
        pixels = image.imread(png)[..., :3]
        assert np.allclose(pixels[..., 0], pixels[..., 1], atol=1e-6), png.name
        assert np.allclose(pixels[..., 1], pixels[..., 2], atol=1e-6), png.name


def test_report_shows_the_checks(folder) -> None:
    page = parse(folder / "report.html")
    section = page.find(".//section[@id='checks']")
    assert section.find(".//figure[@id='figure-checks-sbc']") is not None
    assert section.find(".//figure[@id='figure-checks-sensitivity']") is not None
    assert section.find(".//figure[@id='figure-checks-tail-accuracy']") is not None
    # the prior predictive drawing is embedded byte for byte from prior-predictive.png
    drawing = section.find(".//figure[@id='figure-checks-prior-predictive']//img")
    embedded = base64.b64decode(drawing.get("src").split(",", 1)[1])
    assert embedded == (folder / "prior-predictive.png").read_bytes()
    record = json.loads((folder / "checks.json").read_text())
    verdicts = table_rows(page, "checks-verdicts")
    assert [r.cells["verdict"].text for r in verdicts] == [v["verdict"] for v in
                                                            record["verdicts"]]
    sbc = table_rows(page, "checks-sbc")
    assert [r.cells["p_adjusted"].value for r in sbc] == [
        q["p_adjusted"] for q in record["sbc"]["quantities"]]
    decision = table_rows(page, "checks-conflict-decision")
    assert [r.cells["with"].value for r in decision] == [
        d["prob_success_borrowing"] for d in record["conflict"]["decision"]]
    assert "Simulation-based calibration" in text(section)


def test_report_of_the_design_file_picks_up_its_own_checks(tmp_path) -> None:
    design = tmp_path / "design.toml"
    shutil.copy(DESIGNS / "single-arm-response.toml", design)
    result = invoke("check", design, "--out", tmp_path, *SMALL, "--only", "sbc,sensitivity",
                    "--quiet")
    assert result.exit_code == 0, result.output
    assert invoke("report", design, "--out", tmp_path / "report.html", "--quiet").exit_code == 0
    page = parse(tmp_path / "report.html")
    assert table_rows(page, "checks-verdicts")
    assert page.find(".//figure[@id='figure-checks-sensitivity']") is not None
    # another design file (other bytes) does not take these checks
    design.write_text(design.read_text() + "\n# edited\n")
    assert invoke("report", design, "--out", tmp_path / "report.html", "--quiet").exit_code == 0
    page = parse(tmp_path / "report.html")
    assert "No workflow checks" in text(page.find(".//section[@id='checks']"))


def test_same_seed_same_numbers(tmp_path) -> None:
    design = DESIGNS / "single-arm-event-rate.toml"
    for name in ("a", "b"):
        result = invoke("check", design, "--out", tmp_path / name, "--seed", 7, *SMALL,
                        "--only", "sbc,sensitivity", "--quiet")
        assert result.exit_code == 0, result.output
    for name in ("sbc.csv", "sensitivity.csv", "sbc-rate-treatment-look3.png"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()
    other = invoke("check", design, "--out", tmp_path / "c", "--seed", 8, *SMALL,
                   "--only", "sbc", "--quiet")
    assert other.exit_code == 0
    assert (tmp_path / "a" / "sbc.csv").read_bytes() != (tmp_path / "c" / "sbc.csv").read_bytes()
    assert not (tmp_path / "a" / "tail-accuracy.png").exists()


def test_a_failing_computation_exits_1(tmp_path, monkeypatch) -> None:
    """The posterior's prior differs from the prior generating the truths."""
    other = model_for(build(_single_arm_with_prior(8, 2)))
    monkeypatch.setattr(core, "run_sbc",
                        lambda model, settings: run_sbc(model, settings, truth_model=other))
    result = invoke("check", DESIGNS / "single-arm-response.toml", "--out", tmp_path, *SMALL,
                    "--only", "sbc")
    assert result.exit_code == 1
    assert "FAIL" in result.output
    assert json.loads((tmp_path / "checks.json").read_text())["sbc"]["verdict"] == "fail"


def _single_arm_with_prior(a: float, b: float) -> dict:
    import tomllib

    data = tomllib.loads((DESIGNS / "single-arm-response.toml").read_text())
    data["arms"]["treatment"]["prior"] = {"distribution": "beta", "a": a, "b": b}
    return data


@pytest.mark.parametrize("args, words", [
    (("--simulations", "5"), "--simulations: expected a whole number >= 20; got 5"),
    (("--bins", "1"), "--bins: expected a whole number from 2 to --simulations / 5"),
    # issue 12: the option and the valid values in plain words, not a Python tuple
    (("--only", "sbc,everything"), "--only: expected one or more of prior-predictive, sbc, "
     "sensitivity, tail-accuracy, conflict and design-prior, separated by commas; "
     "got 'everything'"),
    (("--only", "sbc,sensitivty"), "got 'sensitivty' (did you mean 'sensitivity'?)"),
    (("--only", ","), "--only: expected one or more of"),
    (("--outcome-range", "0:x"), "--outcome-range"),
    (("--outcome-range", "0:100"), "a normal endpoint"),
    (("--plausible", "3:1"), "--plausible: expected LOW:HIGH with LOW < HIGH; got 3:1"),
])
def test_bad_input_exits_2_and_writes_nothing(tmp_path, args, words) -> None:
    out = tmp_path / "out"
    result = invoke("check", DESIGNS / "single-arm-response.toml", "--out", out, *args)
    assert result.exit_code == 2, result.output
    assert words in result.output
    assert "(" + "'" not in result.output and "()" not in result.output  # no tuple reprs
    assert not out.exists()


def test_normal_outcome_range_is_accepted(tmp_path) -> None:
    result = invoke("check", DESIGNS / "two-arm-continuous-score.toml", "--out", tmp_path,
                    *SMALL, "--only", "prior-predictive", "--outcome-range", "0:100",
                    "--quiet")
    assert result.exit_code == 0, result.output
    record = json.loads((tmp_path / "checks.json").read_text())
    outcome = record["prior_predictive"]["analysis"]["outcomes"][0]
    assert outcome["outside_possible_range"] < 1e-6  # |difference| beyond 100


def test_checks_of_another_design_version_are_refused(folder, tmp_path) -> None:
    """Never shown beside the run's numbers (tests/test_sealed_folders.py has the rest)."""
    copy = tmp_path / "run"
    shutil.copytree(folder, copy)
    record = json.loads((copy / "checks.json").read_text())
    record["design"]["sha256"] = "0" * 64
    (copy / "checks.json").write_text(json.dumps(record))
    (copy / "report.html").unlink(missing_ok=True)
    result = invoke("report", copy, "--quiet")
    assert result.exit_code == 2 and "checks.json: design.sha256" in result.output
    assert not (copy / "report.html").exists()
