"""Event-driven time-to-event studies simulated event by event (numba), exactly.

With one constant hazard per arm (lambda_a, in time since enrolment), exponential dropout
(hazard mu, or none) and enrolment at deterministic times (even or fixed arrivals) or as
a Poisson process with piecewise-constant rates, the study's state (subjects at risk per
arm R_a, subjects enrolled) is a Markov jump process in calendar time: every subject at
risk leaves at rate lambda_a + mu whatever its time on study (memorylessness), so between
changes the total rate is H = sum_a (lambda_a + mu) R_a, and the next exit is an event
in arm a with probability lambda_a R_a / H and a loss with mu R_a / H (the direct
method; Gillespie 1977). Entries change H at times known in advance (Poisson arrivals
are independent of everything else, so each is drawn one ahead and then treated as
planned), and so do calendar-time looks; the time to the next exit is found by a time
change: one unit exponential budget E is consumed by the integral of H over the
piecewise-constant segments until it runs out (Ross, *Simulation*, 5th ed., 2013, section
5.5, recalled from memory); a deterministic entry costs no random number. Each arm's
exposure grows by R_a x (segment length); a look at D_k events happens at the D_k-th
event, with the exposure accumulated by then (administrative censoring is automatic).
When no event can happen any more (everyone enrolled and followed to the end) before D_k
events, the look is at the last exit and it is the final analysis, as in the
subject-level kernel. Per look the statistics, the decision (the same functions of
:mod:`octrial.simulation.event_driven_decisions`) and the calendar record are those of
:func:`octrial.simulation.event_driven.patient_level_studies`, so the same tallies come
out, equal in distribution (not study by study: the random numbers differ).

Random numbers: per batch, four words from the batch's generator seed an inline
xoshiro256** generator (Blackman & Vigna 2021; each word passed through splitmix64 as
its authors recommend), which draws, per exit, one uniform for the next budget
(E = -log U, U in (0, 1]) and one for the kind of exit, and per Poisson arrival one
uniform for the next gap (53-bit doubles). The predictive
probability of two arms with mixture priors still draws from the batch's numpy generator.
Both depend on the seed and the batch only, so ``--jobs`` and the backend change nothing.

Chosen by ``simulation.event_driven_engine = "events"`` for designs with one hazard
period (:func:`qualifies`); the default stays the subject-level kernel
(:mod:`octrial.simulation.event_driven`), see :func:`event_driven_simulator`.
"""

from __future__ import annotations

import math
from typing import Any

import numba
import numpy as np

from octrial.conduct.arrivals import fill_enrolment_times
from octrial.rules.stop import (
    CONTINUE,
    DECISION_TOLERANCE,
    EFFICACY,
)
from octrial.simulation.base import Tally
from octrial.simulation.calendar import calendar_size, record_study
from octrial.simulation.event_driven import (
    ARRIVALS,
    TRIGGERS,
    EventDrivenSetup,
    EventDrivenSimulator,
    PatientLevelSimulator,
    setup_of_design,
)
from octrial.simulation.event_driven_decisions import look_code

UNIT = 1.0 / 9007199254740992.0  # 2^-53: the spacing of 53-bit uniforms


def qualifies(setup: EventDrivenSetup) -> bool:
    """Whether the event-level simulator is exact for ``setup``: one hazard period (the
    hazards constant in time since enrolment; then the analysis has one piece too).
    Dropout is exponential or absent and every accrual of
    :class:`octrial.conduct.model.Accrual` works (module docstring)."""
    return len(setup.hazard_starts) == 1 and len(setup.analysis_starts) == 1


@numba.njit(cache=True, inline="always")
def splitmix64(x: np.uint64) -> np.uint64:
    """One output of splitmix64 from state ``x`` (Steele, Lea & Flood 2014), to spread a
    seed word over the xoshiro state."""
    z = x + np.uint64(0x9E3779B97F4A7C15)
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


@numba.njit(cache=True, inline="always")
def _rotl(x: np.uint64, k: int) -> np.uint64:
    return (x << np.uint64(k)) | (x >> np.uint64(64 - k))


@numba.njit(cache=True, inline="always")
def xoshiro(s0: np.uint64, s1: np.uint64, s2: np.uint64,
            s3: np.uint64) -> tuple[np.uint64, np.uint64, np.uint64, np.uint64, np.uint64]:
    """The next 64-bit output of xoshiro256** and its new state (Blackman & Vigna 2021).
    The state is four scalars, not an array: the kernel keeps them in registers (an
    array's words went through memory at every draw, which was most of the time)."""
    result = _rotl(s1 * np.uint64(5), 7) * np.uint64(9)
    t = s1 << np.uint64(17)
    s2 ^= s0
    s3 ^= s1
    s1 ^= s2
    s0 ^= s3
    s2 ^= t
    s3 = _rotl(s3, 45)
    return result, s0, s1, s2, s3


