"""Operating characteristics of a several-arm design by simulation, fixed or
response-adaptive allocation, in one table.

Fixed allocation runs the decision-table kernel (:mod:`octrial.multiarm.kernel`);
adaptive allocation the study loop of :mod:`octrial.allocation` (each arm's own rule at
the sizes reached; :mod:`octrial.multiarm.adaptive`). Both add up the same tallies, so
the columns are the same. One seed in: scenario i's batch b of :data:`BATCH` studies
has its own generator (for fixed allocation the Monte Carlo engine's,
:func:`octrial.engines.monte_carlo.batch_generator`), so how the work is split (``--jobs``,
the backend) never changes a number, and a design with one treatment arm and fixed
allocation draws the very words the two-arm engine draws. The table this returns has the
study-level columns of oc.csv and, per arm ``<arm>``, columns named ``<arm>_<quantity>``
(docs/multi-arm.md):

- ``<arm>_is_null``: the arm's true value does not beat the control (benchmark) by the
  margin;
- ``<arm>_prob_success``, ``<arm>_prob_success_se``: the arm is declared a success (at an
  interim look or at the end);
- ``<arm>_expected_n``: expected subjects in the arm (``control_expected_n`` too);
- ``<arm>_look<k>_stop_efficacy``, ``<arm>_look<k>_stop_futility``,
  ``<arm>_look<k>_drop``: the arm leaves the study at look k by its own rule, or is
  dropped there for a low probability of being the best (or not being selected);
- ``<arm>_block<k>_share`` (every arm, the control too): mean allocation probability of
  block k (block 1: the subjects before look 1) over the studies that enrol that block;
- ``<arm>_look<k>_n`` (every arm): mean cumulative subjects of the arm at look k (a study
  that ended earlier counts with the subjects it reached).

Study level: ``prob_success`` (at least one arm succeeds) and its SE, ``fwer`` and
``fwer_se`` (at least one null arm succeeds), ``prob_select_best`` (the selected arm,
the successful arm with the best posterior mean, is truly the best; ties in truth count
for every tied arm), ``selected_bias`` (mean of the selected arm's posterior mean minus
its true value, over studies with a selected arm; NaN when none),
``look<k>_stop_efficacy`` / ``look<k>_stop_futility`` (the study ends at look k with / without a
success), ``expected_n``, ``sd_n``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from octrial._version import __version__
from octrial.execution import Execution, run_grid
from octrial.multiarm import family_loop
from octrial.multiarm.adaptive import AdaptiveTask, adaptive_study, scenario_sums
from octrial.multiarm.fixed_scenario import fixed_tallies
from octrial.multiarm.model import MultiArmDesign
from octrial.multiarm.tables import MultiArmTables, build_tables
from octrial.multiarm.tallies import scenario_identity, tally_problems

BATCH = 50_000
"""Studies per batch: each batch has its own seed, spawned from the scenario's."""

__all__ = ["BATCH", "SimulatedScenarios", "arm_nulls", "simulate_design",
           "simulate_scenarios", "truly_best"]


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


@dataclass(frozen=True, eq=False)
class SimulatedScenarios:
    """Every scenario of a design simulated, and how many came from checkpoints.

    Attributes
    ----------
    table : DataFrame
        One row per scenario (the columns of the module docstring).
    resumed : int
        Scenarios read back from the checkpoints of an earlier, interrupted run rather
        than simulated (0 without checkpoints).
    """

    table: pd.DataFrame
    resumed: int


def simulate_design(design: MultiArmDesign, replicates: int | None = None,
                    seed: int | None = None, tables: MultiArmTables | None = None,
                    execution: Execution | None = None, planned_blocks: bool = False,
                    ) -> pd.DataFrame:
    """Simulate every scenario of ``design``: one row per scenario (see module
    docstring for the columns), for fixed and response-adaptive allocation.

    The table of :func:`simulate_scenarios`, which takes the same parameters.
    """
    return simulate_scenarios(design, replicates, seed, tables, execution,
                              planned_blocks).table


