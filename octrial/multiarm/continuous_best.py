"""The probability that each arm is the best, for many studies at once, when the arms'
posteriors are normal, Student t or gamma mixtures (normal and time-to-event families).

``Pr(arm j best) = sum_c w_jc integral_0^1 prod_{i != j} W_i(Q_jc(v)) dv``,

with ``w_jc`` and ``Q_jc`` the weights and quantile functions of arm j's posterior
components and ``W_i(u)`` the posterior probability that arm ``i`` is worse than ``u``
(its distribution function when higher is better, its survival function when lower is).
Substituting the quantile turns every density into the uniform one, so the integrand is
bounded by 1 and one fixed rule serves every posterior: composite Gauss-Legendre,
:data:`PANELS` panels of :data:`ORDER` nodes on (0, 1), graded towards both ends where
the quantile moves fastest. The same integral, with scipy's adaptive quadrature, is
:func:`octrial.interim.best.probability_best_at` for gamma posteriors.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

__all__ = ["ArmPosteriors", "probability_best", "quadrature_rule"]

PANELS = 48
ORDER = 8
"""Default panels and nodes per panel of :func:`quadrature_rule`."""
CHUNK = 2048
"""Studies per block of the integration (bounds the memory of the (studies, nodes)
arrays; only a matter of speed)."""

KINDS = ("normal", "t", "gamma")


def quadrature_rule(panels: int = PANELS, order: int = ORDER) -> tuple[np.ndarray, np.ndarray]:
    """Nodes and weights on (0, 1): Gauss-Legendre on panels whose edges are
    ``(1 - cos(pi s)) / 2`` for s evenly spaced, so the panels shrink towards 0 and 1."""
    x, w = np.polynomial.legendre.leggauss(order)
    edges = 0.5 * (1.0 - np.cos(np.pi * np.linspace(0.0, 1.0, panels + 1)))
    lo, hi = edges[:-1, None], edges[1:, None]
    nodes = (lo + (hi - lo) * (x + 1.0) / 2.0).ravel()
    weights = ((hi - lo) / 2.0 * w).ravel()
    return nodes, weights


def tanh_sinh_rule(step: float, half_width: float = 3.0) -> tuple[np.ndarray, np.ndarray]:
    """Nodes and weights on (0, 1) of the tanh-sinh rule (Takahasi & Mori 1974):
    v = (1 + tanh(pi/2 sinh t)) / 2, trapezoid in t on [-half_width, half_width] (at
    t = 3 the node is within 2e-14 of the end, where 1 - v is still exact)."""
    t = np.arange(-half_width, half_width + step / 2, step)
    s = 0.5 * np.pi * np.sinh(t)
    return (1.0 + np.tanh(s)) / 2.0, step * 0.25 * np.pi * np.cosh(t) / np.cosh(s) ** 2


RULES = ((2.0, tanh_sinh_rule(1 / 8)), (10.0, tanh_sinh_rule(1 / 16)),
         (30.0, tanh_sinh_rule(1 / 64)), (100.0, tanh_sinh_rule(1 / 128)),
         (np.inf, quadrature_rule(192, 8)))
"""(largest scale ratio, rule): a study is integrated by the first rule whose ratio its
arms' posterior sds are within (equal allocation keeps the ratio near 1). Tanh-sinh
converges geometrically where the integrand is smooth inside (0, 1); a much sharper arm
makes a steep step inside the interval, which needs more nodes. Measured against the
closed form for two normals (4,000 random pairs per band, docs/multi-arm.md): 49 nodes
up to ratio 2 and 97 up to 10, errors 3e-15 and 3e-8; 385 up to 30 and 769 up to 100,
about 1e-13 and 5e-7; beyond, 1,536 graded Gauss-Legendre nodes, 2e-5 up to 300 and
1.3e-4 up to 1,000."""
_NODES, _WEIGHTS = RULES[-1][1]


@dataclass(frozen=True, eq=False)
class ArmPosteriors:
    """One arm's posterior in many studies: a mixture of C components of one kind.

    Attributes
    ----------
    kind : {'normal', 't', 'gamma'}
    weights : ndarray, shape (m, C)
    first, second : ndarray, shape (m, C)
        normal and t: location and scale; gamma: shape and rate.
    df : ndarray, shape (m, C)
        Degrees of freedom (t only; zeros otherwise).
    """

    kind: str
    weights: np.ndarray
    first: np.ndarray
    second: np.ndarray
    df: np.ndarray

    @classmethod
    def of(cls, kind: str, weights: np.ndarray, first: np.ndarray, second: np.ndarray,
           df: np.ndarray | None = None) -> ArmPosteriors:
        """Posteriors from arrays of shape (m,) (one component) or (m, C)."""
        if kind not in KINDS:
            raise ValueError(f"posterior kind {kind!r}: one of {KINDS} expected")
        first = np.asarray(first, dtype=float)
        first = first[:, None] if first.ndim == 1 else first
        shape = first.shape
        arrays = [np.broadcast_to(np.asarray(a, dtype=float).reshape(shape[0], -1), shape)
                  for a in (weights, second, np.zeros(shape) if df is None else df)]
        return cls(kind, arrays[0], first, arrays[1], arrays[2])

    def take(self, rows: np.ndarray | slice) -> ArmPosteriors:
        """The posteriors of the studies ``rows`` (indices or a mask)."""
        return ArmPosteriors(self.kind, self.weights[rows], self.first[rows],
                             self.second[rows], self.df[rows])

    def mean(self) -> np.ndarray:
        """Posterior mean per study."""
        if self.kind == "gamma":
            return np.sum(self.weights * self.first / self.second, axis=1)
        return np.sum(self.weights * self.first, axis=1)

    def _one(self, c: int, u: np.ndarray, upper: bool) -> np.ndarray:
        """Component c's distribution (or survival, ``upper``) function at u (m, G)."""
        a, b = self.first[:, c:c + 1], self.second[:, c:c + 1]
        if self.kind == "gamma":
            x = np.maximum(b * u, 0.0)
            return special.gammaincc(a, x) if upper else special.gammainc(a, x)
        z = (u - a) / b
        z = -z if upper else z
        if self.kind == "t":
            return special.stdtr(self.df[:, c:c + 1], z)
        return special.ndtr(z)

    def worse(self, u: np.ndarray, higher: bool) -> np.ndarray:
        """Probability that the arm's parameter is worse than u (per study and node)."""
        out = np.zeros(u.shape)
        for c in range(self.weights.shape[1]):
            out += self.weights[:, c:c + 1] * self._one(c, u, not higher)
        return out

    def quantile(self, c: int, v: np.ndarray) -> np.ndarray:
        """Component c's quantile function at the nodes v, shape (m, G)."""
        a, b = self.first[:, c:c + 1], self.second[:, c:c + 1]
        if self.kind == "gamma":
            return _per_value(special.gammaincinv, self.first[:, c], v) / b
        if self.kind == "t":
            return a + b * _per_value(special.stdtrit, self.df[:, c], v)
        return a + b * special.ndtri(v)[None, :]


