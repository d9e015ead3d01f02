"""``octrial run``: operating characteristics of a design, written to a folder."""

from __future__ import annotations

import dataclasses
import sys
import warnings
from pathlib import Path

import click

from octrial.caution import CAUTION
from octrial.cli.common import (
    SimulationOptions,
    default_out,
    design_argument,
    read_design,
    reports_input_errors,
    resumable,
    simulation_options,
)
from octrial.cli.run_arms import run_arms
from octrial.cli.tables import assurance_line, oc_summary, prior_size_lines, type1_line
from octrial.errors import NumericalWarning
from octrial.evaluation import compute
from octrial.output import csv_text
from octrial.plurals import noun
from octrial.provenance import now, run_record
from octrial.review.arms_verification import several_arms
from octrial.run_folder import write_run


@click.command("run", epilog=f"Caution: {CAUTION}")
@design_argument
@click.option("--out", "out", type=click.Path(file_okay=False), default=None,
              help="Folder for oc.csv, boundaries.csv and run.json "
                   "[default: reports/<design name>/].")
@click.option("--method", type=click.Choice(["auto", "exact", "monte-carlo"]), default=None,
              help="Engine; overrides simulation.method in the design file.")
@click.option("--seed", type=click.IntRange(0, 2**63 - 1), default=None,
              help="Random seed of the simulations; overrides simulation.seed in the design "
                   "file (run.json records the seed used).")
@simulation_options
@reports_input_errors
def run_command(design: str, out: str | None, method: str | None, seed: int | None,
                simulation: SimulationOptions) -> None:
    """Compute the operating characteristics of DESIGN at every scenario.

    Writes oc.csv (one row per scenario), boundaries.csv (decision boundaries in counts, or
    sample means and z for normal endpoints; with an unknown sd and one arm, sample means
    at a few sample sds) and run.json (provenance, with the SHA-256 of each file), all at
    once, and prints a summary table. A report of the folder's earlier results, and checks
    or a calibration of another design, are removed.

    A design file with 2 to 8 treatment arms (docs/multi-arm.md) is computed exactly when
    each arm is judged on its own with fixed allocation, else simulated; oc.csv then has
    the several-arm columns (docs/output-files.md) and options the engine cannot honour
    (--seed, --jobs, --backend, --scheduler for an exact run; --target-se) exit with
    code 2.

    Simulation (method monte-carlo, and assurance without an exact engine) saves each
    finished scenario (or batch) under OUT/.partial; an interrupted run started again with
    the same arguments resumes where it stopped.
    Exit codes: 0 success; 2 bad input, or OUT cannot be written (then it is left as it
    was); 130 interrupted.
    """
    if several_arms(design):  # 2-8 treatment arms: docs/multi-arm.md
        run_arms(design, out, method, seed, simulation)
        return
    started = now()
    loaded = read_design(design)
    if seed is not None:  # as in check and verify, the command line overrides the file
        loaded = dataclasses.replace(
            loaded, simulation=dataclasses.replace(loaded.simulation, seed=seed))
    folder = Path(out) if out else default_out(loaded)
    execution = simulation.execution(folder)
    with resumable(execution), warnings.catch_warnings():
        warnings.simplefilter("ignore", NumericalWarning)  # printed below from run.json
        evaluation = compute(loaded, method, simulation.settings(), execution)
    record = run_record(evaluation, started=started, finished=now(), command=sys.argv)
    boundaries = None if evaluation.boundaries is None else csv_text(evaluation.boundaries)
    done = write_run(folder, record, csv_text(evaluation.oc), boundaries)  # all at once
    execution.remove_checkpoints()
    for note in evaluation.info.get("warnings", []):
        click.echo(f"warning: {note}", err=True)
    if simulation.quiet:
        return
    click.echo(f"{loaded.name}: {loaded.title}" if loaded.title else loaded.name)
    click.echo(f"engine: {evaluation.info['engine']}")
    click.echo(oc_summary(evaluation.oc))
    click.echo(type1_line(evaluation.info["type1"]))
    line = assurance_line(evaluation.info)
    if line:
        click.echo(line)
    short = evaluation.info.get("scenarios_short_of_target")
    if short:
        click.echo(f"warning: {noun(len(short), 'scenario')} {', '.join(map(str, short))} "
                   f"reached the replicate cap before the target standard error", err=True)
    for line in prior_size_lines(evaluation.info.get("prior_effective_sample_size")):
        click.echo(line)
    click.echo("wrote " + ", ".join(str(p) for p in done.written), err=True)
    if done.removed:
        click.echo("removed, as not about these results: " + ", ".join(done.removed), err=True)
    click.echo(f"Caution: {CAUTION}", err=True)
