"""The grid engine for lattice families: posteriors with no closed form, on a grid.

A lattice family whose prior (or likelihood) has no conjugate form computes each arm's
posterior at every lattice point on a grid of its parameter on an unbounded scale (logit
rate, log rate), via :mod:`octrial.numerics.parameter_grid`; the posterior and predictive
probabilities then feed the same decision tables, so the exact engine still gives the
operating characteristics. The family supplies the model through :class:`GridModel`.

Layout. Each arm's grid covers every posterior it can meet: a pilot grid over the union
of the prior's 1e-15 quantiles and the data's range locates where any posterior (prior
alone, every lattice point at every look) has density above 1e-17 of its maximum. All
grids share one step (``simulation.grid_points`` nodes across the widest range) and are
anchored so that the benchmark (one arm) is a node, or so that the control grid shifted by
the margin on the comparison's scale lands on treatment nodes (two arms).

Error. Every probability is also computed on the nested grid with half the step; twice
the largest difference, plus the density left at the ends of the range, is the reported
error, and a :class:`~octrial.errors.NumericalWarning` gives it when above
:data:`~octrial.numerics.parameter_grid.TOLERANCE`.
"""

from __future__ import annotations

import functools
import math
import warnings
from abc import abstractmethod
from collections.abc import Callable
from typing import Any, ClassVar

import numpy as np

from octrial.errors import NumericalWarning
from octrial.numerics import parameter_grid as pg
from octrial.numerics.parameter_grid import Grid, GridPosterior

PILOT_POINTS = 4001
"""Nodes of the pilot grid that locates the posteriors' range."""

SAFETY = 2.0
"""The reported error is this multiple of the difference from the half-step grid (the
difference alone misses the finer grid's own error, about 1/64 of it at sixth order)."""

PREDICTIVE_STRETCH = 4
"""A truncated final lattice is covered this many times over, for the predictive
probabilities of high interim counts (any remainder shows in the measured error)."""


class GridModel:
    """What a lattice family provides so that its posteriors can be computed on a grid.

    theta is the parameter on the unbounded scale (logit rate, log rate).
    """

    truncates: ClassVar[bool]
    """As :attr:`octrial.endpoints.base.Family.truncates`."""

    @abstractmethod
    def to_theta(self, value: float) -> float:
        """The parameter (rate) on the grid's scale."""

    @abstractmethod
    def from_theta(self, theta: np.ndarray) -> np.ndarray:
        """Back from the grid's scale."""

    @abstractmethod
    def grid_log_prior(self, prior: Any) -> Callable[[np.ndarray], np.ndarray]:
        """Log prior density on the grid's scale."""

    @abstractmethod
    def grid_prior_range(self, prior: Any) -> tuple[float, float]:
        """Where the prior has all but 1e-15 of its mass, on the grid's scale."""

    @abstractmethod
    def grid_log_likelihood(
        self, design: Any, n: float, stats: np.ndarray,
    ) -> Callable[[np.ndarray], np.ndarray]:
        """Log likelihood (up to a constant per data set) of statistic values ``stats``
        after ``n`` subjects, at grid nodes: shape (len(stats), nodes)."""

    @abstractmethod
    def grid_data_range(self, design: Any, arm: int) -> tuple[float, float]:
        """The range of the estimates the lattice can produce, on the grid's scale."""

    @abstractmethod
    def grid_predictive_table(
        self, design: Any, theta: np.ndarray, m: int, size: int,
    ) -> np.ndarray:
        """Pr(statistic of ``m`` future subjects = 0 .. size-1 | theta): (nodes, size)."""

    @abstractmethod
    def lattice_size(self, design: Any, arm: int, n: int) -> int: ...


def arm_prior(design: Any, arm: int) -> Any:
    return design.arms[arm].prior


def anchors(design: Any) -> list[float]:
    """Values the grids must contain as nodes (see module docstring)."""
    family: GridModel = design.family
    h = design.hypothesis
    if not design.two_arm:
        return [family.to_theta(h.benchmark)]
    return [math.log(h.threshold), 0.0]


