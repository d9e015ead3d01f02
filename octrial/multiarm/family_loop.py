"""The several-arm study loop for families without a lattice (normal with known or
unknown sd, time-to-event without ``[conduct]``), fixed allocation.

Vectorised numpy over the studies of a batch. At each look every arm still enrolling
adds its planned subjects; each treatment arm still in the study is judged by its own
two-arm (one-arm) design: the family's posterior probability of benefit from the arm's
and the control's statistics at the planned sizes, and the one stop rule
(:meth:`octrial.rules.stop.Rule.decide_many`); then arms whose probability of being the
best (:mod:`octrial.multiarm.continuous_best`, among the arms still in) is below the
look's threshold are dropped, and at most ``selection.keep`` go on. The control enrols
while any treatment arm does; the study ends when no treatment arm is left. The tallies
are those of :mod:`octrial.multiarm.tallies`, so :func:`octrial.multiarm.engine.columns`
makes the same columns as for lattice families.

Data, per batch of :data:`octrial.multiarm.engine.BATCH` studies from the generator
``Generator(PCG64(SeedSequence(seed, spawn_key=(scenario, batch))))``, arms in slot order
(treatments in file order, then the control):

- normal: every arm's increments at every look drawn at once, whether or not the arm
  still enrols, by the draw of the two-arm normal simulators
  (:func:`octrial.simulation.normal.draw_increments`: increment means, and for an
  unknown sd sums of squares), so an arm's data do not depend on the others' fate and
  one treatment arm draws the two-arm design's numbers;
- time-to-event (every event observed, looks counting subjects): look by look, arm by
  arm, the family's :meth:`draw_statistics` for the studies still running, as the
  generic study loop (:mod:`octrial.simulation.generic`) draws them.

Pr(best) and the selected arm's estimate use each arm's posterior of its own parameter:
its own prior when the arm has one (a one-arm rule against a benchmark, normal-inverse-
gamma priors with an unknown sd, gamma priors of time-to-event arms), otherwise a flat
prior (a known-sd rule whose prior is on the difference with the control: the arm's mean
is then N(ybar, sd^2 / n); a time-to-event rule with its prior on the log hazard ratio:
Gamma(events, exposure)).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import Any

import numba
import numpy as np
from scipy import special

from octrial.endpoints import unknown_sd
from octrial.endpoints.count import GammaMixture
from octrial.endpoints.normal import Flat, update
from octrial.engines.monte_carlo import batch_generator
from octrial.errors import bad_setting
from octrial.multiarm.continuous_best import ArmPosteriors, probability_best
from octrial.multiarm.model import MultiArmDesign
from octrial.multiarm.tallies import scenario_identity, tally_problems
from octrial.rules.stop import EFFICACY, FUTILITY, Rule
from octrial.simulation import student_t
from octrial.simulation.normal import draw_increments

__all__ = ["FamilyTask", "family_sums", "refuse_unsupported", "serves"]

FAMILIES = ("normal", "time-to-event")


def serves(design: MultiArmDesign) -> bool:
    """Whether this loop (rather than the lattice tables) simulates ``design``."""
    return not getattr(design.family, "lattice", False)


def refuse_unsupported(design: MultiArmDesign) -> None:
    """Raise :class:`~octrial.errors.SettingsError`, naming the design-file key, for what
    this loop does not simulate."""
    name = getattr(design.family, "name", type(design.family).__name__)

    def refuse(key: str, expected: str, got: object) -> None:
        raise bad_setting("design", key, expected, got)

    if name not in FAMILIES:
        refuse("endpoint.type", "a binary, count, normal or time-to-event endpoint for "
               "several-arm simulation", name)
    if design.allocation.adaptive:
        refuse("allocation.kind", "'fixed' for normal and time-to-event endpoints "
               "(response-adaptive allocation covers binary endpoints)",
               design.allocation.kind)
    for pair in design.pairs:
        if pair.conduct is not None:
            refuse("conduct", "no [conduct] table: several-arm designs are simulated with "
                   "looks counting subjects", "a [conduct] table")
        if any(v is not None for v in pair.looks.futility_predictive):
            refuse("looks.futility_predictive", "no predictive futility for several-arm "
                   "normal or time-to-event designs (not simulated yet)",
                   pair.looks.futility_predictive)
        if pair.looks.uses_counts:
            refuse("looks.efficacy_count", "probability thresholds (rules in counts need "
                   "a binary or count endpoint)", "a rule in counts")
        if getattr(pair.looks, "trigger", None) in ("events", "time"):
            refuse("looks.events", "looks counting subjects (looks.n)", pair.looks.trigger)
        reason = design.family.simulation_unsupported(pair)
        if reason:
            refuse("endpoint", "a design the family can simulate", reason)


# -- each family's statistics, benefit and own posterior -------------------------------
class _Arms:
    """Statistics of every arm (slot order) in the studies of one batch."""

    def __init__(self, design: MultiArmDesign, truth: np.ndarray, per_arm: np.ndarray,
                 reps: int) -> None:
        self.design = design
        self.family = design.family
        self.truth = truth
        self.per_arm = per_arm  # (K, A) cumulative planned sizes, slot order
        self.increments = np.diff(per_arm, axis=0, prepend=0)
        self.T = len(design.treatments)
        self.control = design.shared_control
        self.reps = reps

    def statistics(self, t: int, k: int, rows: np.ndarray) -> tuple[tuple[np.ndarray, ...],
                                                                     tuple[int, ...]]:
        """Arm t's rule's statistics (treatment, then control) and sizes at look k."""
        raise NotImplementedError

    def draw(self, rng: np.random.Generator) -> None:
        """The batch's data drawn in advance (none for families drawn look by look)."""

    def add(self, k: int, rng: np.random.Generator, running: np.ndarray) -> None:
        """Look k's new data for the studies still ``running`` (none for families
        drawn in advance)."""

    def benefit(self, t: int, k: int, rows: np.ndarray) -> np.ndarray:
        pair = self.design.pairs[t]
        stats_, n = self.statistics(t, k, rows)
        return np.asarray(self.family.benefit_at(pair, stats_, n), dtype=float)

    def own(self, t: int, k: int, rows: np.ndarray) -> ArmPosteriors:
        """Arm t's posterior of its own parameter at look k in the studies ``rows``."""
        raise NotImplementedError

    def slots(self, t: int) -> tuple[int, ...]:
        return (t, self.T) if self.control else (t,)


