"""``octrial calibrate``: thresholds, sample size or a stage search meeting alpha and power."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from octrial.bayesian_oc import METRICS
from octrial.calibration import calibrate
from octrial.calibration.arms import TARGETS as ARMS_TARGETS
from octrial.calibration.arms import ArmsCalibration, calibrate_multiarm, write_arms_calibration
from octrial.calibration.arms_simulated import (
    SimulatedCalibration,
    calibrate_simulated,
    simulated_details,
    simulated_summary,
)
from octrial.calibration.files import summary_lines, write_calibration
from octrial.calibration.request import LOOK_RULES, RULES, SEARCHES, SIZING_RULES
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
from octrial.engines.arms_exact import unsupported
from octrial.execution import Execution
from octrial.multiarm.load import load_multiarm
from octrial.multiarm.model import MultiArmDesign
from octrial.provenance import now
from octrial.review.arms_verification import several_arms


@click.command("calibrate", epilog=f"Caution: {CAUTION}")
@design_argument
@click.option("--alpha", type=float, default=None,
              help="Largest type I error allowed anywhere in the null region (required "
                   "unless --criterion gives Bayesian constraints).")
@click.option("--power", type=float, default=None,
              help="Target power at --alternative (needed for sizing and searches).")
@click.option("--alternative", default=None, metavar="VALUE[,VALUE]",
              help="True value(s) where power is computed, one per arm in the design's "
                   "order (treatment, control).")
@click.option("--vary", default=None, metavar="LIST",
              help="What to vary, comma-separated: final (default), efficacy, futility, "
                   "futility-predictive, eta, n.")
@click.option("--n-range", "n_range", default=None, metavar="MIN:MAX[:STEP]",
              help="Maximum sample sizes to try (with --vary n, or --search).")
@click.option("--looks", type=click.Choice(LOOK_RULES), default=None,
              help="When N varies: interim looks at the same information fractions "
                   "(default) or the same counts.")
@click.option("--choose", type=click.Choice(SIZING_RULES), default=None,
              help="Sizing rule: the smallest N that passes, or (default) the smallest N "
                   "from which every larger N in the range passes.")
@click.option("--criterion", "criterion", multiple=True, metavar="RULE|NAME<=VALUE",
              help="Repeatable. 'power' or 'optimal': how grid searches pick (largest "
                   "power, or smallest expected N under the null, the default when --power "
                   "is given). NAME<=VALUE or NAME>=VALUE: a constraint on a Bayesian "
                   "operating characteristic under the design prior (" + ", ".join(METRICS)
                   + "), met together with --alpha when both are given.")
@click.option("--relevant-effect", "relevant_effect", type=float, default=None,
              help="Bayesian power over the clinically relevant region: effect at least "
                   "this far beyond the null boundary [default: the whole alternative].")
@click.option("--search", type=click.Choice(SEARCHES), default=None,
              help="Stage search by Simon's criteria: optimal (smallest expected N under "
                   "the null) or minimax (smallest maximum N).")
@click.option("--rule", type=click.Choice(RULES), default=None,
              help="Stage search: count bounds or posterior thresholds "
                   "[default: as the design states its rule].")
@click.option("--stages", type=int, default=None,
              help="Stage search: number of looks [default: the design's].")
@click.option("--null-range", "null_range", default=None, metavar="LOW:HIGH",
              help="Limit the null region searched for the maximum type I error to these "
                   "true values of the treatment arm (one arm) or of the control arm on the "
                   "null boundary (two arms), e.g. control drift within +-0.1 of a "
                   "historical estimate; stated as an assumption [default: the whole null "
                   "region].")
@click.option("--null-points", "null_points", type=int, default=None,
              help="Points of the grid over the null region [default: 50].")
@click.option("--method", type=click.Choice(["auto", "exact", "monte-carlo"]), default=None,
              help="Engine; overrides simulation.method in the design file.")
@click.option("--error-rate", "error_rate", type=click.Choice(ARMS_TARGETS), default=None,
              help="Several treatment arms: which type I error --alpha bounds, the "
                   "family-wise error rate or each arm's own [default: family-wise].")
@click.option("--replicates", type=click.IntRange(1), default=None,
              help="Several treatment arms calibrated by simulation: simulated studies per "
                   "null point [default: simulation.replicates].")
@click.option("--seed", type=click.IntRange(0, 2**63 - 1), default=None,
              help="Several treatment arms calibrated by simulation: overrides "
                   "simulation.seed (calibration.json records the seed used).")
@click.option("--se-margin", "se_margin", type=click.FloatRange(min=0), default=None,
              help="Several treatment arms calibrated by simulation: hold the estimated "
                   "error to alpha minus this many Monte Carlo standard errors "
                   "[default: 0, alpha itself].")
@click.option("--out", "out", type=click.Path(file_okay=False), default=None,
              help="Folder for the outputs [default: reports/<design name>/].")
@simulation_options
@reports_input_errors
def calibrate_command(design: str, out: str | None, simulation: SimulationOptions,
                      **options: object) -> None:
    """Calibrate DESIGN: thresholds, sample size or a multi-stage search.

    Finds the least stringent threshold (--vary final or efficacy) whose type I error
    is at most --alpha everywhere on a grid over the null region (and that meets every
    Bayesian constraint --criterion NAME<=VALUE under the design prior, e.g.
    prob_null_given_success<=0.05; calibration.csv then shows every Bayesian operating
    characteristic of every candidate), optionally with futility
    or eta searched on a grid; with --vary n, the maximum sample size meeting --alpha and
    --power (the whole saw-tooth curve is written); with --search, the optimal or minimax
    multi-stage design. Writes calibration.csv (every candidate examined), sizing.csv
    (with --vary n), calibration.json and <name>.calibrated.toml, a design file that
    octrial run accepts as is.

    Designs without an exact engine are calibrated by simulation, every candidate on the
    same simulated studies (one seed); --target-se then fixes the studies per true value
    for every candidate at 0.25 / SE^2 (capped by --max-replicates). Each candidate's
    finished simulations are saved under OUT/.partial; an interrupted calibration started
    again with the same arguments resumes where it stopped.

    With several treatment arms: the smallest common final threshold keeping the
    family-wise error (or each arm's, --error-rate per-arm) at most --alpha on the line
    of null points over control values, by the exact several-arm engine when it applies,
    otherwise (adaptive allocation, dropping, selection; or --method monte-carlo) by
    simulation: every null point simulated once (--replicates, --seed) and every
    candidate threshold counted on the same studies; the result then holds up to Monte
    Carlo error (its standard error is reported; --se-margin holds the estimate below
    alpha by that many standard errors).

    Exit codes: 0 success; 2 bad input, or no candidate meets the constraints (the
    message gives the best found); nothing is written then; 130 interrupted.
    """
    started = now()
    if several_arms(design):
        _calibrate_arms(design, out, started, simulation, **options)
        return
    for name in ("error_rate", "replicates", "seed", "se_margin"):
        if options.pop(name) is not None:
            raise click.UsageError(f"--{name.replace('_', '-')} applies to designs with "
                                   "several treatment arms")
    loaded = read_design(design)
    settings = {k: v for k, v in options.items() if v is not None and v != ()}
    folder = Path(out) if out else default_out(loaded)
    execution = simulation.execution(folder)
    with resumable(execution):
        result = calibrate(loaded, "command line", simulation=simulation.settings(),
                           execution=execution, **settings)
    written = write_calibration(folder, result, started=started,
                                command=["octrial", *sys.argv[1:]])
    execution.remove_checkpoints()
    if simulation.quiet:
        return
    for line in summary_lines(result):
        click.echo(line)
    click.echo("wrote " + ", ".join(str(p) for p in written), err=True)
    click.echo(f"Caution: {CAUTION}", err=True)


ARMS_OPTIONS = {"alpha", "null_range", "null_points", "error_rate", "method"}
"""The options that apply to a design with several treatment arms."""

SIMULATED_OPTIONS = {"replicates", "seed", "se_margin"}
"""The options that apply when several arms are calibrated by simulation."""


def _calibrate_arms(design: str, out: str | None, started: str,
                    simulation: SimulationOptions, **options: object) -> None:
    """Several treatment arms: the common final threshold, by the exact engine or by
    simulation."""
    given = sorted(k for k, v in options.items() if v is not None and v != ()
                   and k not in ARMS_OPTIONS | SIMULATED_OPTIONS)
    if given:
        raise click.UsageError("with several treatment arms only --alpha, --error-rate, "
                               "--null-range, --null-points, --method, --replicates, "
                               "--seed and --se-margin apply; got "
                               + ", ".join("--" + k.replace("_", "-") for k in given))
    if simulation.target_se is not None:
        raise click.UsageError("with several treatment arms the calibration simulates a "
                               "fixed number of studies per null point (--replicates); "
                               "--target-se does not apply")
    alpha = options.get("alpha")
    if not isinstance(alpha, float) or not 0.0 < alpha < 1.0:
        raise click.BadParameter(f"expected a number in (0, 1); got {alpha}",
                                 param_hint="--alpha")
    null_range = None
    if options.get("null_range") is not None:
        try:
            low, high = (float(v) for v in str(options["null_range"]).split(":"))
        except ValueError:
            raise click.BadParameter("expected LOW:HIGH, two numbers",
                                     param_hint="--null-range") from None
        null_range = (low, high)
    points = options.get("null_points")
    null_points = int(points) if isinstance(points, int) else 19
    target = str(options.get("error_rate") or "family-wise")
    loaded = load_multiarm(design)
    method = str(options.get("method") or loaded.simulation.method)
    why = unsupported(loaded)
    simulate = method == "monte-carlo" or (method == "auto" and why is not None)
    if not simulate:
        if why is not None:
            raise click.UsageError(f"--method exact: no exact engine for this several-arm "
                                   f"design: {why}")
        extra = sorted(k for k in SIMULATED_OPTIONS if options.get(k) is not None)
        if extra:
            raise click.UsageError(", ".join("--" + k.replace("_", "-") for k in extra)
                                   + " apply only to calibration by simulation (this "
                                   "design is calibrated by the exact engine; --method "
                                   "monte-carlo simulates)")
    command = ["octrial", *sys.argv[1:]]
    folder = Path(out) if out else Path("reports") / loaded.name
    result: ArmsCalibration
    execution = simulation.execution(folder)
    try:
        if simulate:
            with resumable(execution):
                result = _simulated(loaded, alpha, target, null_range, null_points,
                                    options, execution)
        else:
            result = calibrate_multiarm(loaded, alpha, target=target,
                                        null_range=null_range, null_points=null_points)
    except ValueError as exc:
        execution.remove_checkpoints()
        raise click.UsageError(str(exc)) from None
    if result.threshold is None:
        execution.remove_checkpoints()
        raise click.UsageError(f"no final threshold keeps the {target} error at or below "
                               f"{alpha:g} (the strictest gives {result.error:.4g})")
    if isinstance(result, SimulatedCalibration):
        written = write_arms_calibration(
            folder, loaded, result, alpha, target, started=started, command=command,
            engine="monte-carlo (several arms)", details=simulated_details(result))
    else:
        written = write_arms_calibration(folder, loaded, result, alpha, target,
                                         started=started, command=command)
    execution.remove_checkpoints()
    if simulation.quiet:
        return
    if isinstance(result, SimulatedCalibration):
        for line in simulated_summary(loaded.name, result, alpha, target):
            click.echo(line)
    else:
        click.echo(f"{loaded.name}: final threshold {result.threshold:.6g} for every arm; "
                   f"{target} error {result.error:.4g} <= {alpha:g} (largest over the "
                   "null line, exact several-arm engine)")
    click.echo("wrote " + ", ".join(str(p) for p in written), err=True)
    click.echo(f"Caution: {CAUTION}", err=True)


def _simulated(design: MultiArmDesign, alpha: float, target: str,
               null_range: tuple[float, float] | None, null_points: int,
               options: dict[str, object], execution: Execution) -> SimulatedCalibration:
    """The simulation's settings from the options and the design file."""
    seed = options.get("seed")
    seed = design.simulation.seed if seed is None else seed
    if not isinstance(seed, int):
        raise click.UsageError("calibration by simulation needs a seed: --seed or "
                               "simulation.seed in the design file")
    replicates = options.get("replicates")
    margin = options.get("se_margin")
    return calibrate_simulated(
        design, alpha, target=target, null_range=null_range, null_points=null_points,
        replicates=int(replicates) if isinstance(replicates, int)
        else design.simulation.replicates, seed=seed,
        margin=float(margin) if isinstance(margin, float) else 0.0, execution=execution)
