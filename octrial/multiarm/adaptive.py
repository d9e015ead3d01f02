"""Several-arm designs with response-adaptive allocation, through the study loop of
:mod:`octrial.allocation` (each arm's own rule at the sizes a study reaches).

:func:`adaptive_study` turns a :class:`~octrial.multiarm.model.MultiArmDesign` into an
:class:`~octrial.allocation.simulate.AdaptiveStudy` (refusing, with the design-file key,
what that loop does not cover); :func:`scenario_sums` simulates one scenario and adds up
the same tallies as the fixed-allocation kernel, so :mod:`octrial.multiarm.engine`
writes one table for both.

Conduct: the study enrols ``looks.n`` subjects in all at the looks; the arms still in the
study share each block by the allocation rule (an arm that leaves passes its share to
the others). Randomness: scenario i's batch b of :data:`~octrial.multiarm.engine.BATCH`
studies draws its uniforms from ``Generator(PCG64(SeedSequence(seed, spawn_key=(i,
b))))``, so how the work is split never changes a number.
"""

from __future__ import annotations

import functools
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special

from octrial.allocation.decisions import ArmRule, Memo, new_memo
from octrial.allocation.simulate import AdaptiveStudy, StudyBatch, simulate_batch
from octrial.endpoints.binary import BetaMixture, BinaryEndpoint
from octrial.errors import Problem, SettingsError, show
from octrial.multiarm.model import MultiArmDesign
from octrial.multiarm.tallies import scenario_identity, tally_problems
from octrial.numerics.beta_best import BestTables

__all__ = ["AdaptiveTask", "adaptive_study", "batch_sums", "benefit_memo", "best_tables",
           "memo_identity", "scenario_batches", "scenario_sums"]


def _prior(prior: BetaMixture) -> tuple[tuple[float, ...], tuple[float, ...],
                                        tuple[float, ...]]:
    return tuple(prior.weights), tuple(prior.a), tuple(prior.b)


def refusals(design: MultiArmDesign) -> list[Problem]:
    """What the adaptive study loop does not cover, each under its design-file key."""
    found = []
    kind = design.allocation.kind
    why = f"with response-adaptive allocation (allocation.kind = '{kind}')"
    if not isinstance(design.endpoint, BinaryEndpoint):
        found.append(Problem("endpoint.type", f"'binary' {why}",
                             show(type(design.endpoint).__name__)))
        return found
    arms = ((design.control,) if design.control is not None else ()) + design.treatments
    for arm in arms:
        if not isinstance(arm.prior, BetaMixture):
            found.append(Problem(f"arms.{arm.name}.prior", f"a beta or beta-mixture prior "
                                 f"{why}", show(type(arm.prior).__name__)))
    h = design.hypothesis
    if design.shared_control and h.comparison != "difference":
        found.append(Problem("hypothesis.comparison", f"'difference' {why}",
                             show(h.comparison)))
    pair = design.pairs[0]
    if any(v is not None for v in pair.looks.futility_predictive):
        found.append(Problem("looks.futility_predictive", f"no value {why} (predictive "
                             "futility is not simulated at random arm sizes)",
                             show(list(pair.looks.futility_predictive))))
    if pair.looks.efficacy_count is not None or pair.looks.futility_count is not None:
        found.append(Problem("looks.efficacy_count", f"thresholds on posterior "
                             f"probabilities {why}", "a rule stated in counts"))
    if pair.conduct is not None:
        found.append(Problem("conduct", f"no [conduct] table {why}", "a [conduct] table"))
    for other in design.pairs[1:]:
        if (other.looks.efficacy, other.looks.futility) != (pair.looks.efficacy,
                                                            pair.looks.futility):
            found.append(Problem("looks.efficacy", f"the same thresholds for every arm {why}",
                                 "thresholds that differ between arms"))
            break
    return found


