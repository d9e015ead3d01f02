"""What each look sees when timing is deterministic: its time, enrolled and complete counts.

Under even or fixed arrivals and no dropout (:attr:`Conduct.deterministic`), subject ``i``
is enrolled at a known time and its outcome is observed ``lag`` later, so every look's
calendar time and counts are fixed in advance (as long as the study has not stopped).
The exact engines use these counts; the Monte Carlo simulator of
:mod:`octrial.simulation.calendar_studies` draws them study by study instead.

Subjects are assigned to arms in fixed blocks (:func:`arm_counts`), the same rule the
simulator uses, so the two agree subject for subject.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from octrial.conduct.model import Conduct

SLACK = 1e-9
"""Relative tolerance when comparing calendar times: even arrivals computed as
``start + i / rate`` may land a rounding error before or after a look's time."""


@dataclass(frozen=True)
class LookTiming:
    """Counts at each look under deterministic timing.

    Attributes
    ----------
    time : tuple of float
        Calendar time of each look (from the first period's start).
    enrolled : tuple of tuple of int
        ``enrolled[k][j]``: subjects of arm ``j`` enrolled by look ``k``.
    complete : tuple of tuple of int
        ``complete[k][j]``: subjects of arm ``j`` whose outcome is observed by look ``k``.
    """

    time: tuple[float, ...]
    enrolled: tuple[tuple[int, ...], ...]
    complete: tuple[tuple[int, ...], ...]

    @property
    def pipeline(self) -> tuple[tuple[int, ...], ...]:
        """Subjects enrolled but without an outcome yet, per look and arm."""
        return tuple(tuple(e - c for e, c in zip(es, cs, strict=True))
                     for es, cs in zip(self.enrolled, self.complete, strict=True))


def allocation_block(weights: Sequence[float]) -> tuple[int, ...]:
    """Smallest whole numbers in the ratio of the arms' allocation weights (one block).

    Weights are read as fractions with denominators up to 1000 (``1.5:1`` is ``3:2``).
    """
    fractions = [Fraction(w).limit_denominator(1000) for w in weights]
    scale = math.lcm(*(f.denominator for f in fractions))
    whole = [int(f * scale) for f in fractions]
    divisor = math.gcd(*whole)
    return tuple(w // divisor for w in whole)


def arm_counts(m: int | np.ndarray, block: Sequence[int]) -> np.ndarray:
    """Subjects of each arm among the first ``m`` enrolled.

    Subjects are allocated in blocks: of each block of ``sum(block)`` consecutive
    subjects, the first ``block[0]`` go to the first arm (treatment), the next
    ``block[1]`` to the second, and so on. At whole blocks the counts are exactly the
    allocation ratio, as the design's per-look sample sizes are.

    Returns
    -------
    ndarray of int64, shape ``np.shape(m) + (arms,)``
    """
    m = np.asarray(m, dtype=np.int64)
    size = sum(block)
    full, rest = np.divmod(m, size)
    out = []
    before = 0
    for b in block:
        out.append(full * b + np.clip(rest - before, 0, b))
        before += b
    return np.stack(out, axis=-1)


def enrolment_times(conduct: Conduct) -> np.ndarray:
    """Every subject's enrolment time under deterministic arrivals (all ``max_enrolment``)."""
    if not conduct.accrual.deterministic:
        raise ValueError("enrolment times are random under Poisson arrivals")
    return np.array([conduct.accrual.time_of(i) for i in range(1, conduct.max_enrolment + 1)])


def _count_by(times: np.ndarray, t: float) -> int:
    return int(np.searchsorted(times, t + SLACK * max(1.0, abs(t)), side="right"))


def look_timing(conduct: Conduct, trigger: str, targets: Sequence[float],
                weights: Sequence[float]) -> LookTiming:
    """Time and counts of every look under deterministic conduct.

    Parameters
    ----------
    conduct : Conduct
        Deterministic conduct (even or fixed arrivals, no dropout).
    trigger : {'complete', 'enrolled', 'time'}
        What each look waits for (:attr:`Looks.trigger`).
    targets : sequence of float
        Per look: subjects with an outcome (``'complete'``, the looks' ``n``), subjects
        enrolled (``'enrolled'``) or the calendar time (``'time'``).
    weights : sequence of float
        The arms' allocation weights (treatment first).

    Returns
    -------
    LookTiming

    Raises
    ------
    ValueError
        When the conduct is random, the trigger is ``'events'`` or a look cannot be
        reached (a target beyond ``max_enrolment``).
    """
    if not conduct.deterministic:
        raise ValueError("look counts are random unless arrivals are even or fixed and "
                         "nobody is lost")
    enrol = enrolment_times(conduct)
    outcome = enrol + conduct.lag
    block = allocation_block(weights)
    times, enrolled, complete = [], [], []
    for target in targets:
        if trigger == "complete":
            if not 1 <= target <= conduct.max_enrolment:
                raise ValueError(f"no look at {target} complete outcomes")
            t = float(outcome[int(target) - 1])
        elif trigger == "enrolled":
            if not 1 <= target <= conduct.max_enrolment:
                raise ValueError(f"no look at {target} enrolled subjects")
            t = float(enrol[int(target) - 1])
        elif trigger == "time":
            t = float(target)
        else:
            raise ValueError(f"no deterministic timing for looks triggered by {trigger!r}")
        times.append(t)
        enrolled.append(tuple(int(v) for v in arm_counts(_count_by(enrol, t), block)))
        complete.append(tuple(int(v) for v in arm_counts(_count_by(outcome, t), block)))
    return LookTiming(tuple(times), tuple(enrolled), tuple(complete))
