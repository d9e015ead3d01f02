"""``octrial run``: operating characteristics of a design, written to a folder."""

from __future__ import annotations

import sys
import warnings
from pathlib import Path

import click

from octrial.caution import CAUTION
from octrial.cli.common import default_out, design_argument, read_design, reports_input_errors
from octrial.cli.tables import assurance_line, oc_summary, prior_size_lines, type1_line
from octrial.engines import MonteCarloSettings
from octrial.errors import NumericalWarning
from octrial.evaluation import compute
from octrial.execution import Execution
from octrial.execution.backends import BACKENDS
from octrial.execution.checkpoints import PARTIAL, remove_partial
from octrial.output import csv_text, json_text, write_atomic
from octrial.provenance import now, run_record

EXIT_INTERRUPTED = 130


@click.command("run")
@design_argument
@click.option("--out", "out", type=click.Path(file_okay=False), default=None,
              help="Folder for oc.csv, boundaries.csv and run.json "
                   "[default: reports/<design name>/].")
@click.option("--method", type=click.Choice(["auto", "exact", "monte-carlo"]), default=None,
              help="Engine; overrides simulation.method in the design file.")
@click.option("--jobs", type=click.IntRange(min=1), default=1, show_default=True,
              help="Scenarios simulated at once (worker processes, or local Dask workers).")
@click.option("--backend", type=click.Choice(BACKENDS), default="joblib", show_default=True,
              help="Where simulations run: local processes (joblib) or a Dask cluster.")
@click.option("--scheduler", metavar="ADDRESS", default=None,
              help="Address of a running Dask scheduler (with --backend dask); without it "
                   "a local Dask cluster is started.")
@click.option("--target-se", type=click.FloatRange(0, 0.5, min_open=True), default=None,
              help="Simulate until every estimated probability's standard error is at most "
                   "this (instead of simulation.replicates).")
@click.option("--max-replicates", type=click.IntRange(min=1), default=None,
              help="Cap on simulated studies per scenario with --target-se "
                   "[default: 10000000].")
@click.option("--quiet", is_flag=True, help="Print nothing but errors (no progress bar).")
@reports_input_errors
def run_command(design: str, out: str | None, method: str | None, jobs: int, backend: str,
                scheduler: str | None, target_se: float | None, max_replicates: int | None,
                quiet: bool) -> None:
    """Compute the operating characteristics of DESIGN at every scenario.

    Writes oc.csv (one row per scenario), boundaries.csv (decision boundaries in counts, or
    sample means and z for normal endpoints) and run.json (provenance), and prints a summary table.

    Simulation (method monte-carlo) saves each finished scenario under OUT/.partial; an
    interrupted run started again with the same arguments resumes where it stopped.
    Exit codes: 0 success; 2 bad input; 130 interrupted.
    """
    if scheduler is not None and backend != "dask":
        raise click.UsageError("--scheduler needs --backend dask")
    if max_replicates is not None and target_se is None:
        raise click.UsageError("--max-replicates applies only with --target-se")
    started = now()
    loaded = read_design(design)
    folder = Path(out) if out else default_out(loaded)
    settings = MonteCarloSettings(target_se=target_se)
    if max_replicates is not None:
        settings = MonteCarloSettings(target_se=target_se, max_replicates=max_replicates)
    execution = Execution(jobs=jobs, backend=backend, scheduler=scheduler,
                          checkpoints=folder / PARTIAL, progress=not quiet)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NumericalWarning)  # printed below from run.json
            evaluation = compute(loaded, method, settings, execution)
    except KeyboardInterrupt:
        click.echo(f"\ninterrupted: finished scenarios are kept in {folder / PARTIAL}; run "
                   "the same command again to resume", err=True)
        raise SystemExit(EXIT_INTERRUPTED) from None
    record = run_record(evaluation, started=started, finished=now(), command=sys.argv)
    written = [write_atomic(folder / "oc.csv", csv_text(evaluation.oc))]
    if evaluation.boundaries is not None:
        written.append(write_atomic(folder / "boundaries.csv", csv_text(evaluation.boundaries)))
    written.append(write_atomic(folder / "run.json", json_text(record)))
    remove_partial(folder / PARTIAL)
    for note in evaluation.info.get("warnings", []):
        click.echo(f"warning: {note}", err=True)
    if quiet:
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
        click.echo(f"warning: scenarios {short} reached the replicate cap before the target "
                   "standard error", err=True)
    for line in prior_size_lines(evaluation.info.get("prior_effective_sample_size")):
        click.echo(line)
    click.echo("wrote " + ", ".join(str(p) for p in written), err=True)
    click.echo(f"Caution: {CAUTION}", err=True)
