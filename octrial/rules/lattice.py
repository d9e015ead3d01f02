"""The decision rule as a table over the sufficient-statistic lattice, one per look.

For discrete endpoints every decision depends on the data only through each arm's count,
so the rule becomes, per look, a boolean mask over the lattice (one axis per arm): where
the study stops for efficacy and where it stops for futility. The exact engine, the Monte
Carlo fast path, the boundary table and the interim decision all read these masks.

Efficacy is checked first: a point that meets the efficacy threshold never counts as
futile. The last look's efficacy threshold is the final success threshold; every other
point at the last look is a failure.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from octrial.design.model import Design
from octrial.endpoints.base import LatticeFamily

DECISION_TOLERANCE = 1e-12
"""A probability within this of a threshold counts as reaching it, so that a threshold
equal to a computed posterior probability (as calibration produces) is met despite
rounding in the last bit."""


@dataclass(frozen=True, eq=False)
class LookTable:
    """The rule at one look.

    Attributes
    ----------
    look : int
        Look number, from 1.
    n : tuple of int
        Cumulative sample size per arm.
    benefit : ndarray or None
        Posterior probability of benefit at every lattice point (``None`` for a count rule
        with no prior).
    predictive : ndarray or None
        Predictive probability of final success (only where a predictive futility
        threshold applies).
    efficacy, futility : ndarray of bool
        Where the study stops for efficacy (at the last look: succeeds) and for futility
        (at the last look: every point that does not succeed).
    """

    look: int
    n: tuple[int, ...]
    benefit: np.ndarray | None
    predictive: np.ndarray | None
    efficacy: np.ndarray
    futility: np.ndarray

    @property
    def shape(self) -> tuple[int, ...]:
        """Lattice shape: one axis per arm."""
        return self.efficacy.shape


@dataclass(frozen=True, eq=False)
class LatticeRule:
    """Every look's table, plus the numerical error of the probabilities behind them."""

    looks: tuple[LookTable, ...]
    quadrature_error: float

    @property
    def final(self) -> LookTable:
        """The last look's table."""
        return self.looks[-1]


class LatticeCache:
    """Posterior tables by per-arm sample size, shared by designs that differ only in looks
    and thresholds (calibration examines many such designs).

    The posterior at a look depends on the data only through each arm's count and sample
    size, so the benefit table for per-arm sizes ``n`` is the same whatever the look number,
    the maximum sample size or the thresholds. Every design given to one cache must share
    the endpoint, the hypothesis and the analysis priors.
    """

    def __init__(self) -> None:
        self._posteriors: dict[tuple[int, ...], tuple] = {}
        self._benefit: dict[tuple[int, ...], np.ndarray] = {}
        self._predictive: dict[tuple, list[np.ndarray]] = {}
        self.error = 0.0
        self._key: tuple | None = None

    def _check(self, design: Design) -> None:
        key = (design.endpoint, design.hypothesis, tuple(a.prior for a in design.arms))
        if self._key is None:
            self._key = key
        elif key != self._key:
            raise ValueError("a LatticeCache serves designs with the same endpoint, "
                             "hypothesis and priors only")

    def posteriors(self, design: Design, n: tuple[int, ...]) -> tuple:
        """Each arm's posterior at every lattice point after per-arm sizes ``n``."""
        self._check(design)
        if n not in self._posteriors:
            family = design.family
            self._posteriors[n] = tuple(
                family.posterior(design, j, n[j], np.arange(family.lattice_size(design, j, n[j])))
                for j in range(len(design.arms)))
        return self._posteriors[n]

    def benefit(self, design: Design, n: tuple[int, ...]) -> np.ndarray:
        """Posterior probability of benefit on the lattice after per-arm sizes ``n``."""
        if n not in self._benefit:
            values, err = design.family.benefit(design, self.posteriors(design, n))
            self._benefit[n] = values
            self.error = max(self.error, err)
        return self._benefit[n]

    def predictive(
        self, design: Design, n_now: tuple[int, ...], n_end: tuple[int, ...],
        sizes: tuple[int, ...],
    ) -> list[np.ndarray]:
        """Per arm, the predictive pmf of the statistic still to come, one row per point."""
        key = (n_now, n_end, sizes)
        if key not in self._predictive:
            family = design.family
            posts = self.posteriors(design, n_now)
            self._predictive[key] = [
                family.predictive_pmf(design, post, n_end[j] - n_now[j], sizes[j])
                for j, post in enumerate(posts)]
        return self._predictive[key]