def simulate_scenarios(design: MultiArmDesign, replicates: int | None = None,
                       seed: int | None = None, tables: MultiArmTables | None = None,
                       execution: Execution | None = None, planned_blocks: bool = False,
                       ) -> SimulatedScenarios:
    """Simulate every scenario of ``design``, one task per scenario through
    :func:`octrial.execution.run_grid` (workers, checkpoints, resumption), for fixed and
    response-adaptive allocation.

    Parameters
    ----------
    replicates, seed : int, optional
        Default: the design's ``[simulation]`` values.
    tables : MultiArmTables, optional
        Fixed allocation: the decision tables, when already built.
    execution : Execution, optional
        How to spread the scenarios over workers (never changes a number), and where
        to keep finished scenarios (``checkpoints``) so that an interrupted run resumes
        without simulating them again.
    planned_blocks : bool
        Run a fixed-allocation design through the adaptive study loop, each arm
        enrolling its planned subjects (a check of the two engines against each other);
        adaptive designs always go there, enrolling ``looks.n`` in all.

    Raises
    ------
    SettingsError
        For what adaptive allocation does not support, naming the design-file key.
    """
    replicates = design.simulation.replicates if replicates is None else replicates
    seed = design.simulation.seed if seed is None else seed
    if seed is None:
        raise ValueError("several-arm simulation needs a seed (simulation.seed)")
    execution = Execution() if execution is None else execution
    rows = list(design.scenarios.values)
    family = family_loop.serves(design)
    if family:  # normal, time-to-event: octrial.multiarm.family_loop
        family_loop.refuse_unsupported(design)
    adaptive = (design.allocation.adaptive or planned_blocks) and not family
    store = execution.store({
        "design_sha256": design.source.sha256, "design": repr(design),
        "engine": "several-arm monte-carlo",
        "loop": "family" if family else "adaptive" if adaptive else "fixed",
        "planned_blocks": planned_blocks, "replicates": replicates, "seed": seed,
        "batch": BATCH, "octrial": __version__})
    if family:
        family_tasks = [family_loop.FamilyTask(
            design, tuple(map(float, row)), tuple(map(bool, arm_nulls(design, row))),
            tuple(map(bool, truly_best(design, row))), replicates, seed, i, BATCH)
            for i, row in enumerate(rows)]
        results, resumed = run_grid(family_loop.family_sums, family_tasks, execution, store)
    elif adaptive:
        study = adaptive_study(design, planned_blocks)
        adaptive_tasks = [
            AdaptiveTask(study, tuple(map(float, row)),
                         tuple(map(bool, arm_nulls(design, row))),
                         tuple(map(bool, truly_best(design, row))), replicates, seed, i,
                         BATCH, design.source.sha256) for i, row in enumerate(rows)]
        results, resumed = run_grid(scenario_sums, adaptive_tasks, execution, store)
    else:
        tables = build_tables(design) if tables is None else tables
        fixed_tasks = [FixedTask(design, tables, tuple(row), replicates, seed, i)
                       for i, row in enumerate(rows)]
        results, resumed = run_grid(fixed_sums, fixed_tasks, execution, store)
    out = [columns(design, row, sums, replicates) for row, sums in zip(rows, results,
                                                                       strict=True)]
    for i, r in enumerate(out):
        r["scenario"] = i + 1
    return SimulatedScenarios(pd.DataFrame(out), resumed)


@dataclass(frozen=True)
class FixedTask:
    """One scenario with fixed allocation (picklable for the workers)."""

    design: MultiArmDesign
    tables: MultiArmTables
    row: tuple[float, ...]
    replicates: int
    seed: int
    index: int

    def identity(self) -> dict[str, Any]:
        """What this scenario's checkpoint records."""
        return scenario_identity(self.design.source.sha256, self.seed, self.index,
                                 "several-arm fixed")

    def problems(self, arrays: dict[str, np.ndarray]) -> list[str]:
        """What is wrong with ``arrays`` as this scenario's saved tallies."""
        T, K = self.tables.decision.shape[:2]
        return tally_problems(arrays, T, K, self.tables.increments.shape[1],
                              self.replicates)


def fixed_sums(task: FixedTask) -> dict[str, np.ndarray]:
    """The tallies of one scenario with fixed allocation (the keys of
    :func:`octrial.multiarm.adaptive.batch_sums`; arms in design order)."""
    design, row = task.design, task.row
    return fixed_tallies(design, task.tables, row, task.replicates, task.seed, task.index,
                         BATCH, arm_nulls(design, row), truly_best(design, row))


def columns(design: MultiArmDesign, row: tuple[float, ...], sums: dict[str, np.ndarray],
            replicates: int) -> dict[str, object]:
    """One row of the table from a scenario's tallies (fixed or adaptive)."""
    K = design.looks.count
    scalars, end = sums["scalars"], sums["end"]
    nulls = arm_nulls(design, row)
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
    n_arm = sums["n_arm"]
    if design.shared_control:
        out["control_expected_n"] = n_arm[0] / r
    for t, name in enumerate(design.treatment_names):
        p = sums["success"][t] / r
        out[f"{name}_is_null"] = bool(nulls[t])
        out[f"{name}_prob_success"] = p
        out[f"{name}_prob_success_se"] = float(np.sqrt(p * (1 - p) / r))
        out[f"{name}_expected_n"] = n_arm[offset + t] / r
        for k in range(K):
            out[f"{name}_look{k + 1}_stop_efficacy"] = sums["efficacy"][t, k] / r
            out[f"{name}_look{k + 1}_stop_futility"] = sums["futility"][t, k] / r
            out[f"{name}_look{k + 1}_drop"] = sums["drop"][t, k] / r
    for a, name in enumerate(design.arm_names):
        for k in range(K):
            running = float(sums["running"][k])
            out[f"{name}_block{k + 1}_share"] = (sums["share"][k, a] / running
                                                 if running > 0 else float("nan"))
        for k in range(K):
            out[f"{name}_look{k + 1}_n"] = sums["look_n"][k, a] / r
    out["method"] = "monte-carlo"
    out["replicates"] = replicates
    return out
