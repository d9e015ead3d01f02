"""Simulated time-to-event studies for the workflow checks, one true hazard set per study.

The checks draw a different truth for every study (from the analysis or the design
prior), so the scenario-wise simulator of :mod:`octrial.simulation.event_driven` cannot
be used as a whole; its numba parts are, unchanged: every subject is drawn by
:func:`~octrial.simulation.event_driven.draw_subjects` (enrolment, arm, piecewise
exponential event time, loss time, in that order), the event-driven look times by
:func:`~octrial.simulation.event_driven.look_times` and each look's events and exposure
per hazard period by :func:`~octrial.simulation.event_driven.piece_statistics`. Looks
happen as the simulator has them: at the D_k-th observed event (or a stated calendar
time), and when the events run out, when every follow-up has ended. Studies are not
stopped, so every look's data are known for every study (the checks judge every look's
posterior whatever the rule would have done).

Without ``[conduct]`` nobody is censored: each arm's subjects enter at time 0, nobody is
lost, and look k analyses the first ``looks.per_arm[k][j]`` subjects of arm j, each with
its whole time to the event (the family's data model; one period gives the Gamma(n,
hazard) total time of the generic study loop).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numba
import numpy as np

from octrial.design.model import Design
from octrial.simulation.event_driven import (
    ARRIVALS,
    TRIGGERS,
    allocation_pattern,
    draw_subjects,
    look_buffers,
    look_times,
    piece_statistics,
    subject_buffers,
)


@dataclass(frozen=True, eq=False)
class EventData:
    """Each look's statistics of every simulated study.

    Attributes
    ----------
    events, exposure : ndarray
        Shape (looks, arms, studies, periods): events and time at risk per hazard period.
    time : ndarray
        Shape (looks, studies): calendar time of each look (NaN without ``[conduct]``).
    enrolled : ndarray
        Shape (looks, studies): subjects enrolled by each look.
    """

    events: np.ndarray
    exposure: np.ndarray
    time: np.ndarray
    enrolled: np.ndarray

    def __len__(self) -> int:
        return self.events.shape[2]

    def at(self, look: int, arm: int) -> tuple[np.ndarray, np.ndarray]:
        """(events, exposure) of arm ``arm`` at look ``look``, each (studies, periods)."""
        return self.events[look, arm], self.exposure[look, arm]


def simulate_studies(design: Design, rng: np.random.Generator,
                     hazards: np.ndarray) -> EventData:
    """Every look's events and exposure for studies with true ``hazards``.

    Parameters
    ----------
    design : Design
        A time-to-event design (its periods are both the true hazard's pieces and the
        analysis pieces).
    rng : numpy.random.Generator
        The only source of random numbers (passed into numba, which draws the same
        stream as numpy).
    hazards : ndarray
        Shape (studies, arms, periods): each study's true hazard per arm and period.

    Returns
    -------
    EventData
    """
    hazards = np.ascontiguousarray(hazards, dtype=float)
    studies, arms, periods = hazards.shape
    starts = np.asarray(design.endpoint.starts, dtype=float)
    looks = design.looks
    shape = (looks.count, arms, studies, periods)
    events, exposure = np.zeros(shape), np.zeros(shape)
    time = np.full((looks.count, studies), np.nan)
    enrolled = np.zeros((looks.count, studies))
    conduct = design.conduct
    if conduct is None:
        sizes = np.asarray(looks.per_arm, dtype=np.int64)
        _uncensored_studies(rng, hazards, starts, sizes, events, exposure)
        enrolled[:] = sizes.sum(axis=1)[:, None]
        return EventData(events, exposure, time, enrolled)
    accrual = conduct.accrual
    trigger = "time" if looks.trigger == "time" else "events"
    targets = np.asarray(looks.at if looks.trigger in TRIGGERS and looks.at else looks.n,
                         dtype=float)
    _conduct_studies(
        rng, conduct.max_enrolment, ARRIVALS[accrual.arrivals],
        np.asarray(accrual.rates or (1.0,), dtype=float),
        np.asarray(accrual.starts or (0.0,), dtype=float),
        np.asarray(accrual.times or (0.0,), dtype=float),
        allocation_pattern(tuple(float(a.allocation) for a in design.arms)),
        hazards, starts, float(conduct.dropout_hazard), TRIGGERS[trigger], targets,
        events, exposure, time, enrolled)
    return EventData(events, exposure, time, enrolled)


@numba.njit(cache=True)
def _conduct_studies(rng: Any, m: int, kind: int, rates: np.ndarray, starts: np.ndarray,
                     times: np.ndarray, pattern: np.ndarray, hazards: np.ndarray,
                     hazard_starts: np.ndarray, dropout: float, trigger: int,
                     targets: np.ndarray, events: np.ndarray, exposure: np.ndarray,
                     look_time: np.ndarray, entered: np.ndarray) -> None:
    """Studies in calendar time: the look times as the patient-level kernel finds them
    (:func:`~octrial.simulation.event_driven.patient_level_studies`), without stopping."""
    looks = targets.size
    arms = hazards.shape[1]
    pieces = hazard_starts.size
    gaps, enrolled, arm_of, follow, seen = subject_buffers(m)
    event_times, scattered, tally, ranks, taus = look_buffers(m, trigger, targets)
    ev = np.zeros((arms, pieces))
    ex = np.zeros((arms, pieces))
    for s in range(hazards.shape[0]):
        resolved = draw_subjects(rng, kind, rates, starts, times, pattern, hazards[s],
                                 hazard_starts, dropout, gaps, enrolled, arm_of, follow,
                                 seen)
        reached = look_times(trigger, targets, enrolled, follow, seen, event_times,
                             scattered, tally, ranks, taus)
        for k in range(looks):
            tau = taus[k] if k < reached else resolved
            entered[k, s] = piece_statistics(enrolled, follow, seen, arm_of, tau,
                                             hazard_starts, ev, ex)
            look_time[k, s] = tau
            for j in range(arms):
                for p in range(pieces):
                    events[k, j, s, p] = ev[j, p]
                    exposure[k, j, s, p] = ex[j, p]


@numba.njit(cache=True)
def _uncensored_studies(rng: Any, hazards: np.ndarray, hazard_starts: np.ndarray,
                        sizes: np.ndarray, events: np.ndarray, exposure: np.ndarray) -> None:
    """Studies without ``[conduct]``: per study and arm, that arm's subjects drawn by
    :func:`draw_subjects` (all enrolled at 0, nobody lost); look k analyses the first
    ``sizes[k, j]`` of them to their events."""
    looks, arms = sizes.shape
    pieces = hazard_starts.size
    pattern = np.zeros(1, dtype=np.int64)
    ev = np.zeros((1, pieces))
    ex = np.zeros((1, pieces))
    for s in range(hazards.shape[0]):
        for j in range(arms):
            m = sizes[looks - 1, j]
            enrolled = np.empty(m)
            arm_of = np.empty(m, dtype=np.int64)
            follow = np.empty(m)
            seen = np.empty(m, dtype=np.bool_)
            draw_subjects(rng, 2, np.ones(1), np.zeros(1), np.zeros(m), pattern,
                          hazards[s, j:j + 1], hazard_starts, 0.0, np.empty(m), enrolled,
                          arm_of, follow, seen)
            for k in range(looks):
                n = sizes[k, j]
                piece_statistics(enrolled[:n], follow[:n], seen[:n], arm_of[:n], np.inf,
                                 hazard_starts, ev, ex)
                for p in range(pieces):
                    events[k, j, s, p] = ev[0, p]
                    exposure[k, j, s, p] = ex[0, p]
