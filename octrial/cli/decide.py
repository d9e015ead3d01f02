"""``octrial decide``: the design's decision at an interim look on the data so far."""

from __future__ import annotations

import click

from octrial.caution import CAUTION
from octrial.cli.common import design_argument, read_design, reports_input_errors
from octrial.endpoints import FAMILIES
from octrial.errors import bad_setting
from octrial.interim import Decision, decide
from octrial.interim.arms import ArmsDecision, decide_arms
from octrial.interim.base import PosteriorSummary
from octrial.interim.decision import DEFAULT_LEVEL, DEFAULT_SEED
from octrial.interim.pipeline import PipelineReading
from octrial.multiarm.load import load_multiarm
from octrial.output import json_text
from octrial.plurals import count
from octrial.review.arms_verification import several_arms

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
@click.option("--stopped", "stopped", multiple=True, metavar="ARM",
              help="Designs with several treatment arms: an arm that left the study at an "
                   "earlier look (stopped by its rule, dropped or not selected), once per "
                   "arm. It takes no part in this look and its --data may be left out "
                   "(response-adaptive designs need it). Every other arm needs --data.")
@click.option("--json", "as_json", is_flag=True, help="Print the result as JSON.")
@reports_input_errors
def decide_command(design: str, look: int, data: tuple[str, ...], level: float,
                   subjects: str | None, seed: int, pipeline: tuple[str, ...],
                   stopped: tuple[str, ...], as_json: bool) -> None:
    """The decision DESIGN's rule gives at an interim look on the data so far.

    Prints the posterior probability of benefit, the predictive probability of final
    success, posterior means with credible intervals, and the decision: continue, stop for
    efficacy or stop for futility (at the last look: success or failure). Warns when the
    observed sample size differs from the planned one. The data come from --data, from a
    per-subject file (--subjects), or both (they must agree).

    For a design with several treatment arms, each arm is judged by its own rule
    against the shared control (or the benchmark), then arms unlikely to be the best are
    dropped and at most selection.keep go on, as the simulation does; the output adds
    each arm's posterior probability of being the best, the study's decision and, for
    response-adaptive designs, the allocation probabilities of the next block.

    Exit codes: 0 a decision was made; 2 bad input.
    """
    if several_arms(design):
        if subjects is not None:
            raise bad_setting("subjects", "", "no per-subject file for a design with "
                              "several treatment arms (give --data per arm)", subjects)
        if pipeline:
            raise bad_setting("pipeline", "", "a design with one or two arms (the pipeline "
                              "of several-arm designs is not supported yet)", list(pipeline))
        arms = decide_arms(load_multiarm(design), look, data, stopped=stopped, level=level)
        for warning in arms.warnings:
            click.echo(f"warning: {warning}", err=True)
        click.echo(json_text(arms.as_dict()), nl=False) if as_json else click.echo(
            render_arms(arms))
        click.echo(f"Caution: {CAUTION}", err=True)
        return
    if stopped:
        raise bad_setting("stopped", "", "a design with several treatment arms (this one "
                          "has one or two arms)", list(stopped))
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


def render_arms(result: ArmsDecision) -> str:
    """A several-arm decision as plain text: a table per arm, then the study."""
    kind = "final analysis" if result.look == result.looks else "interim"
    against = (f"against the shared {result.control}" if result.control is not None
               else "against the benchmark")
    lines = [f"{result.design}: look {result.look} of {result.looks} ({kind}), "
             f"{len(result.arms)} treatment arms {against}"]
    data = ([f"{result.control} {result.control_observed.describe()}"]
            if result.control is not None else [])
    data += [f"{a.arm} {a.observed.describe()}" for a in result.arms if a.observed is not None]
    lines.append("data: " + "; ".join(data))
    if result.control_summary is not None:
        s = result.control_summary
        lines.append(f"{result.control}: {s.quantity} {_number(s.mean)} ({_number(s.lower)} "
                     f"to {_number(s.upper)}), {result.level:.0%} equal-tailed interval")
    adaptive = result.allocation is not None
    compared = any(a.pr_best_continuing is not None for a in result.arms)
    header = ["arm", "estimate (interval)", "effect (interval)", "Pr(benefit)",
              "predictive", "own rule", "Pr(best)"] + (
        ["Pr(best), continuing"] if compared else []) + ["outcome"] + (
        ["next block"] if adaptive else [])
    rows = []
    for a in result.arms:
        own = a.own
        if own is None:
            rows.append([a.arm, "", "", "", "", "", ""] + ([""] if compared else [])
                        + [a.outcome] + (["0"] if adaptive else []))
            continue
        ass = own.assessment
        summaries = own.posterior
        rows.append([
            a.arm, _interval(summaries[0]) if summaries else "",
            _interval(summaries[-1]) if len(summaries) > 2 else "",
            _probability(ass.benefit), _probability(ass.predictive), ass.decision,
            _probability(a.pr_best)] + ([_probability(a.pr_best_continuing)] if compared else [])
            + [a.outcome]
            + ([_probability(a.allocation)] if adaptive else []))
    lines += _table(header, rows)
    first = next((a.own for a in result.arms if a.own is not None), None)
    if first is not None:
        lines.append("Pr(benefit) of each arm ARM: " + _generic(first.statement, first, result))
    lines.append("Pr(best): posterior probability that the arm is the best among the arms "
                 "in the study at this look" + ("; continuing: among the arms that continue "
                                                "after their own rules (what dropping and "
                                                "selection compare)" if compared else ""))
    rule = []
    if result.drop_below is not None:
        rule.append(f"an arm continuing after its own rule is dropped when its Pr(best) "
                    f"among the continuing arms is below {result.drop_below:g}")
    if result.keep is not None and result.look < result.looks:
        verb = "goes" if result.keep == 1 else "go"
        rule.append(f"at most {count(result.keep, 'arm')} {verb} on")
    if rule:
        lines.append("at this look: " + "; ".join(rule))
    for a in result.arms:
        lines.append(f"{a.arm}: {a.outcome.upper()} ({a.why})")
    lines.append(f"study: {result.study.upper()} ({result.study_reason})")
    if adaptive:
        alloc = result.allocation
        assert alloc is not None
        shares = ", ".join(f"{arm} {share:.4f}" for arm, share in alloc["next_block"].items())
        lines.append(f"allocation of the next block ({alloc['kind']}): {shares}")
    return "\n".join(lines)


def _generic(statement: str, decision: Decision, result: ArmsDecision) -> str:
    """The first arm's statement with its name replaced by ARM."""
    arm = next(a.arm for a in result.arms if a.own is decision)
    return statement.replace(f"_{arm} ", "_ARM ").replace(f"({arm})", "(ARM)")


def _interval(s: PosteriorSummary) -> str:
    return f"{_number(s.mean)} ({_number(s.lower)} to {_number(s.upper)})"


def _probability(value: float | None) -> str:
    return "" if value is None else f"{value:.4f}"


def _table(header: list[str], rows: list[list[str]]) -> list[str]:
    """Columns padded to their widest cell."""
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]
    return ["  ".join(cell.ljust(w) for cell, w in zip(r, widths, strict=True)).rstrip()
            for r in [header, *rows]]


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
