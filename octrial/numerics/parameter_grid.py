"""Posteriors on a uniform grid of a transformed parameter (the grid engine).

For priors with no conjugate form (a logit-normal prior on a rate, a normal prior on a log
rate, a negative binomial likelihood) the posterior is computed on a grid of the
parameter on an unbounded scale (logit p, log lambda), where posterior densities are
smooth and decay at both ends:

* normalising constant and expectations: the trapezoidal rule, which converges
  geometrically for smooth integrands decaying at both ends of the range (Trefethen &
  Weideman 2014, SIAM Review 56:385-458);
* tail probabilities Pr(theta > node) at every node: the trapezoidal sum from the node
  with the Euler-Maclaurin end corrections h^2/12 f'(a) - h^4/720 f'''(a) (derivatives by
  five-point differences), so the error is O(h^6);
* Pr(theta_1 - theta_2 > d) for two independent grid posteriors: both grids share the
  step and are offset by d, so theta_2 + d lands on nodes of the first grid and the
  outer integral is again a trapezoidal sum.

The numerical error is measured, not assumed: every posterior is also computed on the
nested grid with half the step, and the difference in every probability is the basis of
the reported error (see :mod:`octrial.endpoints.grid_family`).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
from scipy import special

RELATIVE_FLOOR = 1e-17
"""Nodes where every posterior's density is below this fraction of its maximum are left
out of the range."""

TOLERANCE = 1e-7
"""Largest acceptable measured grid error; above it a NumericalWarning is raised."""


@dataclass(frozen=True)
class Grid:
    """Nodes ``anchor + step * i`` for whole numbers i = lo .. hi."""

    anchor: float
    step: float
    lo: int
    hi: int

    @property
    def index(self) -> np.ndarray:
        """The whole numbers i of the nodes."""
        return np.arange(self.lo, self.hi + 1)

    @property
    def nodes(self) -> np.ndarray:
        """The node positions."""
        return self.anchor + self.step * self.index

    def __len__(self) -> int:
        return self.hi - self.lo + 1

    def finer(self) -> Grid:
        """The nested grid with half the step over the same range."""
        return Grid(self.anchor, self.step / 2, 2 * self.lo, 2 * self.hi)


def layout(
    spans: list[tuple[float, float]], anchors: list[float], points: int,
) -> list[Grid]:
    """Grids for several parameters sharing one step.

    Parameters
    ----------
    spans : list of (float, float)
        The range each parameter's posteriors can occupy.
    anchors : list of float
        A value each grid must contain as a node (a benchmark, or offsets that align two
        grids for a difference).
    points : int
        Nodes across the widest span.
    """
    step = max(hi - lo for lo, hi in spans) / (points - 1)
    return [Grid(a, step, int(np.floor((lo - a) / step)), int(np.ceil((hi - a) / step)))
            for (lo, hi), a in zip(spans, anchors, strict=True)]


def support(log_density: np.ndarray, nodes: np.ndarray) -> tuple[float, float]:
    """The range of ``nodes`` where any row of ``log_density`` (unnormalised) is above
    :data:`RELATIVE_FLOOR` times its maximum, widened by one node each side."""
    keep = log_density - log_density.max(axis=1, keepdims=True) > np.log(RELATIVE_FLOOR)
    hit = np.flatnonzero(keep.any(axis=0))
    lo, hi = max(hit[0] - 1, 0), min(hit[-1] + 1, nodes.size - 1)
    return float(nodes[lo]), float(nodes[hi])


@dataclass(frozen=True, eq=False)
class GridPosterior:
    """Posterior densities on one grid for many data sets (rows), with the same on the
    finer grid for the error estimate (``finer`` is ``None`` on the finer grid itself).

    Attributes
    ----------
    grid : Grid
    density : ndarray, shape (points, nodes)
        Normalised posterior density on the transformed scale.
    finer : GridPosterior or None
    """

    grid: Grid
    density: np.ndarray
    finer: GridPosterior | None = None
    memo: dict = field(default_factory=dict, repr=False)
    """Results computed from this posterior (for example predictive pmfs), by key."""

    def __len__(self) -> int:
        return self.density.shape[0]

    @property
    def refined(self) -> GridPosterior:
        """The posterior on the finer grid (computed unless ``with_finer=False``)."""
        if self.finer is None:
            raise ValueError("this grid posterior was computed without its finer grid")
        return self.finer

    @property
    def weights(self) -> np.ndarray:
        """Trapezoidal weights h f(node): expectations are ``weights @ g(nodes)``."""
        return self.density * self.grid.step

    def survival(self) -> np.ndarray:
        """Pr(theta > node) at every node, per row."""
        return _tail(self.density, self.grid.step, right=True)

    def cdf(self) -> np.ndarray:
        """Pr(theta < node) at every node, per row."""
        return _tail(self.density, self.grid.step, right=False)

    def edge_mass(self) -> float:
        """Largest density left at either end of the range times the step: a bound on the
        mass the range leaves out, for densities decaying at least geometrically."""
        ends = self.density[:, [0, -1]] * self.grid.step
        return float(ends.max()) if ends.size else 0.0


def posterior(
    grid: Grid, log_prior: Callable[[np.ndarray], np.ndarray],
    log_likelihood: Callable[[np.ndarray], np.ndarray], with_finer: bool = True,
) -> GridPosterior:
    """Grid posteriors from a log prior density and log likelihoods.

    Parameters
    ----------
    grid : Grid
    log_prior : callable
        Log prior density on the transformed scale at an array of nodes.
    log_likelihood : callable
        Given nodes (shape (G,)), the log likelihood of every data set (shape (points, G)).
    with_finer : bool
        Also compute the posterior on the nested finer grid.
    """
    nodes = grid.nodes
    log_f = log_prior(nodes)[None, :] + log_likelihood(nodes)
    log_f -= log_f.max(axis=1, keepdims=True)
    f = np.exp(log_f)
    f /= f.sum(axis=1, keepdims=True) * grid.step
    finer = posterior(grid.finer(), log_prior, log_likelihood, False) if with_finer else None
    return GridPosterior(grid, f, finer)


def _derivatives(f: np.ndarray, h: float) -> tuple[np.ndarray, np.ndarray]:
    """First and third derivatives along the last axis by central differences (the
    density is taken as 0 beyond the range)."""
    p = np.pad(f, [(0, 0)] * (f.ndim - 1) + [(2, 2)])
    m2, m1, p1, p2 = p[..., :-4], p[..., 1:-3], p[..., 3:-1], p[..., 4:]
    first = (m2 - 8 * m1 + 8 * p1 - p2) / (12 * h)
    third = (p2 - 2 * p1 + 2 * m1 - m2) / (2 * h**3)
    return first, third


def _tail(f: np.ndarray, h: float, right: bool) -> np.ndarray:
    """Integral of f from each node to the end of the range (right) or from the start.

    Trapezoidal sums with Euler-Maclaurin end corrections at the node: for the right tail
    int_a^inf f = T + h^2/12 f'(a) - h^4/720 f'''(a); mirrored for the left tail.
    """
    first, third = _derivatives(f, h)
    if right:
        trapezoid = h * (np.cumsum(f[..., ::-1], axis=-1)[..., ::-1] - 0.5 * f)
        value = trapezoid + h**2 / 12 * first - h**4 / 720 * third
    else:
        trapezoid = h * (np.cumsum(f, axis=-1) - 0.5 * f)
        value = trapezoid - h**2 / 12 * first + h**4 / 720 * third
    return np.clip(value, 0.0, 1.0)


def tail_at(post: GridPosterior, index: int, right: bool) -> np.ndarray:
    """Pr(theta > node i) (right) or Pr(theta < node i) for the node with whole number
    ``index`` (0 or 1 outside the range), per row: :func:`_tail` at one node."""
    g = post.grid
    if index < g.lo:
        return np.full(len(post), 1.0 if right else 0.0)
    if index > g.hi:
        return np.full(len(post), 0.0 if right else 1.0)
    i = index - g.lo
    window = np.pad(post.density, [(0, 0), (2, 2)])[:, i : i + 5]
    first, third = (v[:, 2] for v in _derivatives(window, g.step))
    f = post.density
    h = g.step
    if right:
        value = h * (f[:, i:].sum(axis=1) - 0.5 * f[:, i]) + h**2 / 12 * first - h**4 / 720 * third
    else:
        value = (h * (f[:, : i + 1].sum(axis=1) - 0.5 * f[:, i]) - h**2 / 12 * first
                 + h**4 / 720 * third)
    return np.clip(value, 0.0, 1.0)


def difference_tail(first: GridPosterior, second: GridPosterior, right: bool) -> np.ndarray:
    """Pr(theta_1 - theta_2 > d) (right) or Pr(theta_1 - theta_2 < d) for every pair of
    rows, where d = first.grid.anchor - second.grid.anchor (the grids share the step).

    = int f_2(u) S_1(u + d) du, a trapezoidal sum over the second grid's nodes u_j, for
    which u_j + d is the first grid's node with the same whole number j.
    """
    g1, g2 = first.grid, second.grid
    tails = first.survival() if right else first.cdf()
    j = g2.index
    inside = (j >= g1.lo) & (j <= g1.hi)
    below = 1.0 if right else 0.0
    matrix = np.where(j[None, :] < g1.lo, below, 1.0 - below)
    matrix = np.broadcast_to(matrix, (len(first), j.size)).copy()
    matrix[:, inside] = tails[:, j[inside] - g1.lo]
    return np.clip(matrix @ second.weights.T, 0.0, 1.0)


def cdf_at(post: GridPosterior, positions: np.ndarray) -> np.ndarray:
    """Pr(theta < x) per row at x = anchor + step * position, for real ``positions``
    (whole numbers are the nodes): cubic Lagrange interpolation of the node values of
    :meth:`GridPosterior.cdf` through the four nearest nodes, with 0 below the range and
    1 above it; O(h^4) between nodes. Shape (rows, len(positions))."""
    g = post.grid
    rows = len(post)
    table = np.concatenate([np.zeros((rows, 2)), post.cdf(), np.ones((rows, 3))], axis=1)
    # padded column c holds whole number g.lo - 2 + c
    p = np.clip(np.asarray(positions, dtype=float) - (g.lo - 2), 1.0, table.shape[1] - 3.0)
    i = np.floor(p).astype(int)
    t = p - i
    weights = (-t * (t - 1) * (t - 2) / 6, (t + 1) * (t - 1) * (t - 2) / 2,
               -(t + 1) * t * (t - 2) / 2, (t + 1) * t * (t - 1) / 6)
    value = sum(w[None, :] * table[:, i + shift] for w, shift in zip(weights, (-1, 0, 1, 2),
                                                                        strict=True))
    return np.clip(value, 0.0, 1.0)


def difference_cdf(first: GridPosterior, second: GridPosterior, value: float) -> np.ndarray:
    """Pr(theta_1 - theta_2 < value) for every pair of rows (first x second):
    int f_2(u) F_1(u + value) du, a trapezoidal sum over the second grid's nodes with F_1
    from :func:`cdf_at` (the grids share the step, so every node needs the same
    fractional shift)."""
    g1, g2 = first.grid, second.grid
    positions = g2.index + (g2.anchor + value - g1.anchor) / g1.step
    return np.clip(cdf_at(first, positions) @ second.weights.T, 0.0, 1.0)


def log_normal_density(x: np.ndarray, mean: float, sd: float) -> np.ndarray:
    """Log density of N(mean, sd^2) at ``x``."""
    return -0.5 * ((x - mean) / sd) ** 2 - np.log(sd) - 0.5 * np.log(2 * np.pi)


def log_mixture(parts: list[tuple[float, np.ndarray]]) -> np.ndarray:
    """log sum_j w_j exp(l_j) for (w_j, l_j) pairs, without overflow."""
    return special.logsumexp(np.stack([np.log(w) + part for w, part in parts]), axis=0)
