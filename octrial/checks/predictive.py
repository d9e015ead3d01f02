"""Prior predictive distributions of a study's outcome, and their summaries.

A :class:`Predictive` is the distribution of one observable at the final look (an arm's
responses, events or sample mean, or the observed effect) implied by a prior and the
data model: discrete (a pmf on a support) or continuous (a mixture of scipy
distributions, or a density tabulated on a fine grid). Summaries are the mean, sd and
quantiles, and the probability beyond any stated bounds.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import optimize

QUANTILES = (0.01, 0.05, 0.25, 0.5, 0.75, 0.95, 0.99)
"""Quantiles reported for every prior predictive distribution."""

GRID_POINTS = 801
"""Points on which a continuous distribution's density is tabulated (plots, sums)."""

TAIL = 1e-6
"""A continuous distribution's plotting range runs between these tail quantiles."""


@dataclass(frozen=True, eq=False)
class Predictive:
    """One observable's prior predictive distribution.

    Attributes
    ----------
    name : str
        For files, for example ``'responses_treatment'`` or ``'observed_difference'``.
    label : str
        Words for tables and axes.
    discrete : bool
    values : ndarray
        The support (discrete, increasing) or the tabulation grid (continuous).
    weights : ndarray
        The pmf (discrete) or the density on the grid (continuous).
    effect : bool
        Whether this is the observed effect (one arm: the outcome on the effect scale).
    extremes : (float, float) or None
        A bounded discrete outcome's all-or-none values (binary: 0 and n responses).
    components : sequence of (float, frozen distribution), optional
        Continuous mixtures: exact CDF and quantiles come from these.
    drawn : bool
        Whether the prior predictive drawing shows it (the record always has it): a
        family that reports every look draws the final look's only.
    """

    name: str
    label: str
    discrete: bool
    values: np.ndarray
    weights: np.ndarray
    effect: bool = False
    extremes: tuple[float, float] | None = None
    components: Sequence[tuple[float, Any]] | None = field(default=None, repr=False)
    drawn: bool = True

    # -- construction ----------------------------------------------------------------
    @classmethod
    def from_pmf(cls, name: str, label: str, values: np.ndarray, pmf: np.ndarray,
                 effect: bool = False,
                 extremes: tuple[float, float] | None = None) -> Predictive:
        """A discrete distribution; equal values (to 12 decimals, so that rounding in a
        difference does not split one value in two) are merged and the support sorted."""
        values = np.round(np.asarray(values, dtype=float).ravel(), 12)
        pmf = np.asarray(pmf, dtype=float).ravel()
        support, inverse = np.unique(values, return_inverse=True)
        merged = np.bincount(inverse, weights=pmf, minlength=support.size)
        return cls(name, label, True, support, merged, effect, extremes)

    @classmethod
    def from_mixture(cls, name: str, label: str, components: Sequence[tuple[float, Any]],
                     effect: bool = False) -> Predictive:
        """A continuous mixture of frozen scipy distributions with weights."""
        lo = min(float(d.ppf(TAIL)) for _, d in components)
        hi = max(float(d.isf(TAIL)) for _, d in components)
        grid = np.linspace(lo, hi, GRID_POINTS)
        density = sum(w * d.pdf(grid) for w, d in components)
        return cls(name, label, False, grid, np.asarray(density), effect,
                   components=tuple(components))

    @classmethod
    def from_density(cls, name: str, label: str, grid: np.ndarray, density: np.ndarray,
                     effect: bool = False) -> Predictive:
        """A continuous distribution tabulated on an even grid (normalised here)."""
        density = np.asarray(density, dtype=float)
        step = grid[1] - grid[0]
        return cls(name, label, False, np.asarray(grid, float),
                   density / (density.sum() * step), effect)

    # -- probabilities ---------------------------------------------------------------
    def cdf(self, x: float) -> float:
        """Pr(observable <= x)."""
        if self.discrete:
            return float(self.weights[self.values <= x].sum())
        if self.components is not None:
            return float(sum(w * d.cdf(x) for w, d in self.components))
        step = self.values[1] - self.values[0]
        return float(np.clip(np.interp(x, self.values + step / 2,
                                       np.cumsum(self.weights) * step), 0.0, 1.0))

    def below(self, x: float) -> float:
        """Pr(observable < x)."""
        if self.discrete:
            return float(self.weights[self.values < x].sum())
        return self.cdf(x)

    def above(self, x: float) -> float:
        """Pr(observable > x)."""
        return max(0.0, 1.0 - self.cdf(x))

    def quantile(self, q: float) -> float:
        """The smallest value whose CDF reaches ``q`` (discrete), or the exact quantile."""
        if self.discrete:
            cum = np.cumsum(self.weights)
            i = int(np.searchsorted(cum, q * cum[-1] - 1e-12))
            return float(self.values[min(i, self.values.size - 1)])
        if self.components is not None:
            lo, hi = self.values[0], self.values[-1]
            while self.cdf(lo) > q:
                lo -= hi - lo
            while self.cdf(hi) < q:
                hi += hi - lo
            return float(optimize.brentq(lambda x: self.cdf(x) - q, lo, hi, xtol=1e-12))
        step = self.values[1] - self.values[0]
        cum = np.cumsum(self.weights) * step
        return float(np.interp(q, cum, self.values + step / 2))

    def mean(self) -> float:
        if self.discrete:
            return float(self.weights @ self.values / self.weights.sum())
        if self.components is not None:
            return float(sum(w * d.mean() for w, d in self.components))
        step = self.values[1] - self.values[0]
        return float(self.weights @ self.values * step)

    def sd(self) -> float:
        if self.discrete:
            p = self.weights / self.weights.sum()
            m = p @ self.values
            return float(np.sqrt(max(p @ (self.values - m) ** 2, 0.0)))
        if self.components is not None:
            m = self.mean()
            second = sum(w * (d.var() + d.mean() ** 2) for w, d in self.components)
            return float(np.sqrt(max(second - m**2, 0.0)))
        step = self.values[1] - self.values[0]
        m = self.mean()
        return float(np.sqrt(max(self.weights @ (self.values - m) ** 2 * step, 0.0)))

    def summary(self) -> dict[str, Any]:
        """Mean, sd and :data:`QUANTILES` as a record."""
        return {"observable": self.name, "label": self.label,
                "kind": "discrete" if self.discrete else "continuous",
                "mean": self.mean(), "sd": self.sd(),
                **{f"q{_percent(q)}": self.quantile(q) for q in QUANTILES}}

    def curve(self) -> tuple[np.ndarray, np.ndarray]:
        """(values, pmf or density) for plotting."""
        return self.values, self.weights


