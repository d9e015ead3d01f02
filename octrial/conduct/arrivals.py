"""Samplers of enrolment and dropout times, from random numbers drawn by the caller.

Every sampler takes standard exponential variates already drawn from the batch's numpy
generator (``rng.standard_exponential``) and transforms them, so a batch's numbers depend
on its seed alone, whatever the number of workers.

Poisson arrivals with piecewise-constant rates: within a period the gaps between
arrivals are exponential with that period's rate; a gap that runs past the period's end
carries its unused part, at the next period's rate, into the next period (the
exponential distribution is memoryless). Equivalently, the arrival times are the
cumulative rate function's inverse at the partial sums of standard exponentials (the
time-change theorem for Poisson processes; e.g. Ross, *Simulation*, 5th ed., 2013,
section 5.5, recalled from memory).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from octrial.conduct.model import Accrual


@njit(cache=True)
def fill_enrolment_times(unit: np.ndarray, kind: int, rates: np.ndarray, starts: np.ndarray,
                         times: np.ndarray, out: np.ndarray) -> None:
    """One study's enrolment times into ``out``: Poisson arrivals (``kind`` 0) invert the
    cumulative rate at the running sums of the standard exponentials ``unit``; even
    arrivals (1) invert it at 1, 2, ...; fixed arrivals (2) copy ``times``."""
    if kind == 2:
        for i in range(out.size):
            out[i] = times[i]
        return
    p = 0
    at_start = 0.0  # cumulative rate at the start of period p
    total = 0.0
    for i in range(out.size):
        total = total + unit[i] if kind == 0 else i + 1.0
        while p + 1 < rates.size and total > at_start + rates[p] * (starts[p + 1] - starts[p]):
            at_start += rates[p] * (starts[p + 1] - starts[p])
            p += 1
        out[i] = starts[p] + (total - at_start) / rates[p]


@njit(cache=True)
def _poisson_times(gaps: np.ndarray, rates: np.ndarray, starts: np.ndarray) -> np.ndarray:
    studies, subjects = gaps.shape
    out = np.empty((studies, subjects))
    for s in range(studies):
        fill_enrolment_times(gaps[s], 0, rates, starts, starts, out[s])
    return out


def enrolment_times(accrual: Accrual, gaps: np.ndarray | None, studies: int,
                    subjects: int) -> np.ndarray:
    """Enrolment times of ``subjects`` subjects in each of ``studies`` studies.

    Parameters
    ----------
    accrual : Accrual
        The design's accrual.
    gaps : ndarray of float, shape (studies, subjects), or None
        Standard exponential variates (Poisson arrivals); ``None`` for even or fixed
        arrivals, which draw nothing.
    studies, subjects : int
        How many studies and subjects per study.

    Returns
    -------
    ndarray of float
        Shape ``(studies, subjects)`` for Poisson arrivals; ``(1, subjects)`` for even or
        fixed arrivals (the same in every study; broadcast it).
    """
    if accrual.arrivals == "fixed":
        return np.asarray(accrual.times[:subjects], dtype=float)[None, :]
    if accrual.arrivals == "even":
        return np.array([accrual.time_of(i) for i in range(1, subjects + 1)])[None, :]
    if gaps is None or gaps.shape != (studies, subjects):
        raise ValueError("Poisson arrivals need a (studies, subjects) array of gaps")
    return _poisson_times(np.ascontiguousarray(gaps, dtype=float),
                          np.asarray(accrual.rates, dtype=float),
                          np.asarray(accrual.starts, dtype=float))


def dropout_times(exponentials: np.ndarray, hazard: float) -> np.ndarray:
    """Times to loss to follow-up under an exponential hazard, from standard
    exponential variates (``inf`` when the hazard is 0: nobody is lost)."""
    if hazard <= 0:
        return np.full(np.shape(exponentials), np.inf)
    return np.asarray(exponentials, dtype=float) / hazard
