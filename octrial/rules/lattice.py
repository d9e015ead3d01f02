"""The decision rule as a table over the sufficient-statistic lattice, one per look.

For discrete endpoints every decision depends on the data only through each arm's count,
so the rule becomes, per look, a boolean mask over the lattice (one axis per arm): where
the study stops for efficacy and where it stops for futility. The exact engine, the Monte
Carlo fast path, the boundary table and the interim decision all read these masks.

The masks are the stop rule of :mod:`octrial.rules.stop` (:meth:`Rule.decide_many
<octrial.rules.stop.Rule.decide_many>`, or :class:`~octrial.rules.stop.CountRule` for a
rule stated in counts) read at every lattice point: efficacy is checked first, so a point
that meets the efficacy threshold never counts as futile; the last look's efficacy
threshold is the final success threshold, and every other point at the last look is a
failure.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd

from octrial.design.model import Design
from octrial.endpoints.base import LatticeFamily
from octrial.rules.stop import DECISION_TOLERANCE, EFFICACY, FUTILITY, CountRule, Rule

__all__ = ["DECISION_TOLERANCE", "LatticeCache", "LatticeRule", "LookTable", "build_rule",
           "predictive_pmfs", "predictive_success", "serving", "stop_rule",
           "success_from_pmfs"]


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
    uncertain : ndarray of bool or None
        Points whose decision the numerical error of a probability behind it could change
        (a posterior on a grid; a predictive probability whose mass partly falls beyond a
        truncated final lattice). ``None`` when there are none.
    """

    look: int
    n: tuple[int, ...]
    benefit: np.ndarray | None
    predictive: np.ndarray | None
    efficacy: np.ndarray
    futility: np.ndarray
    uncertain: np.ndarray | None = None

    @property
    def shape(self) -> tuple[int, ...]:
        """Lattice shape: one axis per arm."""
        return self.efficacy.shape


@dataclass(frozen=True, eq=False)
class LatticeRule:
    """Every look's table, plus the numerical error of the probabilities behind them.

    ``reach`` is, per arm, the largest true value a truncated lattice serves (``None``
    when the lattice is complete); ``settings`` holds numerical facts for run.json.
    """

    looks: tuple[LookTable, ...]
    quadrature_error: float
    reach: tuple[float, ...] | None = None
    settings: dict[str, Any] = field(default_factory=dict)

    @property
    def final(self) -> LookTable:
        """The last look's table."""
        return self.looks[-1]

    def covers(self, truths: np.ndarray) -> bool:
        """Whether the lattice is large enough for every row of ``truths``."""
        if self.reach is None:
            return True
        return bool(np.all(np.asarray(truths, dtype=float) <= np.asarray(self.reach) + 1e-12))

    def boundary_table(self, design: Design) -> pd.DataFrame:
        """The rule in plain counts (``boundaries.csv``)."""
        from octrial.rules.boundaries import boundary_table

        return boundary_table(design, self)

    def info(self) -> dict[str, Any]:
        """Numerical facts about the rule for run.json."""
        return {"quadrature_error_bound": self.quadrature_error, **self.settings}


class LatticeCache:
    """Posterior tables by per-arm sample size, shared by designs that differ only in looks
    and thresholds (calibration examines many such designs).

    The posterior at a look depends on the data only through each arm's count and sample
    size, so the benefit table for per-arm sizes ``n`` is the same whatever the look number,
    the maximum sample size or the thresholds. Every design given to one cache must share
    the endpoint, the hypothesis and the analysis priors. Tables are keyed by the lattice
    sizes too: a truncated lattice depends on the true values it serves.
    """

    def __init__(self) -> None:
        self._posteriors: dict[tuple, tuple] = {}
        self._benefit: dict[tuple, np.ndarray] = {}
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

    @staticmethod
    def _sizes(design: Design, n: tuple[int, ...]) -> tuple[int, ...]:
        family = design.family
        return tuple(family.lattice_size(design, j, n[j]) for j in range(len(design.arms)))

    def posteriors(self, design: Design, n: tuple[int, ...],
                   sizes: tuple[int, ...] | None = None) -> tuple:
        """Each arm's posterior at every lattice point after per-arm sizes ``n`` (on a
        lattice of ``sizes`` points per arm; by default the design's)."""
        self._check(design)
        sizes = self._sizes(design, n) if sizes is None else sizes
        key = (n, sizes)
        if key not in self._posteriors:
            family = design.family
            self._posteriors[key] = tuple(
                family.posterior(design, j, n[j], np.arange(sizes[j]))
                for j in range(len(design.arms)))
        return self._posteriors[key]

    def benefit(self, design: Design, n: tuple[int, ...],
                sizes: tuple[int, ...] | None = None) -> np.ndarray:
        """Posterior probability of benefit on the lattice after per-arm sizes ``n``."""
        sizes = self._sizes(design, n) if sizes is None else sizes
        key = (n, sizes)
        if key not in self._benefit:
            values, err = design.family.benefit(design, self.posteriors(design, n, sizes))
            self._benefit[key] = values
            self.error = max(self.error, err)
        return self._benefit[key]

    def predictive(
        self, design: Design, n_now: tuple[int, ...], n_end: tuple[int, ...],
        sizes: tuple[int, ...],
    ) -> list[np.ndarray]:
        """Per arm, the predictive pmf of the statistic still to come, one row per point."""
        key = (n_now, self._sizes(design, n_now), n_end, sizes)
        if key not in self._predictive:
            family = design.family
            posts = self.posteriors(design, n_now)
            self._predictive[key] = [
                family.predictive_pmf(design, post, n_end[j] - n_now[j], sizes[j])
                for j, post in enumerate(posts)]
        return self._predictive[key]


