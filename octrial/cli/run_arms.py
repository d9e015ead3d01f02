"""``octrial run`` on a design with several treatment arms (called by :mod:`.run`).

The run folder is written as for other designs (:func:`octrial.run_folder.write_run`:
oc.csv, boundaries.csv with an ``arm`` column, run.json sealing them, all at once).
Options that the chosen engine cannot honour are refused with exit code 2, never
ignored: the exact engines draw no random numbers (``--seed``) and run in one process
(``--jobs``, ``--backend``, ``--scheduler``); no several-arm engine simulates to a
target standard error (``--target-se``).
"""

from __future__ import annotations

import dataclasses
import sys
from pathlib import Path

import click
from click.core import ParameterSource

from octrial.arms_evaluation import SIMULATION, ArmsEvaluation, choose_engine, compute_arms
from octrial.caution import CAUTION
from octrial.cli.common import SimulationOptions, resumable
from octrial.multiarm.load import load_multiarm
from octrial.output import csv_text
from octrial.plurals import count
from octrial.provenance import now, run_record
from octrial.reporting.formats import probability
from octrial.run_folder import write_run

SIMULATION_ONLY = ("seed", "jobs", "backend", "scheduler")
"""Options that only a simulation uses."""


def _given(names: tuple[str, ...]) -> list[str]:
    """Which of the options ``names`` were given on the command line."""
    context = click.get_current_context()
    return [name for name in names
            if context.get_parameter_source(name) not in (ParameterSource.DEFAULT, None)]


def _flag(name: str) -> str:
    return "--" + name.replace("_", "-")


def run_arms(design: str, out: str | None, method: str | None, seed: int | None,
             simulation: SimulationOptions) -> None:
    """Evaluate a several-arm design file and write its run folder."""
    started = now()
    loaded = load_multiarm(design)
    if simulation.target_se is not None:
        raise click.UsageError("--target-se does not apply to designs with several "
                               "treatment arms (they are simulated with the design's "
                               "simulation.replicates)")
    if seed is not None:
        loaded = dataclasses.replace(
            loaded, simulation=dataclasses.replace(loaded.simulation, seed=seed))
    asked = method or loaded.simulation.method or "auto"
    engine, _ = choose_engine(loaded, asked)
    if engine != SIMULATION:
        refused = _given(SIMULATION_ONLY)
        if refused:
            raise click.UsageError(
                ", ".join(map(_flag, refused)) + (" applies" if len(refused) == 1 else
                                                  " apply") + f" only to simulation; the {engine} "
                f"engine computes this design (method '{asked}'). Give --method "
                "monte-carlo to simulate it.")
    folder = Path(out) if out else Path("reports") / loaded.name
    execution = simulation.execution(folder)
    with resumable(execution):
        evaluation = compute_arms(loaded, asked, execution)
    record = run_record(evaluation, started=started, finished=now(), command=sys.argv)
    record["several_arms"] = True
    boundaries = None if evaluation.boundaries is None else csv_text(evaluation.boundaries)
    done = write_run(folder, record, csv_text(evaluation.oc), boundaries)
    execution.remove_checkpoints()
    if simulation.quiet:
        return
    click.echo(f"{loaded.name}: {loaded.title}" if loaded.title else loaded.name)
    click.echo(f"engine: {evaluation.info['engine']}")
    if evaluation.info.get("exact_not_used"):
        click.echo(f"(no exact engine: {evaluation.info['exact_not_used']})")
    click.echo(summary(evaluation))
    click.echo("wrote " + ", ".join(str(p) for p in done.written), err=True)
    if done.removed:
        click.echo("removed, as not about these results: " + ", ".join(done.removed), err=True)
    click.echo(f"Caution: {CAUTION}", err=True)


def summary(evaluation: ArmsEvaluation) -> str:
    """The console summary: per scenario the study's and each arm's probability of
    success, the family-wise error rate and the expected total size; then the largest
    family-wise error."""
    design, oc = evaluation.design, evaluation.oc
    shown = ["scenario", *(f"true_{a}" for a in design.arm_names), "prob_success", "fwer",
             *(f"{a}_prob_success" for a in design.treatment_names), "expected_n"]
    view = oc[shown].rename(columns=lambda c: c.removeprefix("true_"))
    view = view.rename(columns={f"{a}_prob_success": f"P({a})"
                                for a in design.treatment_names})
    formats = {c: probability for c in view.columns if c == "prob_success" or c == "fwer"
               or c.startswith("P(")}
    formats["expected_n"] = "{:.1f}".format
    lines = [view.to_string(index=False, formatters=formats)]
    worst = evaluation.info.get("type1")
    if worst is None:
        lines.append("No scenario has a null arm: the family-wise error rate is not assessed.")
    else:
        se = f" (se {probability(worst['se'])})" if worst["se"] else ""
        lines.append(f"Largest family-wise error rate: {probability(worst['max_type1_error'])}"
                     f"{se} in scenario {worst['scenario']} of "
                     f"{count(worst['null_scenarios'], 'scenario')} with a null arm.")
    return "\n".join(lines)
