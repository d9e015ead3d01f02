"""Report defects of issue 12, item 4: count bounds past the truncated lattice shown as
the bound (not 'never'), the calibration section as readable tables, the PDF's file
mode."""

from __future__ import annotations

import os
import stat
from pathlib import Path

import pytest
from click.testing import CliRunner

from octrial.cli import main
from octrial.design.write import dumps
from octrial.reporting.pdf import print_pdf
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
