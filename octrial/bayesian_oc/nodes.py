"""Where the null region ends, and quadrature nodes over the design prior weighted by region
(see :mod:`octrial.bayesian_oc`)."""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from octrial.design.model import Design
from octrial.design_prior import on_effect
from octrial.endpoints.base import COMPARISONS, SCENARIO_AXES
from octrial.numerics import tanh_sinh

TAIL = 1e-14
"""Quantile levels closer than this to 0 or 1 are left out (their mass bounds the error;
a truncated count lattice must not be sized for rates at the 1 - 1e-300 quantile)."""
LOG_TAIL = math.log(TAIL)


# -- where the null region ends ----------------------------------------------------------------
def boundary_value(design: Design, effect: float, control: np.ndarray | None = None
                   ) -> np.ndarray:
    """The parameter value at which the hypothesis' effect equals ``effect``.

    One arm: the treatment value; a design prior on the two-arm effect: the difference
    in means; two arms with per-arm design priors: the treatment value for each control
    value in ``control``. The effect increases with ``sign x value`` in every case.
    """
    h = design.hypothesis
    if on_effect(design):
        return np.asarray(h.sign * (h.shift + effect), dtype=float)
    if not design.two_arm:
        return np.asarray(h.null_value + h.sign * effect, dtype=float)
    measure = COMPARISONS[h.measure][1] + h.sign * (h.shift + effect)
    lo, hi = design.family.parameter_range
    c = np.asarray(control, dtype=float)
    if COMPARISONS[h.measure][1] == 1.0 and measure <= 0:
        return np.full(c.shape, lo)  # a ratio cannot reach a non-positive value
    with np.errstate(all="ignore"):
        t = SCENARIO_AXES[h.measure][1](c, measure)
    return np.clip(np.nan_to_num(t, nan=hi, posinf=hi, neginf=lo), lo, hi)


def effect_of(design: Design, values: np.ndarray) -> np.ndarray:
    """The effect (better direction, beyond the benchmark or margin) of true values, one
    row per study: (treatment[, control]), or the difference for priors on the effect."""
    h = design.hypothesis
    v = np.asarray(values, dtype=float)
    if on_effect(design):
        return h.sign * v[:, 0] - h.shift
    if v.shape[1] == 1:
        return h.sign * (v[:, 0] - h.null_value)
    return h.sign * (COMPARISONS[h.measure][0](v[:, 0], v[:, 1])
                     - COMPARISONS[h.measure][1]) - h.shift


# -- nodes with region weights -----------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class PriorNodes:
    """True values with weights that integrate over the design prior by region.

    ``w_null @ p`` is Pr(null and success) when ``p`` holds Pr(success | truth) at
    ``truths``; likewise ``w_alt`` (alternative) and ``w_relevant`` (effect >= delta).

    Attributes
    ----------
    truths : ndarray, shape (nodes, arms)
        As the engines take them (a prior on the effect: treatment = control + effect).
    w_null, w_alt, w_relevant : ndarray, shape (nodes,)
    prior_null, prior_alt, prior_relevant : float
        The design prior's mass on each region (by the same rule, so that the weights
        of the null and alternative sum to these).
    description : str
    """

    truths: np.ndarray
    w_null: np.ndarray
    w_alt: np.ndarray
    w_relevant: np.ndarray
    prior_null: float
    prior_alt: float
    prior_relevant: float
    description: str


def _components(design: Design, prior: Any) -> list[tuple[float, Any]]:
    components = design.family.prior_components(prior)
    if components is None:
        raise ValueError(f"{design.family.name} design prior "
                         f"{type(prior).__name__} has no quantile function for quadrature")
    return components


def _cuts(dist: Any, values: list[float]) -> list[tuple[float, float]]:
    """(F, 1 - F) at each cut value, accurate in both tails, sorted, with 0 and 1."""
    found = [(0.0, 1.0), (1.0, 0.0)]
    for v in values:
        found.append((float(dist.cdf(v)), float(dist.sf(v))))
    return sorted(set(found))


