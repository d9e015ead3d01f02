"""Calendar-time totals of simulated studies, and the oc.csv columns made from them.

A simulator of studies that run in calendar time (``[conduct]``) adds, per study, its
duration, subjects enrolled and analysed, and for each look it reaches the look's time and
events, into one float vector (:attr:`octrial.simulation.base.Tally.calendar`), so that
batches add up exactly and a checkpoint saves it as one array. Layout:

* ``[0:6]``: sums of duration, duration^2, enrolled, enrolled^2, analysed, analysed^2
  (at the end of each study: its final analysis);
* ``[6]``: studies that stopped for efficacy at an interim look and whose final analysis
  including the pipeline missed the final success threshold (``analyse_pipeline``);
* ``[7 + 3k : 10 + 3k]``: look k: studies reaching it, sum of its times, sum of its events;
* then a histogram of the durations on :data:`BINS` log-spaced bins between 1/1000
  and 1000 times the time the design needs to enrol every subject (the quantiles'
  resolution: 0.7% of the value; durations outside go to the end bins);
* then histograms of the subjects enrolled and of those analysed, each on
  :data:`COUNT_BINS` equal bins over [0, max_enrolment] (one subject per bin up to 1000
  subjects).

The columns (:func:`calendar_columns`; names fixed in docs/output-files.md):
``expected_duration(_se)``, ``duration_q10/q50/q90``, ``expected_enrolled(_se)``,
``enrolled_q10/q50/q90``, ``expected_analysed(_se)``, ``analysed_q10/q50/q90``,
``look<k>_time``, ``look<k>_events`` (time-to-event) and
``prob_efficacy_reversed(_se)`` (with ``analyse_pipeline``).

Simulators fill it study by study (:func:`record_study`, in numba loops) or a batch at
a time (:func:`record_studies`); both add the same totals.
"""

from __future__ import annotations

import math
from typing import Any

import numba
import numpy as np

BINS = 2000
COUNT_BINS = 1000
SPAN = 1000.0
HEAD = 7
REVERSED = 6


def calendar_size(looks: int) -> int:
    """Length of the calendar vector of a ``looks``-look design."""
    return HEAD + 3 * looks + BINS + 2 * COUNT_BINS


def duration_edges(design: Any) -> np.ndarray:
    """The histogram's bin edges for ``design`` (module docstring)."""
    conduct = design.conduct
    scale = conduct.accrual.time_of(conduct.max_enrolment) if conduct is not None else 1.0
    scale = scale if scale > 0 else 1.0
    return scale * np.logspace(-np.log10(SPAN), np.log10(SPAN), BINS + 1)


def count_edges(design: Any) -> np.ndarray:
    """The bin edges of the enrolled and analysed histograms (module docstring)."""
    conduct = design.conduct
    most = conduct.max_enrolment if conduct is not None else 1
    return np.linspace(0.0, float(most), COUNT_BINS + 1)


@numba.njit(cache=True)
def _bin(edges: np.ndarray, value: float) -> int:
    at = int(np.searchsorted(edges, value, side="right")) - 1
    return min(max(at, 0), edges.size - 2)


@numba.njit(cache=True)
def record_study(calendar: np.ndarray, edges: np.ndarray, k: int, time: float,
                 enrolled: float, events: float, ended: bool,
                 counts: np.ndarray) -> None:
    """Add one study's look ``k`` (at ``time``, with ``events`` so far) and, when the
    study ``ended`` there, its duration and sizes (every enrolled subject analysed;
    ``counts``: the edges of :func:`count_edges`)."""
    base = HEAD + 3 * k
    calendar[base] += 1.0
    calendar[base + 1] += time
    calendar[base + 2] += events
    if not ended:
        return
    calendar[0] += time
    calendar[1] += time * time
    calendar[2] += enrolled
    calendar[3] += enrolled * enrolled
    calendar[4] += enrolled
    calendar[5] += enrolled * enrolled
    start = calendar.size - 2 * COUNT_BINS - BINS  # the histograms end the vector
    calendar[start + _bin(edges, time)] += 1.0
    calendar[start + BINS + _bin(counts, enrolled)] += 1.0
    calendar[start + BINS + COUNT_BINS + _bin(counts, enrolled)] += 1.0


