"""The numba kernel: simulated several-arm binary studies with fixed allocation.

Policy (which tables, which seeds) lives in :mod:`octrial.multiarm.engine`; this is the
loop over studies. Each study: at each look every arm still enrolling adds its planned
subjects (one binomial draw per arm); each treatment arm still in the study is looked up
in its own decision table; then arms whose probability of being the best is below the
look's threshold are dropped, and at most ``keep`` arms go on. The control enrols while
any treatment arm does. The study ends when no treatment arm is left.
"""

from __future__ import annotations

import numba
import numpy as np

from octrial.allocation.decisions import first_slot
from octrial.numerics.beta_best import best_of_rows
from octrial.rules.dropping import drop_arms
from octrial.simulation.draws import draw

CONTINUE, EFFICACY, FUTILITY = 0, 1, 2

TALLY_FIELDS = ("success", "efficacy", "futility", "dropped", "n_arm", "n_total",
                "n_total_sq", "any_success", "any_null_success", "selected",
                "selected_best", "selected_error", "end_success", "end_failure")


@numba.njit(cache=True)
def simulate(words, truth, increments, sizes, decision, mean, density, worse, support,
             reach, weights, drop_below, keep, control, sign, is_null, is_best, out_success,
             out_eff, out_fut, out_drop, out_n, out_scalars, out_end, out_share,
             out_running, out_look_n, final_benefit, out_final, memo_keys, memo_values,
             memo_held, bounds, t_start, t_length, guide, guide_start, shift):
    """Simulate ``len(words)`` studies at true rates ``truth``.

    Arms are in slot order: the treatment arms, then the control (when there is one),
    as in ``truth`` and ``increments``. ``words`` has shape (studies, looks, arms): one
    random 64-bit word per arm and look, used by arm ``a`` at look ``k`` through draw
    table ``k * arms + a`` (:mod:`octrial.simulation.draws`) whether or not the arm still
    enrols, so each arm's data do not depend on the others' fate; with one treatment
    arm the words and tables are those of the two-arm table kernel.

    Counts are added into the ``out_*`` arrays: per treatment arm successes (T),
    efficacy / futility / drop stops per look (T, K), subjects per arm (A), look at
    which the study ends with or without a success (2, K), and ``out_scalars``:
    [total n, total n squared, any success, any null arm succeeds, studies with a
    selected arm, selected arm truly best, sum of selected estimate - truth]. The
    selected arm is the successful arm with the best posterior mean at its decision
    (``sign`` +1: highest, -1: lowest). Allocation over time: ``out_share[k, a]`` sums
    arm a's share of block k (its planned subjects over those of every arm enrolling
    the block) over the ``out_running[k]`` studies that enrol block k, and
    ``out_look_n[k, a]`` the arm's cumulative subjects at look k (carried forward after
    the study ends). When ``out_final`` (studies, T) has rows, each study's row gets,
    per treatment arm, ``+inf`` (success at an interim look), ``-inf`` (left before
    the last look without one) or ``final_benefit[t, x, c]`` at its last-look counts
    (:mod:`octrial.multiarm.final_values`); an empty ``out_final`` records nothing.
    Pr(best) reads rows ``(t K + k) X + x`` of ``density``, ``worse``
    (:mod:`octrial.numerics.beta_best`); its values are memoised by the look, the arms
    still in and their counts in the hash table ``memo_keys`` / ``memo_values`` (empty:
    no memo), which only saves work.
    """
    reps = words.shape[0]
    K, A = increments.shape
    T = decision.shape[0]
    X = mean.shape[2]
    needs_best = density.shape[0] > 0
    record = out_final.shape[0] > 0
    x = np.zeros(A, np.int64)
    n_arm = np.zeros(A, np.int64)
    active = np.zeros(T, np.bool_)
    success = np.zeros(T, np.bool_)
    estimate = np.zeros(T)
    probs = np.zeros(T)
    rows = np.zeros(T, np.int64)
    gone = np.zeros(T, np.bool_)
    for r in range(reps):
        x[:] = 0
        n_arm[:] = 0
        active[:] = True
        success[:] = False
        n_total = 0
        end = K - 1
        if record:
            for t in range(T):
                out_final[r, t] = -np.inf
        for k in range(K):
            block = 0
            for a in range(A):
                if a >= T or active[a]:
                    block += increments[k, a]
            if block > 0:
                out_running[k] += 1
                for a in range(A):
                    if a >= T or active[a]:
                        out_share[k, a] += increments[k, a] / block
            for a in range(A):
                y = draw(words[r, k, a], k * A + a, bounds, t_start, t_length, guide,
                         guide_start, shift)
                if a < T and not active[a]:
                    continue
                x[a] += y
                if x[a] >= sizes[k, a]:
                    # beyond a truncated lattice: held at its edge (two-arm kernel)
                    x[a] = sizes[k, a] - 1
                n_total += increments[k, a]
                n_arm[a] += increments[k, a]
                out_n[a] += increments[k, a]
            for a in range(A):
                out_look_n[k, a] += n_arm[a]
            c = x[T] if control else 0
            left = 0
            for t in range(T):
                if not active[t]:
                    continue
                code = decision[t, k, x[t], c]
                if record:
                    if k == K - 1:
                        out_final[r, t] = final_benefit[t, x[t], c]
                    elif code == EFFICACY:
                        out_final[r, t] = np.inf
                if code == EFFICACY:
                    active[t] = False
                    success[t] = True
                    estimate[t] = mean[t, k, x[t]]
                    out_eff[t, k] += 1
                elif code == FUTILITY:
                    active[t] = False
                    out_fut[t, k] += 1
                else:
                    left += 1
            if left > 0 and k < K - 1 and needs_best and (drop_below[k] >= 0 or keep > 0):
                best_memoised(density, worse, support, reach, weights, K, X, k, x, active,
                              rows, memo_keys, memo_values, memo_held, probs)
                left -= drop_arms(probs, active, 0, drop_below[k], keep, left, gone)
                for t in range(T):
                    if gone[t]:
                        out_drop[t, k] += 1
            if left == 0:
                end = k
                for later in range(k + 1, K):
                    for a in range(A):
                        out_look_n[later, a] += n_arm[a]
                break
        any_success = False
        null_success = False
        chosen = -1
        for t in range(T):
            if success[t]:
                out_success[t] += 1
                any_success = True
                if is_null[t]:
                    null_success = True
                if chosen < 0 or sign * estimate[t] > sign * estimate[chosen]:
                    chosen = t
        out_scalars[0] += n_total
        out_scalars[1] += n_total * n_total
        if any_success:
            out_scalars[2] += 1
            out_end[0, end] += 1
        else:
            out_end[1, end] += 1
        if null_success:
            out_scalars[3] += 1
        if chosen >= 0:
            out_scalars[4] += 1
            if is_best[chosen]:
                out_scalars[5] += 1
            out_scalars[6] += estimate[chosen] - truth[chosen]