def serving(design: Design, truths: np.ndarray | None) -> Design:
    """``design`` with its scenarios extended by ``truths`` when a truncated lattice must
    serve them (the family sizes its lattice from the design's scenarios)."""
    if truths is None or not design.family.truncates:
        return design
    rows = tuple(tuple(float(v) for v in row) for row in np.asarray(truths, dtype=float))
    values = tuple(dict.fromkeys(design.scenarios.values + rows))
    return replace(design, scenarios=replace(design.scenarios, values=values))


def build_rule(
    design: Design, cache: LatticeCache | None = None, *, truths: np.ndarray | None = None,
) -> LatticeRule:
    """Turn a design's rule into lattice tables (see module docstring).

    Parameters
    ----------
    design : Design
    cache : LatticeCache, optional
        Posterior tables to reuse across designs that differ only in looks and thresholds.
    truths : ndarray, optional
        True values (scenarios x arms) the rule will be evaluated at; a truncated lattice
        is sized for them as well as for the design's own scenarios.
    """
    family = design.family
    if not family.lattice:
        raise TypeError(f"{family.name} endpoints have no lattice rule")
    cache = LatticeCache() if cache is None else cache
    design = serving(design, truths)
    looks = design.looks
    k_last = looks.count - 1
    with_prior = all(arm.prior is not None for arm in design.arms)

    benefits: list[np.ndarray | None] = [
        cache.benefit(design, looks.per_arm[k]) if with_prior else None
        for k in range(looks.count)]
    error = cache.error if with_prior else 0.0

    rule = stop_rule(design)
    final_codes = _codes(rule, design, k_last, benefits[k_last])
    grid = with_prior and family.on_grid(design)
    predictive_error = 0.0
    reach_success = final_codes == EFFICACY
    if any(t is not None for t in looks.futility_predictive):
        reach_success = _success_for_predictive(design, cache, rule, reach_success)
        error = max(error, cache.error)
    tables = []
    for k in range(looks.count):
        predictive = None
        benefit = benefits[k]
        uncertain = _near(design, k, benefit, error) if grid and benefit is not None else None
        threshold = None if k == k_last else looks.futility_predictive[k]
        if threshold is not None:
            pmfs = cache.predictive(design, looks.per_arm[k], looks.per_arm[-1],
                                    reach_success.shape)
            predictive = success_from_pmfs(pmfs, reach_success)
            slack, err = _predictive_slack(design, family,
                                           cache.posteriors(design, looks.per_arm[k]), k,
                                           pmfs, reach_success.shape)
            predictive_error = max(predictive_error, err)
            if np.any(slack > 0):
                near = np.abs(predictive - threshold) < slack
                uncertain = near if uncertain is None else uncertain | near
        codes = (final_codes if k == k_last
                 else _codes(rule, design, k, benefits[k], predictive))
        if uncertain is not None and not uncertain.any():
            uncertain = None
        tables.append(LookTable(k + 1, looks.per_arm[k], benefits[k], predictive,
                                codes == EFFICACY, codes == FUTILITY, uncertain))
    settings = family.rule_info(design, max(error, predictive_error)) if with_prior else {}
    return LatticeRule(tuple(tables), error, family.lattice_reach(design), settings)