def build_rule(design: Design, cache: LatticeCache | None = None) -> LatticeRule:
    """Turn a design's rule into lattice tables (see module docstring).

    Parameters
    ----------
    design : Design
    cache : LatticeCache, optional
        Posterior tables to reuse across designs that differ only in looks and thresholds.
    """
    family = design.family
    if not isinstance(family, LatticeFamily):
        raise TypeError(f"{family.name} endpoints have no lattice rule")
    cache = LatticeCache() if cache is None else cache
    looks = design.looks
    k_last = looks.count - 1
    with_prior = all(arm.prior is not None for arm in design.arms)

    benefits: list[np.ndarray | None] = [
        cache.benefit(design, looks.per_arm[k]) if with_prior else None
        for k in range(looks.count)]

    final_success = _efficacy(design, k_last, benefits[k_last])
    tables = []
    for k in range(looks.count):
        efficacy = final_success if k == k_last else _efficacy(design, k, benefits[k])
        predictive = None
        if k == k_last:
            futility = ~efficacy
        else:
            futility = _futility(design, k, benefits[k], efficacy.shape)
            threshold = looks.futility_predictive[k]
            if threshold is not None:
                pmfs = cache.predictive(design, looks.per_arm[k], looks.per_arm[-1],
                                        final_success.shape)
                predictive = success_from_pmfs(pmfs, final_success)
                futility |= predictive < threshold - DECISION_TOLERANCE
            futility &= ~efficacy
        tables.append(LookTable(k + 1, looks.per_arm[k], benefits[k], predictive, efficacy,
                                futility))
    return LatticeRule(tuple(tables), cache.error if with_prior else 0.0)


def _efficacy(design: Design, k: int, benefit: np.ndarray | None) -> np.ndarray:
    looks = design.looks
    if looks.uses_counts:
        size = design.family.lattice_size(design, 0, looks.per_arm[k][0])
        bound = looks.efficacy_count[k]
        x = np.arange(size)
        if bound is None:
            return np.zeros(size, dtype=bool)
        return x >= bound if design.hypothesis.better == "higher" else x <= bound
    threshold = looks.efficacy[k]
    if threshold is None:
        return np.zeros(benefit.shape, dtype=bool)
    return benefit >= threshold - DECISION_TOLERANCE


def _futility(
    design: Design, k: int, benefit: np.ndarray | None, shape: tuple[int, ...],
) -> np.ndarray:
    looks = design.looks
    if looks.uses_counts:
        bound = looks.futility_count[k]
        x = np.arange(shape[0])
        if bound is None:
            return np.zeros(shape, dtype=bool)
        return x <= bound if design.hypothesis.better == "higher" else x >= bound
    threshold = looks.futility[k]
    if threshold is None:
        return np.zeros(shape, dtype=bool)
    return benefit < threshold - DECISION_TOLERANCE


def predictive_success(
    design: Design, family: LatticeFamily, posteriors: tuple, k: int, success: np.ndarray,
) -> np.ndarray:
    """Predictive probability of success at the final look from every point at look ``k``.

    PP(x) = sum_y Pr(Y = y | x) 1[final success at x + y], with Y the statistic of the
    subjects still to come (Lee & Liu 2008); per arm independently for two arms. Points
    beyond a truncated final lattice count as failures (their mass is reported by the
    family's truncation bound).
    """
    n_now, n_end = design.looks.per_arm[k], design.looks.per_arm[-1]
    pmfs = [
        family.predictive_pmf(design, post, n_end[j] - n_now[j], success.shape[j])
        for j, post in enumerate(posteriors)
    ]
    return success_from_pmfs(pmfs, success)


def success_from_pmfs(pmfs: list[np.ndarray], success: np.ndarray) -> np.ndarray:
    """Predictive probability of reaching the final ``success`` region from every point,
    given each arm's predictive pmf of its remaining statistic (one row per point)."""
    final_shape = success.shape
    if len(pmfs) == 1:
        (pmf,) = pmfs
        idx = np.arange(pmf.shape[0])[:, None] + np.arange(pmf.shape[1])[None, :]
        hit = np.where(idx < final_shape[0], success[np.minimum(idx, final_shape[0] - 1)], False)
        return np.sum(pmf * hit, axis=1)
    pmf_t, pmf_c = pmfs
    # G[x_t, X_c] = sum_y Pr(Y_t = y | x_t) S[x_t + y, X_c]; then sum over the control side.
    padded = np.zeros((final_shape[0] + pmf_t.shape[1], final_shape[1]))
    padded[: final_shape[0]] = success
    g = np.stack([pmf_t[x] @ padded[x : x + pmf_t.shape[1]] for x in range(pmf_t.shape[0])])
    g = np.concatenate([g, np.zeros((g.shape[0], pmf_c.shape[1]))], axis=1)
    out = np.empty((pmf_t.shape[0], pmf_c.shape[0]))
    for x in range(pmf_c.shape[0]):
        out[:, x] = g[:, x : x + pmf_c.shape[1]] @ pmf_c[x]
    return out
