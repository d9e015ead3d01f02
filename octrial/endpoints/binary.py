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
* A logit-normal prior (normal on logit p), or a comparison on the odds ratio, has no
  closed form: the posteriors then come from the grid engine
  (:mod:`octrial.endpoints.grid_family`) on the logit scale.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from scipy import special, stats

import octrial.endpoints.grid_family as grid_family
import octrial.endpoints.schema as schema
from octrial.design.model import Hypothesis
from octrial.design.reader import PRIOR_SIZE, Phrase, Problems, Table
from octrial.endpoints.base import LatticeFamily
from octrial.endpoints.borrowing import Borrowing, borrow_mixture, read_borrowing
from octrial.endpoints.grid_family import GridModel
from octrial.endpoints.mixtures import describe
from octrial.endpoints.prior_size import arm_summary, fda_summary
from octrial.numerics import parameter_grid as pg
from octrial.numerics import tanh_sinh

if TYPE_CHECKING:
    from octrial.checks.model import CheckModel
    from octrial.interim.base import EndpointInterim

TAIL = 1e-15
"""Prior quantile that bounds the grid's range."""


def beta_shape(key: str) -> schema.Number:
    """A beta shape parameter (a prior worth at most PRIOR_SIZE subjects)."""
    return schema.prior_size(key, f"a shape parameter > 0 and at most {PRIOR_SIZE:g}")


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
    borrowing: Borrowing | None = None

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

    @property
    def mean(self) -> float:
        """Prior mean of the rate."""
        return float(sum(w * a / (a + b) for w, a, b in zip(self.weights, self.a, self.b,
                                                             strict=True)))

    def describe(self) -> str:
        """Plain-text form for tables and reports."""
        parts = [f"Beta({a:g}, {b:g})" for a, b in zip(self.a, self.b, strict=True)]
        return describe(self.weights, parts, self.borrowing)


@dataclass(frozen=True)
class LogitNormal:
    """A normal prior on logit(rate) (no conjugate form: grid engine)."""

    logit_mean: float
    logit_sd: float

    def describe(self) -> str:
        return f"logit rate ~ Normal({self.logit_mean:g}, {self.logit_sd:g}^2)"


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