def _near(design: Design, k: int, benefit: np.ndarray, error: float) -> np.ndarray | None:
    """Points whose posterior probability lies within ``error`` of a threshold at look k."""
    looks = design.looks
    thresholds = [looks.efficacy[k], looks.futility[k] if k < looks.count - 1 else None]
    near = np.zeros(benefit.shape, dtype=bool)
    for t in thresholds:
        if t is not None:
            near |= np.abs(benefit - t) < error
    return near


def _predictive_slack(
    design: Design, family: LatticeFamily, posteriors: tuple, k: int, pmfs: list[np.ndarray],
    final_shape: tuple[int, ...],
) -> tuple[np.ndarray, float]:
    """Per point, how far the computed predictive probability may be from the true one:
    the predictive mass beyond a truncated final lattice (counted as failure) plus the
    numerical error of the predictive distribution (also returned on its own)."""
    n_now, n_end = design.looks.per_arm[k], design.looks.per_arm[-1]
    error = sum(family.predictive_error(design, post, n_end[j] - n_now[j], final_shape[j])
                for j, post in enumerate(posteriors))
    if not family.truncates:
        return np.full([p.shape[0] for p in pmfs], error), error
    tails = []
    for pmf, size in zip(pmfs, final_shape, strict=True):
        # Pr(x + Y >= size) = 1 - sum_{y < size - x} Pr(Y = y | x)
        x = np.arange(pmf.shape[0])
        inside = np.cumsum(pmf, axis=1)[x, size - 1 - x]
        tails.append(np.clip(1.0 - inside, 0.0, None))
    if len(tails) == 1:
        return tails[0] + error, error
    return tails[0][:, None] + tails[1][None, :] + error, error


def _success_for_predictive(
    design: Design, cache: LatticeCache, rule: Rule | CountRule, final_success: np.ndarray,
) -> np.ndarray:
    """The final success region on a lattice large enough for predictive probabilities.

    A truncated final lattice serves the true values; the predictive distribution from a
    high interim count can reach further. The family says how far
    (:meth:`~octrial.endpoints.base.LatticeFamily.predictive_lattice_size`), and the
    final success region is evaluated on that larger lattice.
    """
    family = design.family
    sizes = tuple(max(size, family.predictive_lattice_size(design, j))
                  for j, size in enumerate(final_success.shape))
    if sizes == final_success.shape:
        return final_success
    benefit = cache.benefit(design, design.looks.per_arm[-1], sizes)
    return _codes(rule, design, design.looks.count - 1, benefit) == EFFICACY


def stop_rule(design: Design) -> Rule | CountRule:
    """The design's stop rule: probability thresholds, or count bounds."""
    looks = design.looks
    if looks.uses_counts:
        return CountRule.of(looks, design.hypothesis.better == "higher")
    return Rule.of(looks)


def _codes(rule: Rule | CountRule, design: Design, k: int, benefit: np.ndarray | None,
           predictive: np.ndarray | None = None) -> np.ndarray:
    """The stop rule's decision codes at every lattice point of look ``k``."""
    if isinstance(rule, CountRule):
        size = design.family.lattice_size(design, 0, design.looks.per_arm[k][0])
        return rule.decide_many(k, np.arange(size))
    assert benefit is not None, "a probability rule needs analysis priors (load checks)"
    return rule.decide_many(k, benefit, predictive)


def predictive_pmfs(
    design: Design, family: LatticeFamily, posteriors: tuple, k: int,
    final_shape: tuple[int, ...],
) -> list[np.ndarray]:
    """Per arm, the predictive pmf of the statistic still to come after look ``k``, one
    row per lattice point and one column per final lattice point."""
    n_now, n_end = design.looks.per_arm[k], design.looks.per_arm[-1]
    return [family.predictive_pmf(design, post, n_end[j] - n_now[j], final_shape[j])
            for j, post in enumerate(posteriors)]


def predictive_success(
    design: Design, family: LatticeFamily, posteriors: tuple, k: int, success: np.ndarray,
) -> np.ndarray:
    """Predictive probability of success at the final look from every point at look ``k``.

    PP(x) = sum_y Pr(Y = y | x) 1[final success at x + y], with Y the statistic of the
    subjects still to come (Lee & Liu 2008); per arm independently for two arms. Points
    beyond a truncated final lattice count as failures; where that could change a
    decision, the point is marked uncertain (see :func:`build_rule`).
    """
    return success_from_pmfs(predictive_pmfs(design, family, posteriors, k, success.shape),
                             success)


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
