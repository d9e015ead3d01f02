"""The lattice dynamic programme, written once.

Carry the distribution of each arm's count on studies still running from look to look:
at each look, add the new subjects' count arm by arm (the arms' increments are
independent, so the convolution separates into one per axis), then move the mass on the
look's efficacy and futility points into the stopping probabilities. The exact engine,
the batched engine (many true values at once, for calibration), assurance (increments
drawn from the design prior's predictive distribution) and the multi-stage search all
run this loop; they differ only in how one arm's increment is added, which each passes
as a step function. The steps below keep the summation order each caller had, so the
numbers stay byte-identical (a matrix product for one true value, a shifted sum over
true values, a shifted sum with state-dependent weights).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Protocol

import numpy as np
from scipy import linalg


class Look(Protocol):
    """What the programme reads of one look (a :class:`~octrial.rules.lattice.LookTable`
    or any object with these attributes)."""

    @property
    def n(self) -> tuple[int, ...]: ...

    @property
    def efficacy(self) -> np.ndarray: ...

    @property
    def futility(self) -> np.ndarray: ...

    @property
    def uncertain(self) -> np.ndarray | None: ...

    @property
    def shape(self) -> tuple[int, ...]: ...


Step = Callable[[np.ndarray, int, int, int, int], np.ndarray]
"""``step(dist, arm, previous_n, new_n, size) -> dist``: add the count of subjects
``previous_n + 1 .. new_n`` of ``arm`` along that arm's lattice axis, keeping ``size``
points."""


@dataclass(frozen=True, eq=False)
class Programme:
    """Where the studies stop.

    Attributes
    ----------
    efficacy, futility : ndarray, shape (looks,) or (scenarios, looks)
        Pr(stop for efficacy / futility at look k) (at the last look: success / failure).
    neglected : float or ndarray, shape (scenarios,)
        Probability mass dropped by truncating an unbounded count (0 otherwise).
    uncertain : float or ndarray, shape (scenarios,)
        Probability of reaching a point whose decision numerical error could change.
    mass : list of ndarray or None
        Per look, the stopped mass at each lattice point (kept on request).
    reach : ndarray or None
        The distribution of the counts on studies arriving at the final analysis (kept
        on request).
    """

    efficacy: np.ndarray
    futility: np.ndarray
    neglected: float | np.ndarray
    uncertain: float | np.ndarray
    mass: list[np.ndarray] | None
    reach: np.ndarray | None


def run_programme(looks: Sequence[Look], arms: int, step: Step, *,
                  scenarios: int | None = None, truncates: bool = False,
                  keep_mass: bool = False, keep_final: bool = False,
                  track_uncertain: bool = True,
                  tally: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None,
                  ) -> Programme:
    """Run the dynamic programme over ``looks``.

    Parameters
    ----------
    looks : sequence of Look
        Per look: cumulative sizes per arm, lattice shape and the stopping points.
    arms : int
        Lattice axes.
    step : Step
        Adds one arm's increment (see :data:`Step`).
    scenarios : int, optional
        With a number, the distribution carries the scenarios (true values) on a leading
        axis and every result gets one row per scenario.
    truncates : bool
        Whether the lattice is truncated (then the mass it drops is tallied).
    keep_mass, keep_final : bool
        Keep the stopped mass per look / the distribution reaching the final analysis.
    track_uncertain : bool
        Tally the mass on points whose decision numerical error could change (searches
        over thousands of candidate rules skip it).
    tally : callable, optional
        With ``scenarios``: ``tally(dist, mask)``, the per-scenario mass on the points of
        ``mask`` (default: the masked points gathered in lattice order and summed); a
        caller whose stopping points form one run may sum a slice instead, which keeps
        its summation order.
    """
    summed = tally or _gathered
    lead: tuple[int, ...] = () if scenarios is None else (scenarios,)
    batch = bool(lead)
    axes = tuple(range(1, arms + 1)) if batch else None
    k_looks = len(looks)
    efficacy, futility = np.zeros((*lead, k_looks)), np.zeros((*lead, k_looks))
    neglected: float | np.ndarray = np.zeros(lead) if batch else 0.0
    uncertain: float | np.ndarray = np.zeros(lead) if batch else 0.0
    mass: list[np.ndarray] | None = [] if keep_mass else None
    reach = None
    dist = np.ones((*lead,) + (1,) * arms)
    previous = (0,) * arms
    for k, table in enumerate(looks):
        before = dist.sum(axis=axes) if truncates else 0.0
        for j in range(arms):
            dist = step(dist, j, previous[j], table.n[j], table.shape[j])
        if truncates:
            if batch:
                neglected += np.clip(before - dist.sum(axis=axes), 0.0, None)
            else:
                neglected += max(before - dist.sum(), 0.0)
        if batch:
            if track_uncertain and table.uncertain is not None:
                uncertain += dist[:, table.uncertain].sum(axis=1)
            if keep_final and k == k_looks - 1:
                reach = dist.copy()
            efficacy[:, k] = summed(dist, table.efficacy)
            futility[:, k] = summed(dist, table.futility)
        else:
            if track_uncertain and table.uncertain is not None:
                uncertain += dist[table.uncertain].sum()
            if keep_final and k == k_looks - 1:
                reach = dist.copy()
            efficacy[k] = dist[table.efficacy].sum()
            futility[k] = dist[table.futility].sum()
        stops = table.efficacy | table.futility
        if mass is not None:
            mass.append(np.where(stops, dist, 0.0))
        dist = np.where(stops, 0.0, dist)
        previous = table.n
    return Programme(efficacy, futility, neglected, uncertain, mass, reach)


def _gathered(dist: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Per-scenario mass on the points of ``mask``."""
    mass: np.ndarray = dist[:, mask].sum(axis=1)
    return mass


