"""Calibration of the per-arm final threshold of a several-arm study by simulation.

For the designs the exact several-arm engine does not cover (response-adaptive
allocation, dropping on Pr(best), selection of arms), or when asked to simulate. The
final threshold is read at the last look only, so for a given random stream everything
before it is the same whatever its value: each null point is simulated once (one seed,
:func:`octrial.multiarm.final_values.final_values`), recording per study and arm its
success before the last look or its final posterior probability of benefit. The
family-wise error and every arm's type I error are then step functions of the threshold,
counted exactly for every candidate (every recorded final probability at or above
``floor``) on the same simulated studies (common random numbers). The chosen threshold
is the smallest candidate whose estimated error, largest over the null points, is at
most the goal ``alpha - margin * sqrt(alpha (1 - alpha) / replicates)`` (``margin`` 0 by
default: the goal is ``alpha`` itself).

The guarantee is up to Monte Carlo error: the estimated error at the chosen threshold
has standard error ``se`` (binomial, at the worst null point), and the true error may
exceed ``alpha`` by a few ``se``; a margin of z standard errors (``--se-margin z``) makes
that less likely, at the cost of a stricter threshold. The search also reuses the
studies that chose the threshold to estimate its error (selection on the same noise), so
the reported error is slightly optimistic; re-simulating the calibrated design with
another seed (``octrial run``) gives an unbiased estimate.

The null points are the line of :func:`octrial.calibration.arms.global_null` (every arm
on its null boundary, over control values). With fixed allocation and per-arm rules the
global null is the worst case (docs/multi-arm-exact.md); with adaptive allocation,
dropping or selection the arms are coupled and no such result is known to us: the line
is searched as an assumption, stated in calibration.json, and other null configurations
(some arms better than the control) should be checked with ``octrial run``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from octrial._version import __version__
from octrial.calibration.arms import TARGETS, ArmsCalibration, null_line, with_threshold
from octrial.execution import Execution, run_grid
from octrial.multiarm.engine import BATCH
from octrial.multiarm.final_values import final_benefit_tables, final_values, refusal
from octrial.multiarm.model import MultiArmDesign
from octrial.multiarm.tables import MultiArmTables, build_tables
from octrial.multiarm.tallies import scenario_identity
from octrial.rules.stop import DECISION_TOLERANCE

__all__ = ["NULL_LINE_ASSUMPTION", "PointTask", "SimulatedCalibration",
           "calibrate_simulated", "error_curves", "point_values", "simulated_details",
           "simulated_summary"]


@dataclass(frozen=True, eq=False)
class SimulatedCalibration(ArmsCalibration):
    """:class:`~octrial.calibration.arms.ArmsCalibration` found by simulation.

    Attributes
    ----------
    se : float
        Monte Carlo standard error of ``error`` (binomial, at ``worst``).
    next_threshold : float or None
        The largest candidate below ``threshold`` (it fails the goal; ``None``: none).
    next_error : float
        The error there (``nan`` when there is none).
    goal : float
        The level the estimated error was held to: ``alpha - margin * sqrt(alpha (1 -
        alpha) / replicates)``.
    margin : float
        Standard errors taken off ``alpha``.
    replicates, seed : int
        Simulated studies per null point, and the seed (null point i is the engine's
        scenario i).

    ``log`` holds every step of the error curve: the smallest candidate giving each
    value (``threshold``, ``error``, ``error_se``); the candidates between two steps give
    the error of the step below them.
    """

    se: float
    next_threshold: float | None
    next_error: float
    goal: float
    margin: float
    replicates: int
    seed: int


@dataclass(frozen=True)
class PointTask:
    """One null point's simulation (picklable for the workers of
    :func:`octrial.execution.run_grid`; its result can be kept as a checkpoint)."""

    design: MultiArmDesign
    tables: MultiArmTables | None
    benefit: np.ndarray | None
    row: tuple[float, ...]
    replicates: int
    seed: int
    index: int

    def identity(self) -> dict[str, Any]:
        """What this point's checkpoint records."""
        return scenario_identity(self.design.source.sha256, self.seed, self.index,
                                 "several-arm final values")

    def problems(self, arrays: dict[str, np.ndarray]) -> list[str]:
        """What is wrong with ``arrays`` as this point's recorded values."""
        shape = (self.replicates, len(self.design.pairs))
        values = arrays.get("values")
        if values is None or np.shape(values) != shape:
            return [f"values: shape {shape} expected"]
        finite = values[np.isfinite(values)]
        if np.isnan(values).any() or np.any((finite < 0) | (finite > 1)):
            return ["values: probabilities in [0, 1], +inf or -inf expected"]
        return []


