"""The stop rule, written once: efficacy first, futility below, predictive futility at
interim looks, and the final look fails without efficacy.

At look ``k`` a study with posterior probability of benefit ``b``

1. stops for efficacy (succeeds at the final look) when ``b >= efficacy[k] - tol``;
2. otherwise fails at the final look;
3. otherwise stops for futility at an interim look when ``b < futility[k] - tol``;
4. otherwise, at an interim look with a predictive threshold, stops for futility when the
   predictive probability of final success ``pp < futility_predictive[k] - tol``;
5. otherwise continues.

A threshold that is absent is ``nan`` in the arrays. ``tol`` is
:data:`DECISION_TOLERANCE`: a probability within it of a threshold reaches it, so that a
threshold equal to a computed posterior probability (as calibration produces) is met
despite rounding in the last bit.

A rule stated in counts (``efficacy_count`` / ``futility_count``: one arm, success at look
``k`` if the count ``x >= a_k``, futility if ``x <= r_k``, the inequalities reversed when
lower is better) is the same rule on the signed count ``sign * x`` with thresholds
``sign * a_k`` and ``sign * r_k + 1`` and no tolerance (for integers ``x <= r`` is
``x < r + 1``): :class:`CountRule`.

The same rule appears in three forms, kept in step by ``tests/test_stop_rule.py``:
:meth:`Rule.decide` (one study, Python: interim decisions), :meth:`Rule.decide_many`
(arrays: decision tables on the lattice, boundary tables) and the numba functions
:func:`look_decision` / :func:`predictive_decision` on the arrays of
:meth:`Rule.arrays`. The predictive step is separate because the predictive probability
is expensive: kernels compute it only when :func:`wants_predictive` says the look has a
predictive threshold and steps 1-3 left the study running. Kernels' inner loops call the
per-look forms :func:`look_decision_at`, :func:`wants_predictive_at` and
:func:`predictive_decision_at` on one look's thresholds as floats (``efficacy[k]``...);
the array forms call them in turn, so the compiled comparisons are written once.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
from numba import njit

DECISION_TOLERANCE = 1e-12
"""A probability within this of a threshold counts as reaching it (module docstring)."""

CONTINUE, EFFICACY, FUTILITY = 0, 1, 2
"""Decision codes. At the final look EFFICACY means success and FUTILITY failure."""


def _array(values: tuple[float | None, ...]) -> np.ndarray:
    return np.array([math.nan if v is None else float(v) for v in values], dtype=float)


@dataclass(frozen=True, eq=False)
class Rule:
    """Per-look probability thresholds of a design (``nan`` where a look has none).

    Parameters
    ----------
    efficacy, futility, futility_predictive : numpy.ndarray
        One value per look; the last efficacy value is the final success threshold and the
        last futility values are ignored (the final look fails without efficacy).
    tolerance : float
        See :data:`DECISION_TOLERANCE`.
    """

    efficacy: np.ndarray
    futility: np.ndarray
    futility_predictive: np.ndarray
    tolerance: float = DECISION_TOLERANCE

    @classmethod
    def of(cls, looks: Any) -> Rule:
        """The rule of a design's ``looks`` (:class:`~octrial.design.model.Looks`)."""
        return cls(_array(looks.efficacy), _array(looks.futility),
                   _array(looks.futility_predictive))

    @classmethod
    def one_look(cls, efficacy: float | None, futility: float | None = None,
                 futility_predictive: float | None = None, *, final: bool) -> Rule:
        """The rule of one look, as look 0 (an interim look is followed by a final look
        with no thresholds, which only makes look 0 an interim one)."""
        after: tuple[None, ...] = () if final else (None,)
        return cls(_array((efficacy, *after)), _array((futility, *after)),
                   _array((futility_predictive, *after)))

    @property
    def last(self) -> int:
        """Index of the final look."""
        return len(self.efficacy) - 1

    def arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
        """``(efficacy, futility, futility_predictive, tolerance)`` for the numba kernels."""
        return self.efficacy, self.futility, self.futility_predictive, self.tolerance

    def has_predictive(self, k: int) -> bool:
        """Whether look ``k`` is an interim look with a predictive futility threshold."""
        return bool(wants_predictive(self.futility_predictive, k, self.last))

    def decide(self, k: int, benefit: float,
               predictive: float | Callable[[], float] | None = None) -> int:
        """The decision at look ``k`` for one study (``predictive`` read only when the
        look has a predictive threshold and the benefit alone left the study running;
        a callable is called only then, as the kernels compute it only then)."""
        code = look_decision(self.efficacy, self.futility, k, self.last, benefit,
                             self.tolerance)
        if code == CONTINUE and predictive is not None and self.has_predictive(k):
            pp = predictive() if callable(predictive) else predictive
            code = predictive_decision(self.futility_predictive, k, pp, self.tolerance)
        return int(code)

    def decide_many(self, k: int, benefit: np.ndarray,
                    predictive: np.ndarray | None = None) -> np.ndarray:
        """:meth:`decide` over arrays of any shape (``predictive`` broadcast with
        ``benefit``); returns int8 codes."""
        b = np.asarray(benefit, dtype=float)
        tol = self.tolerance
        codes = np.full(b.shape, CONTINUE, dtype=np.int8)
        e = self.efficacy[k]
        efficacy = b >= e - tol if not math.isnan(e) else np.zeros(b.shape, dtype=bool)
        if k == self.last:
            codes[:] = FUTILITY
            codes[efficacy] = EFFICACY
            return codes
        f = self.futility[k]
        futile = b < f - tol if not math.isnan(f) else np.zeros(b.shape, dtype=bool)
        if predictive is not None and self.has_predictive(k):
            pp = np.broadcast_to(np.asarray(predictive, dtype=float), b.shape)
            futile = futile | (pp < self.futility_predictive[k] - tol)
        codes[futile] = FUTILITY
        codes[efficacy] = EFFICACY
        return codes


