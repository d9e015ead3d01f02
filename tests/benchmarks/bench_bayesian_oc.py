"""Benchmark: Bayesian operating characteristics under the design prior.

Run:  python tests/benchmarks/bench_bayesian_oc.py

1. One arm, binary (N = 60 in three looks, Beta(3, 7) design prior): octrial's record
   (tanh-sinh over the quantiles, split at the null boundary, batched lattice programme)
   against a naive reference: scipy.integrate.quad over [0, p0] and [p0, 1] calling the
   per-scenario exact engine at every point. Both must agree (difference printed) before
   the time ratio counts.
2. Two arms, binary (the demo borrowing design with a design prior on each arm): wall
   time and true values of the record, and of the assurance alone for comparison.
3. Normal, unknown sd (the demo mean-change design): the simulated record (the same
   studies as the assurance) against the simulated assurance alone.
"""

from __future__ import annotations

import time

import numpy as np
from scipy import integrate, stats

from octrial.bayesian_oc import bayesian_record
from octrial.design.load import load_design, parse_design
from octrial.design.model import Source
from octrial.design.write import dumps
from octrial.design_prior import assurance_record
from octrial.engines.exact_lattice import ExactLatticeEngine
from tests.helpers import DESIGNS, ONE_ARM, changed


def timed(f):
    tic = time.perf_counter()
    out = f()
    return out, time.perf_counter() - tic


def one_arm() -> None:
    data = changed(ONE_ARM, looks__n=[20, 40, 60], hypothesis__benchmark=0.3,
                   arms__treatment__design_prior={"distribution": "beta", "a": 3, "b": 7})
    design = parse_design(data, Source("bench.toml", "", dumps(data)))
    rec, t_octrial = timed(lambda: bayesian_record(design, assurance_record(design)))
    dens = stats.beta(3, 7).pdf

    def success(p: float) -> float:
        return float(ExactLatticeEngine.run(design, np.array([[p]]), estimate=False)
                     .efficacy.sum())

    def naive() -> tuple[float, float]:
        return tuple(integrate.quad(lambda p: success(p) * dens(p), lo, hi, epsabs=1e-12,
                                    limit=200)[0] for lo, hi in ((0, 0.3), (0.3, 1)))

    (ns, as_), t_naive = timed(naive)
    gap = max(abs(ns - rec["prob_null_and_success"]),
              abs(as_ - rec["prob_alternative_and_success"]))
    print(f"one arm: octrial {t_octrial:.3f} s, naive quad {t_naive:.2f} s "
          f"({t_naive / t_octrial:.0f} x); largest difference {gap:.1e}")


def two_arms() -> None:
    text = (DESIGNS / "borrowed-control-response.toml").read_text()
    text = text.replace("allocation = 2\n", "allocation = 2\ndesign_prior = { distribution "
                        "= \"beta\", a = 12, b = 18 }\n", 1)
    text = text.replace("allocation = 1\n", "allocation = 1\ndesign_prior = { distribution "
                        "= \"beta\", a = 9, b = 21 }\n", 1)
    import tomllib

    data = tomllib.loads(text)
    design = parse_design(data, Source("bench.toml", "", text))
    found, t_assurance = timed(lambda: assurance_record(design))
    rec, t_record = timed(lambda: bayesian_record(design, found))
    print(f"two arms (borrowing demo, design priors on both arms): assurance "
          f"{t_assurance:.2f} s, Bayesian OCs {t_record:.1f} s ({rec['nodes']}); "
          f"quadrature total against exact {rec['quadrature_total_gap']:.1e}")


def simulated() -> None:
    design = load_design(DESIGNS / "single-arm-mean-change.toml")
    found, t_assurance = timed(lambda: assurance_record(design))
    rec, t_record = timed(lambda: bayesian_record(design, found))
    print(f"unknown sd (mean-change demo, {found['replicates']} studies): assurance "
          f"{t_assurance:.2f} s, Bayesian OCs {t_record:.2f} s (the same studies again, "
          f"tallied by region); Pr(success) equal: "
          f"{rec['prob_success'] == found['probability']}")


if __name__ == "__main__":
    one_arm()
    two_arms()
    simulated()