class _KnownSd(_Arms):
    """Normal, known sd: an arm's statistic is the sum of its outcomes."""

    def __init__(self, design: MultiArmDesign, truth: np.ndarray, per_arm: np.ndarray,
                 reps: int) -> None:
        super().__init__(design, truth, per_arm, reps)
        endpoint: Any = design.endpoint
        self.endpoint = endpoint
        self.sd = float(endpoint.sd) if endpoint.known_sd else math.nan
        self.sums = np.zeros((reps, per_arm.shape[0], per_arm.shape[1]))

    def draw(self, rng: np.random.Generator) -> None:
        sd = np.full(self.truth.size, self.sd)
        means, _ = draw_increments(rng, self.reps, self.increments, self.truth, sd, False)
        self.sums = np.cumsum(means * self.increments, axis=1)

    def statistics(self, t: int, k: int, rows: np.ndarray) -> tuple[tuple[np.ndarray, ...],
                                                                     tuple[int, ...]]:
        slots = self.slots(t)
        return (tuple(self.sums[rows, k, a] for a in slots),
                tuple(int(self.per_arm[k, a]) for a in slots))

    def own(self, t: int, k: int, rows: np.ndarray) -> ArmPosteriors:
        pair = self.design.pairs[t]
        # the rule's prior is on the difference with the control: flat for the arm's mean
        prior = self.family.analysis_prior(pair) if not pair.two_arm else Flat()
        n = float(self.per_arm[k, t])
        post = update(prior, 1, n / self.sd**2, self.sums[rows, k, t] / self.sd**2)
        return ArmPosteriors.of("normal", post.weights, post.mean,
                                1.0 / np.sqrt(post.precision))