def _theta(dist: Any, u: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Q(u) with 1 - u = v given accurately: the upper half through the survival."""
    with np.errstate(all="ignore"):
        return np.where(u < 0.5, dist.ppf(u), dist.isf(v))


def _pieces(dist: Any, cuts: list[float], u: np.ndarray, v: np.ndarray, w: np.ndarray
            ) -> list[tuple[np.ndarray, np.ndarray, float]]:
    """Nodes (theta, weight) of a rule on [0, 1] mapped onto each piece between cuts, with
    the value at the piece's middle (which classifies the whole piece: a node rounded onto
    the boundary stays on its side)."""
    out = []
    points = _cuts(dist, cuts)
    for (lo, lo_c), (hi, hi_c) in itertools.pairwise(points):
        width = hi - lo if hi - lo > 0.5 else lo_c - hi_c
        if width <= 0:
            continue
        uu, vv = lo + width * u, hi_c + width * v
        middle = float(_theta(dist, np.array([lo + width / 2]), np.array([hi_c + width / 2]))[0])
        out.append((_theta(dist, uu, vv), width * w, middle))
    return out


def _classify(design: Design, truths: np.ndarray, delta: float) -> tuple[np.ndarray, ...]:
    """Null, alternative and relevant masks of true values (engine layout)."""
    effect = effect_of(design, truths if not on_effect(design) else truths[:, :1]
                       - truths[:, 1:2])
    null = effect <= 0.0
    return null, ~null, effect >= delta


def _as_truths(design: Design, theta: np.ndarray) -> np.ndarray:
    if not on_effect(design):
        return theta[:, None]
    # the operating characteristics depend on the effect only: the control at the
    # design's first scenario, the treatment at control + effect (as assurance does)
    control = design.scenarios.values[0][1]
    return np.column_stack([control + theta, np.full(theta.size, control)])


def one_dimensional_nodes(design: Design, generating: Design, nodes: tanh_sinh.Nodes,
                          delta: float) -> PriorNodes:
    """Tanh-sinh ``nodes`` on [0, 1] mapped onto each piece of each mixture component of a
    one-dimensional design prior (one arm, or the effect)."""
    prior = (generating.hypothesis.prior if on_effect(design) else generating.arms[0].prior)
    u, v, w = _kept(nodes)
    cuts = [float(boundary_value(design, 0.0)), float(boundary_value(design, delta))]
    thetas, weights, middles = [], [], []
    masses = np.zeros(3)
    for weight, dist in _components(design, prior):
        for theta, wt, middle in _pieces(dist, cuts, u, v, w):
            thetas.append(theta)
            weights.append(weight * wt)
            middles.append(np.full(theta.size, middle))
    theta = np.concatenate(thetas)
    node_weight = np.concatenate(weights)
    truths = _as_truths(design, theta)
    null, alt, relevant = _classify(design, _as_truths(design, np.concatenate(middles)), delta)
    for weight_k, dist in _components(design, prior):
        b0, bd = (float(boundary_value(design, e)) for e in (0.0, delta))
        low0, low_d = float(dist.cdf(b0)), float(dist.cdf(bd))
        up0, up_d = float(dist.sf(b0)), float(dist.sf(bd))
        sign = design.hypothesis.sign
        masses += weight_k * np.array([low0 if sign > 0 else up0, up0 if sign > 0 else low0,
                                       up_d if sign > 0 else low_d])
    return PriorNodes(truths, node_weight * null, node_weight * alt, node_weight * relevant,
                      masses[0], masses[1], masses[2],
                      description=f"tanh-sinh over the design prior's quantiles, "
                                  f"{theta.size} nodes, split at the null boundary")


def _kept(nodes: tanh_sinh.Nodes) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    keep = (nodes.log_u > LOG_TAIL) & (nodes.log_1mu > LOG_TAIL)
    return nodes.u[keep], nodes.one_minus_u[keep], np.exp(nodes.log_w[keep])


def tensor_nodes(design: Design, generating: Design, level: int, delta: float) -> PriorNodes:
    """Tanh-sinh at one level over the control arm's design prior and, per control node,
    over the treatment arm's, split where the effect is 0 (and delta)."""
    x, y, w = _kept(cumulative_nodes(level))
    control_nodes = [(weight * w, _theta(dist, x, y))
                     for weight, dist in _components(design, generating.arms[1].prior)]
    wc = np.concatenate([a for a, _ in control_nodes])
    c = np.concatenate([b for _, b in control_nodes])
    tops = [boundary_value(design, e, c) for e in (0.0, delta)]
    rows, weights, middles = [], [], []
    masses = np.zeros(3)
    sign = design.hypothesis.sign
    for weight_t, dist in _components(design, generating.arms[0].prior):
        for i, (ci, wi) in enumerate(zip(c, wc, strict=True)):
            cuts = [float(tops[0][i]), float(tops[1][i])]
            for theta, wt, middle in _pieces(dist, cuts, x, y, w):
                rows.append(np.column_stack([theta, np.full(theta.size, ci)]))
                weights.append(weight_t * wi * wt)
                middles.append(np.tile([middle, ci], (theta.size, 1)))
            f0, fd = float(dist.cdf(tops[0][i])), float(dist.cdf(tops[1][i]))
            s0, sd_ = float(dist.sf(tops[0][i])), float(dist.sf(tops[1][i]))
            masses += weight_t * wi * np.array([f0 if sign > 0 else s0, s0 if sign > 0 else f0,
                                                sd_ if sign > 0 else fd])
    truths = np.vstack(rows)
    weight = np.concatenate(weights)
    lo, hi = design.family.parameter_range
    truths = np.clip(truths, np.nextafter(lo, hi), np.nextafter(hi, lo))
    null, alt, relevant = _classify(design, np.vstack(middles), delta)
    return PriorNodes(truths, weight * null, weight * alt, weight * relevant,
                      masses[0], masses[1], masses[2],
                      description=f"tanh-sinh over both arms' design prior quantiles, "
                                  f"{x.size} nodes per arm and piece ({len(truths)} true "
                                  "values), treatment split at the null boundary for each "
                                  "control node")


def cumulative_nodes(level: int) -> tanh_sinh.Nodes:
    """Every tanh-sinh node up to ``level``, with the weights of that level's step."""
    step = tanh_sinh.FIRST_STEP / 2**level
    k = np.arange(-np.floor(tanh_sinh.T_MAX / step), np.floor(tanh_sinh.T_MAX / step) + 1)
    return tanh_sinh.nodes(k * step, step)
