"""The Bayesian operating characteristics by simulation: the assurance's studies tallied by
the region of each study's drawn truth (see :mod:`octrial.bayesian_oc`)."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from octrial._version import __version__
from octrial.bayesian_oc.metrics import metrics
from octrial.bayesian_oc.nodes import effect_of
from octrial.design.model import Design
from octrial.endpoints.base import NULL_TOLERANCE
from octrial.execution import Execution, run_grid

CLASSES = ("null", "alternative", "relevant")


def simulate_split_batch(task: Any) -> dict[str, np.ndarray]:
    """One batch of studies under the design prior (the assurance's draws: same stream),
    tallied by the region of each study's truth (runs in a worker).

    Returns counts ``[studies, successes]`` for the null, the alternative and the
    relevant region (a subset of the alternative).
    """
    from octrial.simulation.prior_studies import draw_prior_batch

    design, delta = task.design, task.delta
    simulator, mean, data = draw_prior_batch(design, task.seed, task.index, task.size)
    effect = effect_of(design, mean)
    null = effect <= NULL_TOLERANCE  # as the scenarios' is_null
    masks = {"null": null, "alternative": ~null, "relevant": ~null & (effect >= delta)}
    out = {}
    for name, mask in masks.items():
        m = int(mask.sum())
        won = 0
        if m:
            part = tuple(None if a is None else a[mask] for a in data)
            won = int(simulator.run(part, m, False).efficacy.sum())
        out[name] = np.array([m, won], dtype=np.int64)
    return out


@dataclass(frozen=True, eq=False)
class SplitBatch:
    """One batch of :func:`simulate_split_batch` (picklable)."""

    design: Design
    seed: int
    index: int
    size: int
    delta: float

    def identity(self) -> dict[str, Any]:
        """What this batch's checkpoint records."""
        return {"design_sha256": self.design.source.sha256, "seed": self.seed,
                "scenario": "design prior by region", "batch": self.index,
                "kernel": "general", "delta": self.delta}

    def problems(self, arrays: dict[str, np.ndarray]) -> list[str]:
        """What is wrong with ``arrays`` as this batch's saved counts: each region's
        ``[studies, successes]`` whole, with 0 <= successes <= studies; null and
        alternative studies adding up to the batch; the relevant region inside the
        alternative."""
        found = []
        for name in CLASSES:
            value = arrays.get(name)
            if value is None or np.shape(value) != (2,) or not np.all(np.isfinite(value)):
                found.append(f"{name}: expected two counts")
                continue
            m, won = (float(v) for v in value)
            if m != int(m) or won != int(won) or not 0 <= won <= m <= self.size:
                found.append(f"{name}: counts {m:g}, {won:g} out of range")
        if not found:
            null, alt, rel = (arrays[n] for n in ("null", "alternative", "relevant"))
            if null[0] + alt[0] != self.size or rel[0] > alt[0] or rel[1] > alt[1]:
                found.append("region counts do not add up to the batch")
        return found


def simulated(design: Design, replicates: int, seed: int, delta: float = 0.0,
              execution: Execution | None = None) -> dict[str, Any]:
    """The metrics and their standard errors by simulation (see module docstring)."""
    from octrial.simulation.prior_studies import BATCH_SIZE

    batches = -(-replicates // BATCH_SIZE)
    tasks = [SplitBatch(design, seed, b, min(BATCH_SIZE, replicates - b * BATCH_SIZE), delta)
             for b in range(batches)]
    store = None
    if execution is not None:
        store = execution.store({
            "design_sha256": design.source.sha256, "design": repr(design),
            "bayesian_operating_characteristics": "simulation", "replicates": replicates,
            "seed": seed, "delta": delta, "batch_size": BATCH_SIZE, "octrial": __version__})
    results, _ = run_grid(simulate_split_batch, tasks, execution or Execution(), store,
                          unit="batches of Bayesian operating characteristics")
    counts: dict[str, Any] = {name: sum(r[name] for r in results) for name in CLASSES}
    r_total = replicates
    n_null, s_null = (int(v) for v in counts["null"])
    n_alt, s_alt = (int(v) for v in counts["alternative"])
    n_rel, s_rel = (int(v) for v in counts["relevant"])
    won = s_null + s_alt
    values = {k: float(v) for k, v in metrics(
        s_null / r_total, s_alt / r_total, s_rel / r_total, n_null / r_total,
        n_alt / r_total, n_rel / r_total, won / r_total).items()}

    def se(p: float, m: int) -> float:
        return math.sqrt(p * (1 - p) / m) if m > 0 and math.isfinite(p) else math.nan

    ses = {
        "prob_success": se(values["prob_success"], r_total),
        "average_type1_error": se(values["average_type1_error"], n_null),
        "bayesian_power": se(values["bayesian_power"], n_rel),
        "prob_null_and_success": se(values["prob_null_and_success"], r_total),
        "prob_alternative_and_failure": se(values["prob_alternative_and_failure"], r_total),
        "prob_null_given_success": se(values["prob_null_given_success"], won),
        "prob_alternative_given_failure": se(values["prob_alternative_given_failure"],
                                             r_total - won),
        "prior_prob_null": se(values["prior_prob_null"], r_total),
    }
    return {"values": values, "se": ses,
            "counts": {"studies": r_total, "null": n_null, "null_successes": s_null,
                       "alternative": n_alt, "alternative_successes": s_alt,
                       "relevant": n_rel, "relevant_successes": s_rel}}
