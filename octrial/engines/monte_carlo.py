"""The Monte Carlo engine: simulated studies per scenario, with standard errors.

Policy lives here; the numbers come from a :class:`~octrial.simulation.base.Simulator`.

* **Kernels.** Lattice families use the table kernel (decision tables on the count
  lattice, increments from inverse-CDF tables); ``kernel='general'`` evaluates posterior
  and predictive probabilities per study instead, with the simulator the family gives
  (:meth:`~octrial.endpoints.base.Family.simulator`; by default the generic study loop).
* **Randomness.** One seed in. Scenario i's batch b is simulated with
  ``Generator(PCG64(SeedSequence(seed, spawn_key=(i, b))))``, the child that
  ``SeedSequence(seed).spawn(...)[i].spawn(...)[b]`` gives, built directly so that any
  worker can make it. Batches have a fixed size and their tallies are added in batch
  order, so results do not depend on the number of workers, the backend or the order in
  which scenarios finish.
* **Precision.** A fixed number of replicates per scenario, or (``target_se``) batches
  until every estimated probability's standard error is at most the target or the cap
  ``max_replicates`` is reached. Memory is bounded by the batch size.
* **Resumption.** With a checkpoint folder each finished scenario is saved as it
  arrives (:mod:`octrial.execution.checkpoints`), keyed by everything that determines
  its numbers.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from octrial._version import __version__
from octrial.design.model import Design
from octrial.endpoints.base import LatticeFamily
from octrial.engines.outcome import Estimation, Outcome
from octrial.errors import InputError, Problem, show
from octrial.execution import Execution, run_grid
from octrial.execution.checkpoints import SEED_BITS, CheckpointStore, kept_seed
from octrial.rules.estimates import LatticeEstimates, lattice_estimates
from octrial.rules.lattice import LatticeRule, build_rule, serving
from octrial.simulation.base import Simulator, Tally, tally_problems
from octrial.simulation.calendar import calendar_columns
from octrial.simulation.lattice import LatticePlan, LatticeSimulator, lattice_plan

KERNELS = ("auto", "table", "general")


@dataclass(frozen=True)
class MonteCarloSettings:
    """What determines the simulated numbers (beside the design).

    Attributes
    ----------
    replicates : int or None
        Studies per scenario; default ``simulation.replicates``. Ignored with a target.
    seed : int or None
        Default ``simulation.seed``; when neither is given one is drawn and recorded.
    target_se : float or None
        Simulate batches until every estimated probability's standard error is at most
        this (or ``max_replicates`` is reached).
    max_replicates : int
        Cap on studies per scenario under a target standard error.
    batch_size : int
        Studies per batch (the unit of seeding and of memory).
    kernel : {'auto', 'table', 'general'}
        'auto' takes the table kernel where a lattice rule exists.
    """

    replicates: int | None = None
    seed: int | None = None
    target_se: float | None = None
    max_replicates: int = 10_000_000
    batch_size: int = 50_000
    kernel: str = "auto"

    def __post_init__(self) -> None:
        checks = [
            ("replicates", self.replicates is None or self.replicates >= 1,
             "a whole number >= 1"),
            ("seed", self.seed is None or 0 <= self.seed < 2**SEED_BITS,
             "a whole number in [0, 2^63)"),
            ("target_se", self.target_se is None or 0 < self.target_se <= 0.5,
             "a standard error in (0, 0.5]"),
            ("max_replicates", self.max_replicates >= 1, "a whole number >= 1"),
            ("batch_size", self.batch_size >= 1, "a whole number >= 1"),
            ("kernel", self.kernel in KERNELS, "one of " + ", ".join(KERNELS)),
        ]
        problems = [Problem(name, expected, show(getattr(self, name)))
                    for name, ok, expected in checks if not ok]
        if problems:
            raise InputError("simulation settings", problems)


@dataclass(frozen=True, eq=False)
class ScenarioTask:
    """Everything a worker needs to simulate one scenario (picklable)."""

    index: int
    truth: tuple[float, ...]
    design: Design
    plan: LatticePlan | None
    estimates: LatticeEstimates | None
    settings: MonteCarloSettings
    batches: tuple[int, int] | None = None
    """``(first, count)``: only these batches of the scenario (a scenario split over
    workers, :data:`BATCHES_PER_TASK`); ``None``: every batch."""

    def identity(self) -> dict[str, Any]:
        """What this task's checkpoint records (its scenario and batches)."""
        batch = "all" if self.batches is None else (
            f"{self.batches[0]}-{self.batches[0] + self.batches[1] - 1}")
        return {"design_sha256": self.design.source.sha256, "seed": self.settings.seed,
                "scenario": self.index, "batch": batch, "kernel": self.settings.kernel}

    def sizes(self) -> list[int]:
        """Studies in each of this task's batches (fixed replicates only)."""
        replicates, size = self.settings.replicates, self.settings.batch_size
        assert replicates is not None and self.batches is not None
        first, count = self.batches
        return [min(size, replicates - b * size) for b in range(first, first + count)]

    def problems(self, arrays: dict[str, np.ndarray]) -> list[str]:
        """What is wrong with ``arrays`` as this scenario's saved result."""
        settings = self.settings
        if self.batches is not None:
            wrong = tally_problems(arrays, self.design.looks.count, sum(self.sizes()))
        elif settings.target_se is None:
            wrong = tally_problems(arrays, self.design.looks.count, settings.replicates)
        else:
            wrong = tally_problems(arrays, self.design.looks.count,
                                   at_most=settings.max_replicates)
            if "target_met" not in arrays or np.shape(arrays["target_met"]) != ():
                wrong.append("no target_met")
            r = int(arrays["replicates"]) if not wrong else 0
            if r and r % settings.batch_size and r != settings.max_replicates:
                wrong.append(f"{r} studies, neither whole batches nor the cap")
        return wrong


