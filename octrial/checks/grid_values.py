"""Grid posteriors read between their nodes: CDF at any value, and draws.

The grid engine (:mod:`octrial.numerics.parameter_grid`) gives each posterior's density
and its end-corrected CDF at the grid's nodes. The checks need the CDF at a true value,
which is rarely a node: between two nodes the CDF is the cubic Hermite interpolant of the
CDF values and their derivatives (the density) at both ends, whose error is O(h^4 f''')
on a grid fine enough for the posterior, and grows visibly when the step is comparable
with the posterior's spread: exactly what simulation-based calibration should expose.
Draws invert the node CDF by linear interpolation (a piecewise-constant density within
each cell).
"""

from __future__ import annotations

import numpy as np

from octrial.numerics.parameter_grid import GridPosterior


def cdf_at(post: GridPosterior, rows: np.ndarray, theta: np.ndarray) -> np.ndarray:
    """Posterior CDF of row ``rows[i]`` at ``theta[i, ...]`` (any trailing shape).

    Parameters
    ----------
    post : GridPosterior
    rows : ndarray of int, shape (m,)
        Which posterior (row of ``post``) each entry uses.
    theta : ndarray, shape (m,) or (m, k)
        Values on the grid's scale.
    """
    theta = np.asarray(theta, dtype=float)
    grid = post.grid
    nodes_lo, h = grid.nodes[0], grid.step
    cdf = post.cdf()
    density = post.density
    pos = (theta - nodes_lo) / h
    i = np.clip(np.floor(pos).astype(np.int64), 0, len(grid) - 2)
    t = np.clip(pos - i, 0.0, 1.0)
    r = np.asarray(rows).reshape((-1,) + (1,) * (theta.ndim - 1))
    f0, f1 = cdf[r, i], cdf[r, i + 1]
    d0, d1 = density[r, i] * h, density[r, i + 1] * h
    t2, t3 = t * t, t * t * t
    value = ((2 * t3 - 3 * t2 + 1) * f0 + (t3 - 2 * t2 + t) * d0
             + (-2 * t3 + 3 * t2) * f1 + (t3 - t2) * d1)
    value = np.where(pos < 0, 0.0, np.where(pos > len(grid) - 1, 1.0, value))
    return np.clip(value, 0.0, 1.0)


def difference_cdf(first: GridPosterior, second: GridPosterior, rows_first: np.ndarray,
                   rows_second: np.ndarray, delta: np.ndarray) -> np.ndarray:
    """Pr(theta_1 - theta_2 <= delta[i]) for the independent posteriors
    ``first[rows_first[i]]`` and ``second[rows_second[i]]``.

    = int f_2(u) F_1(u + delta) du: the trapezoidal sum over the second grid's nodes
    (the grid engine's outer integral), with F_1 read between nodes by :func:`cdf_at`.
    """
    u = second.grid.nodes
    inner = cdf_at(first, rows_first, u[None, :] + np.asarray(delta, float)[:, None])
    return np.clip(np.sum(inner * second.weights[rows_second], axis=1), 0.0, 1.0)


def draw(post: GridPosterior, rows: np.ndarray, rng: np.random.Generator,
         draws: int) -> np.ndarray:
    """``draws`` values (grid scale) from posterior row ``rows[i]`` for each i."""
    rows = np.asarray(rows)
    u = rng.random((rows.size, draws))
    out = np.empty_like(u)
    cdf = post.cdf()
    nodes = post.grid.nodes
    for row in np.unique(rows):
        where = rows == row
        cum = np.maximum.accumulate(cdf[row])
        out[where] = np.interp(u[where], cum, nodes)
    return out
