"""Each treatment arm's own decision at the sizes a study reached.

With adaptive allocation the arms' sizes at a look are random, so decision tables at
planned sizes do not apply; the posterior probability of benefit is computed per arm and
look from the counts reached: against the shared control
``B = Pr(effect > shift)`` by :func:`octrial.simulation.beta_difference.prob_difference_exceeds`
(the decision tables' tanh-sinh quadrature; for one-component posteriors and no margin,
when a shape is a whole number, the exact finite sum :func:`beta_exceeds`), against a
benchmark the posterior tail of the arm's rate. The decision is the project's one stop rule
(:func:`octrial.rules.stop.look_decision_at`). Values are memoised by the counts in a
hash table of fixed capacity (open addressing in two arrays, :func:`new_memo`) that only
saves work: it never changes a number, and once it is full values are computed again.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numba
import numpy as np

from octrial.simulation.beta_difference import (
    QUADRATURE_TOLERANCE,
    _mixture_cdf,
    prob_difference_exceeds,
    quadrature_nodes,
)
from octrial.simulation.special import log_beta


@dataclass(frozen=True)
class ArmRule:
    """The per-arm rule every treatment arm follows.

    Attributes
    ----------
    efficacy, futility : tuple of float
        Posterior probability thresholds per look (``nan``: none at that look); the last
        look's efficacy threshold is the final success threshold.
    versus_control : bool
        Against the shared control (arm 0), else against ``benchmark``.
    shift : float
        The effect, in the better direction, a success must exceed (superiority margin
        d: d; non-inferiority margin d: -d).
    benchmark : float
        The rate each arm must beat without a control.
    higher : bool
        Whether a higher response probability is better.
    """

    efficacy: tuple[float, ...]
    futility: tuple[float, ...]
    versus_control: bool = True
    shift: float = 0.0
    benchmark: float = float("nan")
    higher: bool = True


def padded_priors(priors: list[tuple]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Beta-mixture priors per arm as (arms, components) arrays; missing components
    have weight 0 (they add nothing)."""
    parts = [tuple(np.atleast_1d(np.asarray(v, float)) for v in p) for p in priors]
    width = max(p[0].size for p in parts)
    w = np.zeros((len(parts), width))
    a = np.ones((len(parts), width))
    b = np.ones((len(parts), width))
    for i, (pw, pa, pb) in enumerate(parts):
        w[i, :pw.size] = pw / pw.sum()
        a[i, :pa.size] = pa
        b[i, :pb.size] = pb
    return w, a, b


MEMO_BITS = 21
"""The memo holds up to 0.7 x 2^MEMO_BITS values (about 1.5 million; 32 MiB)."""

Memo = tuple[np.ndarray, np.ndarray, np.ndarray]


def new_memo(bits: int = MEMO_BITS) -> Memo:
    """An empty memo of benefit probabilities: keys (-1: empty slot), values, and the
    number of values held."""
    return (np.full(1 << bits, -1, np.int64), np.zeros(1 << bits), np.zeros(1, np.int64))


@numba.njit(cache=True, inline="always")
def first_slot(key, size):  # pragma: no cover - compiled
    """First probe of ``key`` in a table of ``size`` (a power of 2) slots: Fibonacci
    hashing (Knuth, TAOCP vol. 3, 6.4; common practice)."""
    mixed = np.uint64(key) * np.uint64(11400714819323198485)
    return np.int64(mixed >> np.uint64(40)) & (size - 1)


def nodes() -> tuple[np.ndarray, ...]:
    """The quadrature nodes :func:`arm_benefit` takes."""
    return quadrature_nodes()


@numba.njit(cache=True)
def posterior_mixture(w, a, b, n, x, pw, pa, pb):  # pragma: no cover - compiled
    """Posterior weights and shapes of a beta mixture after ``x`` of ``n`` (METHODS.md,
    binary; zero-weight components stay at zero)."""
    top = -math.inf
    for j in range(w.size):
        pa[j] = a[j] + x
        pb[j] = b[j] + n - x
        if w[j] > 0:
            pw[j] = math.log(w[j]) + log_beta(pa[j], pb[j]) - log_beta(a[j], b[j])
            top = max(top, pw[j])
        else:
            pw[j] = -math.inf
    total = 0.0
    for j in range(w.size):
        pw[j] = math.exp(pw[j] - top) if w[j] > 0 else 0.0
        total += pw[j]
    for j in range(w.size):
        pw[j] /= total