def batch_generator(seed: int, scenario: int, batch: int) -> np.random.Generator:
    """The random generator for one batch of one scenario (0-based indices)."""
    sequence = np.random.SeedSequence(seed, spawn_key=(scenario, batch))
    return np.random.Generator(np.random.PCG64(sequence))


def adjusted_se(tally: Tally) -> float:
    """Largest standard error over the tally's probabilities, with p estimated as
    (x + 1) / (R + 2) so that a probability not yet observed does not count as known
    exactly (used only to decide when to stop simulating)."""
    r = tally.replicates
    p = (tally.probabilities() * r + 1.0) / (r + 2.0)
    return float(np.sqrt(np.max(p * (1.0 - p)) / r))


def make_simulator(task: ScenarioTask) -> Simulator:
    """The simulator a task asks for."""
    design = task.design
    level = design.simulation.interval_level
    if task.plan is not None:
        return LatticeSimulator(design, task.plan, task.truth, task.estimates, level)
    simulator: Simulator = design.family.simulator(design, task.truth, level)
    return simulator


def simulate_scenario(task: ScenarioTask) -> dict[str, np.ndarray]:
    """Simulate one scenario batch by batch (runs in a worker)."""
    settings = task.settings
    seed = settings.seed
    assert seed is not None  # the engine settles the seed before any task runs
    simulator = make_simulator(task)
    tally: Tally | None = None
    if task.batches is not None:
        for b, size in enumerate(task.sizes(), start=task.batches[0]):
            part = simulator.simulate(batch_generator(seed, task.index, b), size)
            tally = part if tally is None else tally + part
        assert tally is not None  # a task holds at least one batch
        return tally.to_arrays()
    batch = 0
    while True:
        done = 0 if tally is None else tally.replicates
        if settings.replicates is not None and settings.target_se is None:
            size = min(settings.batch_size, settings.replicates - done)
        else:
            size = min(settings.batch_size, settings.max_replicates - done)
        if size <= 0:
            break
        part = simulator.simulate(batch_generator(seed, task.index, batch), size)
        tally = part if tally is None else tally + part
        batch += 1
        if settings.target_se is not None and adjusted_se(tally) <= settings.target_se:
            break
    assert tally is not None  # every scenario simulates at least one study
    arrays = tally.to_arrays()
    if settings.target_se is not None:
        arrays["target_met"] = np.array(adjusted_se(tally) <= settings.target_se)
    return arrays


