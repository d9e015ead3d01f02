"""Exact operating characteristics of small several-arm binary studies whose arms are
coupled: dropping on Pr(best) and selection of the arms that go on.

The state is the joint lattice of the counts of the arms still in the study and of the
control, one array per status (each treatment arm in the study, succeeded, or stopped
without success); an arm that leaves the study has its axis summed out, since its data
no longer matter to anyone. At each look every array adds the new subjects' counts
(one independent binomial per arm), then its points are split by what happens at them,
in the order of the simulation kernel (:mod:`octrial.multiarm.kernel`): each arm's own
rule, then (interim looks) dropping of arms whose Pr(best) among the arms still in is
below the look's threshold, then the arms least likely to be the best beyond ``keep``.
Pr(best) and the decision codes are the kernel's own tables
(:func:`octrial.multiarm.tables.build_tables`), so the two differ only in sampling.

The arrays have (x + 1)^arms x (c + 1) points per status, so this is for small studies
(a cross-check of the kernel), refused beyond :data:`MAX_POINTS`.
"""

from __future__ import annotations

import itertools
from collections.abc import Iterator
from typing import Any

import numpy as np
from scipy import stats

from octrial.multiarm.kernel import CONTINUE, EFFICACY, FUTILITY
from octrial.multiarm.model import MultiArmDesign
from octrial.multiarm.tables import MultiArmTables, build_tables

__all__ = ["MAX_POINTS", "joint_exact"]

MAX_POINTS = 2_000_000
"""Largest joint lattice (points of one status array) the engine will hold."""

IN, WON, OUT = 0, 1, 2


def joint_exact(design: MultiArmDesign, row: tuple[float, ...],
                tables: MultiArmTables | None = None) -> dict[str, Any]:
    """Exact oc.csv columns of a binary several-arm design at one scenario ``row`` (true
    values in ``design.arm_names`` order), for fixed allocation.

    Returns the study-level columns ``prob_success``, ``fwer``, ``expected_n``,
    ``look<k>_stop_efficacy`` / ``_futility``, ``control_expected_n`` and per arm
    ``<arm>_prob_success``, ``<arm>_expected_n``, ``<arm>_look<k>_stop_efficacy`` /
    ``_futility`` / ``_drop`` (names as the simulation's).
    """
    if design.allocation.kind != "fixed":
        raise ValueError("the joint exact engine needs fixed allocation")
    tables = build_tables(design) if tables is None else tables
    names = design.treatment_names
    T, K = len(names), design.looks.count
    offset = 1 if design.shared_control else 0
    truth_t = [row[offset + t] for t in range(T)]
    truth_c = row[0] if design.shared_control else None
    nulls = [bool(design.family.is_null(
        p.hypothesis, (truth_t[t], truth_c) if design.shared_control else (truth_t[t],)))
        for t, p in enumerate(design.pairs)]
    x_size, c_size = tables.decision.shape[2], tables.decision.shape[3]
    if x_size**T * c_size > MAX_POINTS:
        raise ValueError(f"the joint lattice has {x_size**T * c_size} points (at most "
                         f"{MAX_POINTS}); use simulation")
    states: dict[tuple[int, ...], np.ndarray] = {(IN,) * T: np.ones((1,) * (T + 1))}
    eff, fut, drop = np.zeros((T, K)), np.zeros((T, K)), np.zeros((T, K))
    n_arm, n_control = np.zeros(T), 0.0
    success, fwer = np.zeros(T), 0.0
    end = np.zeros((2, K))
    best_cache: dict[tuple[int, tuple[int, ...]], np.ndarray] = {}
    for k in range(K):
        new_states: dict[tuple[int, ...], np.ndarray] = {}
        for status, dist in states.items():
            active = [t for t in range(T) if status[t] == IN]
            mass = dist.sum()
            for t in active:
                inc = int(tables.increments[k, offset + t])
                n_arm[t] += mass * inc
                dist = _add(dist, t, stats.binom.pmf(np.arange(inc + 1), inc, truth_t[t]),
                            x_size)
            if design.shared_control:
                inc = int(tables.increments[k, 0])
                n_control += mass * inc
                dist = _add(dist, T, stats.binom.pmf(np.arange(inc + 1), inc, truth_c),
                            c_size)
            codes = [_codes(tables.decision[t, k], dist.shape, t, T) for t in active]
            for combo in itertools.product((EFFICACY, FUTILITY, CONTINUE), repeat=len(active)):
                mask = np.ones(dist.shape, dtype=bool)
                for code, c in zip(combo, codes, strict=True):
                    mask = mask & (c == code)
                part = np.where(mask, dist, 0.0)
                if not part.any():
                    continue
                after = list(status)
                for t, code in zip(active, combo, strict=True):
                    if code == EFFICACY:
                        after[t] = WON
                        eff[t, k] += part.sum()
                    elif code == FUTILITY:
                        after[t] = OUT
                        fut[t, k] += part.sum()
                left = [t for t, code in zip(active, combo, strict=True) if code == CONTINUE]
                for dropped, piece in _dropping(tables, k, left, part, best_cache):
                    final = list(after)
                    for t in dropped:
                        final[t] = OUT
                        drop[t, k] += piece.sum()
                    _move(new_states, tuple(final), status, piece)
        states = {}
        for status, dist in new_states.items():
            if IN in status:
                states[status] = dist
                continue
            p = dist.sum()
            won = [t for t in range(T) if status[t] == WON]
            for t in won:
                success[t] += p
            end[0 if won else 1, k] += p
            if any(nulls[t] for t in won):
                fwer += p
    out: dict[str, Any] = {"prob_success": end[0].sum(), "fwer": fwer,
                           "expected_n": n_arm.sum() + n_control}
    for k in range(K):
        out[f"look{k + 1}_stop_efficacy"] = end[0, k]
        out[f"look{k + 1}_stop_futility"] = end[1, k]
    if design.shared_control:
        out["control_expected_n"] = n_control
    for t, name in enumerate(names):
        out[f"{name}_prob_success"] = success[t]
        out[f"{name}_expected_n"] = n_arm[t]
        for k in range(K):
            out[f"{name}_look{k + 1}_stop_efficacy"] = eff[t, k]
            out[f"{name}_look{k + 1}_stop_futility"] = fut[t, k]
            out[f"{name}_look{k + 1}_drop"] = drop[t, k]
    return out


