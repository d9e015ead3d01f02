"""Calibration of the per-arm final success threshold of a several-arm study.

Every treatment arm succeeds at the final analysis when its posterior probability of
benefit reaches one common threshold; the search finds the smallest threshold whose
family-wise error rate (Pr(at least one null arm succeeds)), or whose largest per-arm
type I error, stays at or below ``alpha`` at every point of a null grid, evaluated by the
exact several-arm engine (:mod:`octrial.engines.arms_exact`).

Why the global null is the worst case. With per-arm rules and fixed allocation a null
arm's success depends on its own data and the shared control only, and Pr(success)
rises with the arm's true value (monotone rules); so the family-wise error is largest
with every arm null and on its null boundary, at some control value. The grid is
therefore a line over the control value (:func:`global_null`); against a benchmark it is
the single point of every arm at its benchmark.

For discrete data Pr(success) is a step function of the threshold: the candidates are
the distinct posterior probabilities at the final look's lattice points (METHODS.md,
'Calibration of thresholds'), searched by bisection, which assumes the error falls as
the threshold rises (it does for posterior thresholds; with a predictive futility rule
the chosen threshold is re-evaluated and reported as found).
"""

from __future__ import annotations

import tomllib
from collections.abc import Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy import optimize

from octrial._version import __version__
from octrial.caution import CAUTION
from octrial.design.model import Design
from octrial.design.reader import NONE_WORD
from octrial.design.write import edited_text
from octrial.engines.arms_exact import ArmsOutcome, check_pairs, run_arms, unsupported
from octrial.multiarm.model import MultiArmDesign
from octrial.output import csv_text, json_text
from octrial.provenance import environment, now
from octrial.rules.lattice import LatticeCache, build_rule
from octrial.run_folder import write_folder

__all__ = ["TARGETS", "ArmsCalibration", "calibrate_arms", "calibrate_multiarm",
           "calibrated_text", "global_null", "null_line", "with_threshold",
           "write_arms_calibration"]

TARGETS = ("family-wise", "per-arm")
"""What the threshold controls: the family-wise error rate, or the largest per-arm type
I error."""


@dataclass(frozen=True, eq=False)
class ArmsCalibration:
    """The calibrated threshold and how it was found.

    Attributes
    ----------
    threshold : float or None
        Smallest final threshold meeting the target (``None``: no candidate does).
    error : float
        The controlled error at ``threshold`` (largest over the null grid).
    worst : ndarray
        The null point where that largest error occurs (treatment arms, then the control).
    pairs : tuple of Design
        Each arm's design with the calibrated threshold.
    log : DataFrame
        Every threshold examined: ``threshold``, ``error``.
    """

    threshold: float | None
    error: float
    worst: np.ndarray
    pairs: tuple[Design, ...]
    log: pd.DataFrame


def with_threshold(design: Design, threshold: float) -> Design:
    """``design`` with its final efficacy (success) threshold replaced."""
    looks = design.looks
    return replace(design, looks=replace(looks, efficacy=(*looks.efficacy[:-1], threshold)))


def global_null(pairs: Sequence[Design], control: Sequence[float] | np.ndarray) -> np.ndarray:
    """Null points with every treatment arm on its null boundary.

    With a shared control, one row per control value: each arm at the value where its
    hypothesis' effect is zero (:meth:`~octrial.endpoints.base.Family.effect`; found by
    root finding, so any comparison: difference, ratio, odds ratio); control values whose
    boundary falls outside the parameter range are left out. Against a benchmark, the
    single row of every arm at its benchmark.
    """
    if not check_pairs(pairs):
        return np.array([[p.hypothesis.null_value for p in pairs]])
    rows = []
    for c in control:
        row = [_boundary(p, float(c)) for p in pairs]
        if all(v is not None for v in row):
            rows.append([*row, float(c)])
    if not rows:
        raise ValueError("no control value gives null boundaries inside the parameter range")
    return np.array(rows, dtype=float)


def _boundary(pair: Design, control: float) -> float | None:
    """The treatment value on ``pair``'s null boundary at this control value."""
    family = pair.family
    low, high = family.parameter_range
    low = max(low, 1e-12) if low >= 0 else max(low, control - 1e6)
    high = min(high, 1.0 - 1e-12) if high <= 1 else min(high, control * 1e6 + 1e6)

    def effect(t: float) -> float:
        return float(family.effect(pair.hypothesis, (t, control)))

    if not low < control < high or effect(low) * effect(high) > 0:
        return None
    return float(optimize.brentq(effect, low, high, xtol=1e-15, rtol=4 * np.finfo(float).eps))


def controlled_error(outcome: ArmsOutcome, target: str) -> np.ndarray:
    """Per null point, the error the target controls."""
    if target == "family-wise":
        return outcome.family_wise
    return np.where(outcome.null, outcome.success, 0.0).max(axis=1)


