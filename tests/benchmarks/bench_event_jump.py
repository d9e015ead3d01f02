"""Benchmark: the event-level (jump) simulator against the subject-level kernel, per core.

Run:  python tests/benchmarks/bench_event_jump.py          (about a minute)
      python tests/benchmarks/bench_event_jump.py --quick  (fewer studies)

The design is issue 15's benchmark, the one of bench_event_driven.py (two arms 1:1,
control median 12 months, HR 0.75, Poisson enrolment 30 per month up to 450, dropout
0.005 per month, looks at 100/200/300 events, efficacy 0.999/0.99/0.975, futility
0.2/0.5). Compared in one run, all on one core:

* the event-level kernel (:class:`octrial.simulation.event_jump.EventJumpSimulator`:
  one transition at a time, about 450 entries and up to 300 events and the losses);
* the subject-level kernel (:class:`octrial.simulation.event_driven.
  PatientLevelSimulator`: every subject's three exponentials);
* the vectorised numpy implementation and the plain Python loop
  (tests/event_driven_reference.py);
* the event-level kernel with even entry (entries planned: no random number each), and
  with one look at 300 events (no early stops) for the cost per transition.

Printed: studies per second, how many times the event-level kernel's rate each is, and
the power (they agree within Monte Carlo error). Wall-clock times are only reported,
never asserted. Issue 15 asked for 10^6 studies per second per core; docs/methods.md
("Event-level simulation") says what the event-level kernel reaches and what limits it.
"""

from __future__ import annotations

import argparse
import dataclasses
import math
import os
import sys

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", ".."))

from octrial.conduct.model import Accrual
from octrial.simulation.event_driven import PatientLevelSimulator
from octrial.simulation.event_jump import EventJumpSimulator
from tests.benchmarks.bench_event_driven import (
    DROPOUT,
    EFFICACY,
    HAZARDS,
    PRIOR,
    RATE,
    TARGETS,
    M,
    setup,
    timed,
)
from tests.event_driven_reference import loop_studies, numpy_studies


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    args = parser.parse_args()
    scale = 0.2 if args.quick else 1.0
    variants = {
        "event-level kernel": setup(),
        "  even entry": dataclasses.replace(setup(), accrual=Accrual(rates=(RATE,),
                                                                     arrivals="even")),
        "  one look at 300 events": dataclasses.replace(
            setup(), targets=(float(TARGETS[-1]),), efficacy=(EFFICACY[-1],),
            futility=(None,)),
    }
    jumps = {name: EventJumpSimulator(s) for name, s in variants.items()}
    subject = PatientLevelSimulator(setup())
    for sim in (*jumps.values(), subject):
        sim.simulate(np.random.default_rng(0), 10)  # compile (cached afterwards)
    common = (M, RATE, True, HAZARDS, DROPOUT, TARGETS, (PRIOR[0],) * 2, (PRIOR[1],) * 2,
              1.0, EFFICACY, (0.2, 0.5, math.nan))

    def kernel(sim):
        return lambda n: sim.simulate(np.random.default_rng(1), n).efficacy

    def vectorised(n: int) -> np.ndarray:
        rng = np.random.default_rng(2)
        total = np.zeros(len(TARGETS), dtype=np.int64)
        for start in range(0, n, 1000):
            total += numpy_studies(rng, min(1000, n - start), *common)[0]
        return total

    def loop(n: int) -> np.ndarray:
        return loop_studies(np.random.default_rng(3), n, *common)[0]

    rows = [(name, *timed(kernel(sim), int(200_000 * scale)))
            for name, sim in jumps.items()]
    rows += [("subject-level kernel", *timed(kernel(subject), int(50_000 * scale))),
             ("numpy vectorised", *timed(vectorised, int(10_000 * scale))),
             ("plain Python loop", *timed(loop, int(200 * scale)))]
    ours = rows[0][1]
    print(f"two arms, {len(TARGETS)} looks at {TARGETS} events, {M} subjects, Poisson "
          f"enrolment {RATE:g}/month, dropout {DROPOUT:g}/month, HR 0.75; one core")
    print(f"{'implementation':32s} {'studies/s':>12s} {'event-level is x':>17s} "
          f"{'power':>7s}")
    for name, rate, power in rows:
        print(f"{name:32s} {rate:12,.0f} {ours / rate:17.2f} {power:7.3f}")


if __name__ == "__main__":
    main()