@numba.njit(cache=True, inline="always")
def to_uniform(word: np.uint64) -> float:
    """A uniform double in [0, 1) from the top 53 bits of ``word``."""
    return float(word >> np.uint64(11)) * UNIT


@numba.njit(cache=True, inline="always")
def to_open_uniform(word: np.uint64) -> float:
    """A uniform double in (0, 1] (so its logarithm is finite) from ``word``."""
    return (float(word >> np.uint64(11)) + 1.0) * UNIT


def seeded_state(rng: np.random.Generator) -> np.ndarray:
    """The xoshiro256** state of a batch: four words of the batch's generator, each
    through splitmix64 (never all zero: splitmix64 is a bijection of 0 to a non-zero
    word, and four zeros from it would need four equal inputs)."""
    words = rng.integers(0, np.iinfo(np.uint64).max, size=4, dtype=np.uint64,
                         endpoint=True)
    return np.array([splitmix64(w) for w in words], dtype=np.uint64)


@numba.njit(cache=True)
def _look(k: int, final: bool, tau: float, entered: int, d0: float, d1: float, x0: float,
          x1: float, rng: Any, arms: int, looks: int, targets: np.ndarray, log_w: np.ndarray,
          a: np.ndarray, b: np.ndarray, claim: float, lower: bool, efficacy: np.ndarray,
          futility: np.ndarray, tol: float, edges: np.ndarray, counts: np.ndarray,
          stop_efficacy: np.ndarray, stop_futility: np.ndarray, calendar: np.ndarray,
          predictive: np.ndarray, bound: float, quantiles: np.ndarray, draws: int,
          normal_w: np.ndarray, normal_m: np.ndarray, normal_p: np.ndarray,
          normal: np.ndarray, shape: np.ndarray, events: np.ndarray, exposure: np.ndarray,
          d: np.ndarray, e: np.ndarray, trace: np.ndarray) -> bool:
    """Look ``k`` at calendar time ``tau``: the decision and the record of
    :func:`octrial.simulation.event_driven.patient_level_studies`; whether the study
    stops. A non-empty ``trace`` (one row of :meth:`EventJumpSimulator.looks_of`) gets
    the look's time, subjects enrolled, events and exposure per arm."""
    if trace.size > 0:
        trace[k, 0] = tau
        trace[k, 1] = entered
        trace[k, 2] = d0
        trace[k, 3] = d1
        trace[k, 4] = x0
        trace[k, 5] = x1
    d[0] = events[0, 0] = d0
    e[0] = exposure[0, 0] = x0
    if arms == 2:
        d[1] = events[1, 0] = d1
        e[1] = exposure[1, 0] = x1
    # one hazard period: no landmark decision (empty views, no allocation)
    code = look_code(rng, k, final, arms, looks, targets, events, exposure, d, e, log_w, a,
                     b, claim, lower, efficacy, futility, tol, predictive, bound, quantiles,
                     draws, e[:0], 0.0, events[:0], events[:0], normal_w, normal_m,
                     normal_p, normal, shape)
    record_study(calendar, edges, k, tau, entered, d0 + d1, code != CONTINUE, counts)
    if code == EFFICACY:
        stop_efficacy[k] += 1
    elif code != CONTINUE:
        stop_futility[k] += 1
    return code != CONTINUE or final


