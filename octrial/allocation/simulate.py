"""Simulated studies with adaptive allocation: batches, seeding and summaries.

Randomness follows the Monte Carlo engine (:mod:`octrial.engines.monte_carlo`): scenario
i's batch b draws its uniforms from ``Generator(PCG64(SeedSequence(seed,
spawn_key=(i, b))))`` and batches have a fixed size, so any split of the batches over
workers gives the same numbers.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from octrial.allocation.decisions import ArmRule, new_memo, padded_priors
from octrial.allocation.decisions import nodes as decision_nodes
from octrial.allocation.kernel import simulate_studies
from octrial.allocation.rule import AllocationRule
from octrial.errors import Problem, SettingsError, show
from octrial.execution import Execution, run_grid
from octrial.numerics.beta_best import BestTables

ASSIGNMENTS = ("randomised", "rounded")
TABLE_LIMIT = 2**30
"""Largest Pr(best) tables allowed, in bytes (checked before anything is allocated)."""


@dataclass(frozen=True)
class AdaptiveStudy:
    """A binary study with several arms and an allocation rule.

    Attributes
    ----------
    looks : tuple of int
        Cumulative subjects at each look (the last is the maximum).
    rule : AllocationRule
    prior : (weights, a, b)
        Beta-mixture prior shared by the treatment arms (for Pr(best)).
    arm_priors : tuple of (weights, a, b), optional
        One prior per arm (control first; its entry is not used), overriding ``prior``.
    control : bool
        Whether arm 0 is a shared control (it takes no part in Pr(best)).
    higher : bool
        Whether a higher response probability is better.
    drop_below : float
        Treatment arms whose Pr(best) falls below this after a look stop enrolling;
        0: none. Below 1 / (treatment arms), so the leading arm never drops.
    arm_rule : ArmRule or None
        Each treatment arm's own efficacy / futility rule (None: no decisions, the
        arms enrol to the end unless dropped).
    assignment : {'randomised', 'rounded'}
        How a block is split over the arms: complete randomisation (a multinomial draw
        with the allocation probabilities) or deterministically (the block times the
        probabilities, rounded by the largest-remainder method).
    drop_by_look : tuple of (float or None), optional
        The several-arm form of ``drop_below``: a threshold per look (None: no rule at
        that look), any value in [0, 1) (every arm may go, ending the study);
        overrides ``drop_below``.
    keep : int
        At most this many treatment arms go on after an interim look, the most likely
        to be the best (0: no limit).
    planned : tuple of tuple of int, optional
        Planned subjects per look and arm (control first): each block is then the
        planned subjects of the arms still enrolling (an arm that leaves takes its
        subjects with it), instead of ``looks[k] - looks[k - 1]``.
    """

    looks: tuple[int, ...]
    rule: AllocationRule
    prior: tuple = (1.0, 1.0, 1.0)
    arm_priors: tuple | None = None
    control: bool = True
    higher: bool = True
    drop_below: float = 0.0
    assignment: str = "randomised"
    arm_rule: ArmRule | None = None
    drop_by_look: tuple[float | None, ...] | None = None
    keep: int = 0
    planned: tuple[tuple[int, ...], ...] | None = None

    def check(self, arms: int) -> None:
        """Raise :class:`~octrial.errors.SettingsError` naming every problem."""
        found = self.rule.problems(arms - int(self.control), self.control)
        if self.arm_priors is not None and len(self.arm_priors) != arms:
            found.append(Problem("arm_priors", f"{arms} priors (one per arm)",
                                 f"{len(self.arm_priors)}"))
        looks = np.asarray(self.looks)
        if looks.size < 1 or np.any(np.diff(looks) <= 0) or looks[0] < 1:
            found.append(Problem("looks", "increasing whole numbers >= 1",
                                 show(list(self.looks))))
        elif np.any(np.diff(np.concatenate([[0], looks])) > 1000):
            found.append(Problem("looks", "blocks of at most 1000 subjects",
                                 show(list(self.looks))))
        treatments = arms - int(self.control)
        if self.drop_by_look is not None:
            if len(self.drop_by_look) != looks.size or not all(
                    v is None or 0 <= v < 1 for v in self.drop_by_look):
                found.append(Problem("drop_by_look", f"{looks.size} numbers in [0, 1) "
                                     "or None (one per look)", show(self.drop_by_look)))
        elif not 0 <= self.drop_below < 1 / max(treatments, 1):
            found.append(Problem("drop_below", f"a number in [0, 1/{treatments}) (below "
                                 "1/arms, so that the leading arm never drops)",
                                 show(self.drop_below)))
        if not found and (need := self.table_bytes(arms)) > TABLE_LIMIT:
            found.append(Problem(
                "looks", f"an interim total whose Pr(best) tables fit in "
                f"{TABLE_LIMIT / 2**30:.0f} GiB (they grow with its square)",
                f"{need / 2**30:.1f} GiB for {self.looks[-2]} subjects at the last interim look"))
        rule = self.arm_rule
        if rule is not None:
            if len(rule.efficacy) != looks.size or len(rule.futility) != looks.size:
                found.append(Problem("arm_rule", f"{looks.size} efficacy and futility "
                                     "thresholds (one per look)",
                                     f"{len(rule.efficacy)} and {len(rule.futility)}"))
            if rule.versus_control != self.control:
                found.append(Problem("arm_rule.versus_control", str(self.control),
                                     str(rule.versus_control)))
            if rule.higher != self.higher:
                found.append(Problem("arm_rule.higher", str(self.higher), str(rule.higher)))
        if not 0 <= self.keep <= treatments:
            found.append(Problem("keep", f"a whole number from 0 to {treatments}",
                                 show(self.keep)))
        if self.planned is not None and (
                len(self.planned) != looks.size
                or any(len(row) != arms or min(row) < 0 for row in self.planned)):
            found.append(Problem("planned", f"{looks.size} rows of {arms} whole numbers "
                                 ">= 0 (subjects per look and arm)", show(self.planned)))
        if self.assignment not in ASSIGNMENTS:
            found.append(Problem("assignment", "one of " + ", ".join(ASSIGNMENTS),
                                 show(self.assignment)))
        if found:
            raise SettingsError("adaptive study", found)

    def table_bytes(self, arms: int) -> int:
        """Memory of the Pr(best) tables: per distinct prior, density and 'worse than'
        on every node for every state up to the last interim look."""
        largest = self.looks[-2] if len(self.looks) > 1 else 0
        priors = 1 if self.arm_priors is None else len({repr(p) for p in self.arm_priors})
        return BestTables.nbytes(priors, largest)

    def drop_thresholds(self) -> np.ndarray:
        """Per look the Pr(best) below which an arm is dropped (-1: no rule)."""
        count = len(self.looks)
        if self.drop_by_look is not None:
            return np.array([-1.0 if v is None else float(v) for v in self.drop_by_look])
        out = np.full(count, float(self.drop_below) if self.drop_below > 0 else -1.0)
        out[-1] = -1.0
        return out

    def block_plan(self, arms: int) -> tuple[np.ndarray, bool]:
        """Planned subjects per look and arm, and whether blocks follow them."""
        if self.planned is None:
            return np.zeros((len(self.looks), arms), np.int64), False
        return np.array(self.planned, np.int64), True

    def tables(self, arms: int) -> BestTables:
        """The Pr(best) tables up to the last interim look's size."""
        largest = self.looks[-2] if len(self.looks) > 1 else 0
        priors = ([self.prior] * arms if self.arm_priors is None
                  else list(self.arm_priors))
        return BestTables.build(priors, int(largest), self.higher)


