"""Event-driven time-to-event studies simulated subject by subject (numba).

One study: ``max_enrolment`` subjects enter in calendar time (``[conduct]``: a Poisson
process with piecewise-constant rates, evenly at those rates, or at fixed times), are
allocated in fixed blocks by the arms' allocation weights (1:1 alternates T, C), and each
has an exponential time to the event at its arm's true hazard and, with a dropout hazard,
an independent exponential time to loss. Look k happens at the calendar time of the
D_k-th observed event; at that time each subject enrolled so far contributes exposure
min(time to event, time to loss, time since enrolment) and an event if it has been seen
(administrative censoring at the analysis). When fewer than D_k events can ever be seen
(losses), the look happens when every subject's follow-up has ended and it is the final
analysis. The stop rule is the one of :mod:`octrial.rules.stop` on the posterior
probability of benefit of :mod:`octrial.endpoints.time_to_event` (gamma-mixture update;
one arm: the regularized incomplete gamma; two arms: the beta identity of the hazard
ratio), and a stop ends enrolment.

Random numbers: per chunk of studies, three arrays of standard exponentials (arrivals,
event times, losses) drawn from the batch's generator in that order, so a batch's numbers
depend on the seed and batch only (whatever ``--jobs``).
"""

from __future__ import annotations

import math
from typing import Any

import numba
import numpy as np

from octrial.rules.stop import CONTINUE, EFFICACY, Rule, look_decision_at
from octrial.simulation.base import Simulator, Tally
from octrial.simulation.calendar import calendar_size, duration_edges, record_study
from octrial.simulation.special import betainc, gammainc_pair

CHUNK = 1024
"""Studies whose subject-level random numbers are held at once."""
ARRIVALS = {"poisson": 0, "even": 1, "fixed": 2}


def allocation_pattern(weights: tuple[float, ...]) -> np.ndarray:
    """The fixed allocation block: arm indices in the order subjects are allocated, e.g.
    (1, 1) gives [0, 1] and (2, 1) gives [0, 0, 1] (weights rounded to whole numbers of
    subjects per block after scaling the smallest to 1)."""
    smallest = min(weights)
    counts = [max(1, round(w / smallest)) for w in weights]
    block: list[int] = []
    while any(counts):
        for j, left in enumerate(counts):
            if left:
                block.append(j)
                counts[j] -= 1
    return np.array(block, dtype=np.int64)


class EventDrivenSimulator(Simulator):
    """Studies of a time-to-event design at the true hazards ``truth`` (one per arm)."""

    kernel = "event-driven"

    def __init__(self, design: Any, truth: tuple[float, ...], level: float) -> None:
        conduct = design.conduct
        if conduct is None:
            raise ValueError("an event-driven design needs a [conduct] table")
        self.design = design
        self.looks = design.looks.count
        accrual = conduct.accrual
        self.m = conduct.max_enrolment
        self.kind = ARRIVALS[accrual.arrivals]
        self.rates = np.asarray(accrual.rates or (1.0,), dtype=float)
        self.starts = np.asarray(accrual.starts or (0.0,), dtype=float)
        self.times = np.asarray(accrual.times or (0.0,), dtype=float)
        self.pattern = allocation_pattern(tuple(a.allocation for a in design.arms))
        self.hazards = np.asarray(truth, dtype=float)
        self.dropout = float(conduct.dropout_hazard)
        self.targets = np.asarray(design.looks.n, dtype=np.int64)
        arms = len(design.arms)
        width = max(len(a.prior.weights) for a in design.arms)
        self.log_w = np.full((arms, width), -np.inf)
        self.a = np.ones((arms, width))
        self.b = np.ones((arms, width))
        for j, arm in enumerate(design.arms):
            p = arm.prior
            size = len(p.weights)
            self.log_w[j, :size] = np.log(np.asarray(p.weights, dtype=float))
            self.a[j, :size], self.b[j, :size] = p.a, p.b
        h = design.hypothesis
        self.claim = h.null_value if arms == 1 else h.threshold
        self.lower = h.better == "lower"
        efficacy, futility, _, self.tolerance = Rule.of(design.looks).arrays()
        self.efficacy = np.asarray(efficacy, dtype=float)
        self.futility = np.asarray(futility, dtype=float)
        self.edges = duration_edges(design)

    def simulate(self, rng: np.random.Generator, replicates: int) -> Tally:
        efficacy = np.zeros(self.looks, dtype=np.int64)
        futility = np.zeros(self.looks, dtype=np.int64)
        calendar = np.zeros(calendar_size(self.looks))
        done = 0
        while done < replicates:
            size = min(CHUNK, replicates - done)
            arrivals = rng.standard_exponential((size, self.m))
            events = rng.standard_exponential((size, self.m))
            losses = rng.standard_exponential((size, self.m))
            event_driven_studies(
                arrivals, events, losses, self.kind, self.rates, self.starts, self.times,
                self.pattern, self.hazards, self.dropout, self.targets, self.log_w, self.a,
                self.b, self.claim, self.lower, self.efficacy, self.futility,
                self.tolerance, self.edges, efficacy, futility, calendar)
            done += size
        return Tally(replicates, efficacy, futility, calendar=calendar)


