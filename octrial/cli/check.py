"""``octrial check``: the workflow checks of a design, written to a folder."""

from __future__ import annotations

import sys
import warnings
from pathlib import Path

import click

from octrial.caution import CAUTION
from octrial.checks import CHECKS, CheckSettings, check
from octrial.checks.files import write_outputs
from octrial.cli.common import default_out, design_argument, read_design, reports_input_errors
from octrial.errors import InputError, NumericalWarning, Problem, single
from octrial.plurals import count
from octrial.provenance import display_command, now
from octrial.review.arms_verification import several_arms

EXIT_FAILED = 1


def _range(option: str, text: str | None) -> tuple[float, float] | None:
    if text is None:
        return None
    parts = text.split(":")
    try:
        low, high = (float(p) for p in parts)
    except ValueError:
        raise single(option, "", "LOW:HIGH (two numbers separated by a colon)", text) from None
    return low, high


def _checks(text: str | None) -> tuple[str, ...]:
    if text is None:
        return CHECKS
    return tuple(part.strip() for part in text.split(",") if part.strip())


@click.command("check")
@design_argument
@click.option("--out", "out", type=click.Path(file_okay=False), default=None,
              help="Folder for checks.json, sbc.csv, sensitivity.csv and the figures "
                   "[default: reports/<design name>/].")
@click.option("--simulations", type=int, default=CheckSettings.simulations, show_default=True,
              help="Simulated studies for simulation-based calibration and sensitivity.")
@click.option("--bins", type=int, default=CheckSettings.bins, show_default=True,
              help="Histogram bins for simulation-based calibration.")
@click.option("--draws", type=int, default=CheckSettings.draws, show_default=True,
              help="Posterior draws per study for the rank statistic (draws + 1 a multiple "
                   "of bins).")
@click.option("--alpha", type=float, default=CheckSettings.alpha, show_default=True,
              help="A posterior computation fails calibration when its Holm-adjusted "
                   "p-value is below this.")
@click.option("--seed", type=int, default=None,
              help="Random seed [default: simulation.seed, else drawn and recorded].")
@click.option("--only", metavar="CHECKS", default=None,
              help="Comma-separated subset of: " + ", ".join(CHECKS) + ".")
@click.option("--outcome-range", metavar="LOW:HIGH", default=None,
              help="Normal endpoints: the values one subject's outcome can take; prior "
                   "predictive mass outside is flagged as impossible.")
@click.option("--plausible", metavar="LOW:HIGH", default=None,
              help="The plausible range of the observed effect (its scale is given in "
                   "checks.json: for time-to-event designs the observed hazard on one arm, "
                   "the observed log hazard ratio on two); replaces the endpoint's "
                   "default.")
@click.option("--quiet", is_flag=True, help="Print nothing but errors.")
@reports_input_errors
def check_command(design: str, out: str | None, simulations: int, bins: int, draws: int,
                  alpha: float, seed: int | None, only: str | None, outcome_range: str | None,
                  plausible: str | None, quiet: bool) -> None:
    """Check the premises of DESIGN: prior predictive distributions, simulation-based
    calibration of every posterior computation, posterior shrinkage and z-scores,
    Monte Carlo accuracy of posterior tail quantiles and, for borrowing designs,
    prior-data conflict. Time-to-event studies are simulated subject by subject with
    their conduct (events, time at risk and look times per look).

    Writes checks.json (every verdict and number), sbc.csv, sensitivity.csv, one PNG
    histogram per calibrated quantity and the prior predictive, sensitivity and
    tail-accuracy figures; 'octrial report' on the same folder shows them.

    Exit codes: 0 every posterior computation passes calibration (flags on the priors
    are warnings); 1 a computation fails calibration; 2 bad input.
    """
    started = now()
    settings = CheckSettings(
        simulations=simulations, bins=bins, draws=draws, alpha=alpha, seed=seed,
        outcome_range=_range("--outcome-range", outcome_range),
        plausible=_range("--plausible", plausible), checks=_checks(only))
    if several_arms(design):  # 2-8 treatment arms: docs/multi-arm.md
        raise InputError(design, [Problem(
            "arms", "one treatment arm (workflow checks for several-arm designs are not "
            "available yet; check each arm's own two-arm design)",
            "several treatment arms")])
    loaded = read_design(design)
    if settings.outcome_range is not None and not loaded.family.outcome_range_needed:
        raise single("--outcome-range", "", "a normal endpoint (binary and count outcomes "
                     "have their own range)", f"a {loaded.family.name} endpoint")
    folder = default_out(loaded) if out is None else Path(out)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", NumericalWarning)
        outcome = check(loaded, settings)
    notes = list(dict.fromkeys(str(w.message) for w in caught
                               if issubclass(w.category, NumericalWarning)))
    outcome.record.update({"command": display_command(sys.argv), "started": started,
                           "finished": now(), "warnings": notes})
    written = write_outputs(outcome, folder)
    for note in notes:
        click.echo(f"warning: {note}", err=True)
    if not quiet:
        click.echo(f"{loaded.name}: workflow checks (seed {outcome.record['seed']})")
        for line in outcome.record["verdicts"]:
            click.echo(f"  {line['verdict'].upper():<14} {line['check']}: {line['item']}"
                       f" - {line['detail']}")
        times = ", ".join(f"{k} {v:.1f} s" for k, v in
                          outcome.record["timings_seconds"].items())
        click.echo(f"time: {times}")
        click.echo(f"wrote {count(len(written), 'file')} in {folder}", err=True)
        click.echo(f"Caution: {CAUTION}", err=True)
    if outcome.failed:
        raise SystemExit(EXIT_FAILED)
