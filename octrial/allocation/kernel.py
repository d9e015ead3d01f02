"""The numba study loop for binary arms with (adaptive) allocation.

Each study enrols blocks of subjects between looks. The allocation probabilities of a
block come from :func:`octrial.allocation.rule.shares` (the first block, and every block
before the burn-in, use the fixed ratio); the block is split over the arms by complete
randomisation (a multinomial draw, as conditional binomials) or, deterministically, by
rounding the block times the probabilities with the largest-remainder method (ties to
the earlier arm), and each arm's responses are binomial. After each look but the last,
arms whose probability of being the best is below ``drop_below`` stop enrolling.

Every random number is an inversion of one uniform from the array the caller draws
from its seeded generator, at a fixed position per study, look and arm, so the numbers
depend only on the seed and the batch, never on the worker that runs it.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from octrial.allocation.decisions import arm_benefit
from octrial.allocation.rule import shares
from octrial.numerics.beta_best import best_of_rows
from octrial.rules.dropping import drop_arms
from octrial.rules.stop import CONTINUE, DECISION_TOLERANCE, EFFICACY, look_decision_at


@numba.njit(cache=True, inline="always")
def binomial_inverse(n, p, u):  # pragma: no cover - compiled
    """Binomial(n, p) by inversion of the uniform ``u`` (sequential search from 0 on
    the smaller tail side; blocks are small, so the search is short)."""
    if n <= 0 or p <= 0.0:
        return 0
    if p >= 1.0:
        return n
    flip = p > 0.5
    q = 1.0 - p if flip else p
    ratio = q / (1.0 - q)
    pmf = math.exp(n * math.log1p(-q))
    cdf = pmf
    k = 0
    while u > cdf and k < n:
        pmf *= ratio * (n - k) / (k + 1)
        k += 1
        cdf += pmf
    return n - k if flip else k


@numba.njit(cache=True)
def split_rounded(block, probs, out):  # pragma: no cover - compiled
    """Split ``block`` subjects by the largest-remainder method: each arm gets the
    whole part of ``block * probs[j]``; the subjects left go one each to the arms with
    the largest fractional parts (ties to the earlier arm)."""
    arms = probs.shape[0]
    given = 0
    for j in range(arms):
        out[j] = math.floor(block * probs[j] + 1e-9)
        given += out[j]
    while given < block:
        pick = -1
        most = -1.0
        for j in range(arms):
            if probs[j] > 0:
                part = block * probs[j] - out[j]
                if part > most + 1e-12:
                    most = part
                    pick = j
        if pick < 0:    # nothing to allocate to (no arm enrolling)
            break
        out[pick] += 1
        given += 1


@numba.njit(cache=True)
def best_now(density, worse, support, reach, weights, which, states, n, x, active, first,
             rows, competing, out):  # pragma: no cover - compiled
    """Pr(best) among the active treatment arms (arms ``first..``) at counts ``n``, ``x``
    from the tables of :class:`octrial.numerics.beta_best.BestTables`."""
    for j in range(out.shape[0]):
        rows[j] = which[j] * states + n[j] * (n[j] + 1) // 2 + x[j]
        competing[j] = active[j] and j >= first
    best_of_rows(density, worse, support, reach, weights, rows, competing, out)


@numba.njit(cache=True)
def simulate_studies(rounded, rates, looks, planned, shrink, control, form, power,
                     control_share, minimum, burn_in, ratio, drop_below, keep, density,
                     worse, support, reach, weights, which, states, decide,
                     versus_control, higher, shift, benchmark, efficacy, futility,
                     prior_w, prior_a, prior_b, log_u, log_1mu, log_w, start, memo,
                     uniforms, sizes, responses, allocation, dropped,
                     outcome):  # pragma: no cover
    """Simulate ``uniforms.shape[0]`` studies (blocks split by rounding when
    ``rounded``, else randomised); write per look and arm the cumulative
    subjects ``sizes``, responses ``responses`` and the allocation probabilities used
    for the block that ended at that look; ``dropped[r, j]`` is the look after which arm
    j stopped enrolling (-1: never). With ``decide``, each active treatment arm meets
    its own rule at every look (:mod:`octrial.allocation.decisions`): ``outcome[r, j]``
    is 1 (efficacy, a success) or 2 (futility, or no success at the end) and
    ``dropped[r, j]`` the look it stopped at; arms dropped for a low Pr(best) or not
    selected keep outcome 0. The study ends when no treatment arm is left (later looks
    repeat the sizes reached).

    Block k has ``looks[k] - looks[k - 1]`` subjects, shared over the arms still
    enrolling; with ``shrink``, only the planned subjects ``planned[k, j]`` of the arms
    still enrolling (the several-arm engine's fixed-allocation conduct: an arm that
    leaves takes its planned subjects with it). After look k (not the last), treatment
    arms with Pr(best) below ``drop_below[k]`` (negative: no rule) are dropped, then at
    most ``keep`` (0: any number) go on, the least likely to be the best leaving first
    (ties: the later arm)."""
    studies = uniforms.shape[0]
    n_looks = looks.shape[0]
    arms = rates.shape[0]
    first = 1 if control else 0
    maximum = looks[n_looks - 1]
    n = np.zeros(arms, np.int64)
    x = np.zeros(arms, np.int64)
    active = np.ones(arms, np.bool_)
    probs = np.zeros(arms)
    pr_best = np.zeros(arms)
    rows = np.zeros(arms, np.int64)
    competing = np.zeros(arms, np.bool_)
    block = np.zeros(arms, np.int64)
    leaving = np.zeros(arms, np.bool_)
    for r in range(studies):
        for j in range(arms):
            n[j] = 0
            x[j] = 0
            active[j] = True
            dropped[r, j] = -1
            outcome[r, j] = 0
            pr_best[j] = 0.0
        ended = False
        enrolled = 0
        shares(pr_best, active, control, form, power, control_share, minimum, burn_in,
               ratio, 0, maximum, probs)
        for k in range(n_looks):
            if ended:
                for j in range(arms):
                    sizes[r, k, j] = n[j]
                    responses[r, k, j] = x[j]
                    allocation[r, k, j] = 0.0
                continue
            if shrink:
                remaining = 0
                for j in range(arms):
                    if active[j]:
                        remaining += planned[k, j]
            else:
                remaining = looks[k] - enrolled
            rest = 1.0
            last = -1
            for j in range(arms):
                allocation[r, k, j] = probs[j]
                if probs[j] > 0:
                    last = j
            if rounded:
                split_rounded(remaining, probs, block)
            enrolled += remaining
            for j in range(arms):
                if probs[j] <= 0.0:
                    continue
                if rounded:
                    m = block[j]
                elif j == last:
                    m = remaining
                else:
                    m = binomial_inverse(remaining, min(probs[j] / rest, 1.0),
                                         uniforms[r, k, j])
                remaining -= m
                rest -= probs[j]
                n[j] += m
                x[j] += binomial_inverse(m, rates[j], uniforms[r, k, arms + j])
            for j in range(arms):
                sizes[r, k, j] = n[j]
                responses[r, k, j] = x[j]
            left = 0
            for j in range(first, arms):
                if active[j]:
                    left += 1
            if decide:
                left = 0
                for j in range(first, arms):
                    if not active[j]:
                        continue
                    b = arm_benefit(versus_control, higher, shift, benchmark, j, prior_w,
                                    prior_a, prior_b, n[j], x[j], n[0], x[0], maximum,
                                    log_u, log_1mu, log_w, start, memo)
                    code = look_decision_at(efficacy[k], futility[k], k == n_looks - 1,
                                            b, DECISION_TOLERANCE)
                    if code != CONTINUE:
                        active[j] = False
                        dropped[r, j] = k
                        outcome[r, j] = 1 if code == EFFICACY else 2
                    else:
                        left += 1
            if left == 0:
                ended = True
                continue
            if k == n_looks - 1:
                break
            adaptive = form != 0 and enrolled >= burn_in
            if adaptive or drop_below[k] > 0 or (keep > 0 and left > keep):
                best_now(density, worse, support, reach, weights, which, states, n, x,
                         active, first, rows, competing, pr_best)
                gone = drop_arms(pr_best, active, first, drop_below[k], keep, left, leaving)
                for j in range(first, arms):
                    if leaving[j]:
                        dropped[r, j] = k
                if left - gone == 0:
                    ended = True
                    continue
                # Pr(best) among the arms left, for the allocation
                if gone > 0 and adaptive:
                    best_now(density, worse, support, reach, weights, which, states, n,
                             x, active, first, rows, competing, pr_best)
            shares(pr_best, active, control, form, power, control_share, minimum,
                   burn_in, ratio, enrolled, maximum, probs)