def adaptive_study(design: MultiArmDesign, planned_blocks: bool = False) -> AdaptiveStudy:
    """The study loop's settings for ``design`` (any allocation kind).

    Parameters
    ----------
    planned_blocks : bool
        Enrol each arm's planned subjects per look (the fixed-allocation engine's
        conduct: an arm that leaves takes its subjects with it) instead of ``looks.n``
        in all; used to check this loop against that engine.

    Raises
    ------
    SettingsError
        Naming the design-file key of everything not supported with adaptive allocation.
    """
    found = refusals(design)
    if found:
        raise SettingsError(design.source.path or design.name, found)
    arms = ((design.control,) if design.control is not None else ()) + design.treatments
    rule = design.allocation_rule()
    pair = design.pairs[0]
    h = design.hypothesis
    nan = float("nan")
    arm_rule = ArmRule(
        tuple(nan if v is None else float(v) for v in pair.looks.efficacy),
        tuple(nan if v is None else float(v) for v in pair.looks.futility),
        design.shared_control, float(h.shift) if design.shared_control else 0.0,
        float(h.benchmark) if h.benchmark is not None else nan, h.better == "higher")
    per_arm = np.array(design.looks.per_arm, np.int64)
    planned = np.diff(np.vstack([np.zeros(per_arm.shape[1], np.int64), per_arm]), axis=0)
    study = AdaptiveStudy(
        design.looks.n, rule, arm_priors=tuple(_prior(a.prior) for a in arms),
        control=design.shared_control, higher=h.better == "higher",
        assignment=design.allocation.assignment, arm_rule=arm_rule,
        drop_by_look=design.looks.drop_if_best_below, keep=design.selection.keep or 0,
        planned=tuple(map(tuple, planned.tolist())) if planned_blocks else None)
    try:
        # before any work (the Pr(best) tables' size, blocks of at most 1000)
        study.check(len(arms))
    except SettingsError as exc:
        raise SettingsError(design.source.path or design.name, [
            Problem(DESIGN_KEYS.get(p.key, p.key), p.expected, p.got, p.hint)
            for p in exc.problems]) from None
    return study


DESIGN_KEYS = {"looks": "looks.n", "drop_by_look": "looks.drop_if_best_below",
               "keep": "selection.keep", "assignment": "allocation.assignment"}
"""The design-file keys of the study loop's settings (for messages)."""


@functools.lru_cache(maxsize=2)
def best_tables(priors: tuple, largest: int, higher: bool) -> BestTables:
    """The Pr(best) tables of arms with ``priors`` up to ``largest`` subjects, built once
    per process and design (the scenarios of a design share them)."""
    return BestTables.build(list(priors), largest, higher)


@functools.lru_cache(maxsize=1)
def benefit_memo(identity: str) -> Memo:
    """The memo of posterior probabilities of benefit for :func:`memo_identity`
    ``identity``: they depend on the priors and the hypothesis, not on the scenario, so
    the scenarios of a design run in one process share it."""
    return new_memo()


def memo_identity(study: AdaptiveStudy) -> str:
    """What the posterior probabilities of benefit of ``study`` depend on."""
    rule = study.arm_rule
    assert rule is not None
    return repr((study.arm_priors, study.prior, rule.versus_control, rule.higher,
                 rule.shift, rule.benchmark, study.looks[-1]))


def scenario_batches(study: AdaptiveStudy, rates: np.ndarray, replicates: int, seed: int,
                     scenario: int, batch: int) -> Iterator[StudyBatch]:
    """The batches of ``batch`` studies of scenario number ``scenario`` (0-based) at
    true ``rates``, in batch order, decided with the process's shared tables and memo
    (:func:`best_tables`, :func:`benefit_memo`)."""
    study.check(rates.size)
    priors = study.arm_priors if study.arm_priors is not None else (study.prior,) * rates.size
    table = best_tables(tuple(priors), int(study.looks[-2]) if len(study.looks) > 1 else 0,
                        study.higher)
    memo = benefit_memo(memo_identity(study))
    for b, start in enumerate(range(0, replicates, batch)):
        yield simulate_batch(study, rates, min(batch, replicates - start), seed, scenario,
                             b, table, memo)


@dataclass(frozen=True)
class AdaptiveTask:
    """One scenario (picklable for the workers of :func:`octrial.execution.run_grid`)."""

    study: AdaptiveStudy
    truth: tuple[float, ...]
    is_null: tuple[bool, ...]
    is_best: tuple[bool, ...]
    replicates: int
    seed: int
    scenario: int
    batch: int
    design_sha256: str = ""

    def identity(self) -> dict[str, Any]:
        """What this scenario's checkpoint records."""
        return scenario_identity(self.design_sha256, self.seed, self.scenario,
                                 "several-arm adaptive")

    def problems(self, arrays: dict[str, np.ndarray]) -> list[str]:
        """What is wrong with ``arrays`` as this scenario's saved tallies."""
        arms = len(self.truth)
        treatments = arms - int(self.study.control)
        return tally_problems(arrays, treatments, len(self.study.looks), arms,
                              self.replicates)