class BinaryFamily(GridModel, LatticeFamily):
    """Binomial responses, beta or beta-mixture priors, exact on the response lattice."""

    name = "binary"
    parameter = "rate"
    statistic = "responses"
    unit = "proportion"
    data_model = ("Each subject's outcome is a response or not, with the arm's true response "
                  "rate, independently of every other subject (binomial model).")
    prior_size_note = ("Effective sample size of a beta prior: a + b, in subjects; of a "
                       "mixture, the weight-averaged a + b (common practice; Morita, Thall & "
                       "Müller 2008 give a general definition).")
    comparisons = ("difference", "odds-ratio")
    default_better = None
    parameter_range = (0.0, 1.0)
    grid_scale = "logit rate"

    # -- the family's parts in other layers -----------------------------------------
    def interim(self) -> EndpointInterim:
        from octrial.interim.binary import BinaryInterim

        return BinaryInterim()

    def check_model(self, design: Any) -> CheckModel:
        from octrial.checks.lattice_model import BinaryModel

        return BinaryModel(design)

    prior_schema = schema.PriorSchema({
        **schema.with_mixture("beta", beta_shape("a"), beta_shape("b"), BetaMixture),
        "logit-normal": schema.Distribution(
            (schema.Number("logit_mean", "a number (mean of logit rate)", example=-1.0),
             schema.positive("logit_sd", "a number > 0 (sd of logit rate)")),
            lambda v: LogitNormal(v["logit_mean"], v["logit_sd"])),
    })

    def read_endpoint(self, table: Table) -> BinaryEndpoint:
        table.allow("type", "better")
        return BinaryEndpoint()

    def read_prior(self, table: Table) -> BetaMixture | LogitNormal | None:
        kind, prior = schema.read_distribution(table, self.prior_schema)
        if kind is None:
            return None
        spec = read_borrowing(table, {"responses": "count", "n": "size"})
        if spec is None or prior is None:
            return prior
        x0, n0 = spec["historical"]["responses"], spec["historical"]["n"]
        if x0 > n0:
            table.fail("historical.responses", f"at most n ({n0:g}) responses", x0)
            return None
        if not isinstance(prior, BetaMixture):
            table.fail("borrowing", "a beta or beta-mixture initial prior (borrowing stays "
                       "conjugate only for those)", Phrase(f"a {kind} prior"))
            return None
        return borrow_mixture(prior, update, n0, x0, spec, x0 / n0)

    def true_value_problem(self, value: float) -> str | None:
        return None if 0.0 < value < 1.0 else "a rate in (0, 1)"

    def check_design(self, parts: dict[str, Any], problems: Problems) -> None:
        hypothesis = parts["hypothesis"]
        if not parts["two_arm"] or hypothesis is None or hypothesis.comparison != "difference":
            return
        for arm in parts["arms"]:
            if isinstance(arm.prior, LogitNormal):
                problems.add("hypothesis.comparison", "'odds-ratio' (a logit-normal prior in "
                             "a two-arm design is evaluated on the odds-ratio scale)",
                             "difference")
                return

    def on_grid(self, design: Any) -> bool:
        """Whether posteriors need the grid engine (no closed form)."""
        return design.hypothesis.comparison == "odds-ratio" or any(
            isinstance(arm.prior, LogitNormal) for arm in design.arms)

    # -- lattice interface -----------------------------------------------------------
    def lattice_size(self, design: Any, arm: int, n: int) -> int:
        return n + 1

    def increment_pmf(self, design: Any, truth: float, n: int, size: int) -> np.ndarray:
        return stats.binom.pmf(np.arange(size), n, truth)

    def posterior(self, design: Any, arm: int, n: int, stats_: np.ndarray) -> Any:
        if self.on_grid(design):
            return grid_family.posterior(design, arm, n, stats_)
        return update(design.arms[arm].prior, n, stats_)

    def benefit(self, design: Any, posteriors: tuple[Any, ...]) -> tuple[np.ndarray, float]:
        if self.on_grid(design):
            return grid_family.benefit(design, posteriors)
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
        if self.on_grid(design):
            return grid_family.predictive(design, posterior, m, size)
        return predictive_pmf(posterior, m)[:, :size]

    def target_value(self, hypothesis: Hypothesis, truth: tuple[float, ...]) -> float:
        """One arm: the rate. Two arms: p_T - p_C, or the log odds ratio when the
        comparison is on the odds-ratio scale (grid posteriors)."""
        if len(truth) == 2 and hypothesis.comparison == "odds-ratio":
            return float(special.logit(truth[0]) - special.logit(truth[1]))
        return super().target_value(hypothesis, truth)

    def target_mean(self, design: Any, posteriors: tuple[Any, ...]) -> np.ndarray | None:
        if self.on_grid(design):
            return grid_family.target_mean(design, posteriors)
        if len(posteriors) == 1:
            return posteriors[0].mean()
        treatment, control = posteriors
        return treatment.mean()[:, None] - control.mean()[None, :]

    def target_cdf(self, design: Any, posteriors: tuple[Any, ...],
                   value: float) -> np.ndarray | None:
        if self.on_grid(design):
            return grid_family.target_cdf(design, posteriors, value)
        if len(posteriors) == 1:
            return posteriors[0].cdf(value)
        treatment, control = posteriors
        exceeds, _ = prob_difference_exceeds(treatment, control, value)
        return 1.0 - exceeds

    def prior_components(self, prior: Any) -> list[tuple[float, Any]] | None:
        if not isinstance(prior, BetaMixture):
            return None
        return [(w, stats.beta(a, b)) for w, a, b in zip(prior.weights, prior.a, prior.b,
                                                          strict=True)]

    def predictive_error(self, design: Any, posterior: Any, m: int, size: int) -> float:
        if self.on_grid(design):
            return grid_family.predictive_error(design, posterior, m, size)
        return 0.0

    def rule_info(self, design: Any, error: float) -> dict[str, Any]:
        return grid_family.info(design, error) if self.on_grid(design) else {}

    def prior_probability_of_claim(self, design: Any) -> float | None:
        if any(arm.prior is None for arm in design.arms):
            return None
        priors = tuple(self.posterior(design, j, 0, np.zeros(1))
                       for j in range(len(design.arms)))
        return float(np.asarray(self.benefit(design, priors)[0]).ravel()[0])

    def effective_sample_size(self, design: Any) -> dict[str, Any] | None:
        if any(arm.prior is None for arm in design.arms):
            return None
        out = {}
        for j, arm in enumerate(design.arms):
            prior = arm.prior
            n = design.looks.per_arm[-1][j]
            simple = formula = None
            if isinstance(prior, BetaMixture):
                simple, formula = prior.effective_sample_size, "a + b"
                m = prior.mean
                v1 = m * (1 - m) / (n + 1)  # Beta(n m, n (1 - m)): flat on logit p
                v2 = float(update(prior, n, np.array([n * m])).variance()[0])
            else:
                x = n * grid_family.mean_of(design, j, prior)
                v1 = grid_family.variance_at(design, j, prior, n, x, flat=True)
                v2 = grid_family.variance_at(design, j, prior, n, x)
            out[arm.name] = arm_summary(prior.describe(), simple, formula,
                                        fda_summary(n, v1, v2), getattr(prior, "borrowing",
                                                                         None))
        return out

    # -- grid model ------------------------------------------------------------------
    def to_theta(self, value: float) -> float:
        return float(special.logit(value))

    def from_theta(self, theta: np.ndarray) -> np.ndarray:
        return special.expit(theta)

    def grid_log_prior(self, prior: Any) -> Any:
        if isinstance(prior, LogitNormal):
            return lambda t: pg.log_normal_density(t, prior.logit_mean, prior.logit_sd)

        def log_beta_on_logit_scale(t: np.ndarray) -> np.ndarray:
            # density of p = expit(t) times the Jacobian p (1 - p)
            log_p, log_q = _log_p(t), _log_p(-t)
            return pg.log_mixture([(w, a * log_p + b * log_q - special.betaln(a, b))
                                   for w, a, b in zip(prior.weights, prior.a, prior.b,
                                                      strict=True)])
        return log_beta_on_logit_scale

    def grid_prior_range(self, prior: Any) -> tuple[float, float]:
        if isinstance(prior, LogitNormal):
            z = stats.norm.isf(TAIL)
            return prior.logit_mean - z * prior.logit_sd, prior.logit_mean + z * prior.logit_sd
        lo = min(stats.beta.ppf(TAIL, a, b) for a, b in zip(prior.a, prior.b, strict=True))
        hi = max(stats.beta.isf(TAIL, a, b) for a, b in zip(prior.a, prior.b, strict=True))
        return float(special.logit(max(lo, 1e-300))), float(special.logit(min(hi, 1 - 1e-16)))

    def grid_log_likelihood(self, design: Any, n: float, stats_: np.ndarray) -> Any:
        x = np.asarray(stats_, dtype=float)[:, None]
        return lambda t: x * _log_p(t)[None, :] + (n - x) * _log_p(-t)[None, :]

    def grid_data_range(self, design: Any, arm: int) -> tuple[float, float]:
        n = design.looks.per_arm[-1][arm]
        return (float(special.logit(0.5 / (n + 1))) - 5.0,
                float(special.logit((n + 0.5) / (n + 1))) + 5.0)

    def grid_predictive_table(self, design: Any, theta: np.ndarray, m: int,
                              size: int) -> np.ndarray:
        y = np.arange(size, dtype=float)[None, :]
        t = theta[:, None]
        log_choose = special.gammaln(m + 1) - special.gammaln(y + 1) - special.gammaln(m - y + 1)
        return np.where(y <= m, np.exp(log_choose + y * _log_p(t) + (m - y) * _log_p(-t)), 0.0)

    # == simulation by the generic study loop =======================================
    def increment_distribution(self, design: Any, arm: int, truth: Any, n: int) -> Any:
        """Responses of ``n`` new subjects: Binomial(n, rate)."""
        return stats.binom(n, truth)

    def draw_statistics(self, design: Any, arm: int, truth: float, n: int,
                        rng: np.random.Generator, size: int) -> np.ndarray:
        return rng.binomial(n, truth, size)


def _log_p(t: np.ndarray) -> np.ndarray:
    """log expit(t), accurate in both tails."""
    return -np.logaddexp(0.0, -t)
