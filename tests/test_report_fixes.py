"""Report defects of issue 12, item 4: count bounds past the truncated lattice shown as
the bound (not 'never'), the calibration section as readable tables, the PDF's file
mode."""

from __future__ import annotations

import os
import stat
from pathlib import Path

import pytest
from click.testing import CliRunner
from matplotlib.axis import Tick
from matplotlib.text import Text

from octrial.cli import main
from octrial.design.write import dumps
from octrial.reporting import figures, from_run_folder
from octrial.reporting.pdf import print_pdf
from tests.helpers import ROOT
from tests.report_pages import parse, table_rows
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
