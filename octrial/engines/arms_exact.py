"""Exact operating characteristics of several treatment arms with fixed allocation.

Each treatment arm is judged by its own rule against a shared control (or against a
benchmark): the two-arm (or one-arm) design of that arm alone, whose lattice tables
(:func:`~octrial.rules.lattice.build_rule`) say where the arm stops for efficacy or is
dropped for futility at each look. With fixed allocation and such per-arm rules the
arms are linked only through the shared control, so given the control's path of counts
(x_C at every look) each treatment arm is an independent one-dimensional programme, and
the arms are independent of one another. The engine therefore walks the tree of control
paths look by look, carrying for every path its probability and each arm's conditional
distribution of counts on the paths where that arm is still in the study; joint
quantities (the family-wise error, Pr(at least one arm succeeds), the control's sample
size) are products over arms within a path, summed over paths. The control stops when
every treatment arm has stopped.

The number of control paths is the product over looks of the control's increment
sizes plus one, so the engine is for small studies (it refuses more than
:data:`MAX_CELLS` path-by-count cells, about 80 MB per copy); against a benchmark there
is one path and any number of arms and subjects is cheap. Rules that couple the arms
(dropping when Pr(best) is low, selection, response-adaptive allocation) are outside
it: they need the joint lattice or simulation.

With one treatment arm the walk is the two-arm programme of
:mod:`octrial.engines.lattice_programme` summed in another order (equal to rounding).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from octrial.design.model import Design
from octrial.engines.lattice_programme import add_increment
from octrial.multiarm.model import MultiArmDesign
from octrial.rules.lattice import LatticeCache, LatticeRule, build_rule

__all__ = ["MAX_CELLS", "ArmsOutcome", "check_pairs", "evaluate_design", "run_arms",
           "stopping_sd", "unsupported"]

MAX_CELLS = 10_000_000
"""Largest number of (control path, arm count) cells the engine will hold at one look,
summed over the treatment arms: a memory bound."""


@dataclass(frozen=True, eq=False)
class ArmsOutcome:
    """Exact operating characteristics of a several-arm study, one row per scenario.

    Attributes
    ----------
    efficacy, futility : ndarray, shape (scenarios, arms, looks)
        Pr(treatment arm j stops for efficacy / is dropped for futility at look k); at the
        last look, Pr(the arm succeeds / fails at the final analysis).
    successes : ndarray, shape (scenarios, arms + 1)
        Pr(exactly r treatment arms succeed), r = 0 .. arms.
    family_wise : ndarray, shape (scenarios,)
        Pr(at least one null arm succeeds): the family-wise error rate (0 where no arm is
        null).
    null : ndarray of bool, shape (scenarios, arms)
        Which arms lie in the null region of their own comparison (boundary included).
    reach : ndarray, shape (scenarios, looks)
        Pr(the study reaches look k): at least one treatment arm still in it.
    expected_n : ndarray, shape (scenarios, arms + 1)
        Expected subjects per treatment arm, then the control (0 against a benchmark).
    neglected : ndarray, shape (scenarios,)
        Probability mass dropped by truncating an unbounded count (0 for binary data).
    study_efficacy, study_futility : ndarray, shape (scenarios, looks)
        Pr(the study ends at look k with at least one successful arm / with none).
    uncertain : ndarray, shape (scenarios,)
        Summed over arms, the probability of reaching a point whose decision numerical
        error could change (posteriors on a grid; see
        :class:`~octrial.rules.lattice.LookTable`); 0 for closed-form posteriors.
    """

    efficacy: np.ndarray
    futility: np.ndarray
    successes: np.ndarray
    family_wise: np.ndarray
    null: np.ndarray
    reach: np.ndarray
    expected_n: np.ndarray
    neglected: np.ndarray
    study_efficacy: np.ndarray
    study_futility: np.ndarray
    uncertain: np.ndarray

    @property
    def success(self) -> np.ndarray:
        """Pr(treatment arm j succeeds), shape (scenarios, arms)."""
        total: np.ndarray = self.efficacy.sum(axis=2)
        return total

    @property
    def any_success(self) -> np.ndarray:
        """Pr(at least one treatment arm succeeds): the study's success."""
        return 1.0 - self.successes[:, 0]

    def table(self, names: Sequence[str], control: bool = True) -> pd.DataFrame:
        """One row per scenario, in the several-arm columns of oc.csv (the Monte Carlo
        engine's names, :mod:`octrial.multiarm.engine`): study-level columns, then per
        treatment arm ``<arm>_<quantity>``. ``<arm>_look<k>_drop`` (dropping on Pr(best)
        or selection) is 0: this engine serves designs without either."""
        looks = self.efficacy.shape[2]
        cols: dict[str, np.ndarray] = {
            "prob_success": self.any_success,
            "fwer": self.family_wise,
            "prob_stop_efficacy": self.study_efficacy[:, :-1].sum(axis=1),
            "prob_stop_futility": self.study_futility[:, :-1].sum(axis=1),
            "expected_n": self.expected_n.sum(axis=1),
        }
        for k in range(looks):
            cols[f"look{k + 1}_stop_efficacy"] = self.study_efficacy[:, k]
            cols[f"look{k + 1}_stop_futility"] = self.study_futility[:, k]
        if control:
            cols["control_expected_n"] = self.expected_n[:, -1]
        for j, name in enumerate(names):
            cols[f"{name}_is_null"] = self.null[:, j]
            cols[f"{name}_prob_success"] = self.success[:, j]
            cols[f"{name}_expected_n"] = self.expected_n[:, j]
            for k in range(looks):
                cols[f"{name}_look{k + 1}_stop_efficacy"] = self.efficacy[:, j, k]
                cols[f"{name}_look{k + 1}_stop_futility"] = self.futility[:, j, k]
                cols[f"{name}_look{k + 1}_drop"] = np.zeros(len(self.null))
        return pd.DataFrame(cols)