@numba.njit(cache=True)
def best_memoised(density, worse, support, reach, weights, K, X, k, x, active, rows,
                  memo_keys, memo_values, memo_held, probs):  # pragma: no cover - compiled
    """Pr(best) of the active treatment arms at look ``k`` (row ``(t K + k) X + x[t]``
    of the tables), memoised: the key is the look and, per arm, 0 when it has left or
    1 + its count, in radix X + 1 (the caller leaves the memo empty when such keys could
    overflow)."""
    T = probs.shape[0]
    size = memo_keys.shape[0]
    slot = -1
    key = k
    if size > 0:
        for t in range(T):
            key = key * (X + 1) + (x[t] + 1 if active[t] else 0)
        slot = first_slot(key, size)
        while memo_keys[slot] != -1:
            if memo_keys[slot] == key:
                for t in range(T):
                    probs[t] = memo_values[slot, t]
                return
            slot = (slot + 1) & (size - 1)
    for t in range(T):
        rows[t] = (t * K + k) * X + x[t]
    best_of_rows(density, worse, support, reach, weights, rows, active, probs)
    if size > 0 and memo_held[0] < 0.7 * size:
        memo_keys[slot] = key
        for t in range(T):
            memo_values[slot, t] = probs[t]
        memo_held[0] += 1
