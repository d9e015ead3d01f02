"""Benchmark: sizing a 3-look single-arm binary design over N = 10..150 with the final
threshold calibrated at every N.

Run:  python tests/benchmarks/bench_calibrate.py

Issue target: the whole calibration (141 values of N, each with its final threshold
calibrated to alpha over a 50-point null grid, power at the alternative) in under 10 s on
one core. The script pins numerical libraries to one thread.

Two designs: posterior futility only (the final threshold is swept in one pass per N) and
with predictive futility (the interim rule depends on the final threshold, so each N is a
bisection over the candidate thresholds).

The naive reference is what a hand-written script does with the exact engine: for each N,
bisect the final threshold as a continuous number (to 1e-12), and at every step rebuild the
decision tables from scratch and run the exact engine at every null point and the
alternative. It is timed on every tenth N (15 values); its cost per N is compared with
octrial's cost per N within the full sizing run (and with 15 separate octrial calibrations,
which pay the fixed cost of a calibration each time). Both must choose the same count
bound and type I error at each of the 15 values of N.
"""

from __future__ import annotations

import os

for _name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import time  # noqa: E402

import numpy as np  # noqa: E402

from octrial.calibration import calibrate  # noqa: E402
from octrial.design.load import parse_design  # noqa: E402
from octrial.design.model import Source  # noqa: E402
from octrial.design.write import dumps  # noqa: E402
from octrial.engines.exact_lattice import stopping_probabilities  # noqa: E402
from octrial.rules.boundaries import boundary_table  # noqa: E402
from octrial.rules.lattice import build_rule  # noqa: E402

ALPHA, POWER, ALTERNATIVE, NULL_POINTS = 0.05, 0.8, 0.4, 50
SUBSET = list(range(10, 151, 10))


def data(predictive: bool, n: list[int], final: float = 0.95) -> dict:
    looks = {"n": n, "efficacy": ["none", 0.995, final], "futility": 0.05}
    if predictive:
        looks["futility_predictive"] = 0.1
    return {
        "schema": 1, "name": "bench-calibrate",
        "endpoint": {"type": "binary", "better": "higher"},
        "hypothesis": {"benchmark": 0.2},
        "arms": {"treatment": {"prior": {"distribution": "beta", "a": 0.4, "b": 1.6}}},
        "looks": looks,
        "scenarios": {"treatment": [0.2, 0.4]},
    }


def design(predictive: bool, n: list[int], final: float = 0.95):
    d = data(predictive, n, final)
    return parse_design(d, Source("bench.toml", "", dumps(d)))


def looks_for(n_max: int) -> list[int]:
    """Looks at 1/3 and 2/3 of N, rounded half up (octrial's rule for --looks fractions)."""
    return [int(np.floor(t * n_max + 0.5)) for t in (1 / 3, 2 / 3)] + [n_max]


def octrial_sizing(predictive: bool, n_range: str):
    return calibrate(design(predictive, [20, 40, 60]), alpha=ALPHA, power=POWER,
                     alternative=[ALTERNATIVE], vary="n,final", n_range=n_range,
                     null_points=NULL_POINTS)


def octrial_at(predictive: bool, truths: np.ndarray) -> dict[int, tuple[int, float]]:
    """octrial's calibrated final bound and type I error at each N of the subset."""
    out = {}
    for n_max in SUBSET:
        result = calibrate(design(predictive, looks_for(n_max)), alpha=ALPHA,
                           null_points=NULL_POINTS)
        table = boundary_table(result.design, build_rule(result.design))
        out[n_max] = (int(table["efficacy_bound"].iloc[-1]), result.summary["type1_error"])
    return out


def naive_at(predictive: bool, truths: np.ndarray) -> dict[int, tuple[int, float]]:
    """Continuous bisection per N; each step rebuilds the tables and runs the engine at
    every null point."""
    out = {}
    for n_max in SUBSET:
        n = looks_for(n_max)

        def worst(c: float, n: list[int] = n) -> tuple[float, object, object]:
            d = design(predictive, n, c)
            rule = build_rule(d)
            value = max(stopping_probabilities(d, rule, (p,))[0].sum() for p in truths)
            return value, d, rule

        lo, hi = 0.0, 1.0
        while hi - lo > 1e-12:
            mid = 0.5 * (lo + hi)
            if worst(mid)[0] <= ALPHA:
                hi = mid
            else:
                lo = mid
        value, d, rule = worst(hi)
        out[n_max] = (int(boundary_table(d, rule)["efficacy_bound"].iloc[-1]), value)
    return out


def main() -> None:
    print("Per N: seconds per sample size (octrial: within one 141-size sizing run; naive: "
          "its bisection).")
    print(f"{'case':44s} {'octrial s':>9s} {'per N ms':>9s} {'naive s':>8s} "
          f"{'per N ms':>9s} {'ratio':>6s} {'agree':>6s}")
    for predictive in (False, True):
        label = "predictive futility" if predictive else "posterior futility"
        calibrate(design(predictive, [20, 40, 60]), alpha=ALPHA)  # warm-up (imports)
        start = time.perf_counter()
        full = octrial_sizing(predictive, "10:150")
        elapsed = time.perf_counter() - start
        sizing = full.summary["sizing"]
        truths = full.truths.values[: full.truths.nulls, 0]
        start = time.perf_counter()
        fast = octrial_at(predictive, truths)
        t_fast = time.perf_counter() - start
        start = time.perf_counter()
        naive = naive_at(predictive, truths)
        t_naive = time.perf_counter() - start
        agree = all(fast[n][0] == naive[n][0] and abs(fast[n][1] - naive[n][1]) < 1e-13
                    for n in SUBSET)
        per_fast, per_naive = elapsed / 141, t_naive / len(SUBSET)
        print(f"{'N = 10..150, ' + label:44s} {elapsed:9.2f} {1e3 * per_fast:9.1f} "
              f"{t_naive:8.1f} {1e3 * per_naive:9.0f} {per_naive / per_fast:6.0f} "
              f"{'yes' if agree else 'NO':>6s}")
        print(f"{'  (15 separate calibrations, N = 10..150 by 10)':44s} {t_fast:9.2f} "
              f"{1e3 * t_fast / len(SUBSET):9.1f} {'':>8s} {'':>9s} "
              f"{t_naive / t_fast:6.0f}")
        print(f"{'':44s} chosen N = {sizing['chosen_n']} (smallest passing "
              f"{sizing['smallest_passing']}), {full.summary['evaluations']} evaluations")


if __name__ == "__main__":
    main()