class _UnknownSd(_KnownSd):
    """Normal, unknown sd: sums and sums of squared deviations (normal-inverse-gamma
    priors, one per arm)."""

    def draw(self, rng: np.random.Generator) -> None:
        sd = np.full(self.truth.size, float(self.endpoint.true_sd))
        means, squares = draw_increments(rng, self.reps, self.increments, self.truth, sd,
                                         True)
        assert squares is not None  # asked for
        m = self.increments[None, :, :].astype(float)
        before = np.zeros(means.shape[::2])
        total = np.zeros(means.shape[::2])
        ss = np.zeros(means.shape[::2])
        self.sums = np.zeros(means.shape)
        self.squares = np.zeros(means.shape)
        for k in range(means.shape[1]):
            # pooled sums of squares (Chan, Golub & LeVeque 1983)
            mean_k, add = means[:, k], m[:, k]
            gap = np.where(before > 0, total / np.maximum(before, 1.0) - mean_k, 0.0)
            ss = ss + squares[:, k] + before * add / (before + add) * gap * gap
            total = total + add * mean_k
            before = before + add
            self.sums[:, k], self.squares[:, k] = total, ss

    def _posterior(self, t: int, slot: int, j: int, k: int,
                   rows: np.ndarray) -> unknown_sd.StudentPosterior:
        prior = self.design.pairs[t].arms[j].prior
        n = int(self.per_arm[k, slot])
        ybar = self.sums[rows, k, slot] / n
        sd = np.sqrt(self.squares[rows, k, slot] / (n - 1))
        return unknown_sd.update(prior.mean, prior.mean_n, prior.shape, prior.scale, n=n,
                                 ybar=ybar, sd=sd)

    def benefit(self, t: int, k: int, rows: np.ndarray) -> np.ndarray:
        h = self.design.pairs[t].hypothesis
        posts = [self._posterior(t, a, j, k, rows) for j, a in enumerate(self.slots(t))]
        df = [p.df for p in posts]
        loc = [h.sign * np.asarray(p.mean) for p in posts]
        scale = [np.sqrt(np.asarray(p.scale) / (p.shape * p.mean_n)) for p in posts]
        if len(posts) == 1:
            assert h.benchmark is not None  # one arm (load.py)
            claim = h.sign * h.benchmark
            return np.asarray(special.stdtr(df[0], (loc[0] - claim) / scale[0]))
        # the two-arm kernel's Behrens-Fisher quadrature (simulation/student_t.py), on
        # the benefit scale (the t is symmetric, so reflecting both arms is exact)
        out = np.empty(loc[0].size)
        # numba's Dispatcher type does not carry the compiled function's parameters
        _difference_exceeds(  # type: ignore[call-arg]
            loc[0], scale[0], float(df[0]), loc[1], scale[1], float(df[1]),
            float(h.shift), *_t_rules(float(df[0]), float(df[1])), out)
        return out

    def own(self, t: int, k: int, rows: np.ndarray) -> ArmPosteriors:
        p = self._posterior(t, t, 0, k, rows)
        scale = np.sqrt(np.asarray(p.scale) / (p.shape * p.mean_n))
        return ArmPosteriors.of("t", np.ones(scale.size), np.asarray(p.mean), scale,
                                np.full(scale.size, p.df))


@functools.lru_cache(maxsize=64)
def _t_rules(df_treatment: float, df_control: float) -> tuple[np.ndarray, ...]:
    """The packed sinh rules of the two arms' degrees of freedom (rows 0 and 1)."""
    return student_t.rules([df_treatment, df_control])


@numba.njit(cache=True)
def _difference_exceeds(loc_x, scale_x, df_x, loc_y, scale_y, df_y, shift, nodes, weights,
                        start, out):  # pragma: no cover - compiled
    """Pr(X - Y > shift) per study, X the treatment (rule row 0), Y the control (row 1)."""
    for r in range(out.size):
        out[r] = student_t.prob_difference_exceeds(
            loc_x[r], scale_x[r], df_x, 0, loc_y[r], scale_y[r], df_y, 1, shift, nodes,
            weights, start)


