"""Threshold calibration at one sample size.

The calibrated threshold ('final' or 'efficacy') is set to its least stringent value whose
type I error is at most alpha everywhere on the null grid. The probability of success
falls monotonically as any of these thresholds tightens (path by path: a study that
succeeds under a stricter rule succeeds under a looser one, because the looser rule stops
for efficacy at least as early and for futility no more often), so the search is a
bisection over the ordered candidates, or one pass over all of them when the sweep of
the final threshold applies. Grid values (futility, predictive futility, eta) are tried
one combination at a time, each with the threshold calibrated; the combination is chosen
by the request's criterion: the largest power (Zhou, Lee & Yuan 2017 choose their
threshold parameters this way) or the smallest expected sample size under the null among
those meeting the power target (Simon's 1989 'optimal' criterion).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from typing import Any

import numpy as np

from octrial.calibration.evaluator import Assessment, Evaluator, LatticeEvaluator
from octrial.calibration.knobs import Knob, grid_knob, knob, shortest_between
from octrial.calibration.log import Log
from octrial.calibration.request import Request
from octrial.calibration.variants import Builder
from octrial.design.model import Design

CONTINUOUS_TOLERANCE = 1e-10
"""Bisection on a continuous threshold stops when the bracket is this narrow."""
MONTE_CARLO_TOLERANCE = 1e-6
"""... this narrow when the evaluator simulates: a threshold moved by 1e-6 moves a
probability of success by far less than its Monte Carlo standard error."""
MAX_BISECTIONS = 80


@dataclass(frozen=True, eq=False)
class Choice:
    """A candidate chosen at one sample size.

    Attributes
    ----------
    looks : dict
        Its ``[looks]`` table.
    design : Design
    assessment : Assessment
    row : int
        Its row in the log.
    meets_alpha, meets_power : bool
    values : dict
        For each tuned knob: ``{'value': written value, 'exact': candidate value,
        'equivalent': (lo, hi) or None}`` (every value in the equivalent range gives the same
        rule on a count lattice).
    """

    looks: dict[str, Any]
    design: Design
    assessment: Assessment
    row: int
    meets_alpha: bool
    meets_power: bool
    values: dict[str, dict[str, Any]]

    @property
    def passes(self) -> bool:
        """Whether it meets alpha and the power target."""
        return self.meets_alpha and self.meets_power


def _same_rule(ev: Evaluator, a: Design, b: Design) -> bool:
    if not isinstance(ev, LatticeEvaluator):
        return False
    ra, rb = ev.rule(a), ev.rule(b)
    return all(np.array_equal(x.efficacy, y.efficacy) and np.array_equal(x.futility, y.futility)
               for x, y in zip(ra.looks, rb.looks, strict=True))


class Tuner:
    """Calibrates thresholds for one request (see module docstring)."""

    def __init__(self, builder: Builder, ev: Evaluator, request: Request, log: Log) -> None:
        self.builder = builder
        self.ev = ev
        self.request = request
        self.log = log

    # -- one candidate -------------------------------------------------------------------
    def _try(self, looks: dict[str, Any], step: str) -> tuple[Design | None, Assessment | None,
                                                             int]:
        design = self.builder.build(looks)
        if isinstance(design, str):
            base = self.builder.design.looks
            return None, None, self.log.add(step, base, None, note=f"invalid: {design}")
        a = self.ev.assess(design)
        return design, a, self.log.add(step, design.looks, a)

    def fixed(self, looks: dict[str, Any], step: str) -> Choice | None:
        """A candidate with no threshold tuned."""
        return self._chosen(looks, step, {})

    # -- the calibrated threshold ----------------------------------------------------------
    def calibrate(self, looks: dict[str, Any], name: str, step: str = "threshold") -> (
            Choice | None):
        """Set knob ``name`` to its least stringent value meeting alpha.

        Returns the most stringent candidate (flagged as not meeting alpha) when none
        meets it, and ``None`` when ``looks`` is not a valid design.
        """
        turn = knob(name)
        base = self.builder.build(looks)
        if isinstance(base, str):
            self.log.add(step, self.builder.design.looks, None, note=f"invalid: {base}")
            return None
        values = turn.candidates(self.ev, base)
        if values is None:
            return self._continuous(looks, base, turn, step)
        if name == "final":
            sweep = self.ev.sweep_final(base)
            if sweep is not None:
                return self._from_sweep(looks, base, turn, sweep, step)
        return self._bisect(looks, base, turn, values, step)

    def _from_sweep(self, looks, base, turn, sweep, step) -> Choice | None:
        self.log.add_sweep(step, base.looks, sweep.values, sweep.prob_success, sweep.expected_n)
        type1 = sweep.prob_success[:, : self.ev.truths.nulls].max(axis=1)
        # every candidate is at hand: the least stringent meeting every constraint, even
        # where a constraint (Pr(null | success)) is not monotone in the threshold
        feasible = np.flatnonzero(self.log.acceptable(type1, sweep.prob_success))
        index = len(sweep.values) - 1 if feasible.size == 0 else int(feasible[0])
        return self._finish(looks, base, turn, sweep.values, index, step)

    def _bisect(self, looks, base, turn, values, step) -> Choice | None:
        cache: dict[int, tuple[Design | None, Assessment | None]] = {}

        def ok(i: int) -> bool:
            if i not in cache:
                design, a, _ = self._try(turn.apply(looks, base, float(values[i])), step)
                cache[i] = (design, a)
            a = cache[i][1]
            return a is not None and self.log.meets(a)[0]

        if not monotone(self.request):
            # a constraint that need not be monotone in the threshold: every candidate
            # from the least stringent until one meets them all
            for i in range(len(values)):
                if ok(i):
                    return self._finish(looks, base, turn, values, i, step)
            return self._finish(looks, base, turn, values, len(values) - 1, step)
        hi = len(values) - 1
        if not ok(hi):
            return self._finish(looks, base, turn, values, hi, step)
        lo = 0
        if ok(lo):
            return self._finish(looks, base, turn, values, lo, step)
        while hi - lo > 1:  # ok(hi) and not ok(lo)
            mid = (lo + hi) // 2
            if ok(mid):
                hi = mid
            else:
                lo = mid
        return self._finish(looks, base, turn, values, hi, step)

    def _finish(self, looks, base, turn: Knob, values, index: int, step: str) -> Choice | None:
        """Write the chosen candidate, as a short decimal when one gives the same rule."""
        value: float  # a count (int) for a rule stated in counts
        exact: float
        if base.looks.uses_counts and turn.name == "final":
            value = exact = int(values[index])
            equivalent = None
        else:
            exact = float(values[index])
            if index > 0:  # the next less stringent candidate changes the rule
                other, closed = float(values[index - 1]), False
            else:  # nothing less stringent: the range runs to the knob's end
                other, closed = turn.span(base)[0], True
            value = exact
            nicer = shortest_between(exact, other, closed_other=closed)
            if nicer != exact:
                precise = self.builder.build(turn.apply(looks, base, exact))
                rounded = self.builder.build(turn.apply(looks, base, nicer))
                if not isinstance(precise, str) and not isinstance(rounded, str) and (
                        _same_rule(self.ev, precise, rounded)):
                    value = nicer
            equivalent = tuple(sorted((exact, other)))
        return self._chosen(turn.apply(looks, base, value), step,
                            {turn.name: {"value": value, "exact": exact,
                                         "equivalent": equivalent}})

    def _chosen(self, looks: dict[str, Any], step: str,
                values: dict[str, dict[str, Any]]) -> Choice | None:
        design, a, row = self._try(looks, step)
        if design is None or a is None:  # both None together: not a valid design
            return None
        alpha_ok, power_ok = self.log.meets(a)
        return Choice(looks, design, a, row, alpha_ok, power_ok, values)

    def _continuous(self, looks, base, turn: Knob, step: str) -> Choice | None:
        least, most = turn.span(base)

        def ok(value: float) -> bool:
            a = self._try(turn.apply(looks, base, value), step)[1]
            return a is not None and self.log.meets(a)[0]

        if not ok(most):
            value = most
        elif ok(least):
            value = least
        else:
            bad, good = least, most
            tolerance = CONTINUOUS_TOLERANCE if self.ev.exact else MONTE_CARLO_TOLERANCE
            for _ in range(MAX_BISECTIONS):
                if abs(good - bad) <= tolerance:
                    break
                mid = 0.5 * (bad + good)
                if ok(mid):
                    good = mid
                else:
                    bad = mid
            value = good
            nicer = shortest_between(good, bad, closed_other=True)
            if nicer != good and ok(nicer):
                value = nicer
        return self._chosen(turn.apply(looks, base, value), step,
                            {turn.name: {"value": value, "exact": value, "equivalent": None}})

    # -- grids around the calibrated threshold ------------------------------------------
    def tune(self, looks: dict[str, Any], step: str = "threshold") -> Choice | None:
        """Everything the request varies at this sample size (thresholds only)."""
        name = self.request.calibrated
        if name is None:
            return self.fixed(looks, step)
        grids = [grid_knob(g) for g in self.request.grid]
        if not grids:
            return self.calibrate(looks, name, step)
        base = self.builder.build(looks)
        if isinstance(base, str):
            self.log.add(step, self.builder.design.looks, None, note=f"invalid: {base}")
            return None
        options = [g.candidates(self.ev, base) for g in grids]
        found: list[Choice] = []
        for combo in itertools.product(*options):
            trial = looks
            for g, value in zip(grids, combo, strict=True):
                trial = g.apply(trial, base, float(value))
            choice = self.calibrate(trial, name, step)
            if choice is None:
                continue
            grid_values = {g.name: {"value": float(v), "exact": float(v), "equivalent": None}
                           for g, v in zip(grids, combo, strict=True)}
            choice = Choice(choice.looks, choice.design, choice.assessment, choice.row,
                            choice.meets_alpha, choice.meets_power,
                            {**grid_values, **choice.values})
            found.append(choice)
        return self.pick(found)

    def pick(self, found: list[Choice]) -> Choice | None:
        """The best of several calibrated candidates by the request's criterion."""
        if not found:
            return None
        passing = [c for c in found if c.passes]
        if passing:
            if self.request.criterion == "optimal":
                return min(passing, key=lambda c: (round(c.assessment.expected_n_null, 10),
                                                   -(c.assessment.power or 0.0)))
            return max(passing, key=lambda c: (round(c.assessment.power or 0.0, 12),
                                               -c.assessment.expected_n_null))
        return best_failing(found)


NOT_MONOTONE = ("prob_null_given_success", "prob_alternative_given_failure")
"""Bayesian operating characteristics that need not move monotonically with a threshold
(ratios of two monotone probabilities); the others do, as the probability of success
does at every true value."""


def monotone(request: Request) -> bool:
    """Whether every constraint of ``request`` moves monotonically with a threshold."""
    return not any(c.name in NOT_MONOTONE for c in request.constraints)


def best_failing(found: list[Choice]) -> Choice:
    """The best of candidates that fail: the most powerful meeting alpha, else the one with
    the smallest type I error."""
    meeting = [c for c in found if c.meets_alpha]
    if meeting:
        return max(meeting, key=lambda c: c.assessment.power or 0.0)
    return min(found, key=lambda c: c.assessment.type1)