def check_pairs(pairs: Sequence[Design]) -> bool:
    """Check that ``pairs`` describe one study; return whether it has a shared control.

    Every pair is the design of one treatment arm alone: two arms (the treatment, then the
    shared control) or one arm against a benchmark. Pairs with a control must give it the
    same prior and the same sample size at every look.
    """
    if not pairs:
        raise ValueError("at least one treatment arm is needed")
    arms = {len(p.arms) for p in pairs}
    if len(arms) != 1 or arms - {1, 2}:
        raise ValueError("every arm's design must have the same number of arms, one "
                         "(against a benchmark) or two (treatment, then the shared control)")
    looks = {p.looks.count for p in pairs}
    if len(looks) != 1:
        raise ValueError("every arm's design must have the same number of looks")
    if any(p.family.name != pairs[0].family.name or not p.family.lattice for p in pairs):
        raise ValueError("every arm must have the same endpoint family, one with a lattice")
    shared = arms == {2}
    if shared:
        first = pairs[0]
        for p in pairs[1:]:
            if p.arms[1].prior != first.arms[1].prior:
                raise ValueError("the shared control must have the same prior in every "
                                 "arm's design")
            if tuple(n[1] for n in p.looks.per_arm) != tuple(n[1] for n in first.looks.per_arm):
                raise ValueError("the shared control must have the same sample size at "
                                 "every look in every arm's design")
    return shared


def run_arms(pairs: Sequence[Design], truths: np.ndarray,
             rules: Sequence[LatticeRule] | None = None,
             caches: Sequence[LatticeCache] | None = None) -> ArmsOutcome:
    """Exact operating characteristics at every row of ``truths``.

    Parameters
    ----------
    pairs : sequence of Design
        Each treatment arm's own design (see :func:`check_pairs`).
    truths : ndarray, shape (scenarios, arms) or (scenarios, arms + 1)
        True values of the treatment arms, then (with a shared control) of the control.
    rules : sequence of LatticeRule, optional
        The pairs' lattice rules, when already built (they are rebuilt if their truncated
        lattice cannot serve ``truths``).
    caches : sequence of LatticeCache, optional
        Posterior tables to share with other calls (calibration).
    """
    shared = check_pairs(pairs)
    truths = np.atleast_2d(np.asarray(truths, dtype=float))
    n_arms = len(pairs)
    if truths.shape[1] != n_arms + shared:
        raise ValueError(f"truths need {n_arms + shared} columns, got {truths.shape[1]}")
    rows = [_pair_truths(truths, j, shared) for j in range(n_arms)]
    built = []
    for j, pair in enumerate(pairs):
        rule = None if rules is None else rules[j]
        if rule is None or not rule.covers(rows[j]):
            cache = None if caches is None else caches[j]
            rule = build_rule(pair, cache, truths=rows[j])
        built.append(rule)
    results = [_one_truth(pairs, built, t, shared) for t in truths]
    return ArmsOutcome(*(np.array([r[i] for r in results]) for i in range(11)))


def _pair_truths(truths: np.ndarray, j: int, shared: bool) -> np.ndarray:
    return truths[:, [j, -1]] if shared else truths[:, [j]]


