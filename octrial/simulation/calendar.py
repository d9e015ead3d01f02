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
* the rest: a histogram of the durations on :data:`BINS` log-spaced bins between 1/1000
  and 1000 times the time the design needs to enrol every subject (the quantiles'
  resolution: 0.7% of the value; durations outside go to the end bins).

The columns (:func:`calendar_columns`; names fixed in docs/output-files.md):
``expected_duration(_se)``, ``duration_q10/q50/q90``, ``expected_enrolled(_se)``,
``expected_analysed(_se)``, ``look<k>_time``, ``look<k>_events`` (time-to-event) and
``prob_efficacy_reversed(_se)`` (with ``analyse_pipeline``).

Simulators fill it study by study (:func:`record_study`, in numba loops) or a batch at
a time (:func:`record_studies`); both add the same totals.
"""

from __future__ import annotations

from typing import Any

import numba
import numpy as np

BINS = 2000
SPAN = 1000.0
HEAD = 7
REVERSED = 6


def calendar_size(looks: int) -> int:
    """Length of the calendar vector of a ``looks``-look design."""
    return HEAD + 3 * looks + BINS


def duration_edges(design: Any) -> np.ndarray:
    """The histogram's bin edges for ``design`` (module docstring)."""
    conduct = design.conduct
    scale = conduct.accrual.time_of(conduct.max_enrolment) if conduct is not None else 1.0
    scale = scale if scale > 0 else 1.0
    return scale * np.logspace(-np.log10(SPAN), np.log10(SPAN), BINS + 1)


@numba.njit(cache=True)
def record_study(calendar: np.ndarray, edges: np.ndarray, k: int, time: float,
                 enrolled: float, events: float, ended: bool) -> None:
    """Add one study's look ``k`` (at ``time``, with ``events`` so far) and, when the
    study ``ended`` there, its duration and sizes."""
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
    bins = edges.size - 1  # the histogram is the vector's last part
    at = int(np.searchsorted(edges, time, side="right")) - 1
    at = min(max(at, 0), bins - 1)
    calendar[calendar.size - bins + at] += 1.0


def record_studies(calendar: np.ndarray, edges: np.ndarray, duration: np.ndarray,
                   enrolled: np.ndarray, analysed: np.ndarray, look_times: np.ndarray,
                   reversed_: int = 0) -> None:
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
    bins = edges.size - 1
    at = np.clip(np.searchsorted(edges, duration, side="right") - 1, 0, bins - 1)
    calendar[calendar.size - bins:] += np.bincount(at, minlength=bins)


def calendar_columns(design: Any, calendars: np.ndarray,
                     replicates: np.ndarray) -> dict[str, np.ndarray]:
    """The oc.csv columns of the calendar totals (one row per scenario)."""
    looks = design.looks.count
    r = replicates.astype(float)
    edges = duration_edges(design)
    out: dict[str, np.ndarray] = {}
    for name, first in (("duration", 0), ("enrolled", 2), ("analysed", 4)):
        mean = calendars[:, first] / r
        variance = np.maximum(calendars[:, first + 1] / r - mean**2, 0.0)
        out[f"expected_{name}"] = mean
        out[f"expected_{name}_se"] = np.sqrt(variance / r)
        if name == "duration":
            hist = calendars[:, HEAD + 3 * looks:]
            for q in (10, 50, 90):
                out[f"duration_q{q}"] = np.array([_quantile(row, edges, q / 100)
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


def _quantile(counts: np.ndarray, edges: np.ndarray, q: float) -> float:
    """The q-quantile of a histogram, log-linear within its bin."""
    total = counts.sum()
    if total <= 0:
        return float("nan")
    cumulative = np.cumsum(counts) / total
    at = int(np.searchsorted(cumulative, q, side="left"))
    below = cumulative[at - 1] if at > 0 else 0.0
    share = (q - below) / (cumulative[at] - below) if cumulative[at] > below else 0.5
    lo, hi = np.log(edges[at]), np.log(edges[at + 1])
    return float(np.exp(lo + share * (hi - lo)))
