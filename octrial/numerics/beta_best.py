"""The probability that an arm is the best, for beta-mixture posteriors: one
implementation for the several-arm engine (fixed and adaptive allocation), the
exact several-arm engine and the next block's allocation at an interim look.

``Pr(arm j best) = integral of f_j(u) prod_{i != j} W_i(u) du``, where ``f_j`` is arm j's
posterior density and ``W_i(u)`` the posterior probability that arm i is worse than
``u`` (its CDF when higher is better, its survival function when lower is better). The
integral runs over Gauss-Legendre nodes on graded panels of [0, 1]
(:func:`quadrature_nodes`), so a posterior concentrated near 0 or 1, or with the
infinite density of a shape below 1, still meets many nodes. The error is measured in
``tests/test_beta_best.py`` against scipy's adaptive quadrature, exact finite sums
and the two-arm closed form.

Posteriors are held as rows of ``f`` and ``W`` on the nodes (:func:`posterior_on_nodes`),
each with the span of nodes where it is not negligible; :func:`best_of_rows` (numba)
does the sum for any set of rows, so the simulation kernels read tabulated rows and
:func:`probability_best` computes its rows on the spot, with the same arithmetic.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np
from scipy import special, stats

NEGLIGIBLE = 1e-18
"""A weighted density or 'worse than' probability below this is treated as 0 when the
integration range is cut (the neglected part is below this times the number of nodes)."""

__all__ = ["NEGLIGIBLE", "BestTables", "best_of_rows", "mixture_on_nodes", "node_rows",
           "posterior_on_nodes", "probability_best", "quadrature_nodes", "spans"]


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


def prior_arrays(prior: tuple) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A beta-mixture prior ``(weights, a, b)`` (numbers or sequences) as arrays, the
    weights normalised."""
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
    w, a, b = prior_arrays(prior)
    x = np.atleast_1d(np.asarray(x))[:, None]
    # posterior mixture weights, in logs (METHODS.md, binary)
    log_w = np.log(w)[None, :] + special.betaln(a + x, b + n - x) - special.betaln(a, b)
    log_w -= log_w.max(axis=1, keepdims=True)
    post = np.exp(log_w)
    post /= post.sum(axis=1, keepdims=True)
    return mixture_on_nodes(post, a[None, :] + x, b[None, :] + n - x, nodes, higher)


