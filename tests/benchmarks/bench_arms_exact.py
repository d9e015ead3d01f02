"""Benchmark: the exact several-arm engine against enumerating every data path.

Run:  PYTHONPATH=. python tests/benchmarks/bench_arms_exact.py

Cases:
* two arms and a shared control, 2 looks of 3 per arm: the walk over control paths
  against the naive reference (every data path enumerated with scipy's binomial pmf and
  the rule applied arm by arm, tests/test_arms_exact.py::_brute_force); both must agree
  to 1e-13 before timing;
* three arms and a shared control, 3 looks of 8 per arm, and 3 looks of 16 per arm: the
  engine alone (the naive enumeration would visit 9^12 and 17^12 paths), with the
  number of control paths it follows.
"""

from __future__ import annotations

import time

import numpy as np

from octrial.engines.arms_exact import run_arms
from tests.helpers import TWO_ARM, build
from tests.test_arms_exact import _brute_force


def timed(fn, repeat: int = 3) -> tuple[float, object]:
    best, out = np.inf, None
    for _ in range(repeat):
        start = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - start)
    return best, out


def main() -> None:
    small = [build(TWO_ARM, looks__n=[6, 12], looks__efficacy=[0.9, 0.8],
                   looks__futility=0.3)] * 2
    truth = np.array([0.35, 0.5, 0.35])
    t_engine, found = timed(lambda: run_arms(small, truth[None, :]))
    t_naive, (success, fwer, _) = timed(lambda: _brute_force(small, truth), repeat=1)
    assert np.allclose(found.success[0], success, atol=1e-13)
    assert abs(found.family_wise[0] - fwer) < 1e-13
    print(f"2 arms + control, 2 looks of 3: engine {t_engine * 1e3:.1f} ms, "
          f"enumeration {t_naive * 1e3:.0f} ms, ratio {t_naive / t_engine:.0f}x")
    for per_look in (8, 16):
        n = [2 * per_look * k for k in (1, 2, 3)]
        pairs = [build(TWO_ARM, looks__n=n, looks__efficacy=[0.995, 0.99, 0.975],
                       looks__futility=0.1)] * 3
        truths = np.array([[0.3, 0.3, 0.3, 0.3], [0.3, 0.45, 0.6, 0.3]])
        t, _ = timed(lambda pairs=pairs, truths=truths: run_arms(pairs, truths), repeat=2)
        print(f"3 arms + control, 3 looks of {per_look}: {t / len(truths) * 1e3:.0f} ms per "
              f"scenario ({(per_look + 1) ** 3} control paths)")


if __name__ == "__main__":
    main()
