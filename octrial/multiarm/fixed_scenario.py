"""One scenario of a several-arm design with fixed allocation, through the kernel.

The engine's tallies (:func:`octrial.multiarm.engine.fixed_sums`) and the per-study final
values (:mod:`octrial.multiarm.final_values`) both run here, so they simulate the same
studies: the arms in the kernel's slot order, each arm's increment draw tables, the
Pr(best) memo, and batch ``b`` of ``batch`` studies drawing its words from
:func:`octrial.engines.monte_carlo.batch_generator` ``(seed, scenario, b)``.
"""

from __future__ import annotations

import numpy as np

from octrial.engines.monte_carlo import batch_generator
from octrial.multiarm.kernel import simulate
from octrial.multiarm.model import MultiArmDesign
from octrial.multiarm.tables import MultiArmTables
from octrial.simulation.draws import DrawTables

__all__ = ["BEST_MEMO_BITS", "best_memo", "fixed_tallies", "increment_pmfs"]

BEST_MEMO_BITS = 18
"""The fixed-allocation kernel memoises up to 0.7 x 2^18 Pr(best) vectors per scenario."""


def best_memo(tables: MultiArmTables) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """An empty memo of Pr(best) for the kernel (keys, values, count); empty arrays
    when no rule needs Pr(best) or when the keys could overflow 63 bits."""
    T, K, X = tables.mean.shape
    fits = K * float(X + 1) ** T < 2.0**62
    size = 1 << BEST_MEMO_BITS if tables.needs_best and fits else 0
    return (np.full(size, -1, np.int64), np.zeros((size, T)), np.zeros(1, np.int64))


def increment_pmfs(design: MultiArmDesign, truth: np.ndarray, increments: np.ndarray,
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


def fixed_tallies(design: MultiArmDesign, tables: MultiArmTables, row: tuple[float, ...],
                  replicates: int, seed: int, scenario: int, batch: int,
                  is_null: np.ndarray, is_best: np.ndarray,
                  final_benefit: np.ndarray | None = None,
                  out_final: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """The tallies of scenario number ``scenario`` (0-based, true values ``row`` in
    design order) over ``replicates`` studies (the keys of
    :func:`octrial.multiarm.adaptive.batch_sums`; arms in design order).

    Parameters
    ----------
    is_null, is_best : ndarray of bool, shape (T,)
        Per treatment arm: null, truly the best (for the study-level tallies).
    final_benefit : ndarray, shape (T, X, C), optional
        Per treatment arm, its posterior probability of benefit at the last look
        (:func:`octrial.multiarm.final_values.final_benefit_tables`).
    out_final : ndarray, shape (replicates, T), optional
        Filled with each study's final value per treatment arm
        (:func:`octrial.multiarm.kernel.simulate`); needs ``final_benefit``.
    """
    T, K = tables.decision.shape[:2]
    A = tables.increments.shape[1]
    success = np.zeros(T, np.int64)
    eff = np.zeros((T, K), np.int64)
    fut = np.zeros((T, K), np.int64)
    drop = np.zeros((T, K), np.int64)
    n_slot = np.zeros(A, np.int64)
    scalars = np.zeros(7)
    end = np.zeros((2, K), np.int64)
    share = np.zeros((K, A))
    running = np.zeros(K, np.int64)
    look_n = np.zeros((K, A), np.int64)
    sign = 1 if design.hypothesis.better == "higher" else -1
    # slot order: treatments, then the control (the two-arm kernel's arm order)
    order = np.roll(np.arange(A), -1) if design.shared_control else np.arange(A)
    truth = np.asarray(row, dtype=float)[order]
    increments = np.ascontiguousarray(tables.increments[:, order])
    sizes = np.ascontiguousarray(tables.sizes[:, order])
    draws = DrawTables.from_pmfs(increment_pmfs(design, truth, increments, sizes))
    memo = best_memo(tables)
    benefit = final_benefit if final_benefit is not None else np.empty((0, 0, 0))
    for b in range(-(-replicates // batch)):
        reps = min(batch, replicates - b * batch)
        rng = batch_generator(seed, scenario, b)
        words = rng.bit_generator.random_raw(reps * K * A).reshape(reps, K, A)
        # an empty array: the kernel records nothing
        final = (out_final[b * batch:b * batch + reps] if out_final is not None
                 else np.empty((0, T)))
        simulate(words, truth, increments, sizes, tables.decision, tables.mean,
                 tables.density, tables.worse, tables.support, tables.reach,
                 tables.weights, tables.drop_below, tables.keep, tables.control, sign,
                 is_null, is_best, success, eff, fut, drop, n_slot, scalars, end, share,
                 running, look_n, benefit, final, *memo, *draws.arrays())
    back = np.argsort(order)
    return {"success": success, "efficacy": eff, "futility": fut, "drop": drop,
            "n_arm": n_slot[back], "scalars": scalars, "end": end,
            "share": share[:, back], "running": running, "look_n": look_n[:, back]}
