"""``octrial boundaries``: the decision rule per look, as a committee applies it by hand."""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import click

from octrial.caution import CAUTION
from octrial.cli.common import default_out, design_argument, read_design, reports_input_errors
from octrial.design.model import Design
from octrial.errors import InputError, single
from octrial.output import csv_text, write_atomic
from octrial.run_folder import seal_conflicts


def boundaries_for(design: Design, sds: tuple[float, ...] = ()) -> tuple[object, str]:
    """The boundary table and its committee text for ``design``.

    The family tabulates its rule (lattice endpoints in counts; normal endpoints as
    sample-mean and z bounds or, with an unknown sd, bounds on the sample mean at the
    sample sds ``sds``).
    """
    family = design.family
    if sds and not family.bounds_depend_on_sd(design):
        raise single("command line", "--sd", "a design with a normal endpoint of unknown sd "
                     "(its bounds on the mean depend on the sample sd)",
                     ",".join(f"{s:g}" for s in sds))
    table = family.boundary_table(design, sds or None)
    if table is None:
        raise single(design.source.path or design.name, "endpoint.type",
                     "an endpoint with a decision-boundary table in this version (binary, "
                     "count, normal with a known sd)",
                     family.name)
    return table, family.committee_table(design, table)


def _positive_numbers(raw: str | None, option: str) -> tuple[float, ...]:
    """``1.5,2,3`` as numbers > 0 (empty without the option)."""
    if raw is None:
        return ()
    try:
        values = tuple(float(part) for part in raw.split(","))
    except ValueError:
        values = ()
    if not values or not all(math.isfinite(v) and v > 0 for v in values):
        raise single("command line", option, "positive numbers separated by commas", raw)
    return values


@click.command("boundaries")
@design_argument
@click.option("--out", "out", type=click.Path(file_okay=False), default=None,
              help="Folder for boundaries.csv and boundaries.txt "
                   "[default: reports/<design name>/].")
@click.option("--sd", "sds", default=None, metavar="SD[,SD...]",
              help="Normal endpoint with an unknown sd: the sample sds at which to give "
                   "the bounds on the mean [default: endpoint.true_sd x 0.5, 0.75, 1, "
                   "1.25, 1.5, 2].")
@click.option("--quiet", is_flag=True, help="Print nothing but errors.")
@reports_input_errors
def boundaries_command(design: str, out: str | None, sds: str | None, quiet: bool) -> None:
    """Print and write the decision boundaries of DESIGN per interim look.

    The rule in plain counts (responses, events) with the posterior probability at each
    bound and one count short of it, or for a normal endpoint with a known sd as bounds on
    the sample mean (difference in sample means) and in z with the standard error, so a
    monitoring committee can apply the rule without software. With an unknown sd (one
    arm) the decision depends on the sample mean and sd together: the bounds on the mean
    are given at a few sample sds (--sd).
    Writes boundaries.csv (the same table as octrial run) and boundaries.txt (the printed
    text).
    """
    loaded = read_design(design)
    table, text = boundaries_for(loaded, _positive_numbers(sds, "--sd"))
    folder = Path(out) if out else default_out(loaded)
    files = {"boundaries.csv": csv_text(table),
             "boundaries.txt": f"{text}\nCaution: {CAUTION}\n"}
    if problems := seal_conflicts(folder, files):
        raise InputError(str(folder), [dataclasses.replace(p, hint=p.hint + " (--out)")
                                       for p in problems])
    written = [write_atomic(folder / name, data) for name, data in files.items()]
    if quiet:
        return
    click.echo(text, nl=False)
    click.echo("wrote " + ", ".join(str(p) for p in written), err=True)
    click.echo(f"Caution: {CAUTION}", err=True)
