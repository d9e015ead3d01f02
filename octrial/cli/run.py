"""``octrial run``: operating characteristics of a design, written to a folder."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from octrial.caution import CAUTION
from octrial.cli.common import default_out, design_argument, read_design, reports_input_errors
from octrial.cli.tables import assurance_line, oc_summary, type1_line
from octrial.evaluation import compute
from octrial.output import csv_text, json_text, write_atomic
from octrial.provenance import now, run_record


@click.command("run")
@design_argument
@click.option("--out", "out", type=click.Path(file_okay=False), default=None,
              help="Folder for oc.csv, boundaries.csv and run.json "
                   "[default: reports/<design name>/].")
@click.option("--method", type=click.Choice(["auto", "exact", "monte-carlo"]), default=None,
              help="Engine; overrides simulation.method in the design file.")
@click.option("--quiet", is_flag=True, help="Print nothing but errors.")
@reports_input_errors
def run_command(design: str, out: str | None, method: str | None, quiet: bool) -> None:
    """Compute the operating characteristics of DESIGN at every scenario.

    Writes oc.csv (one row per scenario), boundaries.csv (decision boundaries in counts,
    discrete endpoints) and run.json (provenance), and prints a summary table.
    """
    started = now()
    loaded = read_design(design)
    evaluation = compute(loaded, method)
    folder = Path(out) if out else default_out(loaded)
    record = run_record(evaluation, started=started, finished=now(), command=sys.argv)
    written = [write_atomic(folder / "oc.csv", csv_text(evaluation.oc))]
    if evaluation.boundaries is not None:
        written.append(write_atomic(folder / "boundaries.csv", csv_text(evaluation.boundaries)))
    written.append(write_atomic(folder / "run.json", json_text(record)))
    if quiet:
        return
    click.echo(f"{loaded.name}: {loaded.title}" if loaded.title else loaded.name)
    click.echo(f"engine: {evaluation.info['engine']}")
    click.echo(oc_summary(evaluation.oc))
    click.echo(type1_line(evaluation.info["type1"]))
    line = assurance_line(evaluation.info)
    if line:
        click.echo(line)
    click.echo("wrote " + ", ".join(str(p) for p in written), err=True)
    click.echo(f"Caution: {CAUTION}", err=True)
