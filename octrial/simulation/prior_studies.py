"""Simulated studies whose true values are drawn from the design prior (assurance).

Assurance (O'Hagan, Stevens & Campbell 2005) averages the probability of success over
the design prior. Where no exact engine gives Pr(success | truth) to integrate (a normal
endpoint with unknown sd), it is simulated directly: every study first draws its own
true values from the design priors (for a normal-inverse-gamma design prior, both the
mean and the sd), then its data, then runs the analysis with the analysis priors. The
estimate is a proportion over independent studies, so its standard error is
sqrt(p (1 - p) / R), and that of the expected sample size sd(N) / sqrt(R).

Randomness: batch b uses ``SeedSequence(seed, spawn_key=(ASSURANCE_STREAM, b))``, a
stream no scenario uses (scenarios use (i, b) with i the scenario's index), in batches of
a fixed size added in order, so the result depends on the seed and the number of
studies only. The batches are independent tasks for :func:`octrial.execution.run_grid`
(worker processes, checkpoints, progress), which never changes a number.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from octrial.design.model import Design
from octrial.execution import Execution, run_grid
from octrial.execution.checkpoints import CheckpointStore
from octrial.simulation.base import Tally, tally_problems

ASSURANCE_STREAM = 2**32 - 1
BATCH_SIZE = 50_000


def prior_simulation_unsupported(design: Design) -> str | None:
    """Why assurance cannot be simulated for ``design``, or ``None``."""
    name = design.family.name
    if not design.family.draws_design_prior:
        return f"no simulation from the design prior for {name} endpoints"
    if design.conduct is not None and not design.family.event_driven:
        # these studies run without calendar time (no lag, dropout or look timing)
        return ("conduct: studies under the design prior are not simulated in calendar "
                "time, so a design with [conduct] has no simulated assurance")
    return design.family.simulation_unsupported(design)


@dataclass(frozen=True, eq=False)
class PriorBatch:
    """One batch of studies under the design prior (picklable, for a worker)."""

    design: Design
    seed: int
    index: int
    size: int

    def identity(self) -> dict[str, Any]:
        """What this batch's checkpoint records."""
        return {"design_sha256": self.design.source.sha256, "seed": self.seed,
                "scenario": "design prior", "batch": self.index, "kernel": "general"}

    def problems(self, arrays: dict[str, np.ndarray]) -> list[str]:
        """What is wrong with ``arrays`` as this batch's saved tally."""
        return tally_problems(arrays, self.design.looks.count, self.size)


def draw_prior_batch(design: Design, seed: int, index: int, size: int) -> tuple[Any, ...]:
    """Batch ``index`` of studies under the design prior: the kernel, every study's true
    means and its data (the stream of the module docstring)."""
    placeholder = tuple(0.0 for _ in design.arms)
    simulator: Any = design.family.simulator(design, placeholder,
                                             design.simulation.interval_level)
    sequence = np.random.SeedSequence(seed, spawn_key=(ASSURANCE_STREAM, index))
    rng = np.random.Generator(np.random.PCG64(sequence))
    mean, sd = design.family.design_prior_draws(design, rng, size)
    return simulator, mean, simulator.draw(rng, size, mean, sd)


def simulate_prior_batch(task: PriorBatch) -> dict[str, np.ndarray]:
    """The tally of one batch, as arrays (runs in a worker)."""
    simulator, _, data = draw_prior_batch(task.design, task.seed, task.index, task.size)
    return simulator.run(data, task.size, False).to_arrays()


def simulate_under_design_prior(
    design: Design, replicates: int, seed: int, batch_size: int = BATCH_SIZE,
    execution: Execution | None = None, store: CheckpointStore | None = None,
    target_se: float | None = None,
) -> Tally:
    """Studies of ``design``, each at true values drawn from its design priors (see
    module docstring); no bias or coverage sums (there is no single truth).

    Without ``target_se``: ``replicates`` studies. With it, ``replicates`` is the cap, and
    the result is the first whole number of batches after which every probability's
    standard error (with p taken as (x + 1) / (R + 2), as for scenarios) is at most
    ``target_se``, as if batches were added one at a time; to keep the workers busy they
    run in rounds, each asking for the studies p (1 - p) / target_se^2 that the estimate
    so far needs. So the result depends on the seed and the target only, whatever the
    workers. ``execution`` says where the batches run; ``store`` keeps finished batches
    for a resumed run (keyed by the caller on the design, seed, size or target, and batch
    size).
    """
    from octrial.engines.monte_carlo import adjusted_se

    cap = -(-replicates // batch_size)
    batches = cap if target_se is None else 1
    total: Tally | None = None
    checked = 0
    while True:
        sizes = [min(batch_size, replicates - b * batch_size) for b in range(batches)]
        tasks = [PriorBatch(design, seed, b, size) for b, size in enumerate(sizes)]
        results, _ = run_grid(simulate_prior_batch, tasks, execution or Execution(), store,
                              unit="assurance batches")
        for result in results[checked:]:
            part = Tally.from_arrays(result)
            total = part if total is None else total + part
            checked += 1
            if target_se is not None and adjusted_se(total) <= target_se:
                return total
        assert total is not None  # at least one batch ran
        if checked >= cap:
            return total
        assert target_se is not None  # without a target every batch ran above
        needed = total.replicates * (adjusted_se(total) / target_se) ** 2
        batches = min(cap, max(batches + 1, -(-math.ceil(needed) // batch_size)))