@numba.njit(cache=True)
def jump_studies(
    rng: Any, state: np.ndarray, studies: int, m: int, kind: int, rates: np.ndarray,
    starts: np.ndarray, entry: np.ndarray, pattern: np.ndarray, hazards: np.ndarray,
    dropout: float, trigger: int, targets: np.ndarray, log_w: np.ndarray, a: np.ndarray,
    b: np.ndarray, claim: float, lower: bool, efficacy: np.ndarray, futility: np.ndarray,
    tol: float, edges: np.ndarray, counts: np.ndarray, stop_efficacy: np.ndarray,
    stop_futility: np.ndarray, calendar: np.ndarray, predictive: np.ndarray, bound: float,
    quantiles: np.ndarray, draws: int, normal_w: np.ndarray, normal_m: np.ndarray,
    normal_p: np.ndarray, normal: np.ndarray, shape: np.ndarray, trace: np.ndarray,
) -> None:
    """Simulate ``studies`` studies transition by transition (module docstring), adding
    their stops and calendar totals; the arguments are those of
    :func:`octrial.simulation.event_driven.patient_level_studies` (one piece), with
    ``state`` the xoshiro256** state and ``entry`` the enrolment times of deterministic
    accrual (``kind`` 1 or 2); a non-empty ``trace`` (studies x looks x 6) gets each
    look's numbers (:func:`_look`)."""
    looks = targets.size
    arms = hazards.size
    lam0 = hazards[0]
    lam1 = hazards[1] if arms == 2 else 0.0
    out0 = lam0 + dropout  # rate at which one subject at risk in arm 0 leaves
    out1 = lam1 + dropout
    events = np.zeros((arms, 1))
    exposure = np.zeros((arms, 1))
    d = np.zeros(arms)
    e = np.zeros(arms)
    blocks = pattern.size
    periods = rates.size
    s0, s1, s2, s3 = state[0], state[1], state[2], state[3]
    inverse = 1.0 / rates  # a multiplication per Poisson arrival rather than a division
    for study in range(studies):
        row = trace[study] if trace.shape[0] > 0 else trace[0:0, 0]
        t = 0.0
        r0 = 0.0  # subjects at risk per arm (floats: they multiply rates and times)
        r1 = 0.0
        x0 = 0.0  # exposure per arm
        x1 = 0.0
        d0 = 0.0  # events per arm
        d1 = 0.0
        n = 0  # subjects enrolled
        place = 0  # position in the allocation block
        k = 0  # next look
        # Poisson arrivals are drawn one ahead (independent of everything else), so
        # that they are planned changes of the rates like deterministic entries: the
        # cumulative enrolment rate reached, its period and the period's start value
        cumulative = 0.0
        p = 0
        at_start = 0.0
        arrive = entry[0]
        if kind == 0:
            w, s0, s1, s2, s3 = xoshiro(s0, s1, s2, s3)
            cumulative = -math.log(to_open_uniform(w))
            while p + 1 < periods and cumulative > at_start + rates[p] * (
                    starts[p + 1] - starts[p]):
                at_start += rates[p] * (starts[p + 1] - starts[p])
                p += 1
            arrive = starts[p] + (cumulative - at_start) * inverse[p]
        w, s0, s1, s2, s3 = xoshiro(s0, s1, s2, s3)
        budget = -math.log(to_open_uniform(w))
        while True:
            h0 = out0 * r0
            h1 = out1 * r1
            total = h0 + h1
            # the next planned change of the rates: an entry or a calendar look (entries
            # at the look's time first: subjects enrolled by tau count)
            at = arrive if n < m else math.inf
            look = trigger == 1 and targets[k] < at
            if look:
                at = targets[k]
            if budget < total * (at - t):
                dt = budget / total
                t += dt
                x0 += r0 * dt
                x1 += r1 * dt
                w, s0, s1, s2, s3 = xoshiro(s0, s1, s2, s3)
                u = to_uniform(w) * total
                w, s0, s1, s2, s3 = xoshiro(s0, s1, s2, s3)
                budget = -math.log(to_open_uniform(w))
                # arm 0's share of u first, its events (rate lambda_0 R_0) then its losses;
                # then arm 1's. Arithmetic rather than branches: which arm and whether an
                # event are coin tosses the processor cannot predict
                first = 1.0 * (u < h0)
                seen = first * (u < lam0 * r0) + (1.0 - first) * (u - h0 < lam1 * r1)
                r0 -= first
                r1 -= 1.0 - first
                d0 += first * seen
                d1 += (1.0 - first) * seen
                if d0 + d1 != targets[k] or trigger != 0:
                    continue
                final = k == looks - 1
            elif at == math.inf:
                # nothing can happen any more: the look at the last transition, final
                final = True
            else:
                dt = at - t
                budget -= total * dt
                x0 += r0 * dt
                x1 += r1 * dt
                t = at
                if not look:
                    if pattern[place] == 0:
                        r0 += 1.0
                    else:
                        r1 += 1.0
                    place = place + 1 if place + 1 < blocks else 0
                    n += 1
                    if n < m:
                        if kind != 0:
                            arrive = entry[n]
                        else:
                            w, s0, s1, s2, s3 = xoshiro(s0, s1, s2, s3)
                            cumulative -= math.log(to_open_uniform(w))
                            while p + 1 < periods and cumulative > at_start + rates[p] * (
                                    starts[p + 1] - starts[p]):
                                at_start += rates[p] * (starts[p + 1] - starts[p])
                                p += 1
                            arrive = starts[p] + (cumulative - at_start) * inverse[p]
                    continue
                final = k == looks - 1
            # one call site for the looks keeps the loop small
            if _look(k, final, t, n, d0, d1, x0, x1, rng, arms, looks, targets, log_w, a,
                     b, claim, lower, efficacy, futility, tol, edges, counts,
                     stop_efficacy, stop_futility, calendar, predictive, bound, quantiles,
                     draws, normal_w, normal_m, normal_p, normal, shape, events, exposure,
                     d, e, row):
                break
            k += 1
    state[0], state[1], state[2], state[3] = s0, s1, s2, s3


