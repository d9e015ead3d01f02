"""Report defects of issue 12, item 4: count bounds past the truncated lattice shown as
the bound (not 'never'), the calibration section as readable tables, the PDF's file
mode."""

from __future__ import annotations

from pathlib import Path

from click.testing import CliRunner

from octrial.cli import main
from octrial.design.write import dumps
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
