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
studies only.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from octrial.design.model import Design
from octrial.simulation import GENERAL_KERNELS
from octrial.simulation.base import Tally

ASSURANCE_STREAM = 2**32 - 1
BATCH_SIZE = 50_000


def _normal_draws(design: Design, rng: np.random.Generator, replicates: int) -> Any:
    from octrial.simulation.normal import design_prior_draws

    return design_prior_draws(design, rng, replicates)


PRIOR_DRAWS: dict[str, Callable[..., tuple[np.ndarray, np.ndarray]]] = {
    "normal": _normal_draws,
}
"""Per family: ``(design, rng, replicates) -> (mean, sd)`` true values per study and arm,
for simulators whose ``draw(rng, replicates, mean, sd)`` accepts per-study truths."""


def prior_simulation_unsupported(design: Design) -> str | None:
    """Why assurance cannot be simulated for ``design``, or ``None``."""
    name = design.family.name
    if name not in PRIOR_DRAWS:
        return f"no simulation from the design prior for {name} endpoints"
    from octrial.simulation import general_unsupported

    return general_unsupported(design)


def simulate_under_design_prior(design: Design, replicates: int, seed: int,
                                batch_size: int = BATCH_SIZE) -> Tally:
    """``replicates`` studies of ``design``, each at true values drawn from its design
    priors (see module docstring); no bias or coverage sums (there is no single truth)."""
    draws = PRIOR_DRAWS[design.family.name]
    placeholder = tuple(0.0 for _ in design.arms)
    simulator: Any = GENERAL_KERNELS[design.family.name](
        design, placeholder, design.simulation.interval_level)
    tally: Tally | None = None
    done = batch = 0
    while done < replicates:
        size = min(batch_size, replicates - done)
        sequence = np.random.SeedSequence(seed, spawn_key=(ASSURANCE_STREAM, batch))
        rng = np.random.Generator(np.random.PCG64(sequence))
        mean, sd = draws(design, rng, size)
        part = simulator.run(simulator.draw(rng, size, mean, sd), size, False)
        tally = part if tally is None else tally + part
        done += size
        batch += 1
    assert tally is not None
    return tally