@dataclass(frozen=True, eq=False)
class CountRule:
    """A rule stated in counts, as a :class:`Rule` on the signed count (module
    docstring).

    Parameters
    ----------
    rule : Rule
        Thresholds on ``sign * count`` (no predictive thresholds, no tolerance).
    sign : int
        +1 when higher counts are better, -1 when lower are.
    """

    rule: Rule
    sign: int

    @classmethod
    def of(cls, looks: Any, higher: bool) -> CountRule:
        """The count rule of a design's ``looks`` (``efficacy_count``,
        ``futility_count``); ``higher``: whether higher counts are better."""
        return cls.from_bounds(looks.efficacy_count, looks.futility_count, higher)

    @classmethod
    def from_bounds(cls, efficacy: tuple[int | None, ...], futility: tuple[int | None, ...],
                    higher: bool) -> CountRule:
        """The rule of per-look count bounds (``None``: no bound at that look)."""
        sign = 1 if higher else -1
        signed = tuple(None if a is None else sign * a for a in efficacy)
        # x <= r (higher) or x >= r (lower) is, on the signed integer count, < sign r + 1
        below = tuple(None if r is None else sign * r + 1 for r in futility)
        rule = Rule(_array(signed), _array(below), np.full(len(signed), math.nan), 0.0)
        return cls(rule, sign)

    @property
    def last(self) -> int:
        """Index of the final look."""
        return self.rule.last

    def decide(self, k: int, count: int) -> int:
        """The decision at look ``k`` for one study with ``count`` responses (events)."""
        return self.rule.decide(k, float(self.sign * count))

    def decide_many(self, k: int, counts: np.ndarray) -> np.ndarray:
        """:meth:`decide` over an array of counts; returns int8 codes."""
        return self.rule.decide_many(k, self.sign * np.asarray(counts, dtype=float))


@njit(cache=True)
def look_decision(efficacy: np.ndarray, futility: np.ndarray, k: int, last: int,
                  b: float, tol: float) -> int:
    """Steps 1-3 of the rule (module docstring) in numba: EFFICACY, FUTILITY or
    CONTINUE from the posterior probability of benefit ``b`` at look ``k``."""
    return look_decision_at(efficacy[k], futility[k], k == last, b, tol)


@njit(cache=True)
def wants_predictive(futility_predictive: np.ndarray, k: int, last: int) -> bool:
    """Whether look ``k`` is an interim look with a predictive futility threshold."""
    return wants_predictive_at(futility_predictive[k], k == last)


@njit(cache=True)
def predictive_decision(futility_predictive: np.ndarray, k: int, pp: float,
                        tol: float) -> int:
    """Step 4 of the rule in numba: FUTILITY when the predictive probability of final
    success ``pp`` is below look ``k``'s threshold, else CONTINUE."""
    return predictive_decision_at(futility_predictive[k], pp, tol)


# The same three on one look's thresholds, for kernels' inner loops: an array argument
# costs reference counting on every call (about 15% of the known-sd kernel, measured with
# tests/benchmarks/bench_monte_carlo.py), a float nothing.

@njit(cache=True)
def look_decision_at(efficacy: float, futility: float, final: bool, b: float,
                     tol: float) -> int:
    """:func:`look_decision` on one look's ``efficacy`` and ``futility`` thresholds
    (``nan``: none); ``final``: whether the look is the last."""
    if not math.isnan(efficacy) and b >= efficacy - tol:
        return EFFICACY
    if final:
        return FUTILITY
    if not math.isnan(futility) and b < futility - tol:
        return FUTILITY
    return CONTINUE


@njit(cache=True)
def wants_predictive_at(futility_predictive: float, final: bool) -> bool:
    """:func:`wants_predictive` on one look's predictive threshold (``nan``: none)."""
    return not final and not math.isnan(futility_predictive)


@njit(cache=True)
def predictive_decision_at(futility_predictive: float, pp: float, tol: float) -> int:
    """:func:`predictive_decision` on one look's predictive threshold."""
    if pp < futility_predictive - tol:
        return FUTILITY
    return CONTINUE
