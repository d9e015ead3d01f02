"""Evaluating candidate designs at the calibration's true values.

Two evaluators share one interface:

* :class:`EngineEvaluator` runs whatever engine :func:`octrial.engines.choose` picks for
  the design (an exact engine, or Monte Carlo). Thresholds are then searched as
  continuous values. Monte Carlo gets one seed for every candidate (the design's, or one
  drawn once and recorded), so every candidate is evaluated on the same simulated
  studies (common random numbers): the kernels draw every study's data before and
  independently of the rule, so a study that succeeds under a stricter threshold
  succeeds under a looser one, and the estimated probability of success is monotone in
  each threshold, as the bisection needs, rather than monotone only up to Monte Carlo
  noise. Its candidates run through the execution layer (:mod:`octrial.execution`): the
  scenarios of a candidate in worker processes, each saved under a key made of the
  candidate design, seed and replicates, so that a resumed calibration takes every
  evaluation already done from disk; a seed drawn for the calibration is saved too.
  ``--target-se`` cannot stop each candidate at its own number of studies without
  breaking the common random numbers, so it fixes one number for every candidate: the
  studies that bound every standard error by the target, 0.25 / SE^2 (capped).
* :class:`LatticeEvaluator` is the fast path for endpoints with a count lattice: the
  posterior tables are computed once per look size and reused by every candidate
  (:class:`~octrial.rules.lattice.LatticeCache`), all true values go through one batched
  dynamic programme (:mod:`octrial.engines.lattice_batch`), the candidate thresholds are the
  distinct posterior probabilities on the lattice (the probability of success is a step
  function of a threshold), and when the interim rules do not depend on the final
  threshold, one pass gives the probability of success under every final threshold at
  once (:meth:`LatticeEvaluator.sweep_final`).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Any

import numpy as np

from octrial.calibration.nulls import Truths
from octrial.design.model import Design
from octrial.engines import choose, engine_for
from octrial.engines.exact_lattice import ExactLatticeEngine
from octrial.engines.lattice_batch import BatchResult, IncrementTables, run_batch
from octrial.engines.monte_carlo import MonteCarloEngine, MonteCarloSettings, replicates_for
from octrial.execution import Execution
from octrial.execution.checkpoints import CheckpointStore, kept_seed
from octrial.execution.progress import StatusLine, clock
from octrial.plurals import count
from octrial.results import proportion_se
from octrial.rules.lattice import DECISION_TOLERANCE, LatticeCache, build_rule


@dataclass(frozen=True, eq=False)
class Assessment:
    """What one candidate achieves at the calibration's true values.

    Attributes
    ----------
    prob_success : ndarray
        Probability of success at every true value (null grid, then the alternative).
    type1, type1_se : float
        Largest probability of success over the null grid, and its Monte Carlo standard
        error (0 when exact).
    worst : int
        Row of the null grid where it occurs.
    power, power_se : float or None
        At the alternative.
    expected_n_null, expected_n_alternative : float or None
        Expected total sample size at the null reference point and at the alternative.
    bayesian : dict or None
        The Bayesian operating characteristics under the design prior (when the truths
        carry design-prior nodes: Bayesian constraints).
    """

    prob_success: np.ndarray
    type1: float
    type1_se: float
    worst: int
    power: float | None
    power_se: float
    expected_n_null: float
    expected_n_alternative: float | None
    bayesian: dict[str, float] | None = None


def bayesian_at(truths: Truths, prob_success: np.ndarray) -> dict[str, Any] | None:
    """The Bayesian operating characteristics from Pr(success) at every true value (the
    last axis; ``None`` without design-prior nodes). A sweep's rows hold, after the null
    grid and the alternative, the three region integrals themselves (``WEIGHTED``
    columns: Pr(null and S), Pr(alternative and S), Pr(relevant and S)) rather than one
    value per node."""
    if truths.prior is None:
        return None
    from octrial.bayesian_oc import metrics, metrics_at

    start = truths.prior_start
    assert start is not None  # set with the prior's nodes
    tail = prob_success[..., start:]
    if tail.shape[-1] == WEIGHTED and len(truths.values) - start != WEIGHTED:
        nodes = truths.prior
        return metrics(tail[..., 0], tail[..., 1], tail[..., 2], nodes.prior_null,
                       nodes.prior_alt, nodes.prior_relevant)
    return metrics_at(truths.prior, tail)


WEIGHTED = 3
"""Region integrals a sweep keeps in place of the design-prior nodes."""


def assessment(
    truths: Truths, prob_success: np.ndarray, expected_n: np.ndarray,
    replicates: np.ndarray | None = None,
) -> Assessment:
    """Summarise per-truth probabilities of success and expected sizes."""
    if replicates is None or not np.any(replicates):
        se = np.zeros(len(prob_success))
    else:
        se = proportion_se(prob_success, replicates)
    null = prob_success[: truths.nulls]
    worst = int(np.argmax(null))
    alt = truths.alternative
    bayesian = bayesian_at(truths, prob_success)
    return Assessment(
        prob_success=prob_success, type1=float(null[worst]), type1_se=float(se[worst]),
        worst=worst,
        power=None if alt is None else float(prob_success[alt]),
        power_se=0.0 if alt is None else float(se[alt]),
        expected_n_null=float(expected_n[truths.reference]),
        expected_n_alternative=None if alt is None else float(expected_n[alt]),
        bayesian=None if bayesian is None else {k: float(v) for k, v in bayesian.items()},
    )


@dataclass(frozen=True, eq=False)
class Sweep:
    """Probability of success under every candidate final threshold at once.

    Attributes
    ----------
    values : ndarray
        Candidate final thresholds (posterior probabilities, or counts for count rules),
        from least to most stringent.
    prob_success : ndarray, shape (candidates, truths)
    expected_n : ndarray, shape (truths,)
        The same for every candidate (the final look is reached either way).
    """

    values: np.ndarray
    prob_success: np.ndarray
    expected_n: np.ndarray


class Evaluator:
    """The interface; see the module docstring."""

    exact: bool = True

    def __init__(self, truths: Truths) -> None:
        self.truths = truths
        self.evaluations = 0

    def assess(self, design: Design) -> Assessment:
        """Evaluate one candidate at every true value."""
        raise NotImplementedError

    def sweep_final(self, design: Design) -> Sweep | None:
        """Every candidate final threshold at once, or ``None`` when not available."""
        return None

    def distinct_values(self, design: Design, looks: list[int]) -> np.ndarray | None:
        """Distinct posterior probabilities at the given looks (0-based), or ``None``
        when thresholds are continuous for this evaluator."""
        return None

    def benefit(self, design: Design, look: int) -> np.ndarray | None:
        """The posterior probability table at one look (lattice evaluators only)."""
        return None

    def finish(self) -> None:
        """End any progress display (called once the calibration stops)."""


class EngineEvaluator(Evaluator):
    """Any engine, through its ``run`` method (see module docstring).

    Parameters
    ----------
    truths : Truths
    method : str, optional
        Engine method override.
    settings : MonteCarloSettings, optional
        Monte Carlo only: replicates (default ``simulation.replicates``), seed (default
        ``simulation.seed``, else drawn once), or a target standard error that fixes the
        replicates (see module docstring).
    execution : Execution, optional
        Monte Carlo only: workers, checkpoints, progress, for every candidate.
    seed_store : CheckpointStore, optional
        Where a drawn seed is saved, so that a resumed calibration draws the same one.

    Attributes
    ----------
    seed : int or None
        Monte Carlo only: the one seed every candidate is simulated with.
    seed_drawn : bool
        Whether it was drawn rather than given.
    replicates : int or None
        Monte Carlo only: studies per true value and candidate.
    scenarios_resumed : int
        Scenario results taken from the checkpoints of an interrupted earlier run.
    """

    def __init__(self, truths: Truths, method: str | None = None,
                 settings: MonteCarloSettings | None = None,
                 execution: Execution | None = None,
                 seed_store: CheckpointStore | None = None) -> None:
        super().__init__(truths)
        self.method = method
        self.exact = method not in ("monte-carlo",)
        self.settings = settings or MonteCarloSettings()
        self.execution = execution or Execution()
        self.seed_store = seed_store
        self.seed: int | None = None
        self.seed_drawn = False
        self.replicates: int | None = None
        self.scenarios_resumed = 0
        self.done: dict[str, Assessment] = {}
        self.status: StatusLine | None = None
        self.saved = 0

    def assess(self, design: Design) -> Assessment:
        engine = choose(design, self.method)
        key = None
        if engine is not MonteCarloEngine:
            outcome = engine.run(design, self.truths.values, estimate=False)
        else:
            key = repr(design)  # the bisection asks for some candidates twice
            if key in self.done:
                return self.done[key]
            outcome = engine.run(design, self.truths.values, settings=self._settings(design),
                                 execution=self._execution())
            self.scenarios_resumed += outcome.info["scenarios_resumed"]
        self.evaluations += 1
        self.exact = outcome.method == "exact"
        stop = outcome.efficacy + outcome.futility
        expected_n = stop @ np.asarray(design.looks.n, dtype=float)
        found = assessment(self.truths, outcome.efficacy.sum(axis=1), expected_n,
                           outcome.replicates)
        if key is not None:
            self.done[key] = found
            self._show(f"{count(self.evaluations, 'candidate')} simulated, the last with type I "
                       f"error {found.type1:.4g}")
        return found

    def _settings(self, design: Design) -> MonteCarloSettings:
        """One seed and one number of studies for every candidate."""
        if self.seed is None:
            given = self.settings.seed
            self.seed, self.seed_drawn = kept_seed(
                self.seed_store, design.simulation.seed if given is None else given)
        target = self.settings.target_se
        self.replicates = (min(replicates_for(target), self.settings.max_replicates)
                           if target is not None else
                           self.settings.replicates or design.simulation.replicates)
        return dataclasses.replace(self.settings, seed=self.seed, replicates=self.replicates,
                                   target_se=None)

    def _execution(self) -> Execution:
        """The execution for one candidate: its own progress bar replaced by one status
        line for the whole calibration."""
        if self.execution.progress and self.status is None:
            self.status = StatusLine()
        self.saved = 0
        return dataclasses.replace(self.execution, progress=False, on_saved=self._on_saved)

    def _on_saved(self, index: int) -> None:
        self.saved += 1
        self._show(f"candidate {self.evaluations + 1}: {self.saved} of "
                   f"{len(self.truths.values)} true values simulated")
        if self.execution.on_saved is not None:
            self.execution.on_saved(index)

    def _show(self, text: str, force: bool = False) -> None:
        if self.status is not None:
            self.status.show(f"calibrating by simulation: {text}; "
                             f"{clock(self.status.elapsed())} elapsed", force)

    def finish(self) -> None:
        if self.status is not None:
            self.status.close()


def distinct(values: np.ndarray) -> np.ndarray:
    """Sorted distinct values, merging runs closer than the decision tolerance (each run is
    represented by its smallest member, the least stringent threshold that keeps the run
    together)."""
    v = np.unique(np.asarray(values, dtype=float).ravel())
    if v.size == 0:
        return v
    keep = np.ones(v.size, dtype=bool)
    # a run's smallest member is kept: drop a value when the one below is within tolerance
    keep[1:] = np.diff(v) > DECISION_TOLERANCE
    return v[keep]


class LatticeEvaluator(Evaluator):
    """The lattice fast path (see module docstring)."""

    CHUNK = 2000
    """True values per batched programme (design-prior nodes can number thousands)."""

    def __init__(self, truths: Truths, design: Design) -> None:
        super().__init__(truths)
        self.cache = LatticeCache()
        values = truths.values
        self.chunks = [IncrementTables(design, values[i:i + self.CHUNK])
                       for i in range(0, len(values), self.CHUNK)]

    def _batch(self, design: Design, rule) -> BatchResult:
        """:func:`run_batch` over every true value, a chunk at a time (memory)."""
        parts = [run_batch(design, rule, inc) for inc in self.chunks]
        if len(parts) == 1:
            return parts[0]
        return BatchResult(np.concatenate([p.efficacy for p in parts]),
                           np.concatenate([p.futility for p in parts]), None,
                           np.concatenate([p.neglected for p in parts]))

    def rule(self, design: Design):
        """The candidate's lattice rule, from the shared posterior tables."""
        if self.truths.prior is not None and getattr(design.family, "truncates", False):
            # a truncated lattice sized for the design-prior nodes too
            return build_rule(design, self.cache, truths=self.truths.values)
        return build_rule(design, self.cache)

    def assess(self, design: Design) -> Assessment:
        result = self._batch(design, self.rule(design))
        self.evaluations += 1
        stop = result.efficacy + result.futility
        expected_n = stop @ np.asarray(design.looks.n, dtype=float)
        return assessment(self.truths, result.efficacy.sum(axis=1), expected_n)

    def benefit(self, design: Design, look: int) -> np.ndarray | None:
        if any(a.prior is None for a in design.arms):
            return None
        return self.cache.benefit(design, design.looks.per_arm[look])

    def distinct_values(self, design: Design, looks: list[int]) -> np.ndarray | None:
        tables = [self.benefit(design, k) for k in looks]
        present = [t for t in tables if t is not None]
        if len(present) < len(tables):
            return None
        if not present:
            return np.array([])
        return distinct(np.concatenate([t.ravel() for t in present]))

    def _final_reach(self, design: Design, rule) -> tuple[np.ndarray, ...]:
        """Per true value: Pr(success before the last look), the expected size of the
        interim looks, and the distribution of the counts reaching the final analysis.

        Design-prior nodes are reduced chunk by chunk to their three weighted sums (the
        region integrals, :data:`WEIGHTED` rows; see :func:`bayesian_at`), so that
        thousands of nodes never hold a final lattice each."""
        n = np.asarray(design.looks.n, dtype=float)
        start = self.truths.prior_start
        nodes = self.truths.prior
        early, interim, reach = [], [], []
        weighted: list[np.ndarray] | None = None
        done = 0
        for inc in self.chunks:
            part = run_batch(design, rule, inc, keep_final=True)
            assert part.reach is not None  # kept (keep_final)
            e = part.efficacy[:, :-1].sum(axis=1)
            i = (part.efficacy[:, :-1] + part.futility[:, :-1]) @ n[:-1]
            r = part.reach.reshape(len(e), -1)
            rows = np.arange(done, done + len(e))
            done += len(e)
            base = rows < start if start is not None else np.ones(len(e), dtype=bool)
            early.append(e[base])
            interim.append(i[base])
            reach.append(r[base])
            if not base.all():
                assert start is not None and nodes is not None  # only nodes are not base
                at = rows[~base] - start
                w = np.stack([nodes.w_null[at], nodes.w_alt[at], nodes.w_relevant[at]])
                sums = [w @ e[~base], w @ i[~base], w @ r[~base]]
                weighted = sums if weighted is None else [
                    a + b for a, b in zip(weighted, sums, strict=True)]
        if weighted is not None:
            early.append(weighted[0])
            interim.append(weighted[1])
            reach.append(weighted[2])
        return np.concatenate(early), np.concatenate(interim), np.vstack(reach)

    def sweep_final(self, design: Design) -> Sweep | None:
        looks = design.looks
        if any(v is not None for v in looks.futility_predictive[:-1]):
            return None  # interim futility depends on the final threshold
        rule = self.rule(design)
        early, interim, reach = self._final_reach(design, rule)
        self.evaluations += 1
        n = np.asarray(looks.n, dtype=float)
        expected_n = interim + n[-1] * reach.sum(axis=1)
        if looks.uses_counts:
            counts = np.arange(reach.shape[1])
            score = counts if design.hypothesis.better == "higher" else -counts
            order = np.argsort(-score, kind="stable")
            cum = np.cumsum(reach[:, order], axis=1)
            values = score[order] * (1 if design.hypothesis.better == "higher" else -1)
            # values[i] as the bound: success on the first i+1 counts of ``order``
            prob = early[None, :] + cum.T
            return Sweep(values[::-1], prob[::-1], expected_n)
        score = rule.final.benefit.ravel()
        order = np.argsort(-score, kind="stable")
        ranked = score[order]
        cum = np.cumsum(reach[:, order], axis=1)
        # group ranks whose scores are within the tolerance of the next: a threshold at a
        # group's smallest score admits exactly the group and everything above it.
        ends = np.flatnonzero(np.append(ranked[:-1] - ranked[1:] > DECISION_TOLERANCE, True))
        values = ranked[ends]
        prob = early[None, :] + cum[:, ends].T
        if values[0] < 1.0 - 2 * DECISION_TOLERANCE:  # 'never succeed at the final look'
            values = np.append(1.0, values)
            prob = np.vstack([early[None, :], prob])
        return Sweep(values[::-1], prob[::-1], expected_n)


def evaluator_for(design: Design, truths: Truths, method: str | None = None,
                  settings: MonteCarloSettings | None = None,
                  execution: Execution | None = None,
                  seed_store: CheckpointStore | None = None) -> Evaluator:
    """The fast lattice evaluator when the exact lattice engine applies, else the engine's
    (``settings``, ``execution`` and ``seed_store`` as for :class:`EngineEvaluator`)."""
    if method in (None, "auto", "exact") and engine_for(design, method) is ExactLatticeEngine:
        return LatticeEvaluator(truths, design)
    return EngineEvaluator(truths, method, settings, execution, seed_store)