def _one_truth(pairs: Sequence[Design], rules: Sequence[LatticeRule], truth: np.ndarray,
               shared: bool) -> tuple[Any, ...]:
    family = pairs[0].family
    n_arms, n_looks = len(pairs), pairs[0].looks.count
    null = np.array([family.is_null(p.hypothesis, tuple(_pair_truths(truth[None], j, shared)[0]))
                     for j, p in enumerate(pairs)])
    # Masks as (arm points, control points); against a benchmark the control axis has one point.
    efficacy_masks = [[t.efficacy if shared else t.efficacy[:, None] for t in r.looks]
                      for r in rules]
    futility_masks = [[t.futility if shared else t.futility[:, None] for t in r.looks]
                      for r in rules]
    uncertain_masks = [[None if t.uncertain is None
                        else t.uncertain if shared else t.uncertain[:, None] for t in r.looks]
                       for r in rules]
    unsure = 0.0
    control_size = [min(m[k].shape[1] for m in efficacy_masks) for k in range(n_looks)]
    weight = np.ones(1)
    control = np.zeros(1, dtype=np.int64)
    dist = [np.ones((1, 1)) for _ in range(n_arms)]
    won, lost = np.zeros((1, n_arms)), np.zeros((1, n_arms))
    eff, fut = np.zeros((n_arms, n_looks)), np.zeros((n_arms, n_looks))
    successes, family_wise = np.zeros(n_arms + 1), 0.0
    reach, arm_n, control_n = np.zeros(n_looks), np.zeros(n_arms), 0.0
    ended_won, ended_lost = np.zeros(n_looks), np.zeros(n_looks)
    neglected = 0.0
    previous: list[tuple[int, ...]] = [(0, 0)] * n_arms
    for k in range(n_looks):
        alive = np.stack([d.sum(axis=1) for d in dist], axis=1)  # (paths, arms)
        reach[k] = weight @ (1.0 - np.prod(1.0 - alive, axis=1))
        sizes = [p.looks.per_arm[k] for p in pairs]
        for j in range(n_arms):
            arm_n[j] += (weight @ alive[:, j]) * (sizes[j][0] - previous[j][0])
        if shared:
            control_n += reach[k] * (sizes[0][1] - previous[0][1])
        # each arm's own increment, the same on every control path
        new_dist = []
        for j, pair in enumerate(pairs):
            size = efficacy_masks[j][k].shape[0]
            pmf = family.increment_pmf(pair, truth[j], sizes[j][0] - previous[j][0], size)
            moved = add_increment(dist[j], pmf, 1, size)
            if family.truncates:
                beyond = dist[j].sum(axis=1) - moved.sum(axis=1)
                neglected += weight @ np.clip(beyond, 0.0, None)
            new_dist.append(moved)
        # the control's increment multiplies the paths
        if shared:
            pmf = family.increment_pmf(pairs[0], truth[-1], sizes[0][1] - previous[0][1],
                                       control_size[k])
            # the pmf is padded to the lattice: paths past its last nonzero point never occur
            nonzero = np.flatnonzero(pmf)
            pmf = pmf[: nonzero[-1] + 1] if nonzero.size else pmf[:1]
        else:
            pmf = np.ones(1)
        steps = np.arange(pmf.size)
        paths = weight.size * pmf.size
        cells = paths * sum(d.shape[1] for d in new_dist)
        if cells > MAX_CELLS:
            raise ValueError(f"the exact several-arm engine would hold {cells} cells "
                             f"({paths} control paths; at most {MAX_CELLS} cells); "
                             "use simulation")
        new_control = (control[:, None] + steps[None, :]).ravel()
        new_weight = (weight[:, None] * pmf[None, :]).ravel()
        keep = (new_control < control_size[k]) & (new_weight > 0)
        neglected += new_weight[new_control >= control_size[k]].sum()
        if family.truncates:
            neglected += weight.sum() * max(1.0 - pmf.sum(), 0.0)
        origin = np.repeat(np.arange(weight.size), pmf.size)[keep]
        control, weight = new_control[keep], new_weight[keep]
        won, lost = won[origin], lost[origin]
        dist = [d[origin] for d in new_dist]
        for j in range(n_arms):
            # mask rows gathered at each path's control count: (paths, arm points)
            e = efficacy_masks[j][k][:, control].T
            f = futility_masks[j][k][:, control].T
            u_mask = uncertain_masks[j][k]
            if u_mask is not None:
                unsure += weight @ np.where(u_mask[:, control].T, dist[j], 0.0).sum(axis=1)
            e_mass = np.where(e, dist[j], 0.0).sum(axis=1)
            f_mass = np.where(f & ~e, dist[j], 0.0).sum(axis=1)
            eff[j, k] += weight @ e_mass
            fut[j, k] += weight @ f_mass
            won[:, j] += e_mass
            lost[:, j] += f_mass
            dist[j] = np.where(e | f, 0.0, dist[j])
        previous = sizes
        # paths on which every arm has stopped are finished: tally their joint outcomes
        still = np.stack([d.sum(axis=1) for d in dist], axis=1).max(axis=1) > 0
        done = ~still if k < n_looks - 1 else np.ones(weight.size, dtype=bool)
        # Pr(every arm has stopped by look k, with / without a success), then per look
        alive_now = np.stack([d.sum(axis=1) for d in dist], axis=1)
        all_stopped = np.prod(1.0 - alive_now, axis=1)
        none_won = np.prod(lost, axis=1)
        ended_won[k] = weight @ (all_stopped - none_won)
        ended_lost[k] = weight @ none_won
        if done.any():
            successes += weight[done] @ _count_distribution(won[done])
            family_wise += weight[done] @ (1.0 - np.prod(1.0 - won[done][:, null], axis=1))
            control, weight, won, lost = control[still], weight[still], won[still], lost[still]
            dist = [d[still] for d in dist]
    expected_n = np.append(arm_n, control_n)
    study_eff = np.diff(ended_won, prepend=0.0)
    study_fut = np.diff(ended_lost, prepend=0.0)
    return (eff, fut, successes, family_wise, null, reach, expected_n, neglected, study_eff,
            study_fut, unsure)