class MonteCarloEngine:
    """Simulated operating characteristics with Monte Carlo standard errors."""

    name = "monte-carlo"

    @staticmethod
    def unsupported(design: Design) -> str | None:
        """Why this engine cannot evaluate ``design``, or ``None`` when it can."""
        if design.conduct is not None and not design.family.event_driven:
            from octrial.simulation.calendar_studies import calendar_unsupported

            return calendar_unsupported(design)
        if isinstance(design.family, LatticeFamily):
            return None
        reason: str | None = design.family.simulation_unsupported(design)
        return reason

    @staticmethod
    def run(design: Design, truths: np.ndarray, rule: LatticeRule | None = None,
            settings: MonteCarloSettings | None = None,
            execution: Execution | None = None) -> Outcome:
        """Simulate every scenario in ``truths`` (one row per scenario, one column per arm).

        Parameters
        ----------
        settings : MonteCarloSettings, optional
            Replicates, seed, target standard error, kernel.
        execution : Execution, optional
            Workers, backend, checkpoints, progress (never changes a number).
        """
        settings = settings or MonteCarloSettings()
        execution = execution or Execution()
        kernel = _kernel(design, settings.kernel)
        settings = dataclasses.replace(
            settings, kernel=kernel,
            replicates=settings.replicates or design.simulation.replicates,
            seed=settings.seed if settings.seed is not None else design.simulation.seed)
        store, settings, drawn = _checkpoints(design, settings, execution)
        # a truncated lattice (counts) and the kernels' draw tables are sized for every
        # truth simulated, not only the design's own scenarios
        if isinstance(design.family, LatticeFamily):
            design = serving(design, truths)

        plan = estimates = None
        if kernel == "table":
            rule = build_rule(design, truths=truths) if rule is None else rule
            estimates = lattice_estimates(design)
            plan = lattice_plan(design, rule, estimates)
        tasks = [task for i, t in enumerate(truths) for task in _tasks(
            ScenarioTask(i, tuple(float(v) for v in t), design, plan, estimates, settings))]
        results, resumed = run_grid(simulate_scenario, tasks, execution, store)
        return _outcome(design, settings, _per_scenario(tasks, results), drawn, resumed)


BATCHES_PER_TASK = 4
"""A scenario with more batches than this (fixed replicates) is split into tasks of this
many batches, so that workers share one large scenario. The split depends on the settings
only, never on ``--jobs``, so the numbers do not either."""