def _add(dist: np.ndarray, axis: int, pmf: np.ndarray, size: int) -> np.ndarray:
    """Add an independent count with ``pmf`` along ``axis`` (lattice of ``size`` points)."""
    moved = np.moveaxis(dist, axis, -1)
    old = moved.shape[-1]
    out = np.zeros((*moved.shape[:-1], size))
    for y, p in enumerate(pmf):
        stop = min(old + y, size)
        out[..., y:stop] += moved[..., : stop - y] * p
    return np.moveaxis(out, -1, axis)


def _codes(table: np.ndarray, shape: tuple[int, ...], t: int, T: int) -> np.ndarray:
    """Arm ``t``'s decision codes broadcast over the joint lattice of ``shape``."""
    sub = table[: shape[t], : shape[T]]
    view = [1] * (T + 1)
    view[t], view[T] = sub.shape
    return np.broadcast_to(sub.reshape(view), shape)


def _dropping(tables: MultiArmTables, k: int, left: list[int], part: np.ndarray,
              cache: dict[tuple[int, tuple[int, ...]], np.ndarray],
              ) -> Iterator[tuple[tuple[int, ...], np.ndarray]]:
    """Split ``part`` by the set of arms the Pr(best) rules drop at look ``k``."""
    K = tables.decision.shape[1]
    if not left or k == K - 1 or not tables.needs_best:
        yield (), part
        return
    key = (k, tuple(left))
    if key not in cache:
        cache[key] = _dropped_codes(tables, k, left, part.shape)
    codes = cache[key]  # bitmask of dropped arms at every point of the left arms' axes
    T = len(part.shape) - 1
    view = [1] * (T + 1)
    for t in left:
        view[t] = codes.shape[left.index(t)]
    full = np.broadcast_to(codes.reshape(view), part.shape)
    for value in np.unique(full[part > 0]):
        yield (tuple(t for t in left if value >> t & 1),
               np.where(full == value, part, 0.0))


def _dropped_codes(tables: MultiArmTables, k: int, left: list[int],
                   shape: tuple[int, ...]) -> np.ndarray:
    T = tables.decision.shape[0]
    sizes = [shape[t] for t in left]
    codes = np.zeros(sizes, dtype=np.int64)
    active = np.zeros(T, dtype=np.bool_)
    active[left] = True
    responses = np.zeros(T, dtype=np.int64)
    threshold = tables.drop_below[k]
    for point in itertools.product(*(range(s) for s in sizes)):
        for t, x in zip(left, point, strict=True):
            responses[t] = x
        probs = tables.best(k, responses, active)
        still = active.copy()
        code = 0
        if threshold >= 0:
            for t in left:
                if probs[t] < threshold:
                    still[t] = False
                    code |= 1 << t
        count = int(still.sum())
        while tables.keep > 0 and count > tables.keep:
            worst = -1
            for t in range(T):
                if still[t] and (worst < 0 or probs[t] <= probs[worst]):
                    worst = t
            still[worst] = False
            code |= 1 << worst
            count -= 1
        codes[point] = code
    return codes


def _move(states: dict[tuple[int, ...], np.ndarray], status: tuple[int, ...],
          before: tuple[int, ...], part: np.ndarray) -> None:
    """Add ``part`` into ``status``'s array, summing out arms that left the study."""
    for t, (was, now) in enumerate(zip(before, status, strict=True)):
        if was == IN and now != IN:
            part = part.sum(axis=t, keepdims=True)
    if status in states:
        states[status] = states[status] + part
    else:
        states[status] = part
