"""``octrial report``: the simulation appendix of a design or of a finished run."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from octrial.caution import CAUTION
from octrial.cli.common import default_out, read_design, reports_input_errors
from octrial.errors import single
from octrial.reporting import PrintError, from_design, from_run_folder, write_report
from octrial.reporting.arms_data import arms_from_design, arms_from_run_folder, is_arms_run
from octrial.review.arms_verification import several_arms

REPORT_NAME = "report.html"


@click.command("report", epilog=f"Caution: {CAUTION}")
@click.argument("source", metavar="DESIGN_OR_RUN_DIR", type=click.Path(exists=True))
@click.option("--out", "out", type=click.Path(dir_okay=False), default=None,
              help="The HTML file to write [default: RUN_DIR/report.html, or "
                   "reports/<design name>/report.html for a design file].")
@click.option("--pdf", is_flag=True,
              help="Also print the report to a PDF beside the HTML (needs headless Chromium).")
@click.option("--alpha", type=click.FloatRange(0, 1, min_open=True, max_open=True),
              default=None, help="The one-sided type I error level the design must keep: "
                                 "drawn on the power curve and compared with the maximum.")
@click.option("--paper", type=click.Choice(["a4", "letter"]), default="a4", show_default=True,
              help="Page size of the printed report.")
@click.option("--method", type=click.Choice(["auto", "exact", "monte-carlo"]), default=None,
              help="Engine when evaluating a design file; overrides simulation.method.")
@click.option("--quiet", is_flag=True, help="Print nothing but errors.")
@reports_input_errors
def report_command(source: str, out: str | None, pdf: bool, alpha: float | None, paper: str,
                   method: str | None, quiet: bool) -> None:
    """Write the simulation appendix of DESIGN_OR_RUN_DIR as one self-contained HTML file.

    DESIGN_OR_RUN_DIR is a design file (evaluated now) or a folder written by
    'octrial run' (its oc.csv, boundaries.csv and run.json, plus calibration.csv and
    checks.json when present, are shown as written, once their SHA-256 are found to be
    the ones recorded: an edited, missing or foreign file is refused with exit code 2;
    for a design file, the checks that
    'octrial check' wrote into the report's folder for the same file are shown). The
    report's tables are also written
    as CSV, Markdown and LaTeX to <report name>-tables/ beside it; --pdf prints a PDF.
    Designs with several treatment arms get their own report (per-arm power, stopping
    and dropping per arm and look, allocation over time).

    Exit codes: 0 written; 1 Chromium failed to print; 2 bad input (a run folder whose
    files are not what was recorded, a report that cannot be written) or Chromium missing.
    """
    path = Path(source)
    if path.is_dir():
        if method is not None:
            raise single("--method", "", "a design file to evaluate (a run folder's results "
                         "are shown as computed)", f"the run folder {path}")
        data = (arms_from_run_folder(path, alpha=alpha) if is_arms_run(path)
                else from_run_folder(path, alpha=alpha))
        html = Path(out) if out else path / REPORT_NAME
    elif several_arms(str(path)):  # 2-8 treatment arms: docs/multi-arm.md
        arms = arms_from_design(path, method, command=sys.argv, alpha=alpha)
        html = Path(out) if out else Path("reports") / arms.design.name / REPORT_NAME
        data = arms
    else:
        loaded = read_design(str(path))
        html = Path(out) if out else default_out(loaded) / REPORT_NAME
        # checks written by 'octrial check' beside the report, for this very file
        data = from_design(loaded, method, command=sys.argv, alpha=alpha,
                           checks_folder=html.parent)
    try:
        written = write_report(data, html, pdf=pdf, paper=paper, command=sys.argv)
    except PrintError as exc:
        click.echo(f"error: printing the PDF failed: {exc}", err=True)
        click.echo(f"The HTML report was written: {html}", err=True)
        raise SystemExit(1) from None
    except OSError as exc:  # a full disk, a read-only folder: a plain message, exit 2
        raise single(str(html), "", "a report file that can be written",
                     exc.strerror or type(exc).__name__) from None
    if quiet:
        return
    click.echo(f"wrote {written.html}")
    click.echo(f"wrote {len(written.tables)} table files in {written.tables[0].parent}")
    if written.pdf is not None:
        click.echo(f"wrote {written.pdf}")
    click.echo(f"Caution: {CAUTION}", err=True)
