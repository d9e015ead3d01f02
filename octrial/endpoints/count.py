"""Count endpoint: events per subject, Poisson (or negative binomial) in the exposure.

Each subject contributes ``exposure`` units of follow-up (set in ``[endpoint]``); the
arm's sufficient statistic is its total number of events. Formulas (docs/methods.md):

* Gamma-mixture prior sum_j w_j Gamma(a_j, b_j) (shape a, rate b) with Poisson counts:
  after x events in exposure t the components are Gamma(a_j + x, b_j + t) with weights
  w'_j proportional to w_j b_j^a_j Gamma(a_j + x) / (Gamma(a_j) (b_j + t)^(a_j + x)).
* One arm: Pr(lambda < lambda0 | x) = sum_j w'_j P(a'_j, b'_j lambda0) (regularized lower
  incomplete gamma; the upper one when higher is better).
* Two arms, rate ratio: with U = b'_T lambda_T and V = b'_C lambda_C, U / (U + V) is
  Beta(a'_T, a'_C), so Pr(lambda_T / lambda_C < c) = I_{k/(1+k)}(a'_T, a'_C) with
  k = c b'_T / b'_C, summed over component pairs.
* Predictive: future events in exposure t' are negative binomial with size a'_j and
  success probability b'_j / (b'_j + t'), mixed over components.
* Negative binomial counts with known dispersion (variance = mean + dispersion x mean^2)
  and log-normal priors have no conjugate form: their posteriors come from the grid engine
  (:mod:`octrial.endpoints.grid_family`) on the log rate.

The count is unbounded, so the lattice is truncated: for every true rate up to the
largest one evaluated, the probability of a count beyond the lattice at any look is below
:data:`TRUNCATION_EPSILON` / (looks x arms), so the exact engine neglects at most
:data:`TRUNCATION_EPSILON` per scenario, and reports what it neglected.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from scipy import special, stats

import octrial.endpoints.grid_family as grid_family
import octrial.endpoints.schema as schema
from octrial.design.reader import Phrase, Problems, Table
from octrial.endpoints.base import LatticeFamily
from octrial.endpoints.borrowing import Borrowing, borrow_mixture, read_borrowing
from octrial.endpoints.grid_family import GridModel
from octrial.endpoints.mixtures import describe
from octrial.endpoints.prior_size import arm_summary, fda_summary
from octrial.numerics import parameter_grid as pg

if TYPE_CHECKING:
    from octrial.checks.model import CheckModel
    from octrial.interim.base import EndpointInterim

TRUNCATION_EPSILON = 1e-10
"""Largest probability mass the truncated count lattice may neglect per scenario."""

MODELS = ("poisson", "negative-binomial")
TAIL = 1e-15
"""Prior quantile that bounds the grid's range."""


@dataclass(frozen=True)
class CountEndpoint:
    """``[endpoint]`` settings of a count endpoint.

    Attributes
    ----------
    exposure : float
        Follow-up per subject (for example 1 year), in the units the rates are per.
    model : {'poisson', 'negative-binomial'}
    dispersion : float or None
        Negative binomial: variance = mean + dispersion x mean^2 (known).
    """

    type: str = "count"
    exposure: float = 1.0
    model: str = "poisson"
    dispersion: float | None = None


@dataclass(frozen=True)
class GammaMixture:
    """A mixture of gamma distributions (shape a, rate b) on the event rate."""

    weights: tuple[float, ...]
    a: tuple[float, ...]
    b: tuple[float, ...]
    borrowing: Borrowing | None = None

    @classmethod
    def single(cls, a: float, b: float) -> GammaMixture:
        """A plain Gamma(a, b)."""
        return cls((1.0,), (float(a),), (float(b),))

    @property
    def mean(self) -> float:
        """Prior mean of the rate."""
        return float(sum(w * a / b for w, a, b in zip(self.weights, self.a, self.b,
                                                       strict=True)))

    def describe(self) -> str:
        """Plain-text form for tables and reports."""
        parts = [f"Gamma(shape {a:g}, rate {b:g})" for a, b in zip(self.a, self.b, strict=True)]
        return describe(self.weights, parts, self.borrowing)