class _Exponential(_Arms):
    """Time-to-event, every event observed: an arm's statistic is its total time on
    study (its exposure); its events are its subjects."""

    def __init__(self, design: MultiArmDesign, truth: np.ndarray, per_arm: np.ndarray,
                 reps: int) -> None:
        super().__init__(design, truth, per_arm, reps)
        self.exposure = np.zeros((reps, per_arm.shape[1]))
        self.at = np.zeros((reps, per_arm.shape[0], per_arm.shape[1]))

    def draw(self, rng: np.random.Generator) -> None:
        """Nothing in advance: drawn look by look (:meth:`add`)."""

    def add(self, k: int, rng: np.random.Generator, running: np.ndarray) -> None:
        rows = np.flatnonzero(running)
        pair = self.design.pairs[0]
        for a in range(self.per_arm.shape[1]):
            j = 0 if a < self.T else 1
            self.exposure[rows, a] += self.family.draw_statistics(
                pair, j, float(self.truth[a]), int(self.increments[k, a]), rng, rows.size)
        self.at[:, k] = self.exposure

    def statistics(self, t: int, k: int, rows: np.ndarray) -> tuple[tuple[np.ndarray, ...],
                                                                     tuple[int, ...]]:
        slots = self.slots(t)
        return (tuple(self.at[rows, k, a] for a in slots),
                tuple(int(self.per_arm[k, a]) for a in slots))

    def own(self, t: int, k: int, rows: np.ndarray) -> ArmPosteriors:
        prior = self.design.pairs[t].arms[0].prior
        events = np.full((np.size(self.at[rows, k, t]), 1), float(self.per_arm[k, t]))
        exposure = self.at[rows, k, t].reshape(-1, 1)
        if isinstance(prior, GammaMixture):
            w, a, b = self.family.posterior(prior, events, exposure)
            return ArmPosteriors.of("gamma", w, a[..., 0], b[..., 0])
        return ArmPosteriors.of("gamma", np.ones(events.shape[0]), events[:, 0],
                                exposure[:, 0])


def _arms(design: MultiArmDesign, truth: np.ndarray, per_arm: np.ndarray,
          reps: int) -> _Arms:
    if getattr(design.family, "name", "") == "time-to-event":
        return _Exponential(design, truth, per_arm, reps)
    endpoint: Any = design.endpoint
    if endpoint.known_sd:
        return _KnownSd(design, truth, per_arm, reps)
    return _UnknownSd(design, truth, per_arm, reps)


# -- the study loop ----------------------------------------------------------------------
@dataclass(frozen=True)
class FamilyTask:
    """One scenario of a normal or time-to-event several-arm design (picklable)."""

    design: MultiArmDesign
    row: tuple[float, ...]
    nulls: tuple[bool, ...]
    best: tuple[bool, ...]
    replicates: int
    seed: int
    index: int
    batch: int

    def identity(self) -> dict[str, Any]:
        """What this scenario's checkpoint records."""
        return scenario_identity(self.design.source.sha256, self.seed, self.index,
                                 "several-arm family loop", self.batch)

    def problems(self, arrays: dict[str, np.ndarray]) -> list[str]:
        """What is wrong with ``arrays`` as this scenario's saved tallies."""
        d = self.design
        return tally_problems(arrays, len(d.treatments), d.looks.count, len(d.arm_names),
                              self.replicates)


