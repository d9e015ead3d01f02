"""Benchmark: calibrating a several-arm final threshold by simulation, recorded final
probabilities (one simulation per null point) against the naive search (the calibrated
design simulated again at every threshold a bisection examines).

Run:  PYTHONPATH=. python tests/benchmarks/bench_calibrate_arms_simulated.py

Both use the same seed and the same candidates (the recorded final probabilities), so
they must choose the same threshold with the same error (checked before the ratio is
printed): the naive search's errors come from octrial.multiarm.engine.simulate_design's
own tallies. Cases: the adaptive demo (designs/dose-ranging.toml) and a
fixed-allocation design with Pr(best) dropping and selection, 3 null points each.
"""

from __future__ import annotations

import time

import numpy as np

from octrial.calibration.arms import null_line
from octrial.calibration.arms_simulated import calibrate_simulated
from octrial.multiarm.engine import simulate_design
from tests.test_arms_exact import multiarm
from tests.test_calibrate_arms_simulated import (
    COUPLED,
    DEMO,
    FINAL,
    demo_text,
    with_final_and_nulls,
)

ALPHA = 0.05
SEED = 7
NULL_RANGE = (0.15, 0.45)


def naive(text: str, old: str, replicates: int, candidates: np.ndarray,
          rows: np.ndarray, names: tuple[str, ...]) -> tuple[float, float, int]:
    """Bisection over ``candidates``, each threshold's design simulated at every null
    point; returns the threshold, its error and the number of thresholds simulated."""
    cache: dict[int, float] = {}

    def error(i: int) -> float:
        if i not in cache:
            design = multiarm(with_final_and_nulls(text, old, float(candidates[i]), names,
                                                   rows))
            cache[i] = float(simulate_design(design, replicates, SEED).fwer.max())
        return cache[i]

    lo, hi = -1, candidates.size - 1
    assert error(hi) <= ALPHA
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if error(mid) <= ALPHA:
            hi = mid
        else:
            lo = mid
    return float(candidates[hi]), error(hi), len(cache)


def case(label: str, text: str, old: str, replicates: int) -> None:
    design = multiarm(text)
    # warm-up (numba's cached code, the Pr(best) tables): both searches then start warm
    calibrate_simulated(design, ALPHA, replicates=100, seed=SEED, null_range=NULL_RANGE,
                        null_points=2)
    simulate_design(design, 100, SEED)
    start = time.perf_counter()
    found = calibrate_simulated(design, ALPHA, replicates=replicates, seed=SEED,
                                null_range=NULL_RANGE, null_points=3, floor=0.5)
    t_recorded = time.perf_counter() - start
    rows = null_line(design, NULL_RANGE, 3)
    # the steps of the error curve (the log): the smallest passing step is the choice
    candidates = np.unique(found.log.threshold.to_numpy())
    start = time.perf_counter()
    threshold, error, count = naive(text, old, replicates, candidates, rows,
                                    design.arm_names)
    t_naive = time.perf_counter() - start
    assert threshold == found.threshold and error == found.error, (threshold, error)
    print(f"{label}: {replicates} studies x 3 null points; recorded values "
          f"{t_recorded:.2f} s, naive bisection ({count} thresholds simulated) "
          f"{t_naive:.2f} s, ratio {t_naive / t_recorded:.1f}x; threshold "
          f"{found.threshold:.6g}, FWER {found.error:.4f} (SE {found.se:.4f})")


def main() -> None:
    case("adaptive demo", demo_text(), "efficacy = [0.9995, 0.9995, 0.999, 0.98]", 10_000)
    case("fixed, Pr(best) dropping and selection", COUPLED, FINAL, 20_000)


if __name__ == "__main__":
    print(f"demo file: {DEMO}")
    main()
