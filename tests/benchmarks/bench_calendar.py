"""Benchmark: two-arm binary studies in calendar time under random conduct, per core.

Run:  PYTHONPATH=. python tests/benchmarks/bench_calendar.py          (a minute or two)
      PYTHONPATH=. python tests/benchmarks/bench_calendar.py --quick  (fewer studies)

Design (issue 15's target for random conduct: two arms, binary, 3 looks, Poisson accrual
and dropout): Beta(1, 1) priors, 1:1 blocks, Poisson arrivals at 8 subjects per month up
to 200, a 6-month outcome lag, 10% lost by 6 months, looks at 60 / 120 / 170 outcomes,
efficacy if Pr(p_T - p_C > 0) >= 0.995 / 0.99 / 0.975, futility if < 0.10 at the interim
looks, the pipeline analysed after a stop. True rates 0.45 against 0.30. Compared in one
run, all on one core:

* octrial's calendar studies (:class:`octrial.simulation.calendar_studies.CalendarStudies`)
  as they are now: each study's posterior probability at its own counts, memoised by the
  counts (:mod:`octrial.simulation.counts_benefit`);
* the same simulator with the previous implementation (a two-arm table by the vectorised
  quadrature for every distinct per-arm size reached), same random numbers;
* a naive loop: study by study, subject by subject in Python, each posterior
  probability by scipy's ``quad`` over beta densities.

A second pair of lines times the same design with futility by the predictive probability
(< 0.10 at the interim looks), at each study's own expected final sizes
(:mod:`octrial.conduct.final_counts`): the compiled predictive probability against the
family's lattice tables per distinct (current, final) sizes at the same final sizes (the
previous way of computing it, which then assumed the planned final sizes).

The fast simulator runs several batches of 50,000 studies, each with its own seed, as the
Monte Carlo engine does; its memo is shared between batches (and scenarios) in a
process, so the first batch pays for most of the quadratures. Printed: studies per second
for the first batch, the later batches and all together, the ratios, and the estimates
of Pr(success) of each (they agree within Monte Carlo error). Times are the process's CPU
time (``time.process_time``: one core, whatever else the machine runs); they are only
reported, never asserted.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import tempfile
import time

import numpy as np
from scipy import integrate, stats

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", ".."))

from octrial import load_design
from octrial.engines.monte_carlo import batch_generator
from octrial.simulation.calendar_studies import CalendarStudies

TRUTH = (0.45, 0.30)
RATE, M, LAG, LOST, LOOKS = 8.0, 200, 6.0, 0.10, (60, 120, 170)
EFFICACY, FUTILITY = (0.995, 0.99, 0.975), 0.10
DESIGN = f"""
schema = 1
name = "bench-calendar"
title = "Benchmark: binary, random conduct (invented)"
[endpoint]
type = "binary"
better = "higher"
[hypothesis]
comparison = "difference"
kind = "superiority"
margin = 0.0
[arms.treatment]
allocation = 1
prior = {{ distribution = "beta", a = 1, b = 1 }}
[arms.control]
allocation = 1
prior = {{ distribution = "beta", a = 1, b = 1 }}
[conduct]
arrivals = "poisson"
enrolment_rate = {RATE}
max_enrolment = {M}
outcome_lag = {LAG}
dropout_proportion = {LOST}
dropout_by = {LAG}
analyse_pipeline = true
[looks]
n = {list(LOOKS)}
efficacy = {list(EFFICACY)}
futility = {FUTILITY}
[scenarios]
control = [0.3]
effect = [0.15]
[simulation]
method = "monte-carlo"
replicates = 50000
seed = 1
"""


def load(predictive: bool = False) -> object:
    """The benchmark design; ``predictive``: futility by the predictive probability
    (< 0.10) instead of the posterior probability."""
    text = DESIGN.replace("futility = ", "futility_predictive = ") if predictive else DESIGN
    with tempfile.TemporaryDirectory() as folder:
        path = os.path.join(folder, "bench.toml")
        with open(path, "w") as handle:
            handle.write(text)
        return load_design(path)


def benefit_quad(x_t: int, n_t: int, x_c: int, n_c: int) -> float:
    """Pr(p_T > p_C | data), Beta(1, 1) priors, by scipy quad (the naive loop's own)."""
    treat, control = stats.beta(1 + x_t, 1 + n_t - x_t), stats.beta(1 + x_c, 1 + n_c - x_c)
    value, _ = integrate.quad(lambda u: control.pdf(u) * treat.sf(u), 0.0, 1.0,
                              epsabs=1e-12, limit=200)
    return value


def naive_loop(rng: np.random.Generator, studies: int) -> float:
    """Pr(success at some look) by a plain loop (no pipeline reversal counted)."""
    hazard = -math.log(1.0 - LOST) / LAG
    success = 0
    for _ in range(studies):
        enrol, arm, outcome, due = [], [], [], []
        t = 0.0
        for i in range(M):
            t += rng.exponential(1.0 / RATE)
            lost = rng.exponential(1.0 / hazard)
            enrol.append(t)
            arm.append(i % 2)
            due.append(t + LAG if lost >= LAG else math.inf)
            outcome.append(0)
        order = sorted(range(M), key=lambda i: due[i])
        for k, target in enumerate(LOOKS):
            seen = [i for i in order[:target] if math.isfinite(due[i])]
            counts = [[0, 0], [0, 0]]  # [arm][n, x]
            for i in seen:
                if outcome[i] == 0:
                    outcome[i] = 1 + int(rng.random() < TRUTH[arm[i]])
                counts[arm[i]][0] += 1
                counts[arm[i]][1] += outcome[i] - 1
            b = benefit_quad(counts[0][1], counts[0][0], counts[1][1], counts[1][0])
            if b >= EFFICACY[k]:
                success += 1
                break
            if k < len(LOOKS) - 1 and b < FUTILITY:
                break
    return success / studies


def timed(simulator: CalendarStudies, seed: int, batches: int, size: int,
          ) -> tuple[list[float], float]:
    times, successes, total = [], 0, 0
    for b in range(batches):
        start = time.process_time()
        tally = simulator.simulate(batch_generator(seed, 0, b), size)
        times.append(time.process_time() - start)
        successes += int(tally.efficacy.sum())
        total += size
    return times, successes / total


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer studies")
    args = parser.parse_args()
    batches, size = (3, 20_000) if args.quick else (8, 50_000)
    old_size, naive_size = (2_000, 100) if args.quick else (10_000, 300)
    design = load()
    fast = CalendarStudies(design, TRUTH, 0.95)
    fast.simulate(batch_generator(99, 9, 9), 50)  # compile (numba cache) outside timing
    times, p_fast = timed(fast, 1, batches, size)
    old = CalendarStudies(design, TRUTH, 0.95)
    old.at_counts = None
    old.simulate(batch_generator(99, 9, 9), 50)
    old_times, p_old = timed(old, 1, 1, old_size)
    start = time.process_time()
    p_naive = naive_loop(np.random.default_rng(5), naive_size)
    naive_time = time.process_time() - start

    all_rate = batches * size / sum(times)
    later = (batches - 1) * size / sum(times[1:])
    old_rate = old_size / old_times[0]
    naive_rate = naive_size / naive_time
    print(f"calendar studies, counts memo: first batch {size / times[0]:,.0f}/s, later "
          f"batches {later:,.0f}/s, all {batches} x {size:,}: {all_rate:,.0f}/s; "
          f"Pr(success) {p_fast:.4f}")
    print(f"previous tables per size:       {old_rate:,.0f}/s ({old_size:,} studies); "
          f"Pr(success) {p_old:.4f}")
    print(f"naive loop (scipy quad):        {naive_rate:,.1f}/s ({naive_size} studies); "
          f"Pr(success) {p_naive:.4f}")
    print(f"ratios (all batches): {all_rate / old_rate:.1f}x the previous implementation, "
          f"{all_rate / naive_rate:,.0f}x the naive loop")

    predictive = load(predictive=True)
    fast = CalendarStudies(predictive, TRUTH, 0.95)
    fast.simulate(batch_generator(99, 9, 9), 50)
    pp_batches = max(2, batches // 2)
    times, p_fast = timed(fast, 2, pp_batches, size)
    old = CalendarStudies(predictive, TRUTH, 0.95)
    old.at_counts = None
    old.simulate(batch_generator(99, 9, 9), 50)
    old_times, p_old = timed(old, 2, 1, old_size // 2)
    pp_rate = pp_batches * size / sum(times)
    pp_old = old_size // 2 / old_times[0]
    print(f"predictive futility, own final sizes: all {pp_batches} x {size:,}: "
          f"{pp_rate:,.0f}/s; Pr(success) {p_fast:.4f}")
    print(f"predictive futility, previous tables: {pp_old:,.0f}/s ({old_size // 2:,} "
          f"studies); Pr(success) {p_old:.4f}; ratio {pp_rate / pp_old:.1f}x")


if __name__ == "__main__":
    main()
