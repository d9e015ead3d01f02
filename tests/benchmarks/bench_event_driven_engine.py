"""Benchmark: event-driven two-arm time-to-event studies, subject by subject.

Run:  python tests/benchmarks/bench_event_driven_engine.py

Design (the issue's case): two arms 1:1, 3 looks at 100, 200 and 300 events, 600
subjects enrolled by a Poisson process at 25 per month, exponential event times (control
hazard 0.05 per month, hazard ratio 0.75), dropout hazard 0.005 per month, gamma priors,
efficacy on Pr(HR < 1 | data). Three implementations of the same study, on one core:

* octrial's numba kernel (:mod:`octrial.simulation.event_driven`) through the engine;
* a vectorised numpy implementation (all studies of a batch at once: sort the event
  times, take each look's time, sum exposure and events per arm, scipy's betainc);
* a naive Python loop over studies and subjects with scipy per decision.

All three estimate Pr(success); they must agree within Monte Carlo error. Studies per
second are reported with the ratio to the numpy implementation.
"""

from __future__ import annotations

import math
import os
import time

os.environ.setdefault("NUMBA_NUM_THREADS", "1")

import numpy as np
from scipy import special

import octrial
from octrial.design.load import parse_design
from octrial.design.model import Source

DESIGN = {
    "schema": 1, "name": "bench-event-driven",
    "endpoint": {"type": "time-to-event"},
    "hypothesis": {"comparison": "ratio", "margin": 0.0},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 0.1, "rate": 2.0}},
             "control": {"prior": {"distribution": "gamma", "shape": 0.1, "rate": 2.0}}},
    "conduct": {"enrolment_rate": 25.0, "max_enrolment": 600, "dropout_hazard": 0.005},
    "looks": {"events": [100, 200, 300], "efficacy": [0.999, 0.995, 0.975],
              "futility": [0.05, 0.2]},
    "scenarios": {"control": [0.05], "ratio": [0.75]},
    "simulation": {"replicates": 200_000, "seed": 1},
}
HAZARDS = (0.0375, 0.05)


def _decide(events, exposure, k, last, eff, fut):
    a_t, a_c = 0.1 + events[..., 0], 0.1 + events[..., 1]
    b_t, b_c = 2.0 + exposure[..., 0], 2.0 + exposure[..., 1]
    ratio = b_t / b_c
    benefit = special.betainc(a_t, a_c, ratio / (1.0 + ratio))
    efficacy = benefit >= eff[k] - 1e-12
    futility = ~efficacy & (last | (benefit < (fut[k] if k < len(fut) else -1) - 1e-12))
    return efficacy, futility


def numpy_studies(rng: np.random.Generator, studies: int) -> float:
    """Pr(success) by numpy, all studies of the batch at once."""
    m, targets = 600, (100, 200, 300)
    eff, fut = (0.999, 0.995, 0.975), (0.05, 0.2)
    enrolled = np.cumsum(rng.standard_exponential((studies, m)), axis=1) / 25.0
    arm = np.arange(m) % 2
    hazard = np.where(arm == 0, HAZARDS[0], HAZARDS[1])
    t_event = rng.standard_exponential((studies, m)) / hazard
    t_loss = rng.standard_exponential((studies, m)) / 0.005
    seen = t_event <= t_loss
    follow = np.where(seen, t_event, t_loss)
    end = enrolled + follow
    event_time = np.sort(np.where(seen, end, np.inf), axis=1)
    running = np.ones(studies, dtype=bool)
    success = 0
    for k, d in enumerate(targets):
        tau = event_time[:, d - 1][:, None]
        inside = enrolled <= tau
        done = end <= tau
        exposure = np.where(inside, np.where(done, follow, tau - enrolled), 0.0)
        events = inside & done & seen
        e = np.stack([exposure[:, arm == j].sum(axis=1) for j in (0, 1)], axis=1)
        n = np.stack([events[:, arm == j].sum(axis=1) for j in (0, 1)], axis=1)
        efficacy, futility = _decide(n, e, k, k == len(targets) - 1, eff, fut)
        success += int(np.count_nonzero(efficacy & running))
        running &= ~(efficacy | futility)
    return success / studies


def naive_studies(rng: np.random.Generator, studies: int) -> float:
    """Pr(success) by a plain loop over studies and subjects."""
    m, targets = 600, (100, 200, 300)
    eff, fut = (0.999, 0.995, 0.975), (0.05, 0.2)
    success = 0
    for _ in range(studies):
        t, subjects = 0.0, []
        for i in range(m):
            t += rng.standard_exponential() / 25.0
            j = i % 2
            te = rng.standard_exponential() / HAZARDS[j]
            tl = rng.standard_exponential() / 0.005
            subjects.append((t, j, min(te, tl), te <= tl))
        times = sorted(s[0] + s[2] for s in subjects if s[3])
        for k, d in enumerate(targets):
            tau = times[d - 1]
            events, exposure = [0.0, 0.0], [0.0, 0.0]
            for start, j, follow, seen in subjects:
                if start > tau:
                    continue
                if start + follow <= tau:
                    exposure[j] += follow
                    events[j] += seen
                else:
                    exposure[j] += tau - start
            efficacy, futility = _decide(np.array(events), np.array(exposure), k,
                                         k == len(targets) - 1, eff, fut)
            if efficacy:
                success += 1
            if efficacy or futility:
                break
    return success / studies


def main() -> None:
    design = parse_design(DESIGN, Source("bench.toml", "", ""))
    octrial.evaluate(parse_design({**DESIGN, "simulation": {"replicates": 2000, "seed": 2}},
                                  Source("warm.toml", "", "")))  # compile
    tic = time.perf_counter()
    oc = octrial.evaluate(design)
    kernel_s = time.perf_counter() - tic
    kernel_p = float(oc["prob_success"].iloc[0])
    r = DESIGN["simulation"]["replicates"]

    rng = np.random.default_rng(3)
    n_numpy = 20_000
    tic = time.perf_counter()
    numpy_p = float(np.mean([numpy_studies(rng, 2000) for _ in range(n_numpy // 2000)]))
    numpy_s = time.perf_counter() - tic

    n_naive = 300
    tic = time.perf_counter()
    naive_p = naive_studies(rng, n_naive)
    naive_s = time.perf_counter() - tic

    rows = [("octrial numba kernel (engine, end to end)", r, kernel_s, kernel_p),
            ("vectorised numpy/scipy", n_numpy, numpy_s, numpy_p),
            ("naive Python loop", n_naive, naive_s, naive_p)]
    numpy_rate = n_numpy / numpy_s
    print(f"{'implementation':44s}{'studies':>9s}{'studies/s':>12s}{'vs numpy':>10s}"
          f"{'P(success)':>12s}")
    for name, n, seconds, p in rows:
        print(f"{name:44s}{n:9d}{n / seconds:12,.0f}{n / seconds / numpy_rate:10.1f}"
              f"{p:12.4f}")
    se = math.sqrt(kernel_p * (1 - kernel_p) / n_numpy)
    print(f"\nkernel vs numpy: |difference| = {abs(kernel_p - numpy_p):.4f} "
          f"(4 SE of the numpy run: {4 * se:.4f})")


if __name__ == "__main__":
    main()