def scenario_sums(task: AdaptiveTask) -> dict[str, np.ndarray]:
    """The tallies of one scenario (the keys of :func:`batch_sums`), added over its
    batches in batch order."""
    rates = np.asarray(task.truth, float)
    study = task.study
    total: dict[str, np.ndarray] = {}
    for part in scenario_batches(study, rates, task.replicates, task.seed, task.scenario,
                                 task.batch):
        sums = batch_sums(study, part, rates, np.array(task.is_null),
                          np.array(task.is_best))
        total = sums if not total else {k: total[k] + v for k, v in sums.items()}
    return total


def posterior_means(study: AdaptiveStudy, n: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Posterior mean of each arm's rate (arms along the last axis) after ``x`` of
    ``n``, by the arm's beta-mixture prior (METHODS.md, binary)."""
    priors = study.arm_priors
    assert priors is not None
    out = np.zeros(n.shape)
    for j, (w, a, b) in enumerate(priors):
        w, a, b = (np.asarray(v, float) for v in (w, a, b))
        nj, xj = n[..., j, None], x[..., j, None]
        log_w = (np.log(w / w.sum()) + special.betaln(a + xj, b + nj - xj)
                 - special.betaln(a, b))
        post = np.exp(log_w - log_w.max(axis=-1, keepdims=True))
        post /= post.sum(axis=-1, keepdims=True)
        out[..., j] = np.sum(post * (a + xj) / (a + b + nj), axis=-1)
    return out


def batch_sums(study: AdaptiveStudy, batch: StudyBatch, rates: np.ndarray,
               is_null: np.ndarray, is_best: np.ndarray) -> dict[str, np.ndarray]:
    """Sums over the studies of a batch, as :mod:`octrial.multiarm.engine` tallies them
    (arms in design order: control first when there is one).

    Keys: ``success`` (T), ``efficacy``, ``futility``, ``drop`` (T, K), ``n_arm`` (A),
    ``scalars`` ([total n, total n squared, any success, any null arm succeeds, studies
    with a selected arm, selected arm truly best, sum of selected estimate - truth]),
    ``end`` (2, K: the study ends at look k with / without a success), ``share`` (K, A)
    and ``running`` (K): allocation probabilities of block k summed over the studies
    that enrol it, and their number; ``look_n`` (K, A): cumulative subjects at look k.
    """
    first = 1 if study.control else 0
    studies, looks, arms = batch.sizes.shape
    outcome = batch.outcome[:, first:]
    stop = batch.dropped[:, first:]
    by_look = np.arange(looks)[None, :, None] == stop[:, None, :]   # (R, K, T)
    success = outcome == 1
    final = batch.sizes[:, -1, :].astype(np.int64)
    total = final.sum(axis=1).astype(float)
    # the selected arm: the successful arm with the best posterior mean at its decision
    at = np.maximum(stop, 0)
    rows = np.arange(studies)[:, None]
    cols = np.arange(first, arms)[None, :]
    n_at = batch.sizes[rows, at, cols]
    x_at = batch.responses[rows, at, cols]
    full_n = np.zeros((studies, arms), np.int64)
    full_x = np.zeros((studies, arms), np.int64)
    full_n[:, first:], full_x[:, first:] = n_at, x_at
    estimate = posterior_means(study, full_n, full_x)[:, first:]
    sign = 1.0 if study.higher else -1.0
    score = np.where(success, sign * estimate, -np.inf)
    chosen = np.argmax(score, axis=1)
    has = success.any(axis=1)
    picked = estimate[np.arange(studies), chosen]
    truth = rates[first:][chosen]
    end = stop.max(axis=1)
    end_table = np.zeros((2, looks))
    np.add.at(end_table[0], end[has], 1)
    np.add.at(end_table[1], end[~has], 1)
    scalars = np.array([
        total.sum(), (total**2).sum(), has.sum(),
        (success & is_null[None, :]).any(axis=1).sum(), has.sum(),
        (has & is_best[chosen]).sum(), (picked - truth)[has].sum()])
    return {"success": success.sum(axis=0).astype(float),
            "efficacy": (by_look & success[:, None, :]).sum(axis=0).T.astype(float),
            "futility": (by_look & (outcome == 2)[:, None, :]).sum(axis=0).T.astype(float),
            "drop": (by_look & (outcome == 0)[:, None, :]).sum(axis=0).T.astype(float),
            "n_arm": final.sum(axis=0).astype(float), "scalars": scalars,
            "end": end_table, "share": batch.allocation.sum(axis=0),
            "running": (batch.allocation.sum(axis=2) > 0).sum(axis=0).astype(float),
            "look_n": batch.sizes.sum(axis=0).astype(float)}
