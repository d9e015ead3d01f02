"""What a scenario of the several-arm engine adds up, for either study loop.

Both loops (:func:`octrial.multiarm.engine.fixed_sums`,
:func:`octrial.multiarm.adaptive.scenario_sums`) return these arrays (arms in design
order, control first), from which :func:`octrial.multiarm.engine.columns` makes a row:
``success`` (T), ``efficacy``, ``futility``, ``drop`` (T, K), ``n_arm`` (A), ``scalars``
([total n, total n squared, any success, any null arm succeeds, studies with a selected
arm, selected arm truly best, sum of selected estimate - truth]), ``end`` (2, K),
``share`` (K, A), ``running`` (K), ``look_n`` (K, A). A checkpoint holds them too.
"""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = ["scenario_identity", "tally_problems"]


def scenario_identity(design_sha256: str, seed: int, scenario: int, kernel: str,
                      batch: int | str = "all") -> dict[str, Any]:
    """What the checkpoint of one several-arm scenario (or calibration null point)
    records: the design, seed, scenario, batch and which study loop wrote it, in one
    layout for every loop (:class:`octrial.execution.checkpoints.Checkpointed`)."""
    return {"design_sha256": design_sha256, "seed": seed, "scenario": scenario,
            "batch": batch, "kernel": kernel}


def tally_problems(arrays: dict[str, np.ndarray], T: int, K: int, A: int,
                   replicates: int) -> list[str]:
    """Shapes and ranges of a scenario's tallies (module docstring) for T treatment
    arms, K looks and A arms in all; empty when they can be used."""
    shapes = {"success": (T,), "efficacy": (T, K), "futility": (T, K), "drop": (T, K),
              "n_arm": (A,), "scalars": (7,), "end": (2, K), "share": (K, A),
              "running": (K,), "look_n": (K, A)}
    wrong = []
    for key, shape in shapes.items():
        value = arrays.get(key)
        if value is None or np.shape(value) != shape:
            wrong.append(f"{key}: shape {shape} expected")
        elif not np.all(np.isfinite(value)):
            wrong.append(f"{key}: finite values expected")
        elif key != "scalars" and np.any(np.asarray(value) < 0):
            # (scalars hold the sum of selected-arm errors, which may be negative)
            wrong.append(f"{key}: values >= 0 expected")
    if not wrong:
        counts = [arrays[k] for k in ("success", "efficacy", "futility", "drop", "end",
                                      "running")]
        if any(np.any(c > replicates) for c in counts) or arrays["end"].sum() != replicates:
            wrong.append(f"counts beyond the {replicates} studies")
    return wrong