def calibrate_arms(pairs: Sequence[Design], alpha: float, nulls: np.ndarray, *,
                   target: str = "family-wise", floor: float = 0.5) -> ArmsCalibration:
    """Smallest common final threshold keeping the target error at or below ``alpha``.

    Parameters
    ----------
    pairs : sequence of Design
        Each treatment arm's design (see :func:`~octrial.engines.arms_exact.check_pairs`);
        their interim thresholds are kept.
    alpha : float
        The largest error allowed, in (0, 1).
    nulls : ndarray, shape (points, columns)
        Null points to search (for example :func:`global_null`).
    target : {'family-wise', 'per-arm'}
    floor : float
        Smallest threshold considered.
    """
    if target not in TARGETS:
        raise ValueError(f"target: expected one of {', '.join(TARGETS)}; got {target!r}")
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha: expected a number in (0, 1); got {alpha}")
    nulls = np.atleast_2d(np.asarray(nulls, dtype=float))
    check_pairs(pairs)
    caches = [LatticeCache() for _ in pairs]
    candidates = _candidates(pairs, caches, floor)
    log: list[tuple[float, float]] = []

    def evaluate(threshold: float) -> tuple[float, np.ndarray, tuple[Design, ...]]:
        designs = tuple(with_threshold(p, threshold) for p in pairs)
        outcome = run_arms(designs, nulls, caches=caches)
        errors = controlled_error(outcome, target)
        worst = int(np.argmax(errors))
        log.append((threshold, float(errors[worst])))
        return float(errors[worst]), nulls[worst], designs

    # bisection over the sorted candidates: lo fails (or is below them all), hi passes
    lo, hi = -1, len(candidates) - 1
    error, worst, designs = evaluate(candidates[hi])
    if error > alpha:
        return ArmsCalibration(None, error, worst, designs, _log(log))
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if evaluate(candidates[mid])[0] <= alpha:
            hi = mid
        else:
            lo = mid
    error, worst, designs = evaluate(candidates[hi])
    return ArmsCalibration(float(candidates[hi]), error, worst, designs, _log(log))


def _candidates(pairs: Sequence[Design], caches: Sequence[LatticeCache],
                floor: float) -> np.ndarray:
    """Distinct final-look posterior probabilities of every arm, at or above ``floor``."""
    values = []
    for pair, cache in zip(pairs, caches, strict=True):
        benefit = build_rule(pair, cache).final.benefit
        if benefit is None:
            raise ValueError("calibration needs an analysis prior for every arm")
        values.append(benefit.ravel())
    found = np.unique(np.concatenate(values))
    found = found[(found >= floor) & (found <= 1.0)]
    if found.size == 0:
        raise ValueError(f"no posterior probability at the final look reaches {floor}")
    return found


def _log(rows: list[tuple[float, float]]) -> pd.DataFrame:
    return pd.DataFrame(rows, columns=["threshold", "error"]).drop_duplicates()


def null_line(design: MultiArmDesign, null_range: tuple[float, float] | None = None,
              null_points: int = 19) -> np.ndarray:
    """The null points of a several-arm design file (:func:`global_null`): with a shared
    control ``null_points`` control values evenly spread over ``null_range`` (by default
    the family's parameter range, ends excluded); against a benchmark the benchmark
    point."""
    if null_points < 2:
        raise ValueError(f"null_points: expected a whole number >= 2; got {null_points}")
    if null_range is None:
        low, high = design.family.parameter_range
        if not (np.isfinite(low) and np.isfinite(high)):
            raise ValueError("null_range (--null-range LOW:HIGH): needed for an unbounded "
                             "parameter")
        step = (high - low) / (null_points + 1)
        control = np.linspace(low + step, high - step, null_points)
    else:
        control = np.linspace(null_range[0], null_range[1], null_points)
    return global_null(design.pairs, control)


def calibrate_multiarm(design: MultiArmDesign, alpha: float, *, target: str = "family-wise",
                       null_range: tuple[float, float] | None = None,
                       null_points: int = 19) -> ArmsCalibration:
    """:func:`calibrate_arms` for a several-arm design file over :func:`null_line`.

    Raises
    ------
    ValueError
        When the exact engine does not apply, or the settings are out of range.
    """
    why = unsupported(design)
    if why is not None:
        raise ValueError(f"no exact engine for this several-arm design: {why}")
    return calibrate_arms(design.pairs, alpha, null_line(design, null_range, null_points),
                          target=target)


def calibrated_text(design: MultiArmDesign, threshold: float, command: list[str]) -> str:
    """The design file with its final efficacy threshold replaced (comments kept)."""
    data = tomllib.loads(design.source.text)
    efficacy: list[Any] = [NONE_WORD if t is None else t
                           for t in design.pairs[0].looks.efficacy]
    efficacy[-1] = threshold
    data["looks"]["efficacy"] = efficacy
    header = [f"calibrated by: {' '.join(command)}",
              f"final threshold {threshold!r} (the original file: {design.source.path})"]
    return edited_text(design.source.text, data, "looks", header)


def write_arms_calibration(folder: str | Path, design: MultiArmDesign,
                           result: ArmsCalibration, alpha: float, target: str, *,
                           started: str, command: list[str],
                           engine: str = "exact (several arms)",
                           details: dict[str, Any] | None = None) -> list[Path]:
    """calibration.csv (every threshold examined), calibration.json and
    ``<name>.calibrated.toml``, all at once; ``details`` go into calibration.json after
    the error (the simulation's seed, replicates and standard error)."""
    assert result.threshold is not None
    record = {
        "octrial_version": __version__,
        "design": {"name": design.name, "path": design.source.path,
                   "sha256": design.source.sha256},
        "command": command, "started": started, "finished": now(),
        "engine": engine, "controls": target, "alpha": alpha,
        "threshold": result.threshold, "error": result.error, **(details or {}),
        "worst_null": dict(zip((*design.treatment_names, "control"),
                               (float(v) for v in result.worst), strict=False)),
        "environment": environment(), "caution": CAUTION,
    }
    return write_folder(folder, {
        "calibration.csv": csv_text(result.log),
        "calibration.json": json_text(record),
        f"{design.name}.calibrated.toml": calibrated_text(design, result.threshold, command),
    }).written