def _per_value(function: np.ufunc, shapes: np.ndarray, v: np.ndarray) -> np.ndarray:
    """``function(shape, v)`` for every study (rows) and node (columns), evaluated once
    per distinct shape: inverting the t and gamma distributions is slow, and at one look
    the studies share their degrees of freedom (gamma shape: prior shape plus events)."""
    values, where = np.unique(shapes, return_inverse=True)
    table: np.ndarray = function(values[:, None], v[None, :])
    return table[where.ravel()]


def probability_best(posteriors: list[ArmPosteriors], active: np.ndarray,
                     higher: bool) -> np.ndarray:
    """Pr(best) of each arm among the active arms of each study (module docstring).

    Parameters
    ----------
    posteriors : list of ArmPosteriors
        One per arm, each over the same m studies.
    active : ndarray of bool, shape (m, T)
        The arms that compete in each study; the others get 0 and do not count.
    higher : bool
        Whether a higher parameter is better.

    Returns
    -------
    ndarray, shape (m, T)

    Examples
    --------
    >>> import numpy as np
    >>> one = ArmPosteriors.of("normal", np.ones(1), np.zeros(1), np.ones(1))
    >>> probability_best([one, one], np.ones((1, 2), bool), True).round(10).tolist()
    [[0.5, 0.5]]
    """
    active = np.asarray(active, dtype=bool)
    m, arms = active.shape
    out = np.zeros((m, arms))
    ratio = _scale_ratio(posteriors, active)
    # each study by the first (cheapest) rule whose scale ratio it is within
    chosen = np.searchsorted(np.array([limit for limit, _ in RULES]), ratio)
    for g, (_, (nodes, weights)) in enumerate(RULES):
        rows_g = np.flatnonzero(chosen == g)
        if rows_g.size:
            out[rows_g] = _integrate([p.take(rows_g) for p in posteriors], active[rows_g],
                                     higher, nodes, weights)
    return out


def _scale_ratio(posteriors: list[ArmPosteriors], active: np.ndarray) -> np.ndarray:
    """Per study, the largest over the smallest posterior sd of the active arms'
    components (the steepness of the integrand in the quantile variable)."""
    big = np.zeros(active.shape[0])
    small = np.full(active.shape[0], np.inf)
    for j, p in enumerate(posteriors):
        if p.kind == "gamma":
            sd = np.sqrt(p.first) / p.second
        elif p.kind == "t":
            sd = p.second * np.sqrt(np.where(p.df > 2, p.df / np.maximum(p.df - 2, 1e-300),
                                             np.inf))
            sd = np.where(np.isfinite(sd), sd, p.second)
        else:
            sd = p.second
        live = active[:, j:j + 1]
        big = np.maximum(big, np.where(live, sd, 0.0).max(axis=1))
        small = np.minimum(small, np.where(live, sd, np.inf).min(axis=1))
    return np.where(small > 0, big / np.where(small > 0, small, 1.0), np.inf)


def _integrate(parts: list[ArmPosteriors], active: np.ndarray, higher: bool,
               nodes: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """The sum of the module docstring on the rule (nodes, weights)."""
    m, arms = active.shape
    out = np.zeros((m, arms))
    for start in range(0, m, CHUNK):
        rows = slice(start, min(start + CHUNK, m))
        live = active[rows]
        chunk = [p.take(rows) for p in parts]
        for j in range(arms):
            if not live[:, j].any():
                continue
            for c in range(chunk[j].weights.shape[1]):
                u = chunk[j].quantile(c, nodes)
                product = np.ones(u.shape)
                for i in range(arms):
                    if i != j:
                        product *= np.where(live[:, i:i + 1], chunk[i].worse(u, higher), 1.0)
                out[rows, j] += chunk[j].weights[:, c] * (product @ weights)
        out[rows] = np.where(live, out[rows], 0.0)
    return out