@dataclass(frozen=True)
class StudyBatch:
    """Per-study results of one batch (arrays indexed study, look, arm)."""

    sizes: np.ndarray
    responses: np.ndarray
    allocation: np.ndarray
    dropped: np.ndarray
    outcome: np.ndarray


def simulate_batch(study: AdaptiveStudy, rates: np.ndarray, studies: int, seed: int,
                   scenario: int, batch: int, table: BestTables | None = None,
                   memo: Any = None) -> StudyBatch:
    """Simulate one seeded batch of ``studies`` studies at true response ``rates``
    (``memo``: a :func:`~octrial.allocation.decisions.new_memo` to share between
    batches; it saves work only)."""
    rates = np.asarray(rates, float)
    arms = rates.size
    study.check(arms)
    table = study.tables(arms) if table is None else table
    looks = np.asarray(study.looks, np.int64)
    generator = np.random.Generator(np.random.PCG64(
        np.random.SeedSequence(seed, spawn_key=(scenario, batch))))
    uniforms = generator.random((studies, looks.size, 2 * arms))
    sizes = np.zeros((studies, looks.size, arms), np.int32)
    responses = np.zeros_like(sizes)
    allocation = np.zeros((studies, looks.size, arms))
    dropped = np.zeros((studies, arms), np.int8)
    outcome = np.zeros((studies, arms), np.int8)
    rule = study.arm_rule
    priors = [study.prior] * arms if study.arm_priors is None else list(study.arm_priors)
    prior_w, prior_a, prior_b = padded_priors(priors)
    memo = new_memo() if memo is None else memo
    if rule is None:
        thresholds = np.full(looks.size, np.nan), np.full(looks.size, np.nan)
    else:
        thresholds = (np.asarray(rule.efficacy, float), np.asarray(rule.futility, float))
    form, power, control_share, minimum, burn_in, ratio = study.rule.codes(
        arms - int(study.control), study.control)
    simulate_studies(  # type: ignore[call-arg]
        study.assignment == "rounded", rates, looks, *study.block_plan(arms),
        study.control, form, power, control_share, minimum, burn_in, ratio,
        study.drop_thresholds(), int(study.keep), table.density, table.worse,
        table.support, table.reach, table.weights, table.which, table.states,
        rule is not None, study.control, study.higher,
        0.0 if rule is None else float(rule.shift),
        np.nan if rule is None else float(rule.benchmark), *thresholds,
        prior_w, prior_a, prior_b, *decision_nodes(), memo, uniforms, sizes,
        responses, allocation, dropped, outcome)
    return StudyBatch(sizes, responses, allocation, dropped, outcome)


