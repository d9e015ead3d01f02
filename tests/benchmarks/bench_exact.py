"""Benchmark: exact binary operating characteristics against a naive scipy loop.

Run:  python tests/benchmarks/bench_exact.py

Two cases (issue targets in brackets):
* one arm, 3 looks (N = 60), 101 scenarios  [well under a second]
* two arms, 60 per arm, 2 looks, 25 scenarios  [a few seconds]

The naive reference is what a hand-written script does: for every scenario, walk the
looks and every outcome count in Python, calling scipy.stats for each posterior
probability and each binomial probability (for two arms it computes each posterior
probability once by scipy.integrate.quad and reuses it across scenarios, which favours
the reference). Both must give the same numbers; the script checks that before timing.
"""

from __future__ import annotations

import functools
import time

import numpy as np
from scipy import integrate, stats

from octrial.design.load import parse_design
from octrial.design.model import Source
from octrial.evaluation import compute

ONE_ARM = {
    "schema": 1, "name": "bench-one-arm",
    "endpoint": {"type": "binary", "better": "higher"},
    "hypothesis": {"benchmark": 0.2},
    "arms": {"treatment": {"prior": {"distribution": "beta", "a": 1, "b": 1}}},
    "looks": {"n": [20, 40, 60], "efficacy": [0.999, 0.995, 0.975], "futility": 0.05},
    "scenarios": {"treatment": {"from": 0.005, "to": 0.995, "step": 0.0099}},  # 101 values
}
TWO_ARM = {
    "schema": 1, "name": "bench-two-arm",
    "endpoint": {"type": "binary", "better": "higher"},
    "hypothesis": {"comparison": "difference", "margin": 0.0},
    "arms": {"treatment": {"prior": {"distribution": "beta", "a": 1, "b": 1}},
             "control": {"prior": {"distribution": "beta", "a": 1, "b": 1}}},
    "looks": {"n": [60, 120], "efficacy": [0.995, 0.975], "futility": 0.1},
    "scenarios": {"control": [0.1, 0.2, 0.3, 0.4, 0.5],
                  "effect": [0.0, 0.05, 0.1, 0.15, 0.2]},
}


def design(data):
    return parse_design(data, Source("bench.toml", "", ""))


def naive_one_arm(d) -> np.ndarray:
    looks, eff, fut = d.looks.n, d.looks.efficacy, d.looks.futility
    p0 = d.hypothesis.benchmark
    out = []
    for (p,) in d.scenarios.values:
        dist = {0: 1.0}
        success, previous = 0.0, 0
        for k, n in enumerate(looks):
            new: dict[int, float] = {}
            m = n - previous
            for x, mass in dist.items():
                for y in range(m + 1):
                    new[x + y] = new.get(x + y, 0.0) + mass * stats.binom.pmf(y, m, p)
            dist = {}
            for x, mass in new.items():
                b = stats.beta.sf(p0, 1 + x, 1 + n - x)
                if eff[k] is not None and b >= eff[k] - 1e-12:
                    success += mass
                elif k < len(looks) - 1 and not (fut[k] is not None and b < fut[k] - 1e-12):
                    dist[x] = mass
            previous = n
        out.append(success)
    return np.array(out)


def naive_two_arm(d) -> np.ndarray:
    @functools.cache
    def benefit(x_t: int, x_c: int, n: int) -> float:
        f = lambda u: stats.beta.pdf(u, 1 + x_c, 1 + n - x_c) * stats.beta.sf(  # noqa: E731
            u, 1 + x_t, 1 + n - x_t)
        return integrate.quad(f, 0, 1, epsabs=1e-13, limit=200)[0]

    per_arm = [n // 2 for n in d.looks.n]
    eff, fut = d.looks.efficacy, d.looks.futility
    out = []
    for p_t, p_c in d.scenarios.values:
        dist = {(0, 0): 1.0}
        success, previous = 0.0, 0
        for k, n in enumerate(per_arm):
            m = n - previous
            pt, pc = stats.binom.pmf(np.arange(m + 1), m, p_t), stats.binom.pmf(
                np.arange(m + 1), m, p_c)
            new: dict[tuple[int, int], float] = {}
            for (x_t, x_c), mass in dist.items():
                for y_t in range(m + 1):
                    for y_c in range(m + 1):
                        key = (x_t + y_t, x_c + y_c)
                        new[key] = new.get(key, 0.0) + mass * pt[y_t] * pc[y_c]
            dist = {}
            for (x_t, x_c), mass in new.items():
                b = benefit(x_t, x_c, n)
                if b >= eff[k] - 1e-12:
                    success += mass
                elif k < len(per_arm) - 1 and not (fut[k] is not None and b < fut[k] - 1e-12):
                    dist[(x_t, x_c)] = mass
            previous = n
        out.append(success)
    return np.array(out)


def timed(fn, *args, repeat: int = 1):
    best, value = np.inf, None
    for _ in range(repeat):
        start = time.perf_counter()
        value = fn(*args)
        best = min(best, time.perf_counter() - start)
    return best, value


def main() -> None:
    rows = []
    for label, data, naive in (("one arm, 3 looks, N=60, 101 scenarios", ONE_ARM, naive_one_arm),
                               ("two arms, 60/arm, 2 looks, 25 scenarios", TWO_ARM,
                                naive_two_arm)):
        d = design(data)
        compute(d)  # warm-up (imports, caches)
        t_fast, ev = timed(compute, d, repeat=3)
        t_naive, reference = timed(naive, d)
        gap = float(np.max(np.abs(ev.oc["prob_success"].to_numpy() - reference)))
        rows.append((label, t_fast, t_naive, t_naive / t_fast, gap))
    print(f"{'case':44s} {'octrial s':>10s} {'naive s':>10s} {'ratio':>8s} {'max |diff|':>11s}")
    for label, fast, slow, ratio, gap in rows:
        print(f"{label:44s} {fast:10.4f} {slow:10.3f} {ratio:8.0f} {gap:11.2e}")


if __name__ == "__main__":
    main()
