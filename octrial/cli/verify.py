"""``octrial verify``: re-compute a sponsor's claimed operating characteristics."""

from __future__ import annotations

import sys
from pathlib import Path

import click
import pandas as pd

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
from octrial.multiarm.load import load_multiarm
from octrial.plurals import count
from octrial.provenance import now
from octrial.review import read_claims, verify
from octrial.review.arms_verification import (
    read_arms_claims,
    several_arms,
    verify_arms,
    write_arms_verification,
)
from octrial.review.verification import (
    DEFAULT_ALPHA,
    DEFAULT_TOLERANCE,
    Verification,
    write_verification,
)

EXIT_DISCREPANT = 1


@click.command("verify", epilog=f"Caution: {CAUTION}")
@design_argument
@click.argument("claims", metavar="CLAIMS.csv", type=click.Path(dir_okay=False))
@click.option("--out", "out", type=click.Path(file_okay=False), default=None,
              help="Folder for verify.csv and verify.json [default: reports/<design name>/].")
@click.option("--alpha", type=click.FloatRange(0, 1, min_open=True, max_open=True),
              default=DEFAULT_ALPHA, show_default=True,
              help="Family-wise error rate of the Holm-adjusted verdicts.")
@click.option("--tolerance", type=click.FloatRange(0, 0.01), default=DEFAULT_TOLERANCE,
              show_default=True,
              help="Numerical tolerance of exact computation (probability scale; times the "
                   "maximum n for expected_n), added to each claim's rounding allowance.")
@click.option("--replicates", type=click.IntRange(1), default=None,
              help="Monte Carlo recomputation only: replicates per scenario "
                   "[default: max(100000, 10 x the largest claim's)].")
@click.option("--seed", type=click.IntRange(0, 2**63 - 1), default=None,
              help="Monte Carlo recomputation only: overrides simulation.seed.")
@simulation_options
@reports_input_errors
def verify_command(design: str, claims: str, out: str | None, alpha: float, tolerance: float,
                   replicates: int | None, seed: int | None,
                   simulation: SimulationOptions) -> None:
    """Re-compute the operating characteristics claimed in CLAIMS.csv for DESIGN.

    Each claim (one row: the scenario's true_<arm> values, metric, claimed, and optionally
    replicates and se) is recomputed, exactly where possible, and judged by a two-sided
    test allowing for both Monte Carlo errors and the claim's rounding; p-values are
    Holm-adjusted over all claims. Writes verify.csv and verify.json.

    A Monte Carlo recomputation saves each finished scenario under OUT/.partial; an
    interrupted run started again with the same arguments resumes where it stopped.
    Exit codes: 0 every claim consistent; 1 any claim discrepant; 2 bad input;
    130 interrupted.
    """
    if replicates is not None and simulation.target_se is not None:
        raise click.UsageError("--replicates and --target-se exclude each other")
    started = now()
    if several_arms(design):
        _verify_arms(design, claims, out, alpha, tolerance, started, simulation.quiet)
        return
    loaded = read_design(design)
    table = read_claims(claims, loaded)
    folder = Path(out) if out else default_out(loaded)
    execution = simulation.execution(folder)
    with resumable(execution):
        result = verify(loaded, table, alpha=alpha, tolerance=tolerance,
                        replicates=replicates, seed=seed, target_se=simulation.target_se,
                        max_replicates=simulation.max_replicates, execution=execution)
    written = write_verification(folder, result, started=started, command=sys.argv)
    execution.remove_checkpoints()
    if not simulation.quiet:
        click.echo(_summary(result))
        click.echo("wrote " + ", ".join(str(p) for p in written), err=True)
        click.echo(f"Caution: {CAUTION}", err=True)
    if result.discrepant:
        raise SystemExit(EXIT_DISCREPANT)


def _verify_arms(design: str, claims: str, out: str | None, alpha: float, tolerance: float,
                 started: str, quiet: bool) -> None:
    """A design with several treatment arms: every claim recomputed exactly."""
    loaded = load_multiarm(design)
    result = verify_arms(loaded, read_arms_claims(claims, loaded), alpha=alpha,
                         tolerance=tolerance)
    folder = Path(out) if out else Path("reports") / loaded.name
    written = write_arms_verification(folder, result, started=started, command=sys.argv)
    if not quiet:
        info = result.info
        click.echo(f"{loaded.name}: {count(info['claims_total'], 'claim')} at "
                   f"{count(info['scenarios'], 'scenario')}, recomputed by the exact "
                   "several-arm engine")
        view = result.table[["line", "metric", "claimed", "recomputed", "z", "p", "p_holm",
                             "verdict"]]
        click.echo(_fixed(view))
        click.echo(f"{info['discrepant']} of {count(info['claims_total'], 'claim')} "
                   f"discrepant (two-sided test, Holm-adjusted, family-wise alpha {alpha:g}).")
        click.echo("wrote " + ", ".join(str(p) for p in written), err=True)
        click.echo(f"Caution: {CAUTION}", err=True)
    if result.discrepant:
        raise SystemExit(EXIT_DISCREPANT)


def _summary(result: Verification) -> str:
    design, info, table = result.design, result.info, result.table
    lines = [f"{design.name}: {count(info['claims_total'], 'claim')} at "
             f"{count(info['scenarios'], 'scenario')}, recomputed by the {info['engine']} engine"
             + _simulated(info)]
    truth = [f"true_{arm}" for arm in design.arm_names]
    view = table[["line", *truth, "metric", "claimed", "recomputed", "z", "p", "p_holm",
                  "verdict"]].rename(columns={c: c.removeprefix("true_") for c in truth})
    lines.append(_fixed(view))
    if result.added:
        where = "; ".join(", ".join(f"{arm} = {v:g}" for arm, v in
                                    zip(design.arm_names, t, strict=True))
                          for t in result.added)
        lines.append(f"Not in the design's scenario grid (evaluated all the same): {where}.")
    total = info["claims_total"]
    verdict = (f"{info['discrepant']} of {count(total, 'claim')} discrepant"
               if info["discrepant"] else
               "The claim is consistent" if total == 1 else f"All {total} claims consistent")
    lines.append(f"{verdict} (two-sided test, Holm-adjusted, family-wise alpha "
                 f"{info['alpha']:g}).")
    return "\n".join(lines)


def _simulated(info: dict) -> str:
    if info["seed"] is None:
        return ""
    if info.get("target_se") is not None:
        return (f" (until every standard error is at most {info['target_se']:g}, at most "
                f"{count(info['max_replicates'], 'replicate')} per scenario, seed "
                f"{info['seed']})")
    return f" ({count(info['replicates'], 'replicate')} per scenario, seed {info['seed']})"


def _fixed(view: pd.DataFrame) -> str:
    formats = {"recomputed": "{:.6g}".format, "z": "{:.2f}".format, "p": "{:.3g}".format,
               "p_holm": "{:.3g}".format}
    return view.to_string(index=False, formatters=formats)