def simulate(study: AdaptiveStudy, rates: np.ndarray, replicates: int, seed: int,
             scenario: int = 0, batch_size: int = 50_000) -> StudyBatch:
    """All batches of one scenario, in batch order (the last may be shorter)."""
    table = study.tables(len(rates))
    memo = new_memo()
    parts = []
    for b, start in enumerate(range(0, replicates, batch_size)):
        parts.append(simulate_batch(study, rates, min(batch_size, replicates - start),
                                    seed, scenario, b, table, memo))
    return StudyBatch(*(np.concatenate([getattr(p, f) for p in parts])
                        for f in ("sizes", "responses", "allocation", "dropped",
                                  "outcome")))


def null_arms(study: AdaptiveStudy, rates: np.ndarray) -> np.ndarray:
    """Per arm, whether its true rate does not beat the control (by the shift) or the
    benchmark; False for the control and for every arm without an arm rule."""
    rates = np.asarray(rates, float)
    out = np.zeros(rates.size, bool)
    rule = study.arm_rule
    if rule is None:
        return out
    sign = 1.0 if study.higher else -1.0
    first = 1 if study.control else 0
    reference = rates[0] if study.control else rule.benchmark
    effect = sign * (rates[first:] - reference)
    out[first:] = effect <= (rule.shift if study.control else 0.0)
    return out


def tallies(batch: StudyBatch, nulls: np.ndarray) -> dict[str, np.ndarray]:
    """Sums over the studies of a batch (added over batches in batch order)."""
    final = batch.sizes[:, -1, :].astype(float)
    looks = batch.sizes.shape[1]
    by_look = np.arange(looks)[:, None, None] == batch.dropped[None, :, :]
    success = batch.outcome == 1
    return {"n": final.sum(axis=0), "n_sq": (final**2).sum(axis=0),
            "total": final.sum(axis=1).sum(keepdims=True),
            "total_sq": (final.sum(axis=1) ** 2).sum(keepdims=True),
            "allocation": batch.allocation.sum(axis=0),
            "running": (batch.allocation.sum(axis=2) > 0).sum(axis=0),
            "dropped": (by_look & (batch.outcome == 0)[None]).sum(axis=1),
            "efficacy": (by_look & success[None]).sum(axis=1),
            "futility": (by_look & (batch.outcome == 2)[None]).sum(axis=1),
            "success": success.sum(axis=0),
            "any": success.any(axis=1).sum(keepdims=True),
            "fwer": (success & nulls[None, :]).any(axis=1).sum(keepdims=True)}