def _count_distribution(won: np.ndarray) -> np.ndarray:
    """Pr(exactly r arms succeed) per path from independent per-arm probabilities
    (the Poisson-binomial recursion), shape (paths, arms + 1)."""
    out = np.zeros((won.shape[0], won.shape[1] + 1))
    out[:, 0] = 1.0
    for j in range(won.shape[1]):
        p = won[:, j : j + 1]
        out[:, 1:] = out[:, 1:] * (1.0 - p) + out[:, :-1] * p
        out[:, 0] *= 1.0 - p[:, 0]
    return out


def unsupported(design: MultiArmDesign) -> str | None:
    """Why the exact several-arm engine cannot evaluate ``design``, or ``None``."""
    if design.allocation.kind != "fixed":
        return "response-adaptive allocation is simulated only"
    if any(v is not None for v in design.looks.drop_if_best_below):
        return "dropping on Pr(best) couples the arms; it is simulated only"
    if design.selection.keep is not None:
        return "selection of arms couples the arms; it is simulated only"
    if not getattr(design.family, "lattice", False):
        return f"{getattr(design.family, 'name', 'these')} endpoints have no lattice statistic"
    if any(p.conduct is not None for p in design.pairs):
        return "calendar-time conduct is simulated only for several arms"
    return None


def evaluate_design(design: MultiArmDesign,
                    truths: np.ndarray | None = None) -> tuple[pd.DataFrame, ArmsOutcome]:
    """The exact several-arm table at ``truths`` (columns in ``design.arm_names`` order;
    by default the design's scenarios): ``true_<arm>`` columns, then
    :meth:`ArmsOutcome.table`'s, then ``<arm>_sd_n`` and ``control_sd_n`` (exact, from
    the looks at which the arm and the study stop) and ``method``.

    Raises
    ------
    ValueError
        When the engine does not apply (:func:`unsupported`).
    """
    why = unsupported(design)
    if why is not None:
        raise ValueError(f"no exact engine for this several-arm design: {why}")
    rows = np.asarray(design.scenarios.values if truths is None else truths, dtype=float)
    rows = np.atleast_2d(rows)
    names = design.arm_names
    order = [names.index(n) for n in design.treatment_names]
    if design.shared_control:
        order.append(0)
    outcome = run_arms(design.pairs, rows[:, order])
    table = pd.concat([pd.DataFrame(rows, columns=[f"true_{n}" for n in names]),
                       outcome.table(design.treatment_names, design.shared_control)], axis=1)
    for name, sd in zip((*design.treatment_names, "control"),
                        stopping_sd(design.pairs, outcome).T, strict=True):
        if name != "control" or design.shared_control:
            table[f"{name}_sd_n"] = sd
    table["method"] = "exact"
    return table, outcome


def stopping_sd(pairs: Sequence[Design], outcome: ArmsOutcome) -> np.ndarray:
    """Exact standard deviation of each arm's sample size, then the control's, shape
    (scenarios, arms + 1): each is fixed by the look at which the arm (the study) stops."""
    looks = pairs[0].looks
    sizes = np.array([[p.looks.per_arm[k][0] for k in range(looks.count)] for p in pairs])
    stop = outcome.efficacy + outcome.futility  # (scenarios, arms, looks)
    mean = np.einsum("sak,ak->sa", stop, sizes.astype(float))
    second = np.einsum("sak,ak->sa", stop, sizes.astype(float) ** 2)
    arm_sd = np.sqrt(np.clip(second - mean**2, 0.0, None))
    if len(pairs[0].arms) == 2:
        control = np.array([n[1] for n in looks.per_arm], dtype=float)
        ends = outcome.reach - np.append(outcome.reach[:, 1:], np.zeros((len(stop), 1)), axis=1)
        c_mean, c_second = ends @ control, ends @ control**2
        control_sd = np.sqrt(np.clip(c_second - c_mean**2, 0.0, None))
    else:
        control_sd = np.zeros(len(stop))
    return np.column_stack([arm_sd, control_sd])