class EventJumpSimulator(PatientLevelSimulator):
    """Studies of one :class:`~octrial.simulation.event_driven.EventDrivenSetup` with one
    hazard period, simulated event by event (module docstring); the posterior and
    predictive set-up is the subject-level simulator's."""

    kernel = "event-jump"

    def __init__(self, setup: EventDrivenSetup) -> None:
        if not qualifies(setup):
            raise ValueError("event-level simulation: expected one hazard period, got "
                             f"hazard_starts {setup.hazard_starts}")
        super().__init__(setup)
        self.entry = np.zeros(max(setup.max_enrolment, 1))
        if self.kind != ARRIVALS["poisson"]:
            fill_enrolment_times(np.empty(0), self.kind, self.rates, self.starts,
                                 self.times, self.entry)

    def simulate(self, rng: np.random.Generator, replicates: int,
                 trace: np.ndarray | None = None) -> Tally:
        if trace is None:
            trace = np.empty((0, self.looks, 6))
        efficacy = np.zeros(self.looks, dtype=np.int64)
        futility = np.zeros(self.looks, dtype=np.int64)
        calendar = np.zeros(calendar_size(self.looks))
        s = self.setup
        state = seeded_state(rng)
        # numba's Dispatcher type does not carry the compiled function's parameters
        jump_studies(  # type: ignore[call-arg]
            rng, state, replicates, s.max_enrolment, self.kind, self.rates, self.starts,
            self.entry, self.pattern, np.ascontiguousarray(self.hazards[:, 0]),
            s.dropout_hazard, TRIGGERS[s.trigger], self.targets, self.log_w, self.a,
            self.b, s.claim, s.lower_better, self.efficacy, self.futility,
            DECISION_TOLERANCE, self.edges, self.counts, efficacy, futility, calendar,
            self.predictive, self.bound, self.quantiles, s.predictive_draws,
            *self.normal, trace)
        return Tally(replicates, efficacy, futility, calendar=calendar)


    def subjects(self, rng: np.random.Generator) -> dict[str, np.ndarray]:
        """Not available: this simulator draws transitions, not subjects (the subject-level
        simulator's :meth:`~octrial.simulation.event_driven.PatientLevelSimulator.subjects`
        would draw another stream); :meth:`looks_of` gives each look's numbers."""
        raise TypeError("the event-level simulator draws no subjects; use looks_of")

    def looks_of(self, rng: np.random.Generator, studies: int) -> dict[str, np.ndarray]:
        """Each study's numbers at each look it reaches (shape (studies, looks); NaN
        after it stops), from the random numbers :meth:`simulate` draws: ``time``,
        ``enrolled``, ``events`` and ``exposure`` (the last two with a last axis per
        arm)."""
        trace = np.full((studies, self.looks, 6), np.nan)
        self.simulate(rng, studies, trace)
        return {"time": trace[:, :, 0], "enrolled": trace[:, :, 1],
                "events": trace[:, :, 2:2 + self.setup.arms],
                "exposure": trace[:, :, 4:4 + self.setup.arms]}


def event_driven_simulator(design: Any, truth: tuple[float, ...],
                           level: float) -> PatientLevelSimulator:
    """The simulator of an event-driven design at true hazards ``truth``: event by event
    when the design asks for it (``simulation.event_driven_engine = "events"``, which
    the family allows with one hazard period only), else subject by subject.

    Not automatic: on the designs measured (``tests/benchmarks/bench_event_jump.py``)
    the event-level kernel is about as fast as the subject-level one, so switching
    would change every published number for no gain (docs/methods.md)."""
    if getattr(design.simulation, "event_driven_engine", "subjects") == "events":
        # raises plainly when it does not qualify (the family refuses such designs)
        return EventJumpSimulator(setup_of_design(design, truth))
    return EventDrivenSimulator(design, truth, level)
