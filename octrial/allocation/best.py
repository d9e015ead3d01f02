"""The probability that each arm is the best, for beta-mixture posteriors.

``Pr(arm j best) = integral of f_j(u) prod_{i != j} W_i(u) du``, where ``f_j`` is arm j's
posterior density and ``W_i(u)`` the posterior probability that arm i is worse than
``u`` (its CDF when higher is better, its survival function when lower is better). The
integral runs over Gauss-Legendre nodes on graded panels of [0, 1]
(:func:`quadrature_nodes`), so a posterior concentrated near 0 or 1 still meets many
nodes.
The error is measured in ``tests/test_allocation.py`` against scipy's adaptive
quadrature.

The simulation kernel reads a :class:`BestTable`: ``f`` and ``W`` on the nodes for every
posterior state ``(n, x)`` with ``n`` up to a maximum, at index ``n (n + 1) / 2 + x``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np
from scipy import special, stats

NEGLIGIBLE = 1e-18


def quadrature_nodes(panels: int = 12, per_panel: int = 8) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights on [0, 1] over graded panels.

    ``panels`` equal panels cover [0.05, 0.95]; towards each end the panels shrink (by
    factors of 10 below 0.01) down to width 1e-12, because a posterior with few
    responses (or a shape below 1) piles its mass, or a singularity, against 0 or 1.
    """
    x, w = np.polynomial.legendre.leggauss(per_panel)
    low = np.concatenate([[0.0], 10.0 ** np.arange(-12, -1), [0.02, 0.03, 0.05]])
    edges = np.concatenate([low, np.linspace(0.05, 0.95, panels + 1)[1:-1],
                            1.0 - low[::-1]])
    half = np.diff(edges) / 2
    nodes = (edges[:-1, None] + half[:, None] * (x[None, :] + 1)).ravel()
    weights = (half[:, None] * w[None, :]).ravel()
    return nodes, weights


def _prior_arrays(prior: tuple) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    weights, a, b = (np.atleast_1d(np.asarray(v, float)) for v in prior)
    return weights / weights.sum(), a, b