@functools.lru_cache(maxsize=16)
def layout(design: Any) -> tuple[Grid, ...]:
    """Each arm's grid (see module docstring)."""
    family: GridModel = design.family
    spans = []
    for j in range(len(design.arms)):
        prior = arm_prior(design, j)
        log_prior = family.grid_log_prior(prior)
        lo, hi = family.grid_prior_range(prior)
        d_lo, d_hi = family.grid_data_range(design, j)
        nodes = np.linspace(min(lo, d_lo), max(hi, d_hi), PILOT_POINTS)
        rows = [log_prior(nodes)[None, :]]
        n_end = design.looks.per_arm[-1][j]
        for n_k in dict.fromkeys(per_arm[j] for per_arm in design.looks.per_arm):
            # the final look also serves predictive probabilities from high interim counts
            stretch = PREDICTIVE_STRETCH if n_k == n_end and family.truncates else 1
            stats = np.arange(stretch * family.lattice_size(design, j, n_k))
            rows.append(log_prior(nodes)[None, :]
                        + family.grid_log_likelihood(design, n_k, stats)(nodes))
        spans.append(pg.support(np.concatenate(rows), nodes))
    return tuple(pg.layout(spans, anchors(design), design.simulation.grid_points))


def posterior(design: Any, arm: int, n: float, stats: np.ndarray,
              prior: Any = None) -> GridPosterior:
    """Grid posteriors of arm ``arm`` after ``n`` subjects at statistic values ``stats``."""
    family: GridModel = design.family
    prior = arm_prior(design, arm) if prior is None else prior
    return pg.posterior(layout(design)[arm], family.grid_log_prior(prior),
                        family.grid_log_likelihood(design, n, np.asarray(stats, float)))


def _benefit_on(design: Any, posts: tuple[GridPosterior, ...]) -> np.ndarray:
    higher = design.hypothesis.better == "higher"
    if len(posts) == 1:
        return pg.tail_at(posts[0], 0, right=higher)
    return pg.difference_tail(posts[0], posts[1], right=higher)


def benefit(design: Any, posts: tuple[GridPosterior, ...]) -> tuple[np.ndarray, float]:
    """Posterior probability of benefit and its measured error (see module docstring)."""
    value = _benefit_on(design, posts)
    finer = _benefit_on(design, tuple(p.refined for p in posts))
    error = SAFETY * float(np.max(np.abs(value - finer))) + sum(p.edge_mass() for p in posts)
    return value, min(error, 1.0)


def target_mean(design: Any, posts: tuple[GridPosterior, ...]) -> np.ndarray:
    """Posterior mean of the target parameter: one arm, the rate (trapezoidal sum of
    the back-transformed nodes); two arms, theta_T - theta_C (log odds ratio, log rate
    ratio), shaped treatment x control like :func:`benefit`."""
    family: GridModel = design.family
    if len(posts) == 1:
        post = posts[0]
        return post.weights @ family.from_theta(post.grid.nodes)
    treatment, control = (post.weights @ post.grid.nodes for post in posts)
    return treatment[:, None] - control[None, :]


def target_cdf(design: Any, posts: tuple[GridPosterior, ...], value: float) -> np.ndarray:
    """Posterior Pr(target <= ``value``), shaped like :func:`target_mean`."""
    family: GridModel = design.family
    if len(posts) == 1:
        post = posts[0]
        position = (family.to_theta(value) - post.grid.anchor) / post.grid.step
        return pg.cdf_at(post, np.array([position]))[:, 0]
    return pg.difference_cdf(posts[0], posts[1], value)


def predictive(design: Any, post: GridPosterior, m: int, size: int) -> np.ndarray:
    """Predictive pmf of the statistic of ``m`` future subjects, one row per point."""
    key = ("predictive", m, size)
    if key not in post.memo:
        family: GridModel = design.family
        table = family.grid_predictive_table(design, post.grid.nodes, m, size)
        post.memo[key] = post.weights @ table
    return post.memo[key]