def _percent(q: float) -> str:
    """0.05 -> '05', 0.5 -> '50', 0.975 -> '97.5'."""
    text = f"{100 * q:g}"
    return text.zfill(2) if "." not in text else text


def truncated_support(pmf_of: Any, start: int, mass: float = 1e-10,
                      limit: int = 1 << 22) -> np.ndarray:
    """A pmf over 0 .. size-1 grown (doubling ``size`` from ``start``) until the mass
    beyond is below ``mass``; ``pmf_of(size)`` returns the pmf on 0 .. size-1."""
    size = max(int(start), 16)
    while True:
        pmf = np.asarray(pmf_of(size), dtype=float)
        if 1.0 - pmf.sum() < mass or size >= limit:
            return pmf
        size *= 2


MAX_PAIRS = 4_000_000
"""Largest outer product of two supports combined exactly (see :func:`pair_effect`)."""


def pair_effect(first: Predictive, second: Predictive, measure: Any, name: str, label: str,
                first_scale: float = 1.0, second_scale: float = 1.0,
                max_points: int = MAX_PAIRS) -> Predictive:
    """The observed effect ``measure(x1 / scale1, x2 / scale2)`` of two independent
    discrete observables, as a discrete distribution: the outer product of their pmfs.
    When the product is large, both supports are first cut to their 1 - 1e-12 mass and,
    if still too long (counts in the thousands), neighbouring values are merged into
    sqrt(max_points) groups at their mean (an approximation finer than the spacing of
    any quantile that is reported)."""
    a_vals, a_pmf = _cut(first, max_points)
    b_vals, b_pmf = _cut(second, max_points)
    values = measure(a_vals[:, None] / first_scale, b_vals[None, :] / second_scale)
    return Predictive.from_pmf(name, label, values, a_pmf[:, None] * b_pmf[None, :],
                               effect=True)


def _cut(p: Predictive, max_points: int) -> tuple[np.ndarray, np.ndarray]:
    if p.values.size ** 2 <= max_points:
        return p.values, p.weights
    keep = np.cumsum(p.weights) <= 1.0 - 1e-12
    keep[np.argmin(keep)] = True
    values, weights = p.values[keep], p.weights[keep]
    groups = int(np.sqrt(max_points))
    if values.size <= groups:
        return values, weights
    which = np.arange(values.size) * groups // values.size
    mass = np.bincount(which, weights=weights, minlength=groups)
    centre = np.bincount(which, weights=weights * values, minlength=groups)
    nonzero = mass > 0
    return centre[nonzero] / mass[nonzero], mass[nonzero]
