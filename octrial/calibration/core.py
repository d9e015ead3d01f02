"""``calibrate``: thresholds, sample size or a stage search, chosen and checked.

Sizing (``n`` among the varied values): for every maximum sample size N in the range
(multiples of the allocation unit), the looks are placed as the request says and the
thresholds are calibrated (or kept) at that N. With a discrete endpoint the type I error
and power are saw-tooth functions of N (Chernick & Liu 2002), so the whole curve is kept
and two rules are offered: the smallest N that passes, and the smallest N from which every
larger N in the range passes (looks that collide at an N leave that N out of both).

Simulated calibrations keep their checkpoints in one folder per calibration (keyed by
the design, the request and the simulation settings; it holds a drawn seed) with one
subfolder per candidate evaluation (see :mod:`octrial.calibration.evaluator`).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from octrial._version import __version__
from octrial.bayesian_oc import METRICS, bayesian_record, calibration_nodes
from octrial.calibration.evaluator import (
    Assessment,
    EngineEvaluator,
    Evaluator,
    LatticeEvaluator,
    evaluator_for,
)
from octrial.calibration.log import Log
from octrial.calibration.nulls import Truths, null_truths
from octrial.calibration.refine import Refined, refine_worst
from octrial.calibration.request import Request, make_request
from octrial.calibration.stages import search
from octrial.calibration.tuning import Choice, Tuner, best_failing
from octrial.calibration.variants import Builder, allocation_unit, looks_at
from octrial.design.model import Design
from octrial.design_prior import assurance_record
from octrial.engines import engine_for
from octrial.engines.exact_lattice import ExactLatticeEngine
from octrial.engines.monte_carlo import MonteCarloSettings
from octrial.errors import DesignError, Problem, SettingsError
from octrial.execution import Execution
from octrial.execution.checkpoints import CheckpointStore
from octrial.rules.boundaries import boundary_table
from octrial.rules.lattice import build_rule

AGREEMENT = 1e-12
"""The fast path and the exact engine must agree this closely on the chosen design."""
REFINE_ROUNDS = 4
"""Calibrations with refined worst points added to the null grid before giving up."""


@dataclass(frozen=True, eq=False)
class Calibration:
    """The outcome of :func:`calibrate`.

    Attributes
    ----------
    request : Request
    original : Design
    design : Design
        The calibrated design (what ``data`` reads as).
    data : dict
        The calibrated design file's data.
    choice : Choice
    truths : Truths
    candidates : DataFrame
        Every candidate examined (``calibration.csv``).
    sizing : DataFrame or None
        One row per maximum sample size (``sizing.csv``), when N varied.
    summary : dict
        The figures the command prints and ``calibration.json`` holds.
    """

    request: Request
    original: Design
    design: Design
    data: dict[str, Any]
    choice: Choice
    truths: Truths
    candidates: pd.DataFrame
    sizing: pd.DataFrame | None
    summary: dict[str, Any]


def _point(design: Design, truths: Truths, row: int) -> dict[str, float]:
    return {arm: float(truths.values[row, j]) for j, arm in enumerate(design.arm_names)}


def _where(design: Design, point: dict[str, float]) -> str:
    return ", ".join(f"{arm} = {v:g}" for arm, v in point.items())


def _figures(design: Design, truths: Truths, a: Assessment) -> str:
    text = f"type I error {a.type1:.4g} at {_where(design, _point(design, truths, a.worst))}"
    if a.power is not None:
        text += f", power {a.power:.4g}"
    if a.bayesian is not None:
        text += ", " + ", ".join(f"{k} {a.bayesian[k]:.4g}" for k in METRICS
                                 if k != "prior_prob_null")
    return text


def with_prior_nodes(design: Design, request: Request, truths: Truths) -> Truths:
    """The null grid (and alternative) with nodes over the design prior appended, when
    the request has Bayesian constraints (see :mod:`octrial.bayesian_oc`)."""
    if not request.constraints:
        return truths
    delta = request.relevant_effect or 0.0
    try:
        nodes = calibration_nodes(design, delta)
    except ValueError as exc:
        raise SettingsError("command line", [Problem(
            "criterion", "a design prior the quadrature can integrate over", str(exc))]
        ) from exc
    return dataclasses.replace(truths, values=np.vstack([truths.values, nodes.truths]),
                               prior=nodes, prior_start=len(truths.values))


def _describe(choice: Choice) -> str:
    looks = choice.design.looks
    n = f"N = {looks.n[-1]} (looks at {', '.join(map(str, looks.n))})"
    parts = [n]
    for name, v in choice.values.items():
        if name != "stages":
            parts.append(f"{name} = {v['value']:.10g}")
    return "; ".join(parts)


class _Search:
    def __init__(self, design: Design, request: Request,
                 extra: tuple[tuple[float, ...], ...] = (),
                 simulation: MonteCarloSettings | None = None,
                 execution: Execution | None = None,
                 seed_store: CheckpointStore | None = None,
                 source: str = "calibrate()") -> None:
        self.design = design
        self.source = source
        self.request = request
        self.execution = execution
        self.simulation = simulation
        self.builder = Builder(design)
        self.truths = with_prior_nodes(design, request, null_truths(
            design, request.null_points, request.alternative, extra, request.null_range))
        self.ev: Evaluator = evaluator_for(design, self.truths, request.method, simulation,
                                           execution, seed_store)
        self.log = Log(design, self.truths, request.alpha, request.power,
                       request.constraints)
        self.tuner = Tuner(self.builder, self.ev, request, self.log)
        self.notes: list[str] = []
        self.curve: pd.DataFrame | None = None
        self.sizing: dict[str, Any] | None = None

    def fail(self, key: str, expected: str, got: str) -> SettingsError:
        """A setting (by its name) that this design cannot meet."""
        return SettingsError(self.source, [Problem(key, expected, got)])

    def constraints_text(self) -> str:
        """The constraints a candidate must meet, in words."""
        parts = [] if self.request.alpha is None else [
            f"type I error <= {self.request.alpha:g}"]
        return " and ".join(parts + [str(c) for c in self.request.constraints])

    # -- the three kinds of search ------------------------------------------------------------
    def thresholds(self) -> Choice:
        choice = self.tuner.tune(self.builder.looks)
        if choice is None:
            raise self.fail("vary", "values that give a valid design",
                            "no valid candidate (see the design file's [looks])")
        if not choice.meets_alpha and self.request.constraints:
            raise self.fail("criterion", "constraints the design can meet by its "
                            f"{self.request.calibrated or 'rule'}",
                            f"{self.constraints_text()} (best found: {_describe(choice)}, "
                            f"{_figures(self.design, self.truths, choice.assessment)})")
        if not choice.meets_alpha:
            raise self.fail("alpha", "a type I error the design can meet by its "
                            f"{self.request.calibrated or 'rule'}",
                            f"{self.request.alpha:g} (best found: {_describe(choice)}, "
                            f"{_figures(self.design, self.truths, choice.assessment)})")
        if not choice.meets_power:
            raise self.fail("power", f"a power the design reaches at N = "
                            f"{choice.design.looks.n[-1]} with {self.constraints_text()}",
                            f"{self.request.power:g} (best found: {_describe(choice)}, "
                            f"{_figures(self.design, self.truths, choice.assessment)})")
        return choice

    def sizes(self) -> Choice:
        lo, hi, step = self.request.sizing_range
        unit = allocation_unit(self.design)
        rows, choices = [], {}
        for n_max in range(lo, hi + 1, step):
            if n_max % unit:
                continue
            sizes = looks_at(self.design.looks, n_max, self.request.looks, unit)
            if sizes is None:
                rows.append({"n": n_max, "note": "looks collide at this N"})
                continue
            looks = self.builder.looks
            looks["n"] = sizes
            choice = self.tuner.tune(looks)
            if choice is None:
                rows.append({"n": n_max, "note": "no valid design at this N"})
                continue
            choices[n_max] = choice
            row = {key: value for key, value in self.log.rows[choice.row - 1].items()
                   if key not in ("candidate", "step", "chosen", "note")}
            row["note"] = ""
            rows.append(row)
        if not choices:
            raise self.fail("n_range", "a range with at least one valid design",
                            f"{lo}:{hi}:{step} (allocation unit {unit})")
        passing = [n for n, c in choices.items() if c.passes]
        first = min(passing) if passing else None
        stable = None
        for n in sorted(choices, reverse=True):
            if not choices[n].passes:
                break
            stable = n
        chosen_n = first if self.request.choose == "first" else stable
        curve = pd.DataFrame(rows)
        curve = curve.drop(columns=[c for c in curve if curve[c].astype(str).isin(
            ["", "nan"]).all() and c != "note"])
        curve.insert(0, "realised", curve["note"] == "")
        curve["smallest_passing"] = curve["n"] == first
        curve["stable_from"] = curve["n"] == stable
        curve["chosen"] = curve["n"] == chosen_n
        self.curve = curve
        self.sizing = {"smallest_passing": first, "stable_from": stable,
                       "rule": self.request.choose, "chosen_n": chosen_n,
                       "range": [lo, hi, step], "allocation_unit": unit,
                       "looks": self.request.looks}
        if chosen_n is None:
            best = best_failing(list(choices.values()))
            rule = ("the smallest N that passes" if self.request.choose == "first" else
                    "the smallest N from which every larger N in the range passes")
            extra = (f"; N = {first} passes but not every larger N does" if first else "")
            raise self.fail("n_range", f"a range containing {rule}, with "
                            f"{self.constraints_text()} and power >= {self.request.power:g}",
                            f"{lo}:{hi} (best found: {_describe(best)}, "
                            f"{_figures(self.design, self.truths, best.assessment)}{extra})")
        return choices[chosen_n]

    def stages(self) -> Choice:
        if not isinstance(self.ev, LatticeEvaluator):
            raise self.fail("search", "a design the exact lattice engine evaluates",
                            f"{self.design.family.name} endpoint")
        chosen, best, notes = search(self.builder, self.request, self.log, self.ev)
        self.notes += notes
        if chosen is None:
            lo, hi, _ = self.request.sizing_range
            got = f"{lo}:{hi}"
            if best is not None:
                got += (f" (best found: {_describe(best)}, "
                        f"{_figures(self.design, self.truths, best.assessment)})")
            raise self.fail("n_range", f"a range containing a {self.request.stages}-stage "
                            f"design with type I error <= {self.request.alpha:g} and power >= "
                            f"{self.request.power:g}", got)
        return chosen


def _check_against_engine(design: Design, truths: Truths, a: Assessment) -> None:
    """The chosen design, recomputed by the exact engine (no caches, no batching)."""
    if engine_for(design, "exact") is not ExactLatticeEngine:
        return
    rows = len(truths.values) if truths.prior_start is None else truths.prior_start
    outcome = ExactLatticeEngine.run(design, truths.values[:rows], estimate=False)
    gap = float(np.max(np.abs(outcome.efficacy.sum(axis=1) - a.prob_success[:rows])))
    if gap > AGREEMENT:
        raise AssertionError(f"calibration fast path and exact engine differ by {gap:g}")


def calibrate(design: Design, source: str = "calibrate()", *,
              simulation: MonteCarloSettings | None = None,
              execution: Execution | None = None, **settings: Any) -> Calibration:
    """Calibrate ``design`` as the settings ask.

    Parameters
    ----------
    design : Design
        Loaded with :func:`octrial.load_design` (its file text is the base of the
        calibrated file).
    source : str
        Where the settings came from, for messages ('command line' for the CLI).
    simulation : MonteCarloSettings, optional
        When candidates are simulated: replicates, seed, or a target standard error
        (which fixes the replicates of every candidate; see
        :mod:`octrial.calibration.evaluator`); default the design's ``[simulation]``.
    execution : Execution, optional
        When candidates (or the assurance) are simulated: workers, backend,
        checkpoints and progress; never changes a number.
    **settings
        See :func:`octrial.calibration.request.make_request`: ``alpha`` (required),
        ``power``, ``alternative``, ``vary``, ``n_range``, ``looks``, ``choose``,
        ``criterion``, ``search``, ``rule``, ``stages``, ``null_points``, ``method``;
        Bayesian constraints as ``criterion=['prob_null_given_success<=0.05', ...]``
        (then ``alpha`` is optional) and ``relevant_effect``.

    Returns
    -------
    Calibration

    Raises
    ------
    SettingsError
        For invalid settings, and when no candidate meets the constraints (the message
        gives the best found); keyed by the settings' names (``n_range``, ``alpha``...).

    Examples
    --------
    >>> import octrial
    >>> from octrial.calibration import calibrate
    >>> design = octrial.load_design("designs/single-arm-response.toml")  # doctest: +SKIP
    >>> result = calibrate(design, alpha=0.05)  # doctest: +SKIP
    >>> result.summary["chosen"]["final"]["value"]  # doctest: +SKIP
    """
    request = make_request(design, source, **settings)
    if design.conduct is not None and (request.search or request.sizes):
        # candidates change the looks' counts, not the enrolment, accrual or lag of
        # [conduct]: they would not be the same study at another size
        raise DesignError(design.source.path, [Problem(
            "conduct", "a design without [conduct] when calibration varies the sample "
            "size (vary n, search)", "a [conduct] table",
            "calibrate thresholds only, or size the study without [conduct] and add it "
            "back with max_enrolment to match")])
    simulation = simulation or MonteCarloSettings()
    execution, seed_store = (execution or Execution()).within({
        "calibration": repr(request), "design_sha256": design.source.sha256,
        "design": repr(design), "simulation": repr(simulation), "octrial": __version__})
    extra: tuple[tuple[float, ...], ...] = ()
    history: list[str] = []
    for _ in range(REFINE_ROUNDS):
        run = _Search(design, request, extra, simulation, execution, seed_store, source)
        run.notes += history
        try:
            if request.search:
                choice = run.stages()
            elif request.sizes:
                choice = run.sizes()
            else:
                choice = run.thresholds()
        finally:
            run.ev.finish()
        refined = refine_worst(choice.design, run.truths, choice.assessment,
                               request.null_range)
        if refined is None or request.alpha is None or refined.type1 <= request.alpha:
            break
        # the grid missed a worse point between its nodes: add it and calibrate again
        missed = refined.type1
        where = ", ".join(f"{arm} = {v:.6g}" for arm, v in zip(design.arm_names,
                                                                refined.point, strict=True))
        history.append(f"between grid points the type I error reached {refined.type1:.6g} "
                       f"at {where}; that point was added to the null grid and the "
                       "calibration repeated")
        extra = (*extra, refined.point)
    else:
        raise run.fail("null_points", "a null grid on which the calibration holds between "
                       "grid points", f"{request.null_points} (type I error {missed:.6g} "
                       f"> alpha at {where} after {REFINE_ROUNDS} rounds; use more "
                       "points)")
    run.log.choose(choice.row)
    if isinstance(run.ev, LatticeEvaluator):
        # simulated assessments (a design file asking for Monte Carlo) are not exact
        _check_against_engine(choice.design, run.truths, choice.assessment)
    data = run.builder.data_for(choice.looks)
    data["name"] = f"{design.name}.calibrated"
    summary = _summary(run, choice, refined)
    calibrated = dataclasses.replace(choice.design, name=data["name"])  # as the file reads
    return Calibration(request, design, calibrated, data, choice, run.truths,
                       run.log.frame(), run.curve, summary)


def _summary(run: _Search, choice: Choice, refined: Refined | None) -> dict[str, Any]:
    design, truths, a = choice.design, run.truths, choice.assessment
    request = run.request
    out: dict[str, Any] = {
        "task": ("stage search" if request.search else
                 "sizing" if request.sizes else "thresholds"),
        "alpha": request.alpha,
        "power_target": request.power,
        "alternative": (None if request.alternative is None else
                        dict(zip(design.arm_names, request.alternative, strict=True))),
        "null_grid": truths.description,
        "type1_error": a.type1,
        "type1_error_se": a.type1_se,
        "worst_null_point": _point(design, truths, a.worst),
        "type1_error_refined": None if refined is None else refined.type1,
        "worst_null_point_refined": None if refined is None else dict(
            zip(design.arm_names, refined.point, strict=True)),
        "power": a.power,
        "power_se": a.power_se if a.power is not None else None,
        "expected_n_null": a.expected_n_null,
        "null_reference_point": _point(design, truths, truths.reference),
        "expected_n_alternative": a.expected_n_alternative,
        "chosen": choice.values,
        "looks_n": list(design.looks.n),
        "method": "exact" if run.ev.exact else "monte-carlo",
        "simulation": _simulation(run.ev, run.simulation),
        "evaluations": run.ev.evaluations,
        "candidates": len(run.log.rows),
        "notes": run.notes,
    }
    if request.search:
        out["search"] = {"criterion": request.search, "rule": request.rule,
                         "stages": request.stages, "range": list(request.sizing_range)}
    if run.sizing is not None:
        out["sizing"] = run.sizing
    if design.family.lattice:
        table = boundary_table(design, build_rule(design))
        if not design.two_arm:
            out["boundaries"] = [
                {"look": int(r["look"]), "n": int(r["n"]), "efficacy": r["efficacy_rule"],
                 "futility": r["futility_rule"]} for _, r in table.iterrows()]
    out["assurance"] = assurance_record(design, settings=run.simulation,
                                        execution=run.execution)
    if request.null_range is not None:
        arm = design.arm_names[1] if design.two_arm else design.arm_names[0]
        low, high = request.null_range
        out["null_range"] = {
            "arm": arm, "low": low, "high": high,
            "assumption": (f"The type I error is controlled only for {arm} values from "
                           f"{low:g} to {high:g} in the null region (--null-range); outside "
                           "that range it may be larger.")}
        out["assumptions"] = [out["null_range"]["assumption"]]
    if request.constraints:
        out["criteria"] = [str(c) for c in request.constraints]
        out["relevant_effect"] = request.relevant_effect
        out["bayesian_at_calibration_nodes"] = a.bayesian
        out["calibration_nodes"] = truths.prior.description
        found = out["bayesian_operating_characteristics"] = bayesian_record(
            design, out["assurance"], request.relevant_effect, run.execution)
        missed = [str(c) for c in request.constraints
                  if found and c.name in found and not c.met(found[c.name])]
        if missed:
            # met on the calibration's nodes, missed by the full quadrature (a margin
            # below the nodes' accuracy): say so rather than hide it
            out["notes"] = [*out["notes"], "by the full quadrature the chosen design "
                            "misses " + ", ".join(missed) + " (met on the calibration's "
                            "quadrature nodes); choose a slightly stricter value"]
    if all(arm.prior is not None for arm in design.arms):
        out["prior_probability_of_claim"] = design.family.prior_probability_of_claim(design)
    else:
        out["prior_probability_of_claim"] = None
    return out


def _simulation(ev: Evaluator, settings: MonteCarloSettings | None) -> dict[str, Any] | None:
    if ev.exact or not isinstance(ev, EngineEvaluator):
        return None
    target = None if settings is None else settings.target_se
    return {"seed": ev.seed, "seed_drawn": ev.seed_drawn, "replicates": ev.replicates,
            **({"target_se": target} if target is not None else {}),
            "common_random_numbers": "every candidate simulated with this seed",
            "scenarios_resumed": ev.scenarios_resumed}


__all__ = ["Calibration", "calibrate", "make_request"]