def predictive_error(design: Any, post: GridPosterior, m: int, size: int) -> float:
    """Total-variation difference between the predictive pmfs on the grid and on the
    finer grid, plus the mass the range leaves out."""
    coarse = predictive(design, post, m, size)
    fine = predictive(design, post.refined, m, size)
    return min(SAFETY * float(np.max(np.abs(coarse - fine).sum(axis=1))) + post.edge_mass(), 1.0)


def variance_at(design: Any, arm: int, prior: Any, n: float, x: float,
                flat: bool = False) -> float:
    """Posterior variance of the parameter (natural scale) after statistic ``x`` (may be
    fractional) in ``n`` subjects, on the arm's grid; ``flat`` uses a prior flat on the
    grid's scale instead of ``prior``."""
    family: GridModel = design.family
    grid = layout(design)[arm].finer()
    log_prior = (lambda t: np.zeros_like(t)) if flat else family.grid_log_prior(prior)
    post = pg.posterior(grid, log_prior,
                        family.grid_log_likelihood(design, n, np.array([float(x)])), False)
    value = family.from_theta(grid.nodes)
    mean = post.weights[0] @ value
    return float(post.weights[0] @ (value - mean) ** 2)


def mean_of(design: Any, arm: int, prior: Any) -> float:
    """Prior mean of the parameter (natural scale) on the arm's finer grid."""
    family: GridModel = design.family
    grid = layout(design)[arm].finer()
    post = pg.posterior(grid, family.grid_log_prior(prior),
                        lambda t: np.zeros((1, t.size)), False)
    return float(post.weights[0] @ family.from_theta(grid.nodes))


def spread_in_steps(design: Any) -> dict[str, dict[str, float]]:
    """Per arm, the prior's sd and the narrowest posterior's sd (any lattice point at the
    final look) on the grid's scale, in grid steps: a grid is coarse when these are small."""
    family: GridModel = design.family
    out = {}
    for j, (arm, grid) in enumerate(zip(design.arms, layout(design), strict=True)):
        n = design.looks.per_arm[-1][j]
        stats = np.arange(family.lattice_size(design, j, n))
        sds = []
        for size, x in ((0, np.zeros(1)), (n, stats)):
            post = pg.posterior(grid, family.grid_log_prior(arm_prior(design, j)),
                                family.grid_log_likelihood(design, size, x), False)
            mean = post.weights @ grid.nodes
            sds.append(np.sqrt(np.clip(post.weights @ grid.nodes**2 - mean**2, 0, None)))
        out[arm.name] = {"prior_sd_steps": float(sds[0][0] / grid.step),
                         "narrowest_posterior_sd_steps": float(sds[1].min() / grid.step)}
    return out


def info(design: Any, error: float) -> dict[str, Any]:
    """The grid settings and measured error for run.json; warns when the error is above
    :data:`~octrial.numerics.parameter_grid.TOLERANCE`."""
    grids = layout(design)
    spread = spread_in_steps(design)
    if error > pg.TOLERANCE:
        words = "; ".join(
            f"the {arm} prior's sd spans {s['prior_sd_steps']:.1f} grid steps and the "
            f"narrowest posterior's {s['narrowest_posterior_sd_steps']:.1f}"
            for arm, s in spread.items())
        warnings.warn(
            f"posterior grid of {design.simulation.grid_points} points is too coarse: "
            f"probabilities differ by up to {error:.2e} from a grid with half the step "
            f"(tolerance {pg.TOLERANCE:g}); {words}; raise simulation.grid_points",
            NumericalWarning, stacklevel=2)
    return {"posterior_grid": {
        "points": design.simulation.grid_points,
        "step": grids[0].step,
        "scale": design.family.grid_scale,
        "nodes_per_arm": {a.name: len(g) for a, g in zip(design.arms, grids, strict=True)},
        "range_per_arm": {a.name: [float(g.nodes[0]), float(g.nodes[-1])]
                          for a, g in zip(design.arms, grids, strict=True)},
        "spread_in_steps": spread,
        "error_vs_half_step": error,
        "tolerance": pg.TOLERANCE,
    }}