@dataclass(frozen=True)
class LogNormalRate:
    """A normal prior on the log rate (no conjugate form: grid engine)."""

    log_mean: float
    log_sd: float

    def describe(self) -> str:
        return f"log rate ~ Normal({self.log_mean:g}, {self.log_sd:g}^2)"


@dataclass(frozen=True, eq=False)
class GammaPosterior:
    """Gamma-mixture posteriors for many data sets at once: arrays of shape (points, J)."""

    weights: np.ndarray
    a: np.ndarray
    b: np.ndarray

    def __len__(self) -> int:
        return self.weights.shape[0]

    def cdf(self, t: float) -> np.ndarray:
        """Pr(lambda <= t) per point."""
        return np.sum(self.weights * special.gammainc(self.a, self.b * t), axis=1)

    def sf(self, t: float) -> np.ndarray:
        """Pr(lambda > t) per point (the upper incomplete gamma, accurate near 1)."""
        return np.sum(self.weights * special.gammaincc(self.a, self.b * t), axis=1)

    def mean(self) -> np.ndarray:
        return np.sum(self.weights * self.a / self.b, axis=1)

    def variance(self) -> np.ndarray:
        """Posterior variance per point (law of total variance over components)."""
        m = self.a / self.b
        mean = np.sum(self.weights * m, axis=1)
        return np.sum(self.weights * (m / self.b + m**2), axis=1) - mean**2


def update(prior: GammaMixture, exposure: float, x: np.ndarray) -> GammaPosterior:
    """Posterior after ``x`` events in total ``exposure`` (vectorised over ``x``; both may
    be fractional, as in a power prior).

    Examples
    --------
    >>> import numpy as np
    >>> post = update(GammaMixture.single(2, 1), 10.0, np.array([3]))
    >>> post.a.item(), post.b.item()
    (5.0, 11.0)
    """
    x = np.asarray(x, dtype=float)[:, None]
    a0 = np.asarray(prior.a)[None, :]
    b0 = np.asarray(prior.b)[None, :]
    a, b = a0 + x, b0 + exposure
    log_w = (np.log(np.asarray(prior.weights))[None, :] + a0 * np.log(b0)
             + special.gammaln(a) - special.gammaln(a0) - a * np.log(b))
    weights = np.exp(log_w - special.logsumexp(log_w, axis=1, keepdims=True))
    return GammaPosterior(weights, a, np.broadcast_to(b, a.shape))


def prob_ratio(
    treatment: GammaPosterior, control: GammaPosterior, c: float, below: bool,
) -> np.ndarray:
    """Pr(lambda_T / lambda_C < c) (``below``) or Pr(lambda_T / lambda_C > c) for every
    pair of points: the Beta identity (module docstring). Shape (len(T), len(C))."""
    out = np.zeros((len(treatment), len(control)))
    for i in range(treatment.weights.shape[1]):
        for j in range(control.weights.shape[1]):
            k = c * treatment.b[0, i] / control.b[0, j]
            a_t, a_c = treatment.a[:, i, None], control.a[None, :, j]
            if below:
                p = special.betainc(a_t, a_c, k / (1.0 + k))
            else:
                p = special.betainc(a_c, a_t, 1.0 / (1.0 + k))
            out += treatment.weights[:, i, None] * control.weights[None, :, j] * p
    return np.clip(out, 0.0, 1.0)


def predictive_pmf(post: GammaPosterior, exposure: float, size: int) -> np.ndarray:
    """Pr(Y = 0 .. size-1) for events in a further ``exposure``, one row per point:
    negative binomial with size a' and success probability b' / (b' + exposure)."""
    y = np.arange(size, dtype=float)[None, :]
    out = np.zeros((len(post), size))
    for j in range(post.weights.shape[1]):
        a, b = post.a[:, j, None], post.b[:, j, None]
        log_p = (special.gammaln(y + a) - special.gammaln(a) - special.gammaln(y + 1)
                 + a * np.log(b / (b + exposure)) + y * np.log(exposure / (b + exposure)))
        out += post.weights[:, j, None] * np.exp(log_p)
    return out