def point_values(task: PointTask) -> dict[str, np.ndarray]:
    """The recorded values of one null point
    (:func:`~octrial.multiarm.final_values.final_values`)."""
    return {"values": final_values(task.design, task.row, task.replicates, task.seed,
                                   task.index, task.tables, task.benefit)}


def error_curves(values: list[np.ndarray], nulls: list[np.ndarray], candidates: np.ndarray,
                 target: str) -> tuple[np.ndarray, np.ndarray]:
    """The controlled error at every candidate threshold, largest over the null points,
    and the index of the point where it is largest.

    Parameters
    ----------
    values : list of ndarray, shape (replicates, T)
        Per null point, :func:`~octrial.multiarm.final_values.final_values`.
    nulls : list of ndarray of bool, shape (T,)
        Per null point, which arms are null.
    candidates : ndarray
        Thresholds, ascending.
    target : {'family-wise', 'per-arm'}

    Notes
    -----
    A study's arm succeeds at threshold ``u`` when its value is ``>= u - tol`` (the stop
    rule's tolerance), so the number of successes is the number of sorted values at or
    above ``u - tol``: one search per candidate.
    """
    worst = np.full(candidates.size, -1.0)
    where = np.zeros(candidates.size, np.int64)
    edge = candidates - DECISION_TOLERANCE
    for i, (v, null) in enumerate(zip(values, nulls, strict=True)):
        reps = v.shape[0]
        if not null.any():
            continue
        if target == "family-wise":
            scores = [v[:, null].max(axis=1)]
        else:
            scores = [v[:, t] for t in np.flatnonzero(null)]
        error = np.zeros(candidates.size)
        for s in scores:
            s = np.sort(s)
            error = np.maximum(error, (reps - np.searchsorted(s, edge, side="left")) / reps)
        higher = error > worst
        worst[higher] = error[higher]
        where[higher] = i
    return worst, where


def calibrate_simulated(design: MultiArmDesign, alpha: float, *, replicates: int, seed: int,
                        target: str = "family-wise",
                        null_range: tuple[float, float] | None = None,
                        null_points: int = 19, margin: float = 0.0,
                        floor: float = 0.5,
                        execution: Execution | None = None) -> SimulatedCalibration:
    """Smallest common final threshold whose simulated error stays at most the goal
    (module docstring) at every point of the null line.

    Parameters
    ----------
    design : MultiArmDesign
        Fixed or response-adaptive allocation; interim thresholds, dropping and
        selection are kept.
    alpha : float
        The largest error allowed, in (0, 1).
    replicates, seed : int
        Simulated studies per null point, and the seed.
    target : {'family-wise', 'per-arm'}
    null_range, null_points
        The control values of the null line (:func:`~octrial.calibration.arms.null_line`).
    margin : float
        Standard errors (at ``alpha``) taken off ``alpha``: the goal.
    floor : float
        Smallest threshold considered.
    execution : Execution, optional
        Workers for the null points (never changes a number) and where to keep the
        finished ones, so that an interrupted calibration resumes.

    Raises
    ------
    ValueError
        For settings out of range, or a design whose final threshold cannot be varied
        alone (:func:`~octrial.multiarm.final_values.refusal`).
    """
    if target not in TARGETS:
        raise ValueError(f"target: expected one of {', '.join(TARGETS)}; got {target!r}")
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha: expected a number in (0, 1); got {alpha}")
    if replicates < 1:
        raise ValueError(f"replicates: expected a whole number >= 1; got {replicates}")
    if not margin >= 0.0:
        raise ValueError(f"margin: expected a number >= 0; got {margin}")
    why = refusal(design)
    if why is not None:
        raise ValueError(f"the final threshold cannot be calibrated by simulation: {why}")
    points = null_line(design, null_range, null_points)
    fixed = not design.allocation.adaptive
    tables = build_tables(design) if fixed else None
    benefit = final_benefit_tables(design) if fixed else None
    tasks = [PointTask(design, tables, benefit, _design_order(design, point), replicates,
                       seed, i) for i, point in enumerate(points)]
    execution = Execution() if execution is None else execution
    store = execution.store({
        "design_sha256": design.source.sha256, "design": repr(design),
        "engine": "several-arm final values", "replicates": replicates, "seed": seed,
        "points": points.tolist(), "batch": BATCH, "octrial": __version__})
    results, _ = run_grid(point_values, tasks, execution, store, unit="null points")
    values = [r["values"] for r in results]
    # every arm is null on this line by construction; the root of its boundary may
    # round a hair to the better side, which must not take the arm out of the error
    nulls = [np.ones(len(design.pairs), dtype=bool) for _ in points]
    found = np.unique(np.concatenate([v[:, null].ravel()
                                      for v, null in zip(values, nulls, strict=True)]))
    candidates = found[(found >= floor) & (found <= 1.0)]
    if candidates.size == 0:
        raise ValueError(f"no simulated final posterior probability of a null arm reaches "
                         f"{floor}")
    errors, where = error_curves(values, nulls, candidates, target)
    se = np.sqrt(errors * (1 - errors) / replicates)
    # the log: every step of the error curve (the smallest candidate giving each value;
    # the candidates between two steps give the same error as the step below them)
    step = np.r_[True, errors[1:] != errors[:-1]]
    log = pd.DataFrame({"threshold": candidates[step], "error": errors[step],
                        "error_se": se[step]})
    goal = alpha - margin * float(np.sqrt(alpha * (1 - alpha) / replicates))
    passing = np.flatnonzero(errors <= goal)
    # the error falls as the threshold rises (counts of values at or above it), so the
    # passing candidates are the top of the list
    chosen = int(passing[0]) if passing.size else candidates.size - 1
    threshold = float(candidates[chosen]) if passing.size else None
    below = chosen - 1 if passing.size and chosen > 0 else -1
    designs = tuple(with_threshold(p, float(candidates[chosen])) for p in design.pairs)
    return SimulatedCalibration(
        threshold, float(errors[chosen]), points[where[chosen]], designs, log,
        se=float(se[chosen]),
        next_threshold=float(candidates[below]) if below >= 0 else None,
        next_error=float(errors[below]) if below >= 0 else float("nan"),
        goal=goal, margin=margin, replicates=replicates, seed=seed)