def mixture_on_nodes(weights: np.ndarray, a: np.ndarray, b: np.ndarray, nodes: np.ndarray,
                     higher: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """Density and 'worse than u' probability at ``nodes`` of beta mixtures given by
    their components: ``weights``, ``a``, ``b`` of shape (posteriors, components)."""
    density = np.zeros((weights.shape[0], nodes.size))
    worse = np.zeros_like(density)
    for j in range(weights.shape[1]):
        dist = stats.beta(a[:, j:j + 1], b[:, j:j + 1])
        density += weights[:, j:j + 1] * dist.pdf(nodes[None, :])
        worse += weights[:, j:j + 1] * (dist.cdf(nodes[None, :]) if higher
                                        else dist.sf(nodes[None, :]))
    return density, worse


def spans(density: np.ndarray, worse: np.ndarray, weights: np.ndarray
          ) -> tuple[np.ndarray, np.ndarray]:
    """Per row, the nodes where the weighted density (``support``) and the 'worse than'
    probability (``reach``) exceed :data:`NEGLIGIBLE`: first and one past the last."""
    return (_span(weights[None, :] * density > NEGLIGIBLE), _span(worse > NEGLIGIBLE))


def _span(above: np.ndarray) -> np.ndarray:
    """First and one past the last True per row (an empty span for all-False rows)."""
    span = np.zeros((above.shape[0], 2), np.int64)
    any_row = above.any(axis=1)
    span[:, 0] = np.where(any_row, np.argmax(above, axis=1), 0)
    span[:, 1] = np.where(any_row, above.shape[1] - np.argmax(above[:, ::-1], axis=1), 0)
    return span


@numba.njit(cache=True)
def best_of_rows(density, worse, support, reach, weights, rows, active,
                 out):  # pragma: no cover - compiled
    """Pr(best) of each active arm among the active arms; inactive arms get 0.

    Parameters
    ----------
    density, worse : ndarray, shape (R, G)
        Posterior density and 'worse than u' probability of R posteriors on the nodes.
    support, reach : ndarray, shape (R, 2)
        Their spans (:func:`spans`); an arm is integrated only where its weighted
        density and every other arm's 'worse than' are not negligible.
    weights : ndarray, shape (G,)
        Quadrature weights.
    rows : ndarray of int, shape (A,)
        Each arm's row.
    active : ndarray of bool, shape (A,)
    out : ndarray, shape (A,)
        Written in place.
    """
    arms = out.shape[0]
    for a in range(arms):
        out[a] = 0.0
        if not active[a]:
            continue
        ra = rows[a]
        low = support[ra, 0]
        high = support[ra, 1]
        for b in range(arms):
            if b != a and active[b]:
                low = max(low, reach[rows[b], 0])
                high = min(high, reach[rows[b], 1])
        total = 0.0
        for g in range(low, high):
            term = weights[g] * density[ra, g]
            for b in range(arms):
                if b != a and active[b]:
                    term *= worse[rows[b], g]
            total += term
        out[a] = total


def node_rows(prior: tuple, n: int, x: np.ndarray, higher: bool = True
              ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Rows of :func:`best_of_rows` for the posteriors after ``x`` responses of ``n``:
    density, worse, support, reach."""
    nodes, weights = quadrature_nodes()
    density, worse = posterior_on_nodes(prior, n, x, nodes, higher)
    return (density, worse, *spans(density, worse, weights))


def probability_best(responses: np.ndarray, sizes: np.ndarray,
                     prior: tuple = (1.0, 1.0, 1.0), higher: bool = True,
                     priors: list[tuple] | None = None) -> np.ndarray:
    """Posterior probability that each arm has the best response probability.

    Parameters
    ----------
    responses, sizes : arrays of int
        Responses and subjects per arm.
    prior : (weights, a, b)
        Beta mixture prior shared by the arms.
    higher : bool
        Whether a higher response probability is better.
    priors : list of (weights, a, b), optional
        Each arm's own prior instead of ``prior``.

    Returns
    -------
    numpy.ndarray
        One probability per arm (summing to 1 up to the quadrature error).

    Examples
    --------
    >>> probability_best(np.array([3, 3]), np.array([10, 10]), (1, 1, 1)).round(6).tolist()
    [0.5, 0.5]
    """
    arms = len(responses)
    each = [prior] * arms if priors is None else list(priors)
    parts = [node_rows(p, int(n), np.array([x]), higher)
             for p, x, n in zip(each, responses, sizes, strict=True)]
    density, worse, support, reach = (np.concatenate([p[i] for p in parts])
                                      for i in range(4))
    out = np.zeros(arms)
    best_of_rows(density, worse, support, reach, quadrature_nodes()[1],
                 np.arange(arms), np.ones(arms, np.bool_), out)
    return out


@dataclass(frozen=True)
class BestTables:
    """Rows of :func:`best_of_rows` for every posterior state ``(n, x)`` with ``n`` up
    to ``largest``, per distinct prior: the row of state ``(n, x)`` of prior ``p`` is
    ``p * states + n (n + 1) / 2 + x``.

    Attributes
    ----------
    density, worse : numpy.ndarray
        Shape (priors x states, nodes).
    support, reach : numpy.ndarray
        Shape (priors x states, 2).
    weights : numpy.ndarray
        Quadrature weights of the nodes.
    which : numpy.ndarray
        Per arm, the index of its prior.
    states : int
        States per prior, (largest + 1)(largest + 2) / 2.
    """

    density: np.ndarray
    worse: np.ndarray
    support: np.ndarray
    reach: np.ndarray
    weights: np.ndarray
    which: np.ndarray
    states: int

    @staticmethod
    def nbytes(priors: int, largest: int) -> int:
        """Memory of the tables, in bytes."""
        states = (largest + 1) * (largest + 2) // 2
        return priors * states * (2 * quadrature_nodes()[0].size + 4) * 8

    @classmethod
    def build(cls, priors: list[tuple], largest: int, higher: bool = True) -> BestTables:
        """Tables for the arms' ``priors`` (equal priors share one table)."""
        keys = [repr(tuple(np.atleast_1d(np.asarray(v, float)).tolist() for v in p))
                for p in priors]
        distinct = list(dict.fromkeys(keys))
        weights = quadrature_nodes()[1]
        parts = []
        for key in distinct:
            prior = priors[keys.index(key)]
            rows = [node_rows(prior, n, np.arange(n + 1), higher)[:2]
                    for n in range(largest + 1)]
            parts.append((np.concatenate([r[0] for r in rows]),
                          np.concatenate([r[1] for r in rows])))
        density = np.concatenate([p[0] for p in parts])
        worse = np.concatenate([p[1] for p in parts])
        support, reach = spans(density, worse, weights)
        return cls(density, worse, support, reach, weights,
                   np.array([distinct.index(k) for k in keys], np.int64),
                   (largest + 1) * (largest + 2) // 2)
