"""Exact dynamic programming on the count lattice for many true values at once.

The same recursion as :mod:`octrial.engines.exact_lattice` (carry the distribution of
each arm's count on studies still running, convolve with the new subjects' count at each
look, move the mass on the look's efficacy and futility points into the stopping
probabilities), with every scenario carried together as the first axis of one array.
Calibration evaluates thousands of candidate rules at the same true values, so it uses
this form; it can also keep the distribution of the counts on studies that reach the
final analysis, from which the probability of success under every candidate final
threshold follows by one cumulative sum.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from octrial.design.model import Design
from octrial.endpoints.base import LatticeFamily
from octrial.rules.lattice import LatticeRule


@dataclass(frozen=True, eq=False)
class BatchResult:
    """Per-scenario stopping probabilities of one rule.

    Attributes
    ----------
    efficacy, futility : ndarray, shape (scenarios, looks)
        As in :class:`~octrial.engines.outcome.Outcome`.
    reach : ndarray or None
        Shape (scenarios, *final lattice shape): the probability of arriving at the final
        analysis with each count (kept on request).
    neglected : ndarray, shape (scenarios,)
        Probability mass dropped by truncating an unbounded count (0 for binary).
    """

    efficacy: np.ndarray
    futility: np.ndarray
    reach: np.ndarray | None
    neglected: np.ndarray


class IncrementTables:
    """The distribution of each look's new count per arm and true value, computed once.

    Parameters
    ----------
    design : Design
        Any design of the family (only the endpoint settings are used).
    truths : ndarray, shape (scenarios, arms)
    """

    def __init__(self, design: Design, truths: np.ndarray) -> None:
        self.design = design
        self.truths = np.asarray(truths, dtype=float)
        self._tables: dict[tuple[int, int, int], np.ndarray] = {}

    def get(self, arm: int, m: int, size: int) -> np.ndarray:
        """Pr(new count = 0 .. size-1) among ``m`` new subjects of ``arm``: (scenarios, size)."""
        key = (arm, m, size)
        if key not in self._tables:
            family: LatticeFamily = self.design.family
            theta = self.truths[:, arm]
            table = None
            try:  # most families broadcast over an array of true values
                table = np.asarray(family.increment_pmf(self.design, theta[:, None], m, size),
                                   dtype=float)
            except (TypeError, ValueError):
                table = None
            if table is None or table.shape != (len(theta), size):
                table = np.array([family.increment_pmf(self.design, t, m, size) for t in theta])
            self._tables[key] = table
        return self._tables[key]


def _convolve(dist: np.ndarray, pmf: np.ndarray, axis: int, size: int) -> np.ndarray:
    """Add an independent increment with per-scenario ``pmf`` along lattice ``axis``.

    ``dist`` has the scenarios on axis 0 and the lattice on the others; ``pmf`` has shape
    (scenarios, m + 1). Points beyond ``size`` are dropped (truncated lattices).
    """
    moved = np.moveaxis(dist, axis, -1)
    old, width = moved.shape[-1], pmf.shape[1]
    shape = (pmf.shape[0],) + (1,) * (moved.ndim - 2) + (width,)
    weights = pmf.reshape(shape)
    out = np.zeros((*moved.shape[:-1], size))
    if old <= width:
        for x in range(min(old, size)):
            stop = min(x + width, size)
            out[..., x:stop] += moved[..., x : x + 1] * weights[..., : stop - x]
    else:
        for y in range(min(width, size)):
            stop = min(y + old, size)
            out[..., y:stop] += moved[..., : stop - y] * weights[..., y : y + 1]
    return np.moveaxis(out, -1, axis)


def run_batch(
    design: Design, rule: LatticeRule, increments: IncrementTables, *, keep_final: bool = False,
) -> BatchResult:
    """Exact stopping probabilities of ``rule`` at every true value of ``increments``.

    Parameters
    ----------
    design : Design
        The design the rule belongs to.
    rule : LatticeRule
    increments : IncrementTables
        The true values (one row per scenario) and their increment distributions.
    keep_final : bool
        Also return the distribution of the counts on studies reaching the final analysis.

    Returns
    -------
    BatchResult
    """
    family: LatticeFamily = design.family
    scenarios, arms = increments.truths.shape
    efficacy = np.zeros((scenarios, len(rule.looks)))
    futility = np.zeros((scenarios, len(rule.looks)))
    neglected = np.zeros(scenarios)
    dist = np.ones((scenarios,) + (1,) * arms)
    previous = (0,) * arms
    reach = None
    lattice_axes = tuple(range(1, arms + 1))
    for k, table in enumerate(rule.looks):
        before = dist.sum(axis=lattice_axes) if family.truncates else None
        for j in range(arms):
            pmf = increments.get(j, table.n[j] - previous[j], table.shape[j])
            dist = _convolve(dist, pmf, j + 1, table.shape[j])
        if before is not None:
            neglected += np.clip(before - dist.sum(axis=lattice_axes), 0.0, None)
        if k == len(rule.looks) - 1 and keep_final:
            reach = dist.copy()
        efficacy[:, k] = dist[:, table.efficacy].sum(axis=1)
        futility[:, k] = dist[:, table.futility].sum(axis=1)
        dist = np.where((table.efficacy | table.futility)[None], 0.0, dist)
        previous = table.n
    return BatchResult(efficacy, futility, reach, neglected)
