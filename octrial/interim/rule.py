"""The design's decision rule applied at one look to the sample sizes actually observed.

The rule at look k depends on that look's thresholds, the final success threshold and the
maximum sample size only, so the look is evaluated as a design with two looks: the observed
sizes now, and the planned maximum at the end (one look when k is the last). Its tables
come from :func:`octrial.rules.lattice.build_rule`, so the posterior and predictive
probabilities are computed by exactly the code behind the boundary table; at the planned
sizes they are the same numbers. The decision is then read with the rule's own comparison
(:class:`~octrial.rules.stop.Rule` and :class:`~octrial.rules.stop.CountRule`: the stop
rule every kernel and table applies, efficacy first).

When the observed sizes differ from the plan, probability thresholds are applied as
written, except thresholds given as a function of the information fraction, which are
evaluated at the observed fraction t = n / N at interim looks (the final success threshold
stays the planned one). Count rules are applied as written.
"""

from __future__ import annotations

import dataclasses
import functools
from dataclasses import dataclass

import numpy as np

from octrial.design.model import Design, Looks
from octrial.design.thresholds import FUNCTIONS, evaluate_spec
from octrial.rules.boundaries import boundary_table
from octrial.rules.lattice import LatticeRule, build_rule, predictive_success
from octrial.rules.stop import EFFICACY, FUTILITY, CountRule, Rule, predictive_decision

CONTINUE = "continue"
STOP_EFFICACY = "stop for efficacy"
STOP_FUTILITY = "stop for futility"
SUCCESS = "success"
FAILURE = "failure"

KINDS = ("efficacy", "futility", "futility_predictive")


@dataclass(frozen=True)
class Thresholds:
    """The rule at one look, as applied: probability thresholds or count bounds.

    ``None`` where the look has no such threshold.
    """

    efficacy: float | None = None
    futility: float | None = None
    futility_predictive: float | None = None
    efficacy_count: int | None = None
    futility_count: int | None = None

    @property
    def in_counts(self) -> bool:
        """Whether the rule is stated in counts."""
        return self.efficacy_count is not None or self.futility_count is not None


@dataclass(frozen=True)
class Assessment:
    """The rule's verdict at the observed point (no posterior summaries).

    Attributes
    ----------
    benefit, predictive : float or None
        Posterior probability of benefit and predictive probability of final success
        (``None`` where the rule has none: no prior, or the last look).
    thresholds : Thresholds
    decision, reason : str
    boundaries : dict
        The look's bounds at the observed sizes in words (efficacy and futility; at the
        last look success and failure).
    predictive_se : float or None
        Monte Carlo standard error of ``predictive`` when it is simulated (normal
        endpoints with an unknown sd and two arms); ``None`` when computed exactly.
    """

    benefit: float | None
    predictive: float | None
    thresholds: Thresholds
    decision: str
    reason: str
    boundaries: dict[str, str]
    predictive_se: float | None = None


def thresholds_at(design: Design, k: int, n_total: int) -> Thresholds:
    """The thresholds of look ``k`` (from 0) when ``n_total`` subjects have been observed."""
    looks = design.looks
    last = k == looks.count - 1
    if looks.efficacy_count is not None:  # the rule is stated in counts
        return Thresholds(efficacy_count=looks.efficacy_count[k],
                          futility_count=None if looks.futility_count is None
                          else looks.futility_count[k])
    values = {kind: getattr(looks, kind)[k] for kind in KINDS}
    if not last:
        information = (n_total / looks.n[-1],)
        for kind, spec in looks.specs:
            if spec.form in FUNCTIONS and values[kind] is not None:
                value = evaluate_spec(spec, information)[0]
                assert value is not None  # a function of information has a value at every look
                values[kind] = float(np.clip(value, 0.0, 1.0))
    return Thresholds(**values)


def observed_design(design: Design, k: int, n_arms: tuple[int, ...]) -> Design:
    """The design reduced to look ``k`` at sizes ``n_arms`` (and the final look after it)."""
    looks = design.looks
    last = looks.count - 1
    total = sum(n_arms)
    now = thresholds_at(design, k, total)
    end = thresholds_at(design, last, looks.n[-1])
    steps = [(total, n_arms, now)] if k == last else [
        (total, n_arms, now), (looks.n[-1], looks.per_arm[-1], end)]
    counts = looks.uses_counts
    reduced = Looks(
        n=tuple(s[0] for s in steps),
        per_arm=tuple(s[1] for s in steps),
        efficacy=tuple(s[2].efficacy for s in steps),
        futility=tuple(s[2].futility for s in steps),
        futility_predictive=tuple(s[2].futility_predictive for s in steps),
        efficacy_count=tuple(s[2].efficacy_count for s in steps) if counts else None,
        futility_count=tuple(s[2].futility_count for s in steps) if counts else None,
    )
    return dataclasses.replace(design, looks=reduced)


@dataclass(frozen=True, eq=False)
class ObservedLook:
    """The rule's tables at one look for the observed sample sizes.

    Attributes
    ----------
    design : Design
        The reduced design (this look, then the final look).
    rule : LatticeRule
        Its tables; ``rule.looks[0]`` is the look at the observed sizes.
    predictive : ndarray or None
        Predictive probability of final success at every lattice point (interim looks with
        an analysis prior).
    boundaries : tuple of dict
        The boundary-table rows of this look at the observed sizes (two arms: one per
        control count, in order).
    thresholds : Thresholds
    """

    design: Design
    rule: LatticeRule
    predictive: np.ndarray | None
    boundaries: tuple[dict, ...]
    thresholds: Thresholds


