"""Operating characteristics of a several-arm design by simulation.

One seed in: scenario i's batch b of :data:`BATCH` studies uses the Monte Carlo
engine's generator (:func:`octrial.engines.monte_carlo.batch_generator`), so how the
work is split never changes a number, and a design with one treatment arm draws the
very words the two-arm engine draws. The table this returns has the study-level
columns of oc.csv and, per treatment arm ``<arm>``, columns named ``<arm>_<quantity>``
(docs/multi-arm.md):

- ``<arm>_is_null``: the arm's true value does not beat the control (benchmark) by the
  margin;
- ``<arm>_prob_success``, ``<arm>_prob_success_se``: the arm is declared a success (at an
  interim look or at the end);
- ``<arm>_expected_n``: expected subjects in the arm (``control_expected_n`` too);
- ``<arm>_look<k>_stop_efficacy``, ``<arm>_look<k>_stop_futility``,
  ``<arm>_look<k>_drop``: the arm leaves the study at look k by its own rule, or is
  dropped there for a low probability of being the best (or not being selected).

Study level: ``prob_success`` (at least one arm succeeds) and its SE, ``fwer`` and
``fwer_se`` (at least one null arm succeeds), ``prob_select_best`` (the selected arm,
the successful arm with the best posterior mean, is truly the best; ties in truth count
for every tied arm), ``selected_bias`` (mean of the selected arm's posterior mean minus
its true value, over studies with a selected arm; NaN when none),
``look<k>_stop_efficacy`` / ``look<k>_stop_futility`` (the study ends at look k with / without a
success), ``expected_n``, ``sd_n``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from octrial.engines.monte_carlo import batch_generator
from octrial.multiarm.kernel import simulate
from octrial.multiarm.model import MultiArmDesign
from octrial.multiarm.tables import MultiArmTables, build_tables
from octrial.simulation.draws import DrawTables

BATCH = 50_000
"""Studies per batch: each batch has its own seed, spawned from the scenario's."""

__all__ = ["BATCH", "arm_nulls", "simulate_design", "truly_best"]


def arm_nulls(design: MultiArmDesign, row: tuple[float, ...]) -> np.ndarray:
    """Per treatment arm, whether it is null in scenario ``row`` (by its own design's
    definition)."""
    family = design.family
    offset = 1 if design.shared_control else 0
    out = []
    for t, pair in enumerate(design.pairs):
        truth = (row[offset + t], row[0]) if design.shared_control else (row[offset + t],)
        out.append(bool(family.is_null(pair.hypothesis, truth)))
    return np.array(out, dtype=np.bool_)


def truly_best(design: MultiArmDesign, row: tuple[float, ...]) -> np.ndarray:
    """Per treatment arm, whether its true value is the best of the treatment arms."""
    offset = 1 if design.shared_control else 0
    values = np.array(row[offset:]) * (1 if design.hypothesis.better == "higher" else -1)
    return values == values.max()


def simulate_design(design: MultiArmDesign, replicates: int | None = None,
                    seed: int | None = None, tables: MultiArmTables | None = None,
                    ) -> pd.DataFrame:
    """Simulate every scenario of ``design``: one row per scenario (see module
    docstring for the columns)."""
    replicates = design.simulation.replicates if replicates is None else replicates
    seed = design.simulation.seed if seed is None else seed
    if seed is None:
        raise ValueError("several-arm simulation needs a seed (simulation.seed)")
    if design.allocation.adaptive:
        raise NotImplementedError("response-adaptive allocation is simulated by "
                                  "octrial.allocation, not yet through this engine")
    tables = build_tables(design) if tables is None else tables
    rows = [_scenario(design, tables, row, replicates, seed, i)
            for i, row in enumerate(design.scenarios.values)]
    for i, r in enumerate(rows):
        r["scenario"] = i + 1
    return pd.DataFrame(rows)


def _increment_pmfs(design: MultiArmDesign, truth: np.ndarray, increments: np.ndarray,
                    sizes: np.ndarray) -> list[np.ndarray]:
    """Per look and slot, the pmf of the arm's increment, sized as the two-arm table
    kernel sizes it (each arm through its own design: the treatment is arm 0 there, the
    control arm 1)."""
    family = design.family
    T = len(design.treatments)
    pmfs = []
    for k in range(increments.shape[0]):
        for a in range(increments.shape[1]):
            pair, j = (design.pairs[a], 0) if a < T else (design.pairs[0], 1)
            m = int(increments[k, a])
            size = min(family.lattice_size(pair, j, m), int(sizes[k, a]))
            pmfs.append(family.increment_pmf(pair, truth[a], m, size))
    return pmfs


