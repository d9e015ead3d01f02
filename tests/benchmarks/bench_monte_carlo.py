"""Benchmark: simulated three-look single-arm studies per second, per core.

Run:  python tests/benchmarks/bench_monte_carlo.py           (about a minute)
      python tests/benchmarks/bench_monte_carlo.py --memory  (adds the 200 x 10^6 grid)

Design: one arm, Beta(1, 1) prior, benchmark 0.2, looks at 15, 30, 45 subjects,
efficacy if Pr(p > 0.2 | data) >= 0.999 / 0.995 / 0.95, futility if < 0.05 at the interim
looks; true rate 0.3. Compared in one run, all on one core:

* (a) naive: a Python loop over studies and looks calling scipy.stats (binom.rvs,
  beta.sf) per study, as a hand-written script does;
* (b) vectorised: numpy binomial draws for all studies at once and scipy's incomplete
  beta on the whole (studies x looks) array, in batches;
* the cost of drawing the binomial random numbers alone (numpy, 3 per study);
* octrial's table kernel (random words + kernel), and the whole engine end to end
  (one scenario: tables, batches, seeding, summaries); and the general kernel, which
  evaluates every posterior probability per study.

Targets (issue 3): >= 1000x (a), >= 20x (b), within a small factor of the binomial
draws alone. All three estimates of P(success) are printed so they can be compared.
With --memory, a grid of 200 scenarios x 10^6 replicates runs in a fresh process and its
peak resident memory is reported beside the memory an unbatched run would need for the
random numbers alone.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time

import numpy as np
from scipy import special, stats

from octrial.design.load import parse_design
from octrial.design.model import Source
from octrial.engines import MonteCarloSettings
from octrial.engines.monte_carlo import batch_generator
from octrial.evaluation import compute
from octrial.rules.estimates import lattice_estimates
from octrial.rules.lattice import build_rule
from octrial.simulation.binary import BinarySimulator
from octrial.simulation.lattice import LatticeSimulator, lattice_plan

LOOKS = (15, 30, 45)
EFFICACY = (0.999, 0.995, 0.95)
FUTILITY = 0.05
P0, TRUTH = 0.2, 0.3
DESIGN = {
    "schema": 1, "name": "bench-mc",
    "endpoint": {"type": "binary", "better": "higher"},
    "hypothesis": {"benchmark": P0},
    "arms": {"treatment": {"prior": {"distribution": "beta", "a": 1, "b": 1}}},
    "looks": {"n": list(LOOKS), "efficacy": list(EFFICACY), "futility": FUTILITY},
    "scenarios": {"treatment": [TRUTH]},
    "simulation": {"seed": 1},
}


def design(data=DESIGN):
    return parse_design(data, Source("bench.toml", "", ""))


def naive(studies: int, seed: int) -> float:
    rng = np.random.default_rng(seed)
    successes = 0
    for _ in range(studies):
        x, previous = 0, 0
        for k, n in enumerate(LOOKS):
            x += stats.binom.rvs(n - previous, TRUTH, random_state=rng)
            previous = n
            b = stats.beta.sf(P0, 1 + x, 1 + n - x)
            if b >= EFFICACY[k]:
                successes += 1
                break
            if k < len(LOOKS) - 1 and b < FUTILITY:
                break
    return successes / studies


def vectorised(studies: int, seed: int, batch: int = 200_000) -> float:
    rng = np.random.default_rng(seed)
    n = np.array(LOOKS)
    successes = 0
    for start in range(0, studies, batch):
        size = min(batch, studies - start)
        x = np.cumsum(rng.binomial(np.diff(n, prepend=0), TRUTH, size=(size, len(n))), axis=1)
        b = special.betaincc(1 + x, 1 + n - x, P0)
        efficacy = b >= np.array(EFFICACY)
        futility = np.zeros_like(efficacy)
        futility[:, :-1] = b[:, :-1] < FUTILITY
        futility[:, -1] = ~efficacy[:, -1]
        stop = efficacy | futility
        first = np.argmax(stop, axis=1)
        successes += int(efficacy[np.arange(size), first].sum())
    return successes / studies


def binomial_draws(studies: int, seed: int, batch: int = 200_000) -> float:
    rng = np.random.default_rng(seed)
    sizes = np.diff(np.array(LOOKS), prepend=0)
    total = 0
    for start in range(0, studies, batch):
        size = min(batch, studies - start)
        total += int(rng.binomial(sizes, TRUTH, size=(size, len(sizes)))[:, 0].sum())
    return total


def table_kernel(studies: int, seed: int, batch: int = 50_000) -> float:
    d = design()
    rule, estimates = build_rule(d), lattice_estimates(d)
    simulator = LatticeSimulator(d, lattice_plan(d, rule, estimates), (TRUTH,), estimates, 0.95)
    tally = None
    for b, start in enumerate(range(0, studies, batch)):
        part = simulator.simulate(batch_generator(seed, 0, b), min(batch, studies - start))
        tally = part if tally is None else tally + part
    return tally.efficacy.sum() / studies


def general_kernel(studies: int, seed: int, batch: int = 50_000) -> float:
    simulator = BinarySimulator(design(), (TRUTH,), 0.95)
    tally = None
    for b, start in enumerate(range(0, studies, batch)):
        part = simulator.simulate(batch_generator(seed, 0, b), min(batch, studies - start))
        tally = part if tally is None else tally + part
    return tally.efficacy.sum() / studies


def engine(studies: int, seed: int) -> float:
    oc = compute(design(), "monte-carlo", MonteCarloSettings(replicates=studies, seed=seed)).oc
    return float(oc["prob_success"].iloc[0])


def rate(function, studies: int, repeat: int = 3) -> tuple[float, float]:
    best, value = np.inf, None
    for r in range(repeat):
        start = time.perf_counter()
        value = function(studies, r + 1)
        best = min(best, time.perf_counter() - start)
    return studies / best, value


def grid_memory() -> dict:
    """Run in a fresh process: 200 scenarios x 10^6 replicates, peak RSS."""
    data = dict(DESIGN, scenarios={"treatment": {"from": 0.004, "to": 0.999, "step": 0.005}},
                simulation={"seed": 1, "replicates": 1_000_000})
    d = design(data)
    compute(design(), "monte-carlo", MonteCarloSettings(replicates=1000))  # warm-up
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    start = time.perf_counter()
    oc = compute(d, "monte-carlo").oc
    seconds = time.perf_counter() - start
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return {"scenarios": len(oc), "replicates": int(oc["replicates"].iloc[0]),
            "seconds": seconds, "rss_before_mb": before / 1024, "rss_peak_mb": peak / 1024}


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--memory", action="store_true", help="also run the 200 x 10^6 grid")
    parser.add_argument("--grid-child", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.grid_child:
        print(json.dumps(grid_memory()))
        return

    table_kernel(10_000, 0)
    general_kernel(1_000, 0)
    engine(10_000, 0)  # compile / load every kernel first
    rows = {
        "(a) naive loop, scipy.stats": rate(naive, 3_000, repeat=1),
        "(b) vectorised numpy/scipy": rate(vectorised, 2_000_000),
        "binomial draws alone (numpy)": rate(binomial_draws, 5_000_000),
        "octrial table kernel": rate(table_kernel, 20_000_000),
        "octrial engine, end to end": rate(engine, 20_000_000),
        "octrial general kernel": rate(general_kernel, 500_000, repeat=1),
    }
    kernel = rows["octrial table kernel"][0]
    print(f"{'implementation':34s} {'studies/s':>14s} {'kernel is x faster':>18s} "
          f"{'P(success)':>11s}")
    for label, (speed, value) in rows.items():
        value_text = "" if label.startswith("binomial") else f"{value:.4f}"
        print(f"{label:34s} {speed:14,.0f} {kernel / speed:18.1f} {value_text:>11s}")
    print(f"\nexact P(success): {compute(design()).oc['prob_success'].iloc[0]:.4f}")

    if args.memory:
        out = subprocess.run([sys.executable, __file__, "--grid-child"], check=True,
                             capture_output=True, text=True).stdout
        m = json.loads(out)
        words_gb = m["scenarios"] * m["replicates"] * len(LOOKS) * 8 / 1e9
        print(f"\ngrid of {m['scenarios']} scenarios x {m['replicates']:,} replicates: "
              f"{m['seconds']:.1f} s on one core; peak RSS {m['rss_peak_mb']:.0f} MB "
              f"({m['rss_before_mb']:.0f} MB before the grid); unbatched random words "
              f"alone would need {words_gb:.1f} GB")


if __name__ == "__main__":
    main()
