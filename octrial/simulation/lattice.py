"""The table kernel: simulated studies on the sufficient-statistic lattice.

For discrete endpoints every decision, and every summary, depends on the data only
through each arm's count, so a simulated study is a walk on the lattice: at each look
draw each arm's increment from its inverse-CDF table (one random word each), look the
new point up in the look's decision table, and stop when it says so. The kernel records
where studies stop (a histogram over the looks' lattices); a second small kernel turns
the histogram into the stopping counts and the sums behind bias, RMSE and coverage.
The decision tables are the ones the exact engine uses (:mod:`octrial.rules.lattice`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from octrial.design.model import Design
from octrial.endpoints.base import LatticeFamily
from octrial.rules.estimates import LatticeEstimates, coverage_tables
from octrial.rules.lattice import LatticeRule
from octrial.simulation.base import Simulator, Tally
from octrial.simulation.draws import DrawTables, draw

CONTINUE, EFFICACY, FUTILITY = 0, 1, 2


@dataclass(frozen=True, eq=False)
class LatticePlan:
    """A design's decision tables flattened for the kernel (the same for every scenario).

    Look k's lattice occupies ``decision[start[k] : start[k + 1]]`` in C order; point
    (x_1, ..., x_J) sits at ``start[k] + sum_j x_j * strides[k, j]``.
    """

    decision: np.ndarray
    start: np.ndarray
    strides: np.ndarray
    sizes: np.ndarray
    increments: np.ndarray
    means: np.ndarray | None

    @property
    def looks(self) -> int:
        """Number of looks K."""
        return self.sizes.shape[0]

    @property
    def arms(self) -> int:
        """Number of arms J."""
        return self.sizes.shape[1]


def lattice_plan(design: Design, rule: LatticeRule,
                 estimates: LatticeEstimates | None) -> LatticePlan:
    """Flatten ``rule`` (and the posterior-mean tables of ``estimates``) for the kernel."""
    decisions, starts, strides, sizes, increments, means = [], [0], [], [], [], []
    previous = (0,) * len(design.arms)
    for k, table in enumerate(rule.looks):
        state = np.full(table.shape, CONTINUE, dtype=np.int8)
        state[table.futility] = FUTILITY
        state[table.efficacy] = EFFICACY
        decisions.append(state.ravel())
        starts.append(starts[-1] + state.size)
        strides.append([s // state.itemsize for s in state.strides])
        sizes.append(table.shape)
        increments.append([n - p for n, p in zip(table.n, previous, strict=True)])
        previous = table.n
        if estimates is not None:
            means.append(estimates.means[k].ravel())
    return LatticePlan(np.concatenate(decisions), np.array(starts, dtype=np.int64),
                       np.array(strides, dtype=np.int64), np.array(sizes, dtype=np.int64),
                       np.array(increments, dtype=np.int64),
                       np.concatenate(means) if estimates is not None else None)


@numba.njit(cache=True)
def stop_histogram(words, decision, start, strides, sizes, hist,
                   bounds, t_start, t_length, guide, guide_start, shift):
    """Add each study's stopping point to ``hist``; return how many studies ran past the
    edge of a truncated lattice (and were held at the edge).

    ``words`` has shape (studies, looks, arms): one random word per arm and look.
    """
    n_studies, n_looks, n_arms = words.shape
    x = np.zeros(n_arms, dtype=np.int64)
    clipped = 0
    for r in range(n_studies):
        x[:] = 0
        past_edge = False
        for k in range(n_looks):
            point = start[k]
            for j in range(n_arms):
                x[j] += draw(words[r, k, j], k * n_arms + j, bounds, t_start, t_length,
                             guide, guide_start, shift)
                if x[j] >= sizes[k, j]:
                    x[j] = sizes[k, j] - 1
                    past_edge = True
                point += x[j] * strides[k, j]
            if decision[point] != 0 or k == n_looks - 1:
                hist[point] += 1
                break
        if past_edge:
            clipped += 1
    return clipped


@numba.njit(cache=True)
def reduce_histogram(hist, decision, start, errors, covered, efficacy, futility, sums):
    """Stopping counts per look, sums of error powers and covered count from ``hist``.

    Sequential loops (no BLAS), so the sums do not depend on the machine's vector unit.
    """
    n_looks = start.size - 1
    total_covered = 0
    for k in range(n_looks):
        for i in range(start[k], start[k + 1]):
            h = hist[i]
            if h == 0:
                continue
            if decision[i] == 1:
                efficacy[k] += h
            else:
                futility[k] += h
            if errors.size:
                e = errors[i]
                e2 = e * e
                sums[0] += h * e
                sums[1] += h * e2
                sums[2] += h * e2 * e2
                if covered[i]:
                    total_covered += h
    return total_covered


class LatticeSimulator(Simulator):
    """Studies of a lattice-family design at one scenario, by the table kernel."""

    kernel = "table"

    def __init__(self, design: Design, plan: LatticePlan, truth: tuple[float, ...],
                 estimates: LatticeEstimates | None, level: float) -> None:
        family: LatticeFamily = design.family
        self.plan = plan
        self.looks = plan.looks
        pmfs = []
        for k in range(plan.looks):
            for j, theta in enumerate(truth):
                m = int(plan.increments[k, j])
                size = min(family.lattice_size(design, j, m), int(plan.sizes[k, j]))
                pmfs.append(family.increment_pmf(design, theta, m, size))
        self.tables = DrawTables.from_pmfs(pmfs)
        if estimates is not None and plan.means is not None:
            target = family.target_value(design.hypothesis, truth)
            self.errors = plan.means - target
            self.covered = np.concatenate(
                [c.ravel() for c in coverage_tables(design, estimates, truth, level)])
        else:
            self.errors = np.zeros(0)
            self.covered = np.zeros(0, dtype=bool)

    def simulate(self, rng: np.random.Generator, replicates: int) -> Tally:
        plan = self.plan
        words = rng.bit_generator.random_raw(replicates * plan.looks * plan.arms)
        words = words.reshape(replicates, plan.looks, plan.arms)
        hist = np.zeros(plan.decision.size, dtype=np.int64)
        clipped = stop_histogram(words, plan.decision, plan.start, plan.strides, plan.sizes,
                                 hist, *self.tables.arrays())
        return self.reduce(hist, replicates, clipped)

    def reduce(self, hist: np.ndarray, replicates: int, clipped: int = 0) -> Tally:
        """The tally of a stopping histogram."""
        plan = self.plan
        efficacy = np.zeros(plan.looks, dtype=np.int64)
        futility = np.zeros(plan.looks, dtype=np.int64)
        sums = np.zeros(3)
        covered = reduce_histogram(hist, plan.decision, plan.start, self.errors, self.covered,
                                   efficacy, futility, sums)
        has = self.errors.size > 0
        return Tally(replicates, efficacy, futility, sums if has else None,
                     int(covered) if has else None, int(clipped))
