"""Binary endpoint: binomial responses with a beta or beta-mixture prior on the rate.

Formulas (see docs/methods.md for the derivations and references):

* Posterior of a mixture sum_j w_j Beta(a_j, b_j) after x responses in n subjects: the
  components Beta(a_j + x, b_j + n - x) with weights
  w'_j proportional to w_j B(a_j + x, b_j + n - x) / B(a_j, b_j).
* One arm: Pr(p > p0 | x) = sum_j w'_j I_{1-p0}(b'_j, a'_j) (the regularized incomplete
  beta on the complement keeps accuracy when the probability is near 1).
* Two arms: Pr(p_X - p_Y > d) = F_Y(-d)[d < 0] + int_lo^hi f_Y(u) S_X(u + d) du with
  lo = max(0, -d), hi = min(1, 1 - d), by tanh-sinh quadrature on nodes shared by every
  lattice point, so the whole lattice is one matrix product.
* Predictive: the responses among m future subjects follow the mixture of
  beta-binomials sum_j w'_j BetaBinomial(m, a'_j, b'_j) (Lee & Liu 2008).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special, stats

from octrial.design.model import Hypothesis
from octrial.design.reader import Phrase, Table
from octrial.endpoints.base import LatticeFamily
from octrial.numerics import tanh_sinh

WEIGHT_TOLERANCE = 1e-9


@dataclass(frozen=True)
class BinaryEndpoint:
    """``[endpoint]`` settings of a binary endpoint (nothing beyond the type)."""

    type: str = "binary"


@dataclass(frozen=True)
class BetaMixture:
    """A mixture of beta distributions; one component is a plain beta prior."""

    weights: tuple[float, ...]
    a: tuple[float, ...]
    b: tuple[float, ...]

    @classmethod
    def single(cls, a: float, b: float) -> BetaMixture:
        """A plain Beta(a, b)."""
        return cls((1.0,), (float(a),), (float(b),))

    @property
    def effective_sample_size(self) -> float:
        """a + b for one component; the weighted sum of a_j + b_j for a mixture (a
        common-practice summary; Morita, Thall & Müller 2008 give a general definition)."""
        return float(sum(w * (a + b) for w, a, b in zip(self.weights, self.a, self.b,
                                                         strict=True)))

    def describe(self) -> str:
        """Plain-text form for tables and reports."""
        parts = [f"Beta({a:g}, {b:g})" for a, b in zip(self.a, self.b, strict=True)]
        if len(parts) == 1:
            return parts[0]
        return " + ".join(f"{w:g} x {p}" for w, p in zip(self.weights, parts, strict=True))


@dataclass(frozen=True, eq=False)
class BetaPosterior:
    """Beta-mixture posteriors for many data sets at once: arrays of shape (points, J)."""

    weights: np.ndarray
    a: np.ndarray
    b: np.ndarray

    def __len__(self) -> int:
        return self.weights.shape[0]

    def mean(self) -> np.ndarray:
        """Posterior mean per point."""
        return np.sum(self.weights * self.a / (self.a + self.b), axis=1)

    def variance(self) -> np.ndarray:
        """Posterior variance per point (law of total variance over components)."""
        m = self.a / (self.a + self.b)
        v = m * (1 - m) / (self.a + self.b + 1)
        mean = np.sum(self.weights * m, axis=1)
        return np.sum(self.weights * (v + m**2), axis=1) - mean**2

    def cdf(self, t: float) -> np.ndarray:
        """Pr(p <= t) per point."""
        return np.sum(self.weights * special.betainc(self.a, self.b, t), axis=1)

    def sf(self, t: float) -> np.ndarray:
        """Pr(p > t) per point, computed on the complement for accuracy near 1."""
        return np.sum(self.weights * special.betainc(self.b, self.a, 1.0 - t), axis=1)

    def sf_from_complement(self, one_minus_t: np.ndarray) -> np.ndarray:
        """Pr(p > t) at many t given 1 - t: shape (points, len(t))."""
        out = np.zeros((len(self), one_minus_t.size))
        for j in range(self.weights.shape[1]):
            out += self.weights[:, j, None] * special.betainc(
                self.b[:, j, None], self.a[:, j, None], one_minus_t[None, :])
        return out

    def log_pdf(self, log_u: np.ndarray, log_1mu: np.ndarray) -> np.ndarray:
        """Log density at u given log u and log(1 - u): shape (points, len(u))."""
        comps = [
            np.log(self.weights[:, j, None])
            + (self.a[:, j, None] - 1) * log_u[None, :]
            + (self.b[:, j, None] - 1) * log_1mu[None, :]
            - special.betaln(self.a[:, j, None], self.b[:, j, None])
            for j in range(self.weights.shape[1])
        ]
        return special.logsumexp(np.stack(comps), axis=0)


def update(prior: BetaMixture, n: int, x: np.ndarray) -> BetaPosterior:
    """Posterior after ``x`` responses in ``n`` subjects (vectorised over ``x``).

    Examples
    --------
    >>> import numpy as np
    >>> post = update(BetaMixture.single(1, 1), 10, np.array([3]))
    >>> post.a.item(), post.b.item()
    (4.0, 8.0)
    """
    x = np.asarray(x, dtype=float)[:, None]
    a0 = np.asarray(prior.a)[None, :]
    b0 = np.asarray(prior.b)[None, :]
    a = a0 + x
    b = b0 + n - x
    log_w = np.log(np.asarray(prior.weights))[None, :] + special.betaln(a, b) - special.betaln(
        a0, b0)
    weights = np.exp(log_w - special.logsumexp(log_w, axis=1, keepdims=True))
    return BetaPosterior(weights, a, b)


def prob_difference_exceeds(
    first: BetaPosterior, second: BetaPosterior, d: float, tol: float = 1e-11,
) -> tuple[np.ndarray, float]:
    """Pr(p_1 - p_2 > d) for every pair of points of two posteriors.

    Parameters
    ----------
    first, second : BetaPosterior
        Posteriors of p_1 (rows of the result) and p_2 (columns).
    d : float
        The difference to exceed, in (-1, 1).
    tol : float
        Target absolute error of the quadrature.

    Returns
    -------
    probability : ndarray, shape (len(first), len(second))
    error : float
        Estimated absolute quadrature error (largest over the lattice).
    """
    lo, hi = max(0.0, -d), min(1.0, 1.0 - d)
    width = hi - lo

    def partial(nodes: tanh_sinh.Nodes) -> np.ndarray:
        # u = lo + width * s runs over [lo, hi]; logs of u and 1 - u stay accurate at the ends.
        s, sc = nodes.u, nodes.one_minus_u
        log_u = np.log(lo + width * s) if lo > 0 else np.log(width) + nodes.log_u
        log_1mu = np.log((1.0 - hi) + width * sc) if hi < 1 else np.log(width) + nodes.log_1mu
        log_density = second.log_pdf(log_u, log_1mu) + nodes.log_w + np.log(width)
        # 1 - (u + d) = (1 - d - hi) + width * (1 - s), exact in the limit s -> 1
        survival = first.sf_from_complement((1.0 - d - hi) + width * sc)
        return survival @ np.exp(log_density).T

    integral = tanh_sinh.integrate(partial, tol)
    value = integral.value
    if d < 0:
        value = value + second.cdf(-d)[None, :]
    return np.clip(value, 0.0, 1.0), integral.error


def predictive_pmf(post: BetaPosterior, m: int) -> np.ndarray:
    """Pr(Y = 0..m) for the responses among ``m`` future subjects, one row per point.

    The beta-binomial pmf C(m, y) B(y + a, m - y + b) / B(a, b), mixed over components.
    """
    y = np.arange(m + 1, dtype=float)[None, :]
    log_choose = special.gammaln(m + 1) - special.gammaln(y + 1) - special.gammaln(m - y + 1)
    out = np.zeros((len(post), m + 1))
    for j in range(post.weights.shape[1]):
        a, b = post.a[:, j, None], post.b[:, j, None]
        out += post.weights[:, j, None] * np.exp(
            log_choose + special.betaln(y + a, m - y + b) - special.betaln(a, b))
    return out


class BinaryFamily(LatticeFamily):
    """Binomial responses, beta or beta-mixture priors, exact on the response lattice."""

    name = "binary"
    parameter = "rate"
    statistic = "responses"
    comparisons = ("difference",)
    default_better = None
    parameter_range = (0.0, 1.0)

    def read_endpoint(self, table: Table) -> BinaryEndpoint:
        table.allow("type", "better")
        return BinaryEndpoint()

    def read_prior(self, table: Table) -> BetaMixture | None:
        kind = table.string("distribution", ("beta", "beta-mixture"))
        if kind == "beta":
            table.allow("distribution", "a", "b")
            a = _shape(table, "a")
            b = _shape(table, "b")
            return None if a is None or b is None else BetaMixture.single(a, b)
        if kind == "beta-mixture":
            table.allow("distribution", "components")
            parts = table.sub_tables("components")
            if parts is None:
                return None
            read = []
            for part in parts:
                part.allow("weight", "a", "b")
                w = part.number("weight", check=lambda v: 0 < v <= 1,
                                expected="a weight in (0, 1]")
                read.append((w, _shape(part, "a"), _shape(part, "b")))
            if any(v is None for r in read for v in r):
                return None
            total = sum(r[0] for r in read)
            if abs(total - 1.0) > WEIGHT_TOLERANCE:
                table.fail("components", "weights summing to 1", Phrase(f"a sum of {total:g}"))
                return None
            w, a, b = zip(*read, strict=True)
            return BetaMixture(tuple(w), tuple(a), tuple(b))
        return None

    def true_value_problem(self, value: float) -> str | None:
        return None if 0.0 < value < 1.0 else "a rate in (0, 1)"

    # -- lattice interface -----------------------------------------------------------
    def lattice_size(self, design: Any, arm: int, n: int) -> int:
        return n + 1

    def increment_pmf(self, design: Any, truth: float, n: int, size: int) -> np.ndarray:
        return stats.binom.pmf(np.arange(size), n, truth)

    def posterior(self, design: Any, arm: int, n: int, stats_: np.ndarray) -> BetaPosterior:
        return update(design.arms[arm].prior, n, stats_)

    def benefit(self, design: Any, posteriors: tuple[Any, ...]) -> tuple[np.ndarray, float]:
        h: Hypothesis = design.hypothesis
        if len(posteriors) == 1:
            post = posteriors[0]
            if h.better == "higher":
                return post.sf(h.benchmark), 0.0
            return post.cdf(h.benchmark), 0.0
        treatment, control = posteriors
        if h.better == "higher":
            return prob_difference_exceeds(treatment, control, h.shift)
        flipped, error = prob_difference_exceeds(control, treatment, h.shift)
        return flipped.T, error

    def predictive_pmf(self, design: Any, posterior: Any, m: int, size: int) -> np.ndarray:
        return predictive_pmf(posterior, m)[:, :size]

    def target_mean(self, design: Any, posteriors: tuple[Any, ...]) -> np.ndarray:
        if len(posteriors) == 1:
            return posteriors[0].mean()
        treatment, control = posteriors
        return treatment.mean()[:, None] - control.mean()[None, :]

    def target_cdf(self, design: Any, posteriors: tuple[Any, ...], value: float) -> np.ndarray:
        if len(posteriors) == 1:
            return posteriors[0].cdf(value)
        treatment, control = posteriors
        exceeds, _ = prob_difference_exceeds(treatment, control, value)
        return 1.0 - exceeds

    def prior_probability_of_claim(self, design: Any) -> float:
        priors = tuple(update(arm.prior, 0, np.zeros(1)) for arm in design.arms)
        return float(np.asarray(self.benefit(design, priors)[0]).ravel()[0])

    def prior_components(self, prior: BetaMixture) -> list[tuple[float, Any]]:
        return [(w, stats.beta(a, b)) for w, a, b in zip(prior.weights, prior.a, prior.b,
                                                          strict=True)]


def _shape(table: Table, key: str) -> float | None:
    return table.number(key, check=lambda v: v > 0, expected="a shape parameter > 0")
