"""Totals of a study's calendar: duration, enrolment, analysed subjects, look times.

A :class:`CalendarTally` is the calendar part of a :class:`~octrial.simulation.base.Tally`
for designs with a ``[conduct]`` table. Every simulator of such designs (binary, count
and normal in :mod:`octrial.simulation.calendar`; time-to-event elsewhere) fills one per
batch with :meth:`CalendarTally.of_studies`. Like the rest of the tally it holds only
sums and counts, so the tallies of disjoint batches add up exactly (in batch order, the
same floating-point sums whatever ``--jobs``), and it saves to and restores from plain
arrays for checkpoints.

Quantiles of the duration come from a histogram with fixed bins on ``[0, horizon]``
(the simulator states the horizon, an upper bound of the duration it expects; longer
studies go in the last bin), read by linear interpolation within a bin: their error is
at most one bin width, ``horizon / DURATION_BINS``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

DURATION_BINS = 4000
"""Bins of the duration histogram."""

PREFIX = "calendar_"
"""Prefix of the calendar arrays in a saved tally."""

FIELDS = ("horizon", "duration_sums", "duration_bins", "enrolled_sums", "analysed_sums",
          "look_reached", "look_time_sums", "look_events_sums", "reversed")
WHOLE = ("duration_bins", "look_reached", "reversed")


@dataclass(frozen=True, eq=False)
class CalendarTally:
    """Calendar totals over simulated studies; tallies of disjoint batches add up.

    Attributes
    ----------
    horizon : float
        Upper end of the duration histogram (the same in every batch of a scenario).
    duration_sums : ndarray of float, shape (2,)
        Sum and sum of squares of each study's duration: time from the first
        enrolment to the final analysis (after a stop, to the stopping look, or to
        the last pipeline outcome when the pipeline is analysed).
    duration_bins : ndarray of int64, shape (DURATION_BINS,)
        Studies per duration bin ``[i, i + 1) x horizon / DURATION_BINS``.
    enrolled_sums, analysed_sums : ndarray of float, shape (2,)
        Sum and sum of squares of subjects enrolled when enrolment stops, and of
        subjects in the final analysis.
    look_reached : ndarray of int64, shape (looks,)
        Studies that reach each look.
    look_time_sums : ndarray of float, shape (looks,)
        Sum of each look's calendar time over the studies that reach it.
    look_events_sums : ndarray of float, shape (looks,)
        Sum of events at each look over the studies that reach it (time-to-event; zeros
        otherwise).
    reversed : int
        Studies that stopped for efficacy at an interim look and whose final analysis
        including the pipeline missed the final success threshold (0 without
        ``analyse_pipeline``).
    """

    horizon: float
    duration_sums: np.ndarray
    duration_bins: np.ndarray
    enrolled_sums: np.ndarray
    analysed_sums: np.ndarray
    look_reached: np.ndarray
    look_time_sums: np.ndarray
    look_events_sums: np.ndarray
    reversed: int = 0

    @classmethod
    def of_studies(cls, horizon: float, duration: np.ndarray, enrolled: np.ndarray,
                   analysed: np.ndarray, look_times: np.ndarray,
                   look_events: np.ndarray | None = None, reversed_: int = 0,
                   ) -> CalendarTally:
        """The totals of a batch of studies from per-study values.

        Parameters
        ----------
        horizon : float
            Upper end of the duration histogram.
        duration, enrolled, analysed : ndarray, shape (studies,)
            Per study: duration, subjects enrolled, subjects in the final analysis.
        look_times : ndarray of float, shape (studies, looks)
            Each look's calendar time; NaN where the study stopped before the look.
        look_events : ndarray, shape (studies, looks), optional
            Events at each look (time-to-event); NaN where the look is not reached.
        reversed_ : int
            Efficacy stops reversed by the pipeline's outcomes.
        """
        duration = np.asarray(duration, dtype=float)
        enrolled = np.asarray(enrolled, dtype=float)
        analysed = np.asarray(analysed, dtype=float)
        reached = ~np.isnan(look_times)
        scaled = np.floor(duration / horizon * DURATION_BINS)
        index = np.clip(np.nan_to_num(scaled, nan=DURATION_BINS - 1), 0,
                        DURATION_BINS - 1).astype(np.int64)
        events = (np.zeros(look_times.shape[1]) if look_events is None
                  else np.where(reached, look_events, 0.0).sum(axis=0))
        return cls(float(horizon),
                   np.array([duration.sum(), (duration * duration).sum()]),
                   np.bincount(index, minlength=DURATION_BINS).astype(np.int64),
                   np.array([enrolled.sum(), (enrolled * enrolled).sum()]),
                   np.array([analysed.sum(), (analysed * analysed).sum()]),
                   reached.sum(axis=0).astype(np.int64),
                   np.where(reached, look_times, 0.0).sum(axis=0),
                   np.asarray(events, dtype=float), int(reversed_))

    def __add__(self, other: CalendarTally) -> CalendarTally:
        if self.horizon != other.horizon:
            raise ValueError("calendar tallies with different duration horizons")
        return CalendarTally(
            self.horizon, self.duration_sums + other.duration_sums,
            self.duration_bins + other.duration_bins,
            self.enrolled_sums + other.enrolled_sums, self.analysed_sums + other.analysed_sums,
            self.look_reached + other.look_reached, self.look_time_sums + other.look_time_sums,
            self.look_events_sums + other.look_events_sums, self.reversed + other.reversed)

    def duration_quantile(self, q: float) -> float:
        """The ``q`` quantile of the duration, interpolated within its histogram bin."""
        counts = self.duration_bins
        total = counts.sum()
        cumulative = np.cumsum(counts)
        target = q * total
        i = int(np.searchsorted(cumulative, target, side="left"))
        i = min(i, DURATION_BINS - 1)
        below = cumulative[i] - counts[i]
        inside = (target - below) / counts[i] if counts[i] else 0.0
        return float((i + inside) * self.horizon / DURATION_BINS)

    def columns(self, replicates: int, pipeline: bool, events: bool) -> dict[str, float]:
        """The oc.csv columns of these totals (docs/output-files.md)."""
        r = float(replicates)

        def mean_se(sums: np.ndarray) -> tuple[float, float]:
            mean = sums[0] / r
            variance = max(sums[1] / r - mean * mean, 0.0) * r / max(r - 1.0, 1.0)
            return float(mean), float(np.sqrt(variance / r))

        out: dict[str, float] = {}
        out["expected_duration"], out["expected_duration_se"] = mean_se(self.duration_sums)
        for q in (10, 50, 90):
            out[f"duration_q{q}"] = self.duration_quantile(q / 100)
        out["expected_enrolled"], out["expected_enrolled_se"] = mean_se(self.enrolled_sums)
        out["expected_analysed"], out["expected_analysed_se"] = mean_se(self.analysed_sums)
        with np.errstate(invalid="ignore", divide="ignore"):
            times = np.where(self.look_reached > 0, self.look_time_sums / self.look_reached,
                             np.nan)
            counts = np.where(self.look_reached > 0,
                              self.look_events_sums / self.look_reached, np.nan)
        for k, t in enumerate(times):
            out[f"look{k + 1}_time"] = float(t)
        if events:
            for k, e in enumerate(counts):
                out[f"look{k + 1}_events"] = float(e)
        if pipeline:
            p = self.reversed / r
            out["prob_efficacy_reversed"] = p
            out["prob_efficacy_reversed_se"] = float(np.sqrt(p * (1.0 - p) / r))
        return out

    def to_arrays(self) -> dict[str, np.ndarray]:
        """Plain arrays, keys prefixed :data:`PREFIX` (for saving with the tally)."""
        return {PREFIX + name: np.asarray(getattr(self, name)) for name in FIELDS}

    @classmethod
    def from_arrays(cls, arrays: dict[str, np.ndarray]) -> CalendarTally | None:
        """The inverse of :meth:`to_arrays` (``None`` when the arrays hold no calendar)."""
        if PREFIX + "horizon" not in arrays:
            return None
        a = {name: np.asarray(arrays[PREFIX + name]) for name in FIELDS}
        return cls(float(a["horizon"]), a["duration_sums"].astype(float),
                   a["duration_bins"].astype(np.int64), a["enrolled_sums"].astype(float),
                   a["analysed_sums"].astype(float), a["look_reached"].astype(np.int64),
                   a["look_time_sums"].astype(float), a["look_events_sums"].astype(float),
                   int(a["reversed"]))


def calendar_problems(arrays: dict[str, np.ndarray], looks: int, replicates: int) -> list[str]:
    """What is wrong with the calendar arrays of a saved tally of ``replicates`` studies
    (none when it holds no calendar arrays at all)."""
    present = [name for name in FIELDS if PREFIX + name in arrays]
    if not present:
        return []
    if len(present) != len(FIELDS):
        return [f"no {PREFIX}{name}" for name in FIELDS if name not in present]
    shapes = {"horizon": (), "duration_sums": (2,), "duration_bins": (DURATION_BINS,),
              "enrolled_sums": (2,), "analysed_sums": (2,), "look_reached": (looks,),
              "look_time_sums": (looks,), "look_events_sums": (looks,), "reversed": ()}
    wrong = [f"{PREFIX}{name} of shape {np.shape(arrays[PREFIX + name])} (expected {shape})"
             for name, shape in shapes.items() if np.shape(arrays[PREFIX + name]) != shape]
    if wrong:
        return wrong
    for name in FIELDS:
        value = np.asarray(arrays[PREFIX + name])
        if name in WHOLE and value.dtype.kind not in "iu":
            wrong.append(f"{PREFIX}{name} not whole numbers ({value.dtype})")
        elif not np.all(np.isfinite(value)) or np.any(value < 0):
            wrong.append(f"{PREFIX}{name} negative or not finite")
    if wrong:
        return wrong
    if int(np.sum(arrays[PREFIX + "duration_bins"])) != replicates:
        wrong.append(f"{PREFIX}duration_bins counting other than {replicates} studies")
    if np.any(np.asarray(arrays[PREFIX + "look_reached"]) > replicates) or int(
            arrays[PREFIX + "reversed"]) > replicates:
        wrong.append(f"{PREFIX} counts beyond {replicates} studies")
    if not float(arrays[PREFIX + "horizon"]) > 0:
        wrong.append(f"{PREFIX}horizon not positive")
    return wrong