def read_rate_prior(table: Table, prior_schema: schema.PriorSchema, why: str) -> Any:
    """A prior on a rate (or hazard) read through ``prior_schema``, with historical events
    in an exposure borrowed by a power prior or robust mixture (gamma priors only: ``why``
    says so in the message)."""
    kind, prior = schema.read_distribution(table, prior_schema)
    if kind is None:
        return None
    spec = read_borrowing(table, {"events": "count", "exposure": "positive"})
    if spec is None or prior is None:
        return prior
    if not isinstance(prior, GammaMixture):
        table.fail("borrowing", f"a gamma or gamma-mixture initial prior ({why})",
                   Phrase(f"a {kind} prior"))
        return None
    x0, t0 = spec["historical"]["events"], spec["historical"]["exposure"]
    return borrow_mixture(prior, update, t0, x0, spec, x0 / t0)


class CountFamily(GridModel, LatticeFamily):
    """Event counts with exposure; exact on the (truncated) count lattice."""

    name = "count"
    parameter = "rate"
    statistic = "events"
    unit = "events per unit of exposure"
    data_model = ("Each subject's number of events follows a Poisson distribution with mean "
                  "equal to the arm's true rate times the subject's exposure, independently "
                  "of other subjects (unless the design states a negative binomial model).")
    comparisons = ("ratio",)
    default_better = "lower"
    truncates = True
    truncation_epsilon = TRUNCATION_EPSILON
    parameter_range = (0.0, math.inf)
    grid_scale = "log rate"

    # -- design-file reading ---------------------------------------------------------
    # -- the family's parts in other layers -----------------------------------------
    def interim(self) -> EndpointInterim:
        from octrial.interim.count import CountInterim

        return CountInterim()

    def check_model(self, design: Any) -> CheckModel:
        from octrial.checks.lattice_model import CountModel

        return CountModel(design)

    prior_schema = schema.PriorSchema({
        **schema.with_mixture("gamma", schema.prior_size("shape"), schema.positive("rate"),
                              GammaMixture),
        "log-normal": schema.Distribution(
            (schema.Number("log_mean", "a number (mean of the log rate)", example=0.0),
             schema.positive("log_sd", "a number > 0 (sd of the log rate)")),
            lambda v: LogNormalRate(v["log_mean"], v["log_sd"])),
    })

    def read_endpoint(self, table: Table) -> CountEndpoint:
        table.allow("type", "better", "exposure", "model", "dispersion")
        exposure = table.number("exposure", required=False, default=1.0,
                                check=lambda v: v > 0,
                                expected="an exposure per subject > 0 (for example 1 year)")
        model = table.string("model", MODELS, required=False, default="poisson")
        dispersion = None
        if model == "negative-binomial":
            dispersion = table.number(
                "dispersion", check=lambda v: v > 0,
                expected="a known dispersion > 0 (variance = mean + dispersion x mean^2)")
        elif table.has("dispersion"):
            table.fail("dispersion", "no dispersion for Poisson counts (set model = "
                       "'negative-binomial')", table.data["dispersion"])
        return CountEndpoint("count", exposure or 1.0, model or "poisson", dispersion)

    def read_prior(self, table: Table) -> GammaMixture | LogNormalRate | None:
        return read_rate_prior(table, self.prior_schema, "borrowing stays conjugate only "
                                                         "for those")

    def true_value_problem(self, value: float) -> str | None:
        return None if value > 0 and math.isfinite(value) else "a rate > 0"

    def check_design(self, parts: dict[str, Any], problems: Problems) -> None:
        endpoint = parts["endpoint"]
        if endpoint is None or endpoint.model != "negative-binomial":
            return
        for arm in parts["arms"]:
            for key in ("prior", "design_prior"):
                prior = getattr(arm, key)
                if isinstance(prior, GammaMixture) and prior.borrowing is not None:
                    problems.add(f"arms.{arm.name}.{key}.borrowing", "Poisson counts "
                                 "(borrowing is available for model = 'poisson' only)",
                                 Phrase("a negative binomial endpoint"))

    # -- which engine computes the posterior -----------------------------------------
    def on_grid(self, design: Any) -> bool:
        """Whether posteriors need the grid engine (no conjugate form)."""
        return design.endpoint.model == "negative-binomial" or any(
            isinstance(arm.prior, LogNormalRate) for arm in design.arms)

    # -- lattice interface -----------------------------------------------------------
    def lattice_reach(self, design: Any) -> tuple[float, ...]:
        values = np.array(design.scenarios.values, dtype=float)
        top = values.max(axis=0)
        h = design.hypothesis
        if not design.two_arm:
            return (float(max(top[0], h.benchmark)),)
        c = h.threshold
        return (float(max(top[0], c * top[1])), float(max(top[1], top[0] / c)))

    def lattice_size(self, design: Any, arm: int, n: int) -> int:
        if n == 0:
            return 1
        e: CountEndpoint = design.endpoint
        share = TRUNCATION_EPSILON / (design.looks.count * len(design.arms))
        mean = self.lattice_reach(design)[arm] * e.exposure * n
        if e.model == "poisson":
            return int(stats.poisson.isf(share, mean)) + 1
        assert e.dispersion is not None  # negative binomial (load.py)
        size = n / e.dispersion
        return int(stats.nbinom.isf(share, size, size / (size + mean))) + 1

    def predictive_lattice_size(self, design: Any, arm: int) -> int:
        """From the highest interim count (the interim lattice edge), the predictive
        distribution of the final count must have less than the truncation share beyond
        the returned size; the predictive count is stochastically increasing in the
        interim count, so every lower count is covered too."""
        looks = design.looks
        n_end = looks.per_arm[-1][arm]
        size = self.lattice_size(design, arm, n_end)
        share = TRUNCATION_EPSILON / (looks.count * len(design.arms))
        for k in range(looks.count - 1):
            n_k = looks.per_arm[k][arm]
            edge = self.lattice_size(design, arm, n_k) - 1
            post = self.posterior(design, arm, n_k, np.array([edge]))
            span = 2 * size
            while True:
                pmf = self.predictive_pmf(design, post, n_end - n_k, span)[0]
                beyond = np.flatnonzero(1.0 - np.cumsum(pmf) < share)
                if beyond.size:
                    size = max(size, edge + int(beyond[0]) + 1)
                    break
                span *= 2
        return size

    def increment_pmf(self, design: Any, truth: Any, n: int, size: int) -> np.ndarray:
        """Poisson(rate x exposure x n) or, for negative binomial counts, the sum of n
        subjects' counts: NB with size n / dispersion and the same mean (logs, vectorised
        over ``truth``)."""
        e: CountEndpoint = design.endpoint
        truth = np.asarray(truth, dtype=float)[..., None]
        x = np.arange(size, dtype=float)
        if n == 0:
            return np.broadcast_to((x == 0).astype(float), (*truth.shape[:-1], size)).copy()
        mean = truth * e.exposure * n
        if e.model == "poisson":
            log_p = special.xlogy(x, mean) - mean - special.gammaln(x + 1)
        else:
            assert e.dispersion is not None  # negative binomial (load.py)
            r = n / e.dispersion
            log_p = (special.gammaln(x + r) - special.gammaln(r) - special.gammaln(x + 1)
                     + r * np.log(r / (r + mean)) + special.xlogy(x, mean / (r + mean)))
        return np.exp(log_p)

    def posterior(self, design: Any, arm: int, n: int, stats_: np.ndarray) -> Any:
        if self.on_grid(design):
            return grid_family.posterior(design, arm, n, stats_)
        return update(design.arms[arm].prior, n * design.endpoint.exposure, stats_)

    def benefit(self, design: Any, posteriors: tuple[Any, ...]) -> tuple[np.ndarray, float]:
        if self.on_grid(design):
            return grid_family.benefit(design, posteriors)
        h = design.hypothesis
        lower = h.better == "lower"
        if len(posteriors) == 1:
            post = posteriors[0]
            return (post.cdf(h.benchmark) if lower else post.sf(h.benchmark)), 0.0
        return prob_ratio(posteriors[0], posteriors[1], h.threshold, below=lower), 0.0

    def predictive_pmf(self, design: Any, posterior: Any, m: int, size: int) -> np.ndarray:
        if self.on_grid(design):
            return grid_family.predictive(design, posterior, m, size)
        return predictive_pmf(posterior, m * design.endpoint.exposure, size)

    def predictive_error(self, design: Any, posterior: Any, m: int, size: int) -> float:
        if self.on_grid(design):
            return grid_family.predictive_error(design, posterior, m, size)
        return 0.0

    def rule_info(self, design: Any, error: float) -> dict[str, Any]:
        return grid_family.info(design, error) if self.on_grid(design) else {}

    def target_value(self, hypothesis: Any, truth: tuple[float, ...]) -> float:
        """One arm: the rate. Two arms: the log rate ratio (its posterior mean is finite
        where the ratio's may not be)."""
        if len(truth) == 1:
            return truth[0]
        return math.log(truth[0] / truth[1])

    def target_mean(self, design: Any, posteriors: tuple[Any, ...]) -> np.ndarray | None:
        if self.on_grid(design):
            return grid_family.target_mean(design, posteriors)
        if len(posteriors) == 1:
            return posteriors[0].mean()
        treatment, control = (np.sum(p.weights * (special.digamma(p.a) - np.log(p.b)), axis=1)
                              for p in posteriors)  # E[log rate]
        return treatment[:, None] - control[None, :]

    def target_cdf(self, design: Any, posteriors: tuple[Any, ...],
                   value: float) -> np.ndarray | None:
        if self.on_grid(design):
            return grid_family.target_cdf(design, posteriors, value)
        if len(posteriors) == 1:
            return posteriors[0].cdf(value)
        return prob_ratio(posteriors[0], posteriors[1], math.exp(value), below=True)

    def prior_components(self, prior: Any) -> list[tuple[float, Any]] | None:
        if isinstance(prior, LogNormalRate):
            return [(1.0, stats.lognorm(prior.log_sd, scale=math.exp(prior.log_mean)))]
        return [(w, stats.gamma(a, scale=1 / b)) for w, a, b in zip(
            prior.weights, prior.a, prior.b, strict=True)]

    def prior_probability_of_claim(self, design: Any) -> float | None:
        if any(arm.prior is None for arm in design.arms):
            return None
        posts = tuple(self.posterior(design, j, 0, np.zeros(1))
                      for j in range(len(design.arms)))
        return float(np.asarray(self.benefit(design, posts)[0]).ravel()[0])

    def effective_sample_size(self, design: Any) -> dict[str, Any] | None:
        if any(arm.prior is None for arm in design.arms):
            return None
        e: CountEndpoint = design.endpoint
        out = {}
        for j, arm in enumerate(design.arms):
            prior = arm.prior
            n = design.looks.per_arm[-1][j]
            t = n * e.exposure
            simple = formula = None
            if isinstance(prior, GammaMixture) and e.model == "poisson":
                simple = float(sum(w * b for w, b in zip(prior.weights, prior.b, strict=True))
                               / e.exposure)
                formula = "b / exposure per subject"
                x = prior.mean * t
                v1 = x / t**2  # Gamma(x, t): the posterior under a prior flat on log rate
                v2 = float(update(prior, t, np.array([x])).variance()[0])
            else:
                x = grid_family.mean_of(design, j, prior) * t
                v1 = grid_family.variance_at(design, j, prior, n, x, flat=True)
                v2 = grid_family.variance_at(design, j, prior, n, x)
            out[arm.name] = arm_summary(prior.describe(), simple, formula,
                                        fda_summary(n, v1, v2), getattr(prior, "borrowing",
                                                                         None))
        return out

    # -- grid model ------------------------------------------------------------------
    def to_theta(self, value: float) -> float:
        return math.log(value)

    def from_theta(self, theta: np.ndarray) -> np.ndarray:
        return np.exp(theta)

    def grid_log_prior(self, prior: Any) -> Any:
        if isinstance(prior, LogNormalRate):
            return lambda t: pg.log_normal_density(t, prior.log_mean, prior.log_sd)

        def log_gamma_on_log_scale(t: np.ndarray) -> np.ndarray:
            # density of lambda = e^t times the Jacobian e^t
            return pg.log_mixture([
                (w, a * np.log(b) - special.gammaln(a) + a * t - b * np.exp(t))
                for w, a, b in zip(prior.weights, prior.a, prior.b, strict=True)])
        return log_gamma_on_log_scale

    def grid_prior_range(self, prior: Any) -> tuple[float, float]:
        if isinstance(prior, LogNormalRate):
            z = stats.norm.isf(TAIL)
            return prior.log_mean - z * prior.log_sd, prior.log_mean + z * prior.log_sd
        lo = min(stats.gamma.ppf(TAIL, a, scale=1 / b) for a, b in zip(prior.a, prior.b,
                                                                       strict=True))
        hi = max(stats.gamma.isf(TAIL, a, scale=1 / b) for a, b in zip(prior.a, prior.b,
                                                                       strict=True))
        return math.log(max(lo, 1e-300)), math.log(hi)

    def grid_log_likelihood(self, design: Any, n: float, stats_: np.ndarray) -> Any:
        e: CountEndpoint = design.endpoint
        s = np.asarray(stats_, dtype=float)[:, None]
        if e.model == "poisson":
            t = n * e.exposure
            return lambda theta: s * theta[None, :] - t * np.exp(theta)[None, :]
        assert e.dispersion is not None  # negative binomial (load.py)
        k = 1.0 / e.dispersion

        def negative_binomial(theta: np.ndarray) -> np.ndarray:
            mean = np.exp(theta)[None, :] * e.exposure
            log_k_plus = np.log(k + mean)
            return s * (np.log(mean) - log_k_plus) + n * k * (math.log(k) - log_k_plus)
        return negative_binomial

    def grid_data_range(self, design: Any, arm: int) -> tuple[float, float]:
        e: CountEndpoint = design.endpoint
        sizes = [(n[arm], self.lattice_size(design, arm, n[arm])) for n in design.looks.per_arm]
        low = math.log(0.5 / (sizes[-1][0] * e.exposure)) - 5.0
        high = max(math.log(size / (n * e.exposure)) for n, size in sizes) + 5.0
        return low, high

    def grid_predictive_table(self, design: Any, theta: np.ndarray, m: int,
                              size: int) -> np.ndarray:
        return self.increment_pmf(design, np.exp(theta), m, size)

    # == simulation by the generic study loop =======================================
    def increment_distribution(self, design: Any, arm: int, truth: Any, n: int) -> Any:
        """Events of ``n`` new subjects: Poisson(rate x exposure x n), or for negative
        binomial counts NB with size n / dispersion and the same mean (as
        :meth:`increment_pmf`)."""
        e: CountEndpoint = design.endpoint
        mean = np.asarray(truth, dtype=float) * e.exposure * n
        if e.model == "poisson":
            return stats.poisson(mean)
        assert e.dispersion is not None  # negative binomial (load.py)
        r = n / e.dispersion
        return stats.nbinom(r, r / (r + mean))

    def draw_statistics(self, design: Any, arm: int, truth: float, n: int,
                        rng: np.random.Generator, size: int) -> np.ndarray:
        e: CountEndpoint = design.endpoint
        mean = truth * e.exposure * n
        if n == 0:
            return np.zeros(size, dtype=np.int64)
        if e.model == "poisson":
            return rng.poisson(mean, size)
        assert e.dispersion is not None  # negative binomial (load.py)
        r = n / e.dispersion
        return rng.negative_binomial(r, r / (r + mean), size)

