"""``octrial decide``: the design's decision at an interim look on the data so far."""

from __future__ import annotations

import click

from octrial.caution import CAUTION
from octrial.cli.common import design_argument, read_design, reports_input_errors
from octrial.endpoints import FAMILIES
from octrial.interim import Decision, decide
from octrial.interim.decision import DEFAULT_LEVEL, DEFAULT_SEED
from octrial.interim.pipeline import PipelineReading
from octrial.output import json_text

FORMS = "; ".join(f"{name}: ARM={support.syntax.form}" for name, family in FAMILIES.items()
                  if (support := family.interim()) is not None)


@click.command("decide", epilog=f"Caution: {CAUTION}")
@design_argument
@click.option("--look", type=int, required=True,
              help="The look being analysed, from 1 (the last look is the final analysis).")
@click.option("--data", "data", multiple=True, metavar="ARM=DATA",
              help=f"Data so far, once per arm ({FORMS}); may be left out with --subjects.")
@click.option("--level", type=float, default=DEFAULT_LEVEL, show_default=True,
              help="Credible level of the equal-tailed posterior intervals.")
@click.option("--subjects", type=click.Path(dir_okay=False), default=None,
              help="Per-subject CSV, one row per subject: the data so far are derived "
                   "from it (with --data as well, the two must agree), and for counts and "
                   "normal data the posterior predictive checks of the data model run on it. "
                   "Columns: arm (optional for one arm), an optional id or subject column, "
                   "and response (0 or 1) for binary data, events [and exposure] for counts, "
                   "value for normal data.")
@click.option("--seed", type=click.IntRange(0, 2**63 - 1), default=DEFAULT_SEED,
              show_default=True, help="Seed of the simulations (posterior predictive checks; "
                                      "the predictive probability of two-arm unknown-sd "
                                      "designs).")
@click.option("--pipeline", "pipeline", multiple=True, metavar="ARM=N",
              help="Designs with an outcome lag ([conduct] outcome_lag): subjects of the "
                   "arm enrolled whose outcome has not arrived yet, once per arm. Adds the "
                   "predictive probability through these subjects and those still to "
                   "enrol and, with analyse_pipeline, the probability that a stop for "
                   "efficacy now is still a success once their outcomes are in.")
@click.option("--json", "as_json", is_flag=True, help="Print the result as JSON.")
@reports_input_errors
def decide_command(design: str, look: int, data: tuple[str, ...], level: float,
                   subjects: str | None, seed: int, pipeline: tuple[str, ...],
                   as_json: bool) -> None:
    """The decision DESIGN's rule gives at an interim look on the data so far.

    Prints the posterior probability of benefit, the predictive probability of final
    success, posterior means with credible intervals, and the decision: continue, stop for
    efficacy or stop for futility (at the last look: success or failure). Warns when the
    observed sample size differs from the planned one. The data come from --data, from a
    per-subject file (--subjects), or both (they must agree).

    Exit codes: 0 a decision was made; 2 bad input.
    """
    result = decide(read_design(design), look, data, level=level, subjects=subjects,
                    seed=seed, pipeline=pipeline)
    for warning in result.warnings:
        click.echo(f"warning: {warning}", err=True)
    if as_json:
        click.echo(json_text(result.as_dict()), nl=False)
    else:
        click.echo(render(result))
    click.echo(f"Caution: {CAUTION}", err=True)


def render(result: Decision) -> str:
    """The decision as plain text."""
    a = result.assessment
    kind = "final analysis" if result.look == result.looks else "interim"
    lines = [f"{result.design}: look {result.look} of {result.looks} ({kind})",
             "data: " + "; ".join(f"{arm} {obs.describe()}"
                                  for arm, obs in result.observed.items())]
    if result.posterior:
        lines.append(f"posterior mean and {result.level:.0%} equal-tailed credible interval:")
        width = max(len(s.quantity) for s in result.posterior)
        lines += [f"  {s.quantity:<{width}}  {_number(s.mean)}  ({_number(s.lower)} to "
                  f"{_number(s.upper)})" for s in result.posterior]
    if a.benefit is not None:
        lines.append(f"{result.statement} = {a.benefit:.4f}")
    if a.predictive is not None:
        se = "" if a.predictive_se is None else f", Monte Carlo SE {a.predictive_se:.4f}"
        lines.append(f"predictive probability of final success = {a.predictive:.4f} "
                     f"({result.to_come} to come{se})")
    if result.pipeline is not None:
        lines += _pipeline_lines(result.pipeline)
    applied = [f"{k.replace('_', ' ')} {v:g}" for k, v in vars(a.thresholds).items()
               if v is not None]
    lines.append("rule at this look: " + ("; ".join(applied) or "no stopping threshold"))
    lines.append("boundaries at the observed size: "
                 + "; ".join(f"{k} {v}" for k, v in a.boundaries.items()))
    for check in result.checks:
        arm = f" ({check.arm})" if len(result.observed) > 1 else ""
        lines.append(f"check of the data model{arm}, {check.statistic}: {check.verdict}")
    lines.append(f"decision: {a.decision.upper()} ({a.reason})")
    return "\n".join(lines)


def _pipeline_lines(reading: PipelineReading) -> list[str]:
    """The pipeline's part of the text output."""
    lines = ["pipeline (enrolled, no outcome yet): "
             + ", ".join(f"{arm} {n}" for arm, n in reading.pipeline.items())
             + "; enrolled: " + ", ".join(f"{arm} {n:g}" for arm, n in reading.enrolled.items())]
    if reading.predictive is not None:
        lines.append("predictive probability of final success through the pipeline and the "
                     f"subjects still to enrol = {reading.predictive:.4f}")
    if reading.success_if_stopped is not None:
        lines.append("if the study stopped for efficacy now, probability that the analysis "
                     "of every enrolled subject still meets the final success threshold "
                     f"{reading.final_threshold:g} = {reading.success_if_stopped:.4f}")
    return lines


def _number(value: float | None) -> str:
    """A posterior summary value with four decimals, or its magnitude's digits."""
    if value is None:
        return "no finite mean"
    if value != 0 and not 1e-3 <= abs(value) < 1e6:
        return f"{value:.4g}"
    return f"{value:.4f}"
