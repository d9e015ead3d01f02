"""Exact operating characteristics on the sufficient-statistic lattice.

The lattice dynamic programme (:mod:`octrial.engines.lattice_programme`) at one true
value at a time, with the new subjects' count drawn from the family's increment pmf. No
Monte Carlo error: the only numerical error is that of the posterior probabilities behind
the rule, reported with the result.

The same stopping distribution gives the bias and RMSE of the posterior mean and the
coverage of the credible interval at the stopping look as exact expectations.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from octrial.design.model import Design
from octrial.endpoints.base import LatticeFamily
from octrial.engines.lattice_programme import add_increment, run_programme
from octrial.engines.outcome import Estimation, Outcome
from octrial.engines.pipeline import calendar_extra, exact_unsupported, reversed_efficacy, timing
from octrial.rules.estimates import LatticeEstimates, coverage_tables, lattice_estimates
from octrial.rules.lattice import LatticeCache, LatticeRule, build_rule


def stopped_mass(
    design: Design, rule: LatticeRule, truth: tuple[float, ...],
) -> tuple[list[np.ndarray], np.ndarray, np.ndarray, float, float]:
    """Exact distribution of where studies stop, at one true parameter vector.

    Returns
    -------
    mass : list of ndarray
        Per look, Pr(the study stops at look k at each lattice point).
    efficacy, futility : ndarray, shape (looks,)
        Pr(stop for efficacy / futility at look k).
    neglected : float
        Probability mass dropped by truncating the lattice (0 for bounded statistics).
    uncertain : float
        Probability of reaching a point whose decision numerical error could change (see
        :class:`~octrial.rules.lattice.LookTable`); with ``neglected`` it bounds the error
        of every stopping probability.
    """
    family: LatticeFamily = design.family

    def step(dist: np.ndarray, arm: int, before: int, after: int, size: int) -> np.ndarray:
        pmf = family.increment_pmf(design, truth[arm], after - before, size)
        return add_increment(dist, pmf, arm, size)

    found = run_programme(rule.looks, len(truth), step, truncates=family.truncates,
                          keep_mass=True)
    assert found.mass is not None
    return (found.mass, found.efficacy, found.futility, float(found.neglected),
            float(found.uncertain))


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
    _, efficacy, futility, neglected, _ = stopped_mass(design, rule, truth)
    return efficacy, futility, neglected


def exact_estimation(
    design: Design, estimates: LatticeEstimates, truth: tuple[float, ...],
    mass: list[np.ndarray], level: float,
) -> tuple[np.ndarray, float]:
    """E[e], E[e^2], E[e^4] of the posterior mean's error e at the stopping look, and the
    coverage probability, as exact sums over the stopping distribution ``mass``."""
    target = design.family.target_value(design.hypothesis, truth)
    covered = coverage_tables(design, estimates, truth, level)
    moments, coverage = np.zeros(3), 0.0
    for m, mean, cover in zip(mass, estimates.means, covered, strict=True):
        e2 = (mean - target) ** 2
        moments += [np.sum(m * (mean - target)), np.sum(m * e2), np.sum(m * e2 * e2)]
        coverage += float(np.sum(m[cover]))
    return moments, coverage


class ExactLatticeEngine:
    """The exact engine for endpoints with a lattice sufficient statistic."""

    name = "exact"
    conduct_aware = True
    """Models calendar time: under deterministic [conduct] (see :func:`unsupported`)."""

    @staticmethod
    def serves(family: object) -> bool:
        return isinstance(family, LatticeFamily)

    @staticmethod
    def unsupported(design: Design) -> str | None:
        """Why this engine cannot evaluate ``design``, or ``None`` when it can."""
        if not isinstance(design.family, LatticeFamily):
            return f"{design.family.name} endpoints have no lattice sufficient statistic"
        return exact_unsupported(design)

    @staticmethod
    def run(design: Design, truths: np.ndarray, rule: LatticeRule | None = None,
            estimate: bool = True, **_simulation: Any) -> Outcome:
        """Evaluate every scenario in ``truths`` (one row per scenario, one column per arm).

        A rule whose truncated lattice is too small for ``truths`` is rebuilt for them.
        Without ``estimate`` the bias, RMSE and coverage are skipped (searches that need
        only the stopping probabilities). Simulation settings (replicates, seeds, parallel
        execution) do not apply and are ignored.
        """
        if rule is None or not rule.covers(truths):
            rule = build_rule(design, truths=truths)
        estimates = lattice_estimates(design, rule) if estimate else None
        level = design.simulation.interval_level
        efficacy, futility, neglected, uncertain, moments, coverage = [], [], [], [], [], []
        plan = timing(design) if design.conduct is not None else None
        reversed_ = []
        finals = LatticeCache()  # final-threshold tables at the pipeline's sizes, shared
        for t in truths:
            mass, eff, fut, lost, unsure = stopped_mass(design, rule, tuple(t))
            if plan is not None and design.conduct is not None and design.conduct.analyse_pipeline:
                reversed_.append(sum(
                    reversed_efficacy(design, tuple(t), np.where(table.efficacy, m, 0.0),
                                      plan.complete[k], plan.enrolled[k], finals)
                    for k, (m, table) in enumerate(zip(mass[:-1], rule.looks[:-1],
                                                       strict=True))))
            efficacy.append(eff)
            futility.append(fut)
            neglected.append(lost)
            uncertain.append(unsure)
            if estimates is not None:
                m, c = exact_estimation(design, estimates, tuple(t), mass, level)
                moments.append(m)
                coverage.append(c)
        info = {
            **rule.info(),
            "max_neglected_mass": float(max(neglected)) if neglected else 0.0,
        }
        if rule.reach is not None:
            info["truncation_epsilon"] = design.family.truncation_epsilon
        if reversed_:
            info["pipeline_quadrature_error_bound"] = finals.error
        if uncertain and max(uncertain) > 0:
            info["max_uncertain_mass"] = float(max(uncertain))
        estimation = None
        if estimates is not None:
            estimation = Estimation(np.array(moments).reshape(len(truths), 3),
                                    np.array(coverage), level)
        extra = {}
        if plan is not None:
            extra = calendar_extra(design, plan, np.array(efficacy), np.array(futility),
                                   np.array(reversed_ or [0.0] * len(truths)))
        return Outcome(np.array(efficacy), np.array(futility),
                       np.zeros(len(truths), dtype=int), "exact", extra=extra, info=info,
                       estimation=estimation)