def _tasks(task: ScenarioTask) -> list[ScenarioTask]:
    """``task``, or its batches split into tasks of :data:`BATCHES_PER_TASK`."""
    settings = task.settings
    if settings.target_se is not None or settings.replicates is None:
        return [task]
    batches = -(-settings.replicates // settings.batch_size)
    if batches <= BATCHES_PER_TASK:
        return [task]
    return [dataclasses.replace(task, batches=(first, min(BATCHES_PER_TASK, batches - first)))
            for first in range(0, batches, BATCHES_PER_TASK)]


def _per_scenario(tasks: list[ScenarioTask],
                  results: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """One result per scenario: the tallies of a split scenario's tasks added in batch
    order."""
    merged: dict[int, Tally] = {}
    whole: dict[int, dict[str, Any]] = {}
    for task, result in zip(tasks, results, strict=True):
        if task.batches is None:
            whole[task.index] = result
            continue
        part = Tally.from_arrays(result)
        merged[task.index] = part if task.index not in merged else merged[task.index] + part
    return [whole[i] if i in whole else merged[i].to_arrays()
            for i in sorted({t.index for t in tasks})]


def _kernel(design: Design, wanted: str) -> str:
    if design.conduct is not None:
        # calendar time: counts per look vary between studies, so no decision tables
        if wanted == "table":
            raise ValueError("a design with [conduct] is simulated study by study (kernel "
                             "'general'), not with decision tables")
        wanted = "general"
    if wanted == "auto":
        return "table" if isinstance(design.family, LatticeFamily) else "general"
    if wanted == "table" and not isinstance(design.family, LatticeFamily):
        raise ValueError(f"{design.family.name} endpoints have no decision tables")
    if wanted == "general" and (reason := design.family.simulation_unsupported(design)):
        raise ValueError(reason)
    return wanted


def _checkpoints(
    design: Design, settings: MonteCarloSettings, execution: Execution,
) -> tuple[CheckpointStore | None, MonteCarloSettings, bool]:
    """The run's checkpoint store (if any) and the settings with a seed for certain."""
    drawn = settings.seed is None
    numbers = dataclasses.asdict(settings)
    if settings.target_se is None:
        numbers.pop("max_replicates")
    else:
        numbers.pop("replicates")
    ingredients = {
        "design_sha256": design.source.sha256,
        "design": repr(design),
        "engine": MonteCarloEngine.name,
        "settings": {**numbers, "seed": "drawn" if drawn else settings.seed},
        "octrial": __version__,
    }
    store = execution.store(ingredients)
    seed, _ = kept_seed(store, settings.seed)
    return store, dataclasses.replace(settings, seed=seed), drawn


def _outcome(design: Design, settings: MonteCarloSettings, results: list[dict[str, Any]],
             drawn: bool, resumed: int) -> Outcome:
    tallies = [Tally.from_arrays(r) for r in results]
    replicates = np.array([t.replicates for t in tallies], dtype=np.int64)
    r = replicates[:, None].astype(float)
    efficacy = np.array([t.efficacy for t in tallies], dtype=float) / r
    futility = np.array([t.futility for t in tallies], dtype=float) / r
    estimation = None
    if tallies and tallies[0].error_sums is not None:
        moments = np.array([t.error_sums for t in tallies]) / r
        coverage = np.array([t.covered for t in tallies], dtype=float) / replicates
        estimation = Estimation(moments, coverage, design.simulation.interval_level)
    info: dict[str, Any] = {
        "seed": settings.seed,
        "seed_drawn": drawn,
        "random_numbers": "numpy PCG64; scenario i (from 0), batch b: "
                          "SeedSequence(seed, spawn_key=(i, b))",
        "kernel": settings.kernel,
        "batch_size": settings.batch_size,
        "replicates_per_scenario": (None if settings.target_se is not None
                                    else settings.replicates),
        "scenarios_resumed": resumed,
        "studies_clipped": int(sum(t.clipped for t in tallies)),
    }
    extra: dict[str, np.ndarray] = {}
    if tallies and tallies[0].calendar is not None:
        extra.update(calendar_columns(design, np.array([t.calendar for t in tallies]),
                                      replicates))
    if settings.target_se is not None:
        met = np.array([bool(res["target_met"]) for res in results])
        extra["target_se_met"] = met
        info["target_se"] = settings.target_se
        info["max_replicates"] = settings.max_replicates
        info["scenarios_short_of_target"] = [int(i) + 1 for i in np.flatnonzero(~met)]
    return Outcome(efficacy, futility, replicates, "monte-carlo", extra=extra, info=info,
                   estimation=estimation)


def replicates_for(se: float, p: float = 0.5) -> int:
    """Studies needed for standard error ``se`` at probability ``p``: p (1 - p) / se^2."""
    return math.ceil(p * (1.0 - p) / se**2)
