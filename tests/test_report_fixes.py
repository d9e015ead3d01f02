"""Report defects of issue 12, item 4: count bounds past the truncated lattice shown as
the bound (not 'never'), the calibration section as readable tables, the PDF's file
mode."""

from __future__ import annotations

import json
import os
import stat
from pathlib import Path
from types import SimpleNamespace

import pandas as pd
import pytest
from click.testing import CliRunner
from matplotlib.axis import Tick
from matplotlib.text import Text

from octrial.cli import main
from octrial.design.write import dumps
from octrial.reporting import calibration_section, figures, from_run_folder
from octrial.reporting.pdf import print_pdf
from tests.helpers import DESIGNS, ROOT
from tests.report_pages import parse, table_rows, text
from tests.test_boundary_text import STRONG_PRIOR, scipy_futility_bound


def invoke(*args: str):
    return CliRunner().invoke(main, list(args))


def test_report_shows_a_count_bound_past_the_lattice_edge(tmp_path: Path) -> None:
    design = tmp_path / "strong.toml"
    design.write_text(dumps(STRONG_PRIOR))
    out = tmp_path / "report.html"
    result = invoke("report", str(design), "--out", str(out), "--quiet")
    assert result.exit_code == 0, result.output
    rows = table_rows(parse(out), "boundaries")
    expected = scipy_futility_bound(30)
    assert rows[0].cells["futility_rule"].text == f"≥ {expected}"
    # look 1 has no efficacy threshold: 'never' is right there
    assert rows[0].cells["efficacy_rule"].text == "never"


FAKE_CHROMIUM = """#!/bin/sh
# Stands in for headless Chromium: writes a small PDF where --print-to-pdf says, the way
# Chromium does (into the file it is given).
for arg in "$@"; do
  case "$arg" in
    --print-to-pdf=*) printf '%%PDF-1.4\\n%%%%EOF\\n' > "${arg#--print-to-pdf=}" ;;
  esac
done
"""


@pytest.mark.parametrize("umask", [0o022, 0o077])
def test_pdf_has_the_mode_of_an_ordinary_new_file(tmp_path: Path, umask: int) -> None:
    fake = tmp_path / "fake-chromium"
    fake.write_text(FAKE_CHROMIUM)
    fake.chmod(0o755)
    html = tmp_path / "page.html"
    html.write_text("<!DOCTYPE html><title>t</title><p>x</p>")
    old = os.umask(umask)
    try:
        pdf = print_pdf(html, tmp_path / "out" / "page.pdf", str(fake))
        # the mode open() gives a new file: 0666 less the umask (POSIX open(2))
        plain = tmp_path / "plain"
        plain.write_text("x")
    finally:
        os.umask(old)
    assert pdf.read_bytes().startswith(b"%PDF")
    assert stat.S_IMODE(pdf.stat().st_mode) == 0o666 & ~umask
    assert stat.S_IMODE(pdf.stat().st_mode) == stat.S_IMODE(plain.stat().st_mode)


# -- figure text inside the figure ----------------------------------------------------------

def outside_texts(fig) -> list[str]:
    """Titles, axis labels, legend entries and annotations of ``fig`` that reach past its
    edges when drawn at the resolution the report saves it (tick labels excluded: those
    outside the axes' limits are never drawn)."""
    fig.set_dpi(figures.RASTER_DPI)
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    ticks = {label for tick in fig.findobj(Tick) for label in (tick.label1, tick.label2)}
    width, height = fig.bbox.width, fig.bbox.height
    out = []
    for item in fig.findobj(Text):
        if item in ticks or not item.get_visible() or not item.get_text():
            continue
        box = item.get_window_extent(renderer)
        if box.x0 < 0 or box.y0 < 0 or box.x1 > width or box.y1 > height:
            out.append(item.get_text())
    return out


@pytest.mark.parametrize("demo", ["single-arm-response", "borrowed-control-response",
                                  "two-arm-randomised"])
def test_no_figure_text_is_cut_at_the_figure_edge(demo, monkeypatch) -> None:
    drawn = []
    encode = figures.encode

    def keep(fig, raster=False):
        uri = encode(fig, raster)  # the report's own fitting and saving
        drawn.append(fig)
        return uri
    monkeypatch.setattr(figures, "encode", keep)
    data = from_run_folder(ROOT / "reports" / demo)
    built = figures.build_figures(data)
    assert any(f.name == "checks-sbc" for f in built)
    for fig in drawn:
        assert outside_texts(fig) == []


# -- the calibration section --------------------------------------------------------------

@pytest.fixture(scope="module")
def calibrated(tmp_path_factory) -> Path:
    """A sizing calibration of the one-arm demo and the run of its calibrated design, in
    one folder, reported."""
    folder = tmp_path_factory.mktemp("calibrated")
    result = invoke("calibrate", str(DESIGNS / "single-arm-response.toml"), "--alpha", "0.05",
                    "--power", "0.8", "--alternative", "0.4", "--vary", "n,final",
                    "--n-range", "20:45", "--out", str(folder), "--quiet")
    assert result.exit_code == 0, result.output
    design = folder / "single-arm-response.calibrated.toml"
    assert invoke("run", str(design), "--out", str(folder), "--quiet").exit_code == 0
    result = invoke("report", str(folder), "--quiet")
    assert result.exit_code == 0, result.output
    return folder


