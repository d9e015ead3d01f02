"""Exact dynamic programming on the count lattice for many true values at once.

The lattice dynamic programme (:mod:`octrial.engines.lattice_programme`) with every
scenario carried together as the first axis of one array.
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
from octrial.engines.lattice_programme import add_increments, run_programme
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

    def step(dist: np.ndarray, arm: int, before: int, after: int, size: int) -> np.ndarray:
        return add_increments(dist, increments.get(arm, after - before, size), arm + 1, size)

    found = run_programme(rule.looks, arms, step, scenarios=scenarios,
                          truncates=family.truncates, keep_final=keep_final,
                          track_uncertain=False)
    neglected = found.neglected if family.truncates else np.zeros(scenarios)
    return BatchResult(found.efficacy, found.futility, found.reach, np.asarray(neglected))