def record_studies(calendar: np.ndarray, edges: np.ndarray, duration: np.ndarray,
                   enrolled: np.ndarray, analysed: np.ndarray, look_times: np.ndarray,
                   reversed_: int, counts: np.ndarray) -> None:
    """Add a batch of studies: per study its duration, subjects enrolled and analysed,
    and each look's time (shape ``(studies, looks)``, NaN where the study ended before
    the look); ``reversed_`` efficacy stops the pipeline reversed. Events stay 0."""
    duration = np.asarray(duration, dtype=float)
    enrolled = np.asarray(enrolled, dtype=float)
    analysed = np.asarray(analysed, dtype=float)
    calendar[:6] += (duration.sum(), (duration * duration).sum(), enrolled.sum(),
                     (enrolled * enrolled).sum(), analysed.sum(), (analysed * analysed).sum())
    calendar[REVERSED] += reversed_
    reached = ~np.isnan(look_times)
    looks = look_times.shape[1]
    calendar[HEAD:HEAD + 3 * looks:3] += reached.sum(axis=0)
    calendar[HEAD + 1:HEAD + 3 * looks:3] += np.where(reached, look_times, 0.0).sum(axis=0)
    start = calendar.size - 2 * COUNT_BINS - BINS
    at = np.clip(np.searchsorted(edges, duration, side="right") - 1, 0, BINS - 1)
    calendar[start:start + BINS] += np.bincount(at, minlength=BINS)
    for offset, values in ((BINS, enrolled), (BINS + COUNT_BINS, analysed)):
        at = np.clip(np.searchsorted(counts, values, side="right") - 1, 0, COUNT_BINS - 1)
        calendar[start + offset:start + offset + COUNT_BINS] += np.bincount(
            at, minlength=COUNT_BINS)


def calendar_columns(design: Any, calendars: np.ndarray,
                     replicates: np.ndarray) -> dict[str, np.ndarray]:
    """The oc.csv columns of the calendar totals (one row per scenario)."""
    looks = design.looks.count
    r = replicates.astype(float)
    edges = duration_edges(design)
    counts = count_edges(design)
    out: dict[str, np.ndarray] = {}
    for name, first in (("duration", 0), ("enrolled", 2), ("analysed", 4)):
        mean = calendars[:, first] / r
        variance = np.maximum(calendars[:, first + 1] / r - mean**2, 0.0)
        out[f"expected_{name}"] = mean
        out[f"expected_{name}_se"] = np.sqrt(variance / r)
        start = HEAD + 3 * looks + {"duration": 0, "enrolled": BINS,
                                    "analysed": BINS + COUNT_BINS}[name]
        hist = calendars[:, start:start + (BINS if name == "duration" else COUNT_BINS)]
        bins, linear = (edges, False) if name == "duration" else (counts, True)
        for q in (10, 50, 90):
            out[f"{name}_q{q}"] = np.array([_quantile(row, bins, q / 100, linear)
                                             for row in hist])
    for k in range(looks):
        reached = calendars[:, HEAD + 3 * k]
        with np.errstate(invalid="ignore", divide="ignore"):
            out[f"look{k + 1}_time"] = np.where(
                reached > 0, calendars[:, HEAD + 3 * k + 1] / reached, np.nan)
            if design.family.event_driven:
                out[f"look{k + 1}_events"] = np.where(
                    reached > 0, calendars[:, HEAD + 3 * k + 2] / reached, np.nan)
    if design.conduct is not None and design.conduct.analyse_pipeline:
        p = calendars[:, REVERSED] / r
        out["prob_efficacy_reversed"] = p
        out["prob_efficacy_reversed_se"] = np.sqrt(p * (1.0 - p) / r)
    return out


def _quantile(counts: np.ndarray, edges: np.ndarray, q: float, linear: bool = False) -> float:
    """The q-quantile of a histogram: log-linear within its bin; on ``linear`` bins of
    whole numbers (subjects), the least whole number whose cumulative share reaches q
    when a bin holds at most one (up to 1000 subjects), else linear within the bin."""
    total = counts.sum()
    if total <= 0:
        return float("nan")
    cumulative = np.cumsum(counts) / total
    at = min(int(np.searchsorted(cumulative, q - 1e-12, side="left")), counts.size - 1)
    below = cumulative[at - 1] if at > 0 else 0.0
    share = (q - below) / (cumulative[at] - below) if cumulative[at] > below else 0.5
    lo, hi = edges[at], edges[at + 1]
    if linear:
        return float(math.ceil(lo)) if hi - lo <= 1.0 else float(lo + share * (hi - lo))
    return float(np.exp(np.log(lo) + share * (np.log(hi) - np.log(lo))))