@functools.lru_cache(maxsize=64)
def observed_look(design: Design, k: int, n_arms: tuple[int, ...]) -> ObservedLook:
    """Tables of look ``k`` (from 0) at per-arm sizes ``n_arms``, cached."""
    family = design.family
    if not family.lattice:
        raise TypeError(f"{family.name} endpoints have no lattice rule")
    reduced = observed_design(design, k, n_arms)
    rule = build_rule(reduced)
    table = rule.looks[0]
    predictive = table.predictive
    has_prior = all(arm.prior is not None for arm in design.arms)
    if predictive is None and has_prior and len(rule.looks) > 1:
        posteriors = tuple(
            family.posterior(reduced, j, n, np.arange(family.lattice_size(reduced, j, n)))
            for j, n in enumerate(n_arms))
        predictive = predictive_success(reduced, family, posteriors, 0, rule.final.efficacy)
    rows = boundary_table(reduced, rule)
    records = tuple(rows[rows["look"] == 1].to_dict("records"))
    return ObservedLook(reduced, rule, predictive, records, thresholds_at(design, k, sum(n_arms)))


def probability_decision(
    thresholds: Thresholds, benefit: float, predictive: float | None, last: bool,
    statement: str = "Pr(benefit)",
) -> tuple[str, str]:
    """The decision of a probability rule, and why (efficacy checked first).

    The decision is :meth:`Rule.decide <octrial.rules.stop.Rule.decide>`, the comparison
    of the boundary tables and the kernels: a probability within
    :data:`~octrial.rules.stop.DECISION_TOLERANCE` of a threshold reaches it. When both
    futility thresholds are crossed, the reason names both.
    """
    e, f, g = thresholds.efficacy, thresholds.futility, thresholds.futility_predictive
    rule = Rule.one_look(e, f, g, final=last)
    decision = rule.decide(0, benefit, predictive)
    if last:
        if decision == EFFICACY:
            return SUCCESS, f"{statement} = {benefit:.4f} reaches the final success threshold {e:g}"
        return FAILURE, f"{statement} = {benefit:.4f} is below the final success threshold {e:g}"
    if decision == EFFICACY:
        return STOP_EFFICACY, f"{statement} = {benefit:.4f} reaches the efficacy threshold {e:g}"
    if decision != FUTILITY:
        return CONTINUE, _no_threshold(thresholds, benefit, predictive, statement)
    why = []
    if rule.decide(0, benefit) == FUTILITY:
        why.append(f"{statement} = {benefit:.4f} is below the futility threshold {f:g}")
    if predictive is not None and rule.has_predictive(0) and predictive_decision(
            rule.futility_predictive, 0, predictive, rule.tolerance) == FUTILITY:
        why.append(f"the predictive probability of final success = {predictive:.4f} is below "
                   f"the futility threshold {g:g}")
    return STOP_FUTILITY, "; ".join(why)


def _no_threshold(thresholds: Thresholds, benefit: float, predictive: float | None,
                  statement: str) -> str:
    needs = []
    if thresholds.efficacy is not None:
        needs.append(f"efficacy needs at least {thresholds.efficacy:g}")
    futile = []
    if thresholds.futility is not None:
        futile.append(f"below {thresholds.futility:g}")
    if thresholds.futility_predictive is not None:
        futile.append(f"a predictive probability below {thresholds.futility_predictive:g}")
    if futile:
        needs.append("futility needs " + " or ".join(futile))
    seen = f"{statement} = {benefit:.4f}"
    if predictive is not None:
        seen += f" (predictive probability {predictive:.4f})"
    if not needs:
        return f"{seen}; this look has no stopping threshold"
    return f"{seen} reaches no stopping threshold: " + "; ".join(needs)


def count_decision(
    thresholds: Thresholds, count: int, higher: bool, last: bool, statistic: str,
) -> tuple[str, str]:
    """The decision of a rule stated in counts, and why (efficacy checked first); the
    decision is :meth:`CountRule.decide <octrial.rules.stop.CountRule.decide>`."""
    a, r = thresholds.efficacy_count, thresholds.futility_count
    reach, fall = (">=", "<=") if higher else ("<=", ">=")
    after: tuple[None, ...] = () if last else (None,)  # look 0, then a final look
    decision = CountRule.from_bounds((a, *after), (r, *after), higher).decide(0, count)
    if last:
        if decision == EFFICACY:
            return SUCCESS, f"{count} {statistic} reach the final success bound ({reach} {a})"
        return FAILURE, f"{count} {statistic} miss the final success bound ({reach} {a})"
    if decision == EFFICACY:
        return STOP_EFFICACY, f"{count} {statistic} reach the efficacy bound ({reach} {a})"
    if decision == FUTILITY:
        return STOP_FUTILITY, f"{count} {statistic} fall in the futility region ({fall} {r})"
    return CONTINUE, f"{count} {statistic} reach no stopping bound"
