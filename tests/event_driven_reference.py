"""Two independent implementations of the event-driven simulator's model, for checks and
the benchmark: a vectorised numpy version (many studies at once) and a plain Python loop
(one subject at a time). Both cover the benchmark's case: one or two arms, constant
hazards, single gamma priors, Poisson or even arrivals at one rate, exponential dropout,
looks at event counts. They draw their own random numbers (not in the kernel's order), so
they agree with the kernel in distribution, not study by study.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special


def _benefit(d: np.ndarray, e: np.ndarray, a: np.ndarray, b: np.ndarray, claim: float,
             lower: bool) -> np.ndarray:
    """Posterior probability of benefit with scipy (rows: studies, columns: arms)."""
    post_a, post_b = a + d, b + e
    if d.shape[1] == 1:
        below = special.gammainc(post_a[:, 0], post_b[:, 0] * claim)
    else:
        k = claim * post_b[:, 0] / post_b[:, 1]
        below = special.betainc(post_a[:, 0], post_a[:, 1], k / (1.0 + k))
    return below if lower else 1.0 - below


def numpy_studies(rng: np.random.Generator, studies: int, m: int, rate: float,
                  poisson: bool, hazards: tuple[float, ...], dropout: float,
                  targets: tuple[int, ...], a: tuple[float, ...], b: tuple[float, ...],
                  claim: float, efficacy: tuple[float, ...], futility: tuple[float, ...],
                  lower: bool = True) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(efficacy stops per look, futility stops per look, mean look times) of
    ``studies`` studies, all in arrays of shape (studies, m)."""
    arms = len(hazards)
    gaps = rng.standard_exponential((studies, m)) if poisson else np.ones((studies, m))
    enrolled = np.cumsum(gaps, axis=1) / rate
    arm = np.arange(m) % arms
    hazard = np.asarray(hazards)[arm]
    t_event = rng.standard_exponential((studies, m)) / hazard
    t_loss = (rng.standard_exponential((studies, m)) / dropout if dropout > 0
              else np.full((studies, m), np.inf))
    seen = t_event <= t_loss
    follow = np.where(seen, t_event, t_loss)
    ends = enrolled + follow
    calendar_events = np.where(seen, ends, np.inf)
    count = seen.sum(axis=1)
    resolved = ends.max(axis=1)
    ordered = np.sort(calendar_events, axis=1)
    looks = len(targets)
    stop_e = np.zeros(looks, dtype=np.int64)
    stop_f = np.zeros(looks, dtype=np.int64)
    time_sum = np.zeros(looks)
    running = np.ones(studies, dtype=bool)
    a_, b_ = np.asarray(a)[None, :], np.asarray(b)[None, :]
    for k, target in enumerate(targets):
        reached = count >= target
        tau = np.where(reached, ordered[:, min(target, m) - 1], resolved)
        final = (k == looks - 1) | ~reached
        ended = ends <= tau[:, None]
        at_risk = enrolled <= tau[:, None]
        exposure_each = np.where(ended, follow, tau[:, None] - enrolled) * at_risk
        event_each = (ended & seen & at_risk).astype(float)
        d = np.stack([event_each[:, arm == j].sum(axis=1) for j in range(arms)], axis=1)
        e = np.stack([exposure_each[:, arm == j].sum(axis=1) for j in range(arms)], axis=1)
        benefit = _benefit(d, e, a_, b_, claim, lower)
        threshold = np.where(final, efficacy[-1], efficacy[k])
        win = running & (benefit >= threshold - 1e-12)
        futile = running & ~win & (final | (benefit < futility[k] - 1e-12))
        time_sum[k] = tau[running].sum()
        stop_e[k] = win.sum()
        stop_f[k] = futile.sum()
        running &= ~(win | futile)
    return stop_e, stop_f, time_sum


def loop_studies(rng: np.random.Generator, studies: int, m: int, rate: float,
                 poisson: bool, hazards: tuple[float, ...], dropout: float,
                 targets: tuple[int, ...], a: tuple[float, ...], b: tuple[float, ...],
                 claim: float, efficacy: tuple[float, ...], futility: tuple[float, ...],
                 lower: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """The same studies one subject at a time in plain Python."""
    arms = len(hazards)
    looks = len(targets)
    stop_e = np.zeros(looks, dtype=np.int64)
    stop_f = np.zeros(looks, dtype=np.int64)
    for _ in range(studies):
        subjects = []
        clock = 0.0
        for i in range(m):
            clock += (rng.standard_exponential() if poisson else 1.0) / rate
            j = i % arms
            x = rng.standard_exponential() / hazards[j]
            loss = rng.standard_exponential() / dropout if dropout > 0 else math.inf
            subjects.append((clock, j, min(x, loss), x <= loss))
        times = sorted(s[0] + s[2] for s in subjects if s[3])
        resolved = max(s[0] + s[2] for s in subjects)
        for k, target in enumerate(targets):
            final = k == looks - 1 or target > len(times)
            tau = times[target - 1] if target <= len(times) else resolved
            d = [0.0] * arms
            e = [0.0] * arms
            for start, j, f, event in subjects:
                if start > tau:
                    continue
                if start + f <= tau:
                    e[j] += f
                    d[j] += 1.0 if event else 0.0
                else:
                    e[j] += tau - start
            benefit = float(_benefit(np.array([d]), np.array([e]), np.array([a]),
                                     np.array([b]), claim, lower)[0])
            if benefit >= (efficacy[-1] if final else efficacy[k]) - 1e-12:
                stop_e[k] += 1
                break
            if final or benefit < futility[k] - 1e-12:
                stop_f[k] += 1
                break
    return stop_e, stop_f