@numba.njit(cache=True)
def enrolment_times(unit: np.ndarray, kind: int, rates: np.ndarray, starts: np.ndarray,
                    times: np.ndarray, out: np.ndarray) -> None:
    """Enrolment times of ``out.size`` subjects: Poisson arrivals invert the cumulative
    rate at the running sum of ``unit`` exponentials; even arrivals invert it at 1, 2,
    ...; fixed arrivals copy ``times``."""
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


@numba.njit(cache=True, inline="always")
def follow_up(unit_event: float, unit_loss: float, hazard: float,
              dropout: float) -> tuple[float, bool]:
    """One subject's follow-up from standard exponentials: (time to the event or the loss,
    whichever comes first; whether it is the event). No loss when ``dropout`` is 0."""
    t_event = unit_event / hazard
    t_loss = unit_loss / dropout if dropout > 0.0 else np.inf
    if t_event <= t_loss:
        return t_event, True
    return t_loss, False


@numba.njit(cache=True)
def arm_statistics(enrolled: np.ndarray, follow: np.ndarray, seen: np.ndarray,
                   arm_of: np.ndarray, tau: float, events: np.ndarray,
                   exposure: np.ndarray) -> int:
    """Each arm's events and exposure at the analysis at calendar time ``tau`` (written
    into ``events`` and ``exposure``; administrative censoring at ``tau``); returns the
    subjects enrolled by then."""
    events[:] = 0.0
    exposure[:] = 0.0
    entered = 0
    for i in range(enrolled.size):
        if enrolled[i] > tau:
            continue
        entered += 1
        j = arm_of[i]
        # compared in calendar time, as the event times were sorted, so that the event
        # at tau itself counts
        if enrolled[i] + follow[i] <= tau:
            exposure[j] += follow[i]
            if seen[i]:
                events[j] += 1.0
        else:
            exposure[j] += tau - enrolled[i]
    return entered


