"""A running study's final counts, expected from its own state at an interim look.

The predictive probability of final success needs the per-arm sizes of the final
analysis. Under deterministic timing they are fixed in advance (the looks' planned
counts). Under Poisson arrivals or dropout they vary from study to study, so the
simulation computes each study's own from what is known at the look (time ``t``):

* its subjects with an outcome (per arm);
* its pipeline: subjects enrolled by ``t`` without an outcome. One lost by ``t`` is known
  to be lost and adds nothing; one still followed adds the probability of staying to its
  outcome, ``exp(-hazard x (e + lag - t))`` (the exponential dropout is memoryless), at
  its outcome time ``e + lag``;
* the subjects still to enrol (up to ``max_enrolment``, arms by the allocation blocks),
  each adding ``exp(-hazard x lag)`` at its expected outcome time: the q-th of them
  enrols when the expected count reaches the count at ``t`` plus q (Poisson arrivals:
  the cumulative rate at ``t`` plus q; even or fixed arrivals: its scheduled time), as
  the loader plans the looks (:func:`octrial.conduct.reader.planned_counts`);
* the final look's trigger keeps the subjects whose outcome is due by the final look:
  ``looks.time``: at the final time; ``looks.enrolled``: at the time the final
  enrolment target is (or is expected to be) reached; ``looks.n``: subjects in order of
  their outcome times until the expected outcomes reach the final target (all of them
  when they never do).

Each arm's final size is its outcomes so far plus the sum of those probabilities, rounded
down (as the loader rounds its plan). With even or fixed arrivals and no dropout every
probability is 1 and the result is the looks' planned final counts.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from octrial.conduct.timing import SLACK

BY_OUTCOMES, BY_ENROLMENT, BY_TIME = 0, 1, 2
"""Look triggers as the kernels number them (``looks.n``, ``looks.enrolled``, ``looks.time``)."""

ROUNDING = 1e-9
"""Added before rounding a size down, so that a sum of probabilities 1 is not cut."""


@numba.njit(cache=True)
def cumulative_rate(t: float, rates: np.ndarray, starts: np.ndarray) -> float:
    """Expected arrivals by time ``t`` under piecewise-constant rates from ``starts``."""
    total = 0.0
    for p in range(rates.size):
        start = starts[p]
        if t <= start:
            break
        end = starts[p + 1] if p + 1 < rates.size else math.inf
        total += rates[p] * (min(t, end) - start)
    return total


@numba.njit(cache=True)
def rate_inverse(count: float, rates: np.ndarray, starts: np.ndarray) -> float:
    """The time the expected arrivals reach ``count`` (the last rate holds forever)."""
    done = 0.0
    for p in range(rates.size):
        if p + 1 == rates.size:
            return starts[p] + (count - done) / rates[p]
        here = rates[p] * (starts[p + 1] - starts[p])
        if done + here >= count:
            return starts[p] + (count - done) / rates[p]
        done += here
    return math.inf  # pragma: no cover - rates is never empty


@numba.njit(cache=True)
def expected_final_counts(enrol: np.ndarray, observed: np.ndarray, lost: np.ndarray,
                          rows: np.ndarray, t: np.ndarray, poisson: bool, rates: np.ndarray,
                          starts: np.ndarray, lag: float, hazard: float, trigger: int,
                          target: float, arm_of: np.ndarray,
                          out: np.ndarray) -> None:  # pragma: no cover - compiled
    """``out[r, j]``: arm ``j``'s expected final size for the study in row ``rows[r]`` of
    the subject arrays at its look time ``t[r]`` (module docstring).

    ``enrol`` and ``observed`` hold each subject's enrolment and outcome time (``inf``:
    lost before the outcome), ``lost`` its time from enrolment to loss (read only when
    ``hazard > 0``); ``trigger`` and ``target`` are the final look's.
    """
    m = enrol.shape[1]
    arms = out.shape[1]
    expected = np.zeros(arms)
    kept = math.exp(-hazard * lag)
    for r in range(rows.size):
        s = rows[r]
        now = t[r]
        limit = now + SLACK * max(1.0, abs(now))
        enrolled = 0
        seen = 0
        for j in range(arms):
            out[r, j] = 0
            expected[j] = 0.0
        for i in range(m):
            if enrol[s, i] <= limit:
                enrolled += 1
            if observed[s, i] <= limit:
                seen += 1
                out[r, arm_of[i]] += 1
        base = cumulative_rate(now, rates, starts) if poisson else 0.0
        final = math.inf
        if trigger == BY_TIME:
            final = target
        elif trigger == BY_ENROLMENT:
            e = int(target)
            if e <= enrolled or not poisson:
                final = enrol[s, e - 1]
            else:
                final = rate_inverse(base + (e - enrolled), rates, starts)
        final_limit = final + SLACK * max(1.0, abs(final))
        remaining = target - seen
        for i in range(m):
            if observed[s, i] <= limit:
                continue
            if enrol[s, i] <= limit:
                if hazard > 0.0 and enrol[s, i] + lost[s, i] <= limit:
                    continue  # known to be lost
                due = enrol[s, i] + lag
                p = math.exp(-hazard * (due - now))
            else:
                when = (rate_inverse(base + (i - enrolled + 1), rates, starts) if poisson
                        else enrol[s, i])
                due = when + lag
                p = kept
            if trigger == BY_OUTCOMES:
                # subjects come in order of their (expected) outcome times
                if remaining <= 0.0:
                    break
                take = min(p, remaining)
                expected[arm_of[i]] += take
                remaining -= take
            elif due <= final_limit:
                expected[arm_of[i]] += p
        for j in range(arms):
            out[r, j] += math.floor(expected[j] + ROUNDING)