def table(sums: dict[str, np.ndarray], replicates: int, rates: np.ndarray,
          nulls: np.ndarray, scenario: int = 1) -> pd.DataFrame:
    """One row per arm (arm 0 is the control when there is one); columns:

    ``true_rate``, ``is_null``, ``expected_n`` and ``expected_n_se``,
    ``allocation_block<k>`` (mean allocation probability of block k over the studies
    that enrol it),
    ``prob_success`` and ``prob_success_se`` (the arm meets its efficacy rule),
    ``look<k>_efficacy``, ``look<k>_futility`` (the arm stops at look k by its own rule;
    futility at the last look is 'no success'), ``look<k>_dropped`` (dropped after look
    k for a low Pr(best)); and, the same on every row, ``study_prob_success`` (at least
    one arm succeeds), ``study_fwer`` (at least one null arm succeeds), their standard
    errors, and ``study_expected_n``.
    """
    r = float(replicates)
    mean = sums["n"] / r
    rows: dict[str, object] = {"scenario": scenario, "arm": np.arange(len(rates)),
                               "true_rate": np.asarray(rates, float), "is_null": nulls,
                               "expected_n": mean,
                               "expected_n_se": np.sqrt(np.maximum(
                                   sums["n_sq"] / r - mean**2, 0.0) / r)}
    for k in range(sums["allocation"].shape[0]):
        running = max(int(sums["running"][k]), 1)
        rows[f"allocation_block{k + 1}"] = sums["allocation"][k] / running
    p = sums["success"] / r
    rows["prob_success"] = p
    rows["prob_success_se"] = np.sqrt(p * (1 - p) / r)
    for k in range(sums["efficacy"].shape[0]):
        rows[f"look{k + 1}_efficacy"] = sums["efficacy"][k] / r
        rows[f"look{k + 1}_futility"] = sums["futility"][k] / r
        rows[f"look{k + 1}_dropped"] = sums["dropped"][k] / r
    for key in ("any", "fwer"):
        name = "study_prob_success" if key == "any" else "study_fwer"
        q = float(sums[key][0]) / r
        rows[name] = q
        rows[name + "_se"] = float(np.sqrt(q * (1 - q) / r))
    rows["study_expected_n"] = float(sums["total"][0]) / r
    return pd.DataFrame(rows)


def summary(study: AdaptiveStudy, batch: StudyBatch, rates: np.ndarray) -> pd.DataFrame:
    """The per-arm table (:func:`table`) of simulated studies."""
    nulls = null_arms(study, rates)
    return table(tallies(batch, nulls), batch.sizes.shape[0], rates, nulls)


@dataclass(frozen=True)
class ScenarioTask:
    """One scenario of :func:`simulate_grid` (picklable for the workers)."""

    study: AdaptiveStudy
    rates: tuple[float, ...]
    replicates: int
    seed: int
    scenario: int
    batch_size: int


def scenario_tallies(task: ScenarioTask) -> dict[str, np.ndarray]:
    """The sums of one scenario (what :func:`simulate_grid` turns into its rows)."""
    rates = np.asarray(task.rates)
    batch = simulate(task.study, rates, task.replicates, task.seed, task.scenario,
                     task.batch_size)
    return tallies(batch, null_arms(task.study, rates))


def simulate_grid(study: AdaptiveStudy, scenarios: list[tuple[float, ...]],
                  replicates: int, seed: int, execution: Execution | None = None,
                  batch_size: int = 50_000) -> pd.DataFrame:
    """The per-arm table (:func:`table`) of every scenario. Scenario i is seeded by
    ``(seed, i, batch)``, so the number of workers never changes a number.
    """
    execution = Execution() if execution is None else execution
    tasks = [ScenarioTask(study, tuple(map(float, rates)), replicates, seed, i, batch_size)
             for i, rates in enumerate(scenarios)]
    results, _ = run_grid(scenario_tallies, tasks, execution)
    frames = [table(sums, replicates, np.asarray(task.rates),
                    null_arms(study, np.asarray(task.rates)), i + 1)
              for i, (task, sums) in enumerate(zip(tasks, results, strict=True))]
    return pd.concat(frames, ignore_index=True)