@numba.njit(cache=True)
def benefit_at(events: np.ndarray, exposure: np.ndarray, log_w: np.ndarray, a: np.ndarray,
               b: np.ndarray, claim: float, lower: bool) -> float:
    """Posterior probability of benefit from each arm's events and exposure (module
    docstring of :mod:`octrial.endpoints.time_to_event`)."""
    arms, width = a.shape
    post_w = np.empty((arms, width))
    post_a = np.empty((arms, width))
    post_b = np.empty((arms, width))
    for j in range(arms):
        top = -np.inf
        for c in range(width):
            post_a[j, c] = a[j, c] + events[j]
            post_b[j, c] = b[j, c] + exposure[j]
            if math.isinf(log_w[j, c]):
                post_w[j, c] = -np.inf
                continue
            # log marginal likelihood of the component (the gamma-Poisson form)
            post_w[j, c] = (log_w[j, c] + a[j, c] * math.log(b[j, c])
                            + math.lgamma(post_a[j, c]) - math.lgamma(a[j, c])
                            - post_a[j, c] * math.log(post_b[j, c]))
            top = max(top, post_w[j, c])
        total = 0.0
        for c in range(width):
            post_w[j, c] = math.exp(post_w[j, c] - top) if not math.isinf(post_w[j, c]) else 0.0
            total += post_w[j, c]
        for c in range(width):
            post_w[j, c] /= total
    below = 0.0
    if arms == 1:
        for c in range(width):
            if post_w[0, c] > 0.0:
                below += post_w[0, c] * gammainc_pair(post_a[0, c], post_b[0, c] * claim)[0]
    else:
        for c in range(width):
            for e in range(width):
                w = post_w[0, c] * post_w[1, e]
                if w > 0.0:
                    k = claim * post_b[0, c] / post_b[1, e]
                    below += w * betainc(post_a[0, c], post_a[1, e], k / (1.0 + k))
    below = min(max(below, 0.0), 1.0)
    return below if lower else 1.0 - below


@numba.njit(cache=True)
def event_driven_studies(
    arrivals: np.ndarray, unit_events: np.ndarray, unit_losses: np.ndarray, kind: int,
    rates: np.ndarray, starts: np.ndarray, times: np.ndarray, pattern: np.ndarray,
    hazards: np.ndarray, dropout: float, targets: np.ndarray, log_w: np.ndarray,
    a: np.ndarray, b: np.ndarray, claim: float, lower: bool, efficacy: np.ndarray,
    futility: np.ndarray, tol: float, edges: np.ndarray, stop_efficacy: np.ndarray,
    stop_futility: np.ndarray, calendar: np.ndarray,
) -> None:
    """Simulate ``arrivals.shape[0]`` studies, adding their stops and calendar totals."""
    studies, m = arrivals.shape
    looks = targets.size
    arms = hazards.size
    enrolled = np.empty(m)
    arm_of = np.empty(m, dtype=np.int64)
    follow = np.empty(m)  # time from enrolment to the event or loss, whichever is first
    seen = np.empty(m, dtype=np.bool_)  # whether that is the event
    event_times = np.empty(m)
    events = np.zeros(arms)
    exposure = np.zeros(arms)
    for s in range(studies):
        enrolment_times(arrivals[s], kind, rates, starts, times, enrolled)
        count = 0
        resolved = 0.0
        for i in range(m):
            j = pattern[i % pattern.size]
            arm_of[i] = j
            follow[i], seen[i] = follow_up(unit_events[s, i], unit_losses[s, i], hazards[j],
                                           dropout)
            resolved = max(resolved, enrolled[i] + follow[i])
            if seen[i]:
                event_times[count] = enrolled[i] + follow[i]
                count += 1
        ordered = np.sort(event_times[:count])
        for k in range(looks):
            if targets[k] <= count:
                tau = ordered[targets[k] - 1]
                final = k == looks - 1
            else:  # the events run out: the analysis when every follow-up has ended
                tau = resolved
                final = True
            entered = arm_statistics(enrolled, follow, seen, arm_of, tau, events, exposure)
            benefit = benefit_at(events, exposure, log_w, a, b, claim, lower)
            threshold = efficacy[looks - 1] if final else efficacy[k]
            code = look_decision_at(threshold, futility[k], final, benefit, tol)
            record_study(calendar, edges, k, tau, entered, events.sum(), code != CONTINUE)
            if code == EFFICACY:
                stop_efficacy[k] += 1
                break
            if code != CONTINUE:
                stop_futility[k] += 1
                break