def _scenario(design: MultiArmDesign, tables: MultiArmTables, row: tuple[float, ...],
              replicates: int, seed: int, index: int) -> dict[str, object]:
    T, K = tables.decision.shape[:2]
    A = tables.increments.shape[1]
    success = np.zeros(T, np.int64)
    eff = np.zeros((T, K), np.int64)
    fut = np.zeros((T, K), np.int64)
    drop = np.zeros((T, K), np.int64)
    n_slot = np.zeros(A, np.int64)
    scalars = np.zeros(7)
    end = np.zeros((2, K), np.int64)
    nulls = arm_nulls(design, row)
    best = truly_best(design, row)
    sign = 1 if design.hypothesis.better == "higher" else -1
    # slot order: treatments, then the control (the two-arm kernel's arm order)
    order = np.roll(np.arange(A), -1) if design.shared_control else np.arange(A)
    truth = np.asarray(row, dtype=float)[order]
    increments = np.ascontiguousarray(tables.increments[:, order])
    sizes = np.ascontiguousarray(tables.sizes[:, order])
    draws = DrawTables.from_pmfs(_increment_pmfs(design, truth, increments, sizes))
    for b in range(-(-replicates // BATCH)):
        reps = min(BATCH, replicates - b * BATCH)
        rng = batch_generator(seed, index, b)
        words = rng.bit_generator.random_raw(reps * K * A).reshape(reps, K, A)
        simulate(words, truth, increments, sizes, tables.decision, tables.mean, tables.cdf,
                 tables.drop_below, tables.keep, tables.control, sign, nulls, best,
                 success, eff, fut, drop, n_slot, scalars, end, *draws.arrays())
    n_arm = n_slot[np.argsort(order)]
    r = float(replicates)
    out: dict[str, object] = {"scenario": None}
    for name, value in zip(design.arm_names, row, strict=True):
        out[f"true_{name}"] = value
    out["is_null"] = bool(nulls.all())
    p_any = scalars[2] / r
    fwer = scalars[3] / r
    out["prob_success"] = p_any
    out["prob_success_se"] = float(np.sqrt(p_any * (1 - p_any) / r))
    out["fwer"] = fwer
    out["fwer_se"] = float(np.sqrt(fwer * (1 - fwer) / r))
    out["prob_select_best"] = scalars[5] / r
    out["selected_bias"] = scalars[6] / scalars[4] if scalars[4] > 0 else float("nan")
    # summed as the two-arm table sums them (results.py), so one arm gives its bits
    out["prob_stop_efficacy"] = float((end[0, :-1] / r).sum())
    out["prob_stop_futility"] = float((end[1, :-1] / r).sum())
    mean_n = scalars[0] / r
    out["expected_n"] = mean_n
    out["sd_n"] = float(np.sqrt(max(scalars[1] / r - mean_n**2, 0.0)))
    for k in range(K):
        out[f"look{k + 1}_stop_efficacy"] = end[0, k] / r
        out[f"look{k + 1}_stop_futility"] = end[1, k] / r
    offset = 1 if design.shared_control else 0
    if design.shared_control:
        out["control_expected_n"] = n_arm[0] / r
    for t, name in enumerate(design.treatment_names):
        p = success[t] / r
        out[f"{name}_is_null"] = bool(nulls[t])
        out[f"{name}_prob_success"] = p
        out[f"{name}_prob_success_se"] = float(np.sqrt(p * (1 - p) / r))
        out[f"{name}_expected_n"] = n_arm[offset + t] / r
        for k in range(K):
            out[f"{name}_look{k + 1}_stop_efficacy"] = eff[t, k] / r
            out[f"{name}_look{k + 1}_stop_futility"] = fut[t, k] / r
            out[f"{name}_look{k + 1}_drop"] = drop[t, k] / r
    out["method"] = "monte-carlo"
    out["replicates"] = replicates
    return out