@numba.njit(cache=True)
def _finite_sum(ax, bx, ay, by):  # pragma: no cover - compiled
    """Pr(p_X > p_Y) for X ~ Beta(ax, bx), Y ~ Beta(ay, by), ``ax`` a whole number:
    sum_{i < ax} B(ay + i, by + bx) / ((bx + i) B(1 + i, bx) B(ay, by)) (E. Miller 2015;
    J. D. Cook 2005; recalled from memory), each term from the one before by its ratio
    (ay + i)(bx + i)(1 + i + bx) / ((ay + by + bx + i)(bx + i + 1)(1 + i))."""
    # term 0: b_x B(1, b_x) = 1, so it is B(ay, by + bx) / B(ay, by) (at most 1; every
    # term is a part of a probability, so none overflows)
    log_term = log_beta(ay, by + bx) - log_beta(ay, by)
    total = 0.0
    if log_term > -690.0:
        term = math.exp(log_term)
        for i in range(int(ax)):
            total += term
            term *= ((ay + i) * (bx + i) * (1.0 + i + bx)
                     / ((ay + by + bx + i) * (bx + i + 1.0) * (1.0 + i)))
        return total
    # a first term below the normal range: carry the terms in logs
    for i in range(int(ax)):
        total += math.exp(log_term)
        log_term += math.log((ay + i) * (bx + i) * (1.0 + i + bx)
                             / ((ay + by + bx + i) * (bx + i + 1.0) * (1.0 + i)))
    return total


@numba.njit(cache=True)
def beta_exceeds(ax, bx, ay, by):  # pragma: no cover - compiled
    """Pr(p_X > p_Y) for independent beta variables by the exact finite sum when ``ax``
    or ``ay`` is a whole number (the shorter sum; ties have probability 0); NaN when
    neither is."""
    x_whole = ax == math.floor(ax) and ax < 1e7
    y_whole = ay == math.floor(ay) and ay < 1e7
    if x_whole and (not y_whole or ax <= ay):
        return min(max(_finite_sum(ax, bx, ay, by), 0.0), 1.0)
    if y_whole:
        return min(max(1.0 - _finite_sum(ay, by, ax, bx), 0.0), 1.0)
    return math.nan


@numba.njit(cache=True)
def _single(w):  # pragma: no cover - compiled
    """The index of the only component with positive weight, or -1."""
    found = -1
    for j in range(w.size):
        if w[j] > 0:
            if found >= 0:
                return -1
            found = j
    return found


@numba.njit(cache=True)
def arm_benefit(versus_control, higher, shift, benchmark, arm, prior_w, prior_a, prior_b,
                n_t, x_t, n_c, x_c, largest, log_u, log_1mu, log_w, start,
                memo):  # pragma: no cover - compiled
    """Posterior probability of benefit of treatment arm ``arm`` (against arm 0 when
    ``versus_control``), memoised by the counts (``largest`` bounds every count)."""
    if versus_control and shift == 0.0 and prior_w.shape[1] == 1:
        # one-component priors, no margin: the exact finite sum, cheaper than a look-up
        ta, tb = prior_a[arm, 0] + x_t, prior_b[arm, 0] + n_t - x_t
        ca, cb = prior_a[0, 0] + x_c, prior_b[0, 0] + n_c - x_c
        quick = beta_exceeds(ta, tb, ca, cb) if higher else beta_exceeds(ca, cb, ta, tb)
        if not math.isnan(quick):
            return quick
    side = largest + 1
    key = (((arm * side + n_t) * side + x_t) * side + n_c) * side + x_c
    keys, values, held = memo
    size = keys.shape[0]
    slot = first_slot(key, size)
    while keys[slot] != -1:
        if keys[slot] == key:
            return values[slot]
        slot = (slot + 1) & (size - 1)
    width = prior_w.shape[1]
    tw, ta, tb = np.empty(width), np.empty(width), np.empty(width)
    posterior_mixture(prior_w[arm], prior_a[arm], prior_b[arm], n_t, x_t, tw, ta, tb)
    if not versus_control:
        value = _mixture_cdf(tw, ta, tb, benchmark, higher)
    else:
        cw, ca, cb = np.empty(width), np.empty(width), np.empty(width)
        posterior_mixture(prior_w[0], prior_a[0], prior_b[0], n_c, x_c, cw, ca, cb)
        value = math.nan
        it, ic = _single(tw), _single(cw)
        if shift == 0.0 and it >= 0 and ic >= 0:
            value = (beta_exceeds(ta[it], tb[it], ca[ic], cb[ic]) if higher
                     else beta_exceeds(ca[ic], cb[ic], ta[it], tb[it]))
        if math.isnan(value) and higher:
            value = prob_difference_exceeds(tw, ta, tb, cw, ca, cb, shift, log_u, log_1mu,
                                            log_w, start, QUADRATURE_TOLERANCE)
        elif math.isnan(value):
            value = prob_difference_exceeds(cw, ca, cb, tw, ta, tb, shift, log_u, log_1mu,
                                            log_w, start, QUADRATURE_TOLERANCE)
    if held[0] < 0.7 * size:
        keys[slot] = key
        values[slot] = value
        held[0] += 1
    return value
