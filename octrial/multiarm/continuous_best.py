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


_NODES, _WEIGHTS = quadrature_rule()


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
    for start in range(0, m, CHUNK):
        rows = slice(start, min(start + CHUNK, m))
        live = active[rows]
        parts = [p.take(rows) for p in posteriors]
        for j in range(arms):
            if not live[:, j].any():
                continue
            for c in range(parts[j].weights.shape[1]):
                u = parts[j].quantile(c, _NODES)
                product = np.ones(u.shape)
                for i in range(arms):
                    if i != j:
                        product *= np.where(live[:, i:i + 1], parts[i].worse(u, higher), 1.0)
                out[rows, j] += parts[j].weights[:, c] * (product @ _WEIGHTS)
        out[rows] = np.where(live, out[rows], 0.0)
    return out