def pairs(page, name: str) -> dict[str, str]:
    return {r.cells["item"].text: r.cells["value"].text for r in table_rows(page, name)}


def test_calibration_section_is_readable_tables(calibrated: Path) -> None:
    record = json.loads((calibrated / "calibration.json").read_text())
    page = parse(calibrated / "report.html")
    section = page.find(".//section[@id='calibration']")
    words = text(section)
    # no JSON keys or Python reprs: the old section printed 'request.alpha', "{'final':"
    for raw in ("request.", "{", "}", "['", "[2", "None", "True", "False", "chosen.final"):
        assert raw not in words, raw
    searched = pairs(page, "calibration-search")
    assert searched["varied"] == "maximum sample size N, final success threshold"
    assert searched["sample sizes tried"] == "N from 20 to 45"
    assert searched["null region searched"] == record["null_grid"]
    constraints = {r.cells["constraint"].text: r for r in table_rows(
        page, "calibration-constraints")}
    t1 = constraints["maximum type I error"]
    assert t1.cells["value"].value == record["type1_error"]
    assert t1.cells["target"].text == "≤ 0.05" and t1.cells["met"].text == "yes"
    power = constraints["power"]
    assert power.cells["value"].value == record["power"]
    assert power.cells["target"].text == "≥ 0.8"
    assert "treatment = 0.4" in power.cells["where"].text
    result = pairs(page, "calibration-result")
    looks = record["looks_n"]
    assert result["maximum sample size"].startswith(f"N = {looks[-1]} ")
    assert result["final success threshold"].startswith(
        f"{record['chosen']['final']['value']:g}")
    # the saw-tooth figure belongs to this section, marked with the chosen N
    figure = section.find(".//figure[@id='figure-sawtooth']")
    assert figure is not None and "chosen" in text(figure)
    assert page.find(".//section[@id='figures']//figure[@id='figure-sawtooth']") is None
    sizing = pd.read_csv(calibrated / "sizing.csv")
    shown = table_rows(page, "sizing")
    assert [r.cells["n"].value for r in shown] == list(sizing["n"])
    assert [r.cells["type1_error"].value for r in shown] == list(sizing["type1_error"])
    assert [r.cells["n"].value for r in shown if "chosen" in r.classes] == [looks[-1]]


def test_power_figure_marks_the_target_power_and_alternative(calibrated: Path,
                                                              monkeypatch) -> None:
    drawn = []
    encode = figures.encode

    def keep(fig, raster=False):
        drawn.append(fig)
        return encode(fig, raster)
    monkeypatch.setattr(figures, "encode", keep)
    data = from_run_folder(calibrated)
    facts = figures.plot_facts(data)
    assert (facts.power_target, facts.alternative_at) == (0.8, 0.4)
    figure = figures.power_curve(data, facts)
    (ax,) = drawn[-1].axes
    labels = ax.get_legend_handles_labels()[1]
    assert "target power 0.8" in labels and "alternative (0.4)" in labels
    horizontal = [line.get_ydata()[0] for line in ax.get_lines()
                  if line.get_label() == "target power 0.8"]
    vertical = [line.get_xdata()[0] for line in ax.get_lines()
                if line.get_label() == "alternative (0.4)"]
    assert horizontal == [0.8] and vertical == [0.4]
    assert "power 0.8 at the alternative 0.4" in figure.caption
    # without a calibration nothing is marked
    plain = figures.plot_facts(from_run_folder(ROOT / "reports" / "single-arm-response"))
    assert plain.power_target is None and plain.alternative_at is None


def test_calibration_tables_follow_the_keys_present() -> None:
    # A record with Bayesian criteria (as calibrate --criterion writes them) and an entry
    # this version does not know: each becomes a readable row.
    record = {"task": "thresholds", "alpha": None, "power_target": None,
              "request": {"vary": ["final"]},
              "criteria": ["prob_null_given_success<=0.05", "bayesian_power>=0.7"],
              "bayesian_operating_characteristics": {"prob_null_given_success": 0.043,
                                                     "bayesian_power": 0.65},
              "chosen": {"final": {"value": 0.97, "exact": 0.97123,
                                   "equivalent": [0.969, 0.97123]}},
              "looks_n": [20, 40], "new_entry": {"a": 1, "b": [1.5, 2]}}
    data = SimpleNamespace(calibration_record=record, sizing=None, calibration=None)
    tables = {t.name: t for t in calibration_section.calibration_tables(data)}
    rows = {r.cells[0].text: r for r in tables["calibration-constraints"].rows}
    assert rows["prob null given success"].cells[1].text == "≤ 0.05"
    assert rows["prob null given success"].cells[2].value == 0.043
    assert rows["prob null given success"].cells[4].text == "yes"
    assert rows["bayesian power"].cells[4].text == "no"
    further = {r.cells[0].text: r.cells[1].text for r in tables["calibration-further"].rows}
    assert further["new entry"] == "a = 1; b = 1.5000, 2"
    assert further["bayesian operating characteristics"] == (
        "prob null given success = 0.0430; bayesian power = 0.6500")
    result = {r.cells[0].text: r.cells[1].text for r in tables["calibration-result"].rows}
    assert result["final success threshold"] == (
        "0.97 (exact candidate 0.97123); any value from 0.969 to 0.97123 gives the same "
        "decisions")