def family_sums(task: FamilyTask) -> dict[str, np.ndarray]:
    """The tallies of one scenario (the keys of :mod:`octrial.multiarm.tallies`; arms in
    design order)."""
    design = task.design
    T, K, A = len(design.treatments), design.looks.count, len(design.arm_names)
    order = np.roll(np.arange(A), -1) if design.shared_control else np.arange(A)
    truth = np.asarray(task.row, dtype=float)[order]
    per_arm = np.array(design.looks.per_arm, dtype=np.int64)[:, order]
    sums: dict[str, np.ndarray] = {
        "success": np.zeros(T, np.int64), "efficacy": np.zeros((T, K), np.int64),
        "futility": np.zeros((T, K), np.int64), "drop": np.zeros((T, K), np.int64),
        "n_arm": np.zeros(A, np.int64), "scalars": np.zeros(7),
        "end": np.zeros((2, K), np.int64), "share": np.zeros((K, A)),
        "running": np.zeros(K, np.int64), "look_n": np.zeros((K, A), np.int64)}
    for b in range(-(-task.replicates // task.batch)):
        reps = min(task.batch, task.replicates - b * task.batch)
        _batch(design, task, truth, per_arm, reps, batch_generator(task.seed, task.index, b),
               sums)
    back = np.argsort(order)
    for key in ("n_arm",):
        sums[key] = sums[key][back]
    sums["share"] = sums["share"][:, back]
    sums["look_n"] = sums["look_n"][:, back]
    return sums


def _batch(design: MultiArmDesign, task: FamilyTask, truth: np.ndarray,
           per_arm: np.ndarray, reps: int, rng: np.random.Generator,
           sums: dict[str, np.ndarray]) -> None:
    """Simulate one batch of ``reps`` studies and add its tallies into ``sums``."""
    T, K = len(design.treatments), design.looks.count
    arms = _arms(design, truth, per_arm, reps)
    arms.draw(rng)
    inc = arms.increments
    rules = [Rule.of(p.looks) for p in design.pairs]
    higher = design.hypothesis.better == "higher"
    sign = 1.0 if higher else -1.0
    drop_below = [-1.0 if v is None else float(v) for v in design.looks.drop_if_best_below]
    keep = design.selection.keep or 0
    active = np.ones((reps, T), bool)
    success = np.zeros((reps, T), bool)
    estimate = np.zeros((reps, T))
    running = np.ones(reps, bool)
    end = np.full(reps, K - 1)
    n_arm = np.zeros((reps, inc.shape[1]), np.int64)
    for k in range(K):
        enrolling = np.concatenate([active, np.broadcast_to(running[:, None],
                                                            (reps, inc.shape[1] - T))], 1)
        block = enrolling @ inc[k]
        opened = running & (block > 0)
        sums["running"][k] += int(np.count_nonzero(opened))
        sums["share"][k] += (enrolling[opened] * inc[k] / block[opened, None]).sum(axis=0)
        arms.add(k, rng, running)
        n_arm += enrolling * inc[k]
        sums["look_n"][k] += n_arm.sum(axis=0)
        for t in range(T):
            rows = np.flatnonzero(active[:, t])
            if rows.size == 0:
                continue
            codes = rules[t].decide_many(k, arms.benefit(t, k, rows))
            won = rows[codes == EFFICACY]
            lost = rows[codes == FUTILITY]
            if won.size:
                success[won, t] = True
                estimate[won, t] = arms.own(t, k, won).mean()
            active[won, t] = False
            active[lost, t] = False
            sums["efficacy"][t, k] += won.size
            sums["futility"][t, k] += lost.size
        left = active.sum(axis=1)
        if k < K - 1 and (drop_below[k] >= 0 or keep > 0):
            rows = np.flatnonzero(left > 1 if drop_below[k] < 0 else left > 0)
            if rows.size:
                probs = probability_best([arms.own(t, k, rows) for t in range(T)],
                                         active[rows], higher)
                _drop(rows, probs, active, drop_below[k], keep, sums["drop"][:, k])
            left = active.sum(axis=1)
        ending = running & (left == 0)
        end[ending] = k
        running &= ~ending
    total = n_arm.sum(axis=1).astype(float)
    any_success = success.any(axis=1)
    nulls = np.asarray(task.nulls, bool)
    sums["success"] += success.sum(axis=0)
    sums["end"][0] += np.bincount(end[any_success], minlength=K)
    sums["end"][1] += np.bincount(end[~any_success], minlength=K)
    sums["n_arm"] += n_arm.sum(axis=0)
    # the selected arm: the successful arm with the best estimate (ties: the first)
    scored = np.where(success, sign * estimate, -np.inf)
    chosen = np.argmax(scored, axis=1)[any_success]
    picked = np.flatnonzero(any_success)
    treat_truth = truth[:T]
    sums["scalars"] += [total.sum(), (total * total).sum(), any_success.sum(),
                        (success & nulls).any(axis=1).sum(), picked.size,
                        np.asarray(task.best, bool)[chosen].sum(),
                        (estimate[picked, chosen] - treat_truth[chosen]).sum()]


def _drop(rows: np.ndarray, probs: np.ndarray, active: np.ndarray, below: float,
          keep: int, dropped: np.ndarray) -> None:
    """Drop arms of the studies ``rows`` with Pr(best) under ``below`` (when >= 0), then
    the least likely to be the best (ties: the later arm) until ``keep`` are left."""
    live = active[rows]
    if below >= 0:
        out = live & (probs < below)
        dropped += out.sum(axis=0)
        live &= ~out
    if keep > 0:
        T = live.shape[1]
        while True:
            over = live.sum(axis=1) > keep
            if not over.any():
                break
            masked = np.where(live[over], probs[over], math.inf)
            worst = T - 1 - np.argmin(masked[:, ::-1], axis=1)
            sub = live[over]
            sub[np.arange(sub.shape[0]), worst] = False
            live[over] = sub
            dropped += np.bincount(worst, minlength=T)
    active[rows] = live