def _design_order(design: MultiArmDesign, point: np.ndarray) -> tuple[float, ...]:
    """A null point (treatment arms, then the control) in ``design.arm_names`` order
    (the control first)."""
    values = tuple(float(v) for v in point)
    return (values[-1], *values[:-1]) if design.shared_control else values


NULL_LINE_ASSUMPTION = (
    "the error is searched on the null line (every arm on its null boundary, over "
    "control values); with adaptive allocation, dropping or selection the arms are "
    "coupled and that the global null is the worst case is an assumption: check other "
    "null configurations with octrial run")


def simulated_details(result: SimulatedCalibration) -> dict[str, object]:
    """What calibration.json records of a calibration by simulation."""
    return {"error_se": result.se, "goal": result.goal, "se_margin": result.margin,
            "next_threshold": result.next_threshold,
            "next_error": None if result.next_threshold is None else result.next_error,
            "replicates": result.replicates, "seed": result.seed,
            "guarantee": "up to Monte Carlo error: the error is estimated from "
                         f"{result.replicates} simulated studies per null point (standard "
                         f"error {result.se:.2g}), on the studies that chose the "
                         "threshold; re-simulate with another seed to confirm",
            "null_line": NULL_LINE_ASSUMPTION}


def simulated_summary(name: str, result: SimulatedCalibration, alpha: float,
                      target: str) -> list[str]:
    """The lines the command prints."""
    assert result.threshold is not None
    goal = (f"{alpha:g}" if result.margin == 0 else
            f"{result.goal:.4g} (alpha {alpha:g} - {result.margin:g} SE)")
    lines = [f"{name}: final threshold {result.threshold:.6g} for every arm; {target} "
             f"error {result.error:.4g} (Monte Carlo SE {result.se:.2g}) <= {goal}, largest "
             f"over the null line; {result.replicates} simulated studies per null point, "
             f"seed {result.seed}"]
    if result.next_threshold is not None:
        lines.append(f"the next smaller candidate, {result.next_threshold:.6g}, gives "
                     f"{result.next_error:.4g}")
    lines.append("The guarantee holds up to Monte Carlo error; re-simulate the calibrated "
                 "design with another seed (octrial run --seed) to confirm it.")
    return lines