def posterior_on_nodes(prior: tuple, n: int, x: np.ndarray, nodes: np.ndarray,
                       higher: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """Posterior density and 'worse than u' probability at ``nodes``.

    Parameters
    ----------
    prior : (weights, a, b)
        Beta mixture prior on the response probability.
    n : int
        Subjects.
    x : array of int
        Responses (one posterior per entry).
    nodes : array of float
    higher : bool
        Whether a higher response probability is better.

    Returns
    -------
    density, worse : arrays of shape (len(x), len(nodes))
    """
    w, a, b = _prior_arrays(prior)
    x = np.atleast_1d(np.asarray(x))[:, None]
    # posterior mixture weights, in logs (METHODS.md, binary)
    log_w = np.log(w)[None, :] + special.betaln(a + x, b + n - x) - special.betaln(a, b)
    log_w -= log_w.max(axis=1, keepdims=True)
    post = np.exp(log_w)
    post /= post.sum(axis=1, keepdims=True)
    density = np.zeros((x.shape[0], nodes.size))
    worse = np.zeros_like(density)
    for j in range(w.size):
        dist = stats.beta(a[j] + x, b[j] + n - x)
        density += post[:, j:j + 1] * dist.pdf(nodes[None, :])
        worse += post[:, j:j + 1] * (dist.cdf(nodes[None, :]) if higher
                                     else dist.sf(nodes[None, :]))
    return density, worse


def probability_best(responses: np.ndarray, sizes: np.ndarray, prior: tuple,
                     higher: bool = True, panels: int = 12,
                     per_panel: int = 8) -> np.ndarray:
    """Posterior probability that each arm has the best response probability.

    Parameters
    ----------
    responses, sizes : arrays of int
        Responses and subjects per arm.
    prior : (weights, a, b)
        Beta mixture prior shared by the arms.
    higher : bool
        Whether a higher response probability is better.

    Returns
    -------
    numpy.ndarray
        One probability per arm (summing to 1 up to the quadrature error).

    Examples
    --------
    >>> probability_best(np.array([3, 3]), np.array([10, 10]), (1, 1, 1)).round(6).tolist()
    [0.5, 0.5]
    """
    nodes, weights = quadrature_nodes(panels, per_panel)
    dens, worse = [], []
    for x, n in zip(responses, sizes, strict=True):
        d, s = posterior_on_nodes(prior, int(n), np.array([x]), nodes, higher)
        dens.append(d[0])
        worse.append(s[0])
    dens_a, worse_a = np.array(dens), np.array(worse)
    out = np.empty(len(dens))
    for j in range(len(dens)):
        others = np.prod(np.delete(worse_a, j, axis=0), axis=0)
        out[j] = np.sum(weights * dens_a[j] * others)
    return out


@dataclass(frozen=True)
class BestTable:
    """Posterior density and 'worse than u' on quadrature nodes for every state.

    Attributes
    ----------
    density, worse : numpy.ndarray
        Shape (states, nodes); state ``n (n + 1) / 2 + x`` for ``0 <= x <= n <= largest``.
    support : numpy.ndarray
        Shape (states, 2): the first and one past the last node where the weighted
        density exceeds ``NEGLIGIBLE``; the kernel integrates each arm over its support
        only (the neglected mass is below ``NEGLIGIBLE`` times the number of nodes).
    reach : numpy.ndarray
        Shape (states, 2): the same for 'worse than u' (above ``NEGLIGIBLE``); outside it
        every other arm's integrand is negligible too, so the integration range of an
        arm is also cut to the other arms' reach.
    weights : numpy.ndarray
        Quadrature weights of the nodes.
    largest : int
        The largest number of subjects in the table.
    """

    density: np.ndarray
    worse: np.ndarray
    support: np.ndarray
    reach: np.ndarray
    weights: np.ndarray
    largest: int

    @classmethod
    def build(cls, prior: tuple, largest: int, higher: bool = True, panels: int = 12,
              per_panel: int = 8) -> BestTable:
        """Tabulate every posterior state with up to ``largest`` subjects."""
        nodes, weights = quadrature_nodes(panels, per_panel)
        states = (largest + 1) * (largest + 2) // 2
        density = np.empty((states, nodes.size))
        worse = np.empty((states, nodes.size))
        for n in range(largest + 1):
            start = n * (n + 1) // 2
            d, s = posterior_on_nodes(prior, n, np.arange(n + 1), nodes, higher)
            density[start:start + n + 1] = d
            worse[start:start + n + 1] = s
        support = _span(weights[None, :] * density > NEGLIGIBLE)
        return cls(density, worse, support, _span(worse > NEGLIGIBLE), weights, largest)


def _span(above: np.ndarray) -> np.ndarray:
    """First and one past the last True per row (an empty span for all-False rows)."""
    span = np.zeros((above.shape[0], 2), np.int64)
    any_row = above.any(axis=1)
    span[:, 0] = np.where(any_row, np.argmax(above, axis=1), 0)
    span[:, 1] = np.where(any_row, above.shape[1] - np.argmax(above[:, ::-1], axis=1), 0)
    return span


@dataclass(frozen=True)
class BestTables:
    """Several :class:`BestTable` (one per distinct prior) stacked for the kernel.

    Attributes
    ----------
    density, worse : numpy.ndarray
        Shape (priors, states, nodes).
    support, reach : numpy.ndarray
        Shape (priors, states, 2).
    weights : numpy.ndarray
        Quadrature weights of the nodes.
    which : numpy.ndarray
        Per arm, the index of its prior's table.
    """

    density: np.ndarray
    worse: np.ndarray
    support: np.ndarray
    reach: np.ndarray
    weights: np.ndarray
    which: np.ndarray

    @classmethod
    def build(cls, priors: list[tuple], largest: int, higher: bool = True) -> BestTables:
        """Tables for the arms' ``priors`` (equal priors share one table)."""
        keys = [repr(tuple(np.atleast_1d(np.asarray(v, float)).tolist() for v in p))
                for p in priors]
        distinct = list(dict.fromkeys(keys))
        tables = [BestTable.build(priors[keys.index(k)], largest, higher) for k in distinct]
        return cls(np.stack([t.density for t in tables]), np.stack([t.worse for t in tables]),
                   np.stack([t.support for t in tables]), np.stack([t.reach for t in tables]),
                   tables[0].weights, np.array([distinct.index(k) for k in keys], np.int64))


@numba.njit(cache=True)
def best_from_table(density, worse, support, reach, weights, which, sizes, responses,
                    active, first, states, out):  # pragma: no cover - compiled
    """Pr(best) among the active arms ``first..`` from :class:`BestTables`' arrays
    (arm j reads table ``which[j]``); inactive arms (and arms before ``first``) get 0.
    ``states`` is scratch space."""
    arms = out.shape[0]
    # the competing arms, with their table and row, gathered once
    rows = np.empty(arms, np.int64)
    tabs = np.empty(arms, np.int64)
    count = 0
    for j in range(arms):
        out[j] = 0.0
        states[j] = sizes[j] * (sizes[j] + 1) // 2 + responses[j]
        if j >= first and active[j]:
            rows[count] = states[j]
            tabs[count] = which[j]
            count += 1
    for a in range(count):
        sj = rows[a]
        tj = tabs[a]
        low = support[tj, sj, 0]
        high = support[tj, sj, 1]
        for b in range(count):
            if b != a:
                low = max(low, reach[tabs[b], rows[b], 0])
                high = min(high, reach[tabs[b], rows[b], 1])
        total = 0.0
        for g in range(low, high):
            term = weights[g] * density[tj, sj, g]
            for b in range(count):
                if b != a:
                    term *= worse[tabs[b], rows[b], g]
            total += term
        out[_arm(first, active, a)] = total


@numba.njit(cache=True, inline="always")
def _arm(first, active, position):  # pragma: no cover - compiled
    """The arm at ``position`` among the active arms from ``first`` on."""
    seen = 0
    for j in range(first, active.shape[0]):
        if active[j]:
            if seen == position:
                return j
            seen += 1
    return -1