# -- steps -------------------------------------------------------------------------------
def shift_matrix(pmf: np.ndarray, old: int, new: int) -> np.ndarray:
    """M[i, x] = pmf[i - x]: maps a distribution over ``old`` points to ``new`` points."""
    column = np.zeros(new)
    column[: min(new, pmf.size)] = pmf[:new]
    row = np.zeros(old)
    row[0] = column[0]
    matrix: np.ndarray = linalg.toeplitz(column, row)
    return matrix


def add_increment(dist: np.ndarray, pmf: np.ndarray, axis: int, size: int) -> np.ndarray:
    """One true value: add an independent increment with ``pmf`` along ``axis``, keeping
    ``size`` points (a matrix product)."""
    matrix = shift_matrix(pmf, dist.shape[axis], size)
    return np.moveaxis(np.tensordot(matrix, dist, axes=([1], [axis])), 0, axis)


def add_increments(dist: np.ndarray, pmf: np.ndarray, axis: int, size: int) -> np.ndarray:
    """Many true values: add an independent increment with per-scenario ``pmf``.

    ``dist`` has the scenarios on axis 0 and the lattice on the others; ``pmf`` has shape
    (scenarios, m + 1). Points beyond ``size`` are dropped (truncated lattices).
    """
    moved = np.moveaxis(dist, axis, -1)
    old, width = moved.shape[-1], pmf.shape[1]
    shape = (pmf.shape[0],) + (1,) * (moved.ndim - 2) + (width,)
    weights = pmf.reshape(shape)
    out = np.zeros((*moved.shape[:-1], size))
    # loop over the shorter of the two axes
    if old <= width:
        for x in range(min(old, size)):
            stop = min(x + width, size)
            out[..., x:stop] += moved[..., x : x + 1] * weights[..., : stop - x]
    else:
        for y in range(min(width, size)):
            stop = min(y + old, size)
            out[..., y:stop] += moved[..., : stop - y] * weights[..., y : y + 1]
    return np.moveaxis(out, -1, axis)


def add_state_increment(dist: np.ndarray, pmf: np.ndarray, axis: int,
                        size: int) -> np.ndarray:
    """State-dependent increments: out[x + y] += dist[x] pmf[x, y] along ``axis``."""
    moved = np.moveaxis(dist, axis, 0)
    out = np.zeros((size, *moved.shape[1:]))
    width = pmf.shape[1]
    extra = (None,) * (moved.ndim - 1)
    for y in range(width):
        stop = min(moved.shape[0] + y, size)
        if stop > y:
            out[y:stop] += moved[: stop - y] * pmf[: stop - y, y][(slice(None), *extra)]
    return np.moveaxis(out, 0, axis)
