"""Exact operating characteristics on the sufficient-statistic lattice.

Dynamic programming over the distribution of each arm's count on studies still running:
at each look, convolve with the distribution of the new subjects' count (per arm; the two
arms' increments are independent, so the two-dimensional convolution separates into one
convolution per axis), then move the mass on the look's efficacy and futility points into
the stopping probabilities. No Monte Carlo error: the only numerical error is that of the
posterior probabilities behind the rule, reported with the result.
"""

from __future__ import annotations

import numpy as np

from octrial.design.model import Design
from octrial.endpoints.base import LatticeFamily
from octrial.engines.outcome import Outcome
from octrial.rules.lattice import LatticeRule, build_rule


def _shift_matrix(pmf: np.ndarray, old: int, new: int) -> np.ndarray:
    """M[i, x] = pmf[i - x]: maps a distribution over ``old`` points to ``new`` points."""
    lag = np.arange(new)[:, None] - np.arange(old)[None, :]
    valid = (lag >= 0) & (lag < pmf.size)
    return np.where(valid, pmf[np.clip(lag, 0, pmf.size - 1)], 0.0)


def _advance(dist: np.ndarray, pmf: np.ndarray, axis: int, size: int) -> np.ndarray:
    """Add an independent increment with ``pmf`` along ``axis``, keeping ``size`` points."""
    matrix = _shift_matrix(pmf, dist.shape[axis], size)
    return np.moveaxis(np.tensordot(matrix, dist, axes=([1], [axis])), 0, axis)


def stopping_probabilities(
    design: Design, rule: LatticeRule, truth: tuple[float, ...],
) -> tuple[np.ndarray, np.ndarray, float]:
    """Exact per-look stopping probabilities at one true parameter vector.

    Returns
    -------
    efficacy, futility : ndarray, shape (looks,)
    neglected : float
        Probability mass dropped by truncating the lattice (0 for bounded statistics).
    """
    family: LatticeFamily = design.family
    k_looks = len(rule.looks)
    efficacy, futility = np.zeros(k_looks), np.zeros(k_looks)
    dist = np.ones((1,) * len(truth))
    previous = (0,) * len(truth)
    neglected = 0.0
    for k, table in enumerate(rule.looks):
        before = dist.sum() if family.truncates else 0.0
        for j, theta in enumerate(truth):
            increment = table.n[j] - previous[j]
            pmf = family.increment_pmf(design, theta, increment, table.shape[j])
            dist = _advance(dist, pmf, j, table.shape[j])
        if family.truncates:
            neglected += max(before - dist.sum(), 0.0)
        efficacy[k] = dist[table.efficacy].sum()
        futility[k] = dist[table.futility].sum()
        dist = np.where(table.efficacy | table.futility, 0.0, dist)
        previous = table.n
    return efficacy, futility, neglected


class ExactLatticeEngine:
    """The exact engine for endpoints with a lattice sufficient statistic."""

    name = "exact"

    @staticmethod
    def unsupported(design: Design) -> str | None:
        """Why this engine cannot evaluate ``design``, or ``None`` when it can."""
        if not isinstance(design.family, LatticeFamily):
            return f"{design.family.name} endpoints have no lattice sufficient statistic"
        return None

    @staticmethod
    def run(design: Design, truths: np.ndarray, rule: LatticeRule | None = None) -> Outcome:
        """Evaluate every scenario in ``truths`` (one row per scenario, one column per arm)."""
        rule = build_rule(design) if rule is None else rule
        rows = [stopping_probabilities(design, rule, tuple(t)) for t in truths]
        efficacy = np.array([r[0] for r in rows])
        futility = np.array([r[1] for r in rows])
        neglected = np.array([r[2] for r in rows])
        info = {
            "quadrature_error_bound": rule.quadrature_error,
            "max_neglected_mass": float(neglected.max()) if neglected.size else 0.0,
        }
        return Outcome(efficacy, futility, np.zeros(len(truths), dtype=int), "exact", info=info)
