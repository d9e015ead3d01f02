"""Normal endpoint: a continuous outcome per subject, known or unknown sd.

Known sd sigma. The parameter is the mean (one arm) or the difference in means
treatment - control (two arms; its prior is written as ``hypothesis.prior``). With
n_k subjects the information is I_k = n_k / sigma^2 (one arm) or
1 / (sigma^2 (1/n_T + 1/n_C)) (two arms), and the score S_k = I_k x estimate (sample
mean, or difference in sample means) is a Gaussian random walk with independent
increments S_k - S_{k-1} ~ N(theta (I_k - I_{k-1}), I_k - I_{k-1}) (Jennison & Turnbull
2000, ch. 3; the allocation ratio is the same at every look). Everything below is on the
benefit scale eta = sign x theta (sign = +1 when higher is better), with score sign x S.

* Normal-mixture prior sum_j w_j N(m_j, s_j^2) on eta: component posteriors have
  precision P_j = 1/s_j^2 + I and mean M_j = (m_j / s_j^2 + S) / P_j, weights
  proportional to w_j N(S; I m_j, I + I^2 s_j^2). A flat prior gives P = I, M = S / I.
* B = Pr(eta > c | S) = sum_j w'_j Phi((M_j - c) sqrt(P_j)), with c = sign x benchmark
  (one arm) or the margin shift (two arms). Increasing in S (monotone likelihood ratio),
  so every probability threshold is a bound on S: see :mod:`octrial.rules.normal`.
* Predictive: S_K - S_k given the data is the mixture of N(M_j D, D + D^2 / P_j) with
  D = I_K - I_k.

Unknown sd: a normal-inverse-gamma prior per arm (mu | sigma^2 ~ N(m, sigma^2 / k),
sigma^2 ~ InvGamma(shape, scale)); the posterior of mu is Student t and the sufficient
statistic is two-dimensional, so only the Monte Carlo engine applies.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from scipy import integrate, special, stats

import octrial.endpoints.schema as schema
from octrial.design.reader import PRIOR_SIZE, Phrase, Problems, Table
from octrial.endpoints.base import Family
from octrial.endpoints.borrowing import Borrowing, make_borrowing, read_borrowing
from octrial.endpoints.mixtures import describe
from octrial.endpoints.prior_size import arm_summary, fda_summary
from octrial.errors import single

if TYPE_CHECKING:
    from octrial.checks.model import CheckModel
    from octrial.interim.base import EndpointInterim

UNKNOWN = "unknown"
HISTORICAL = {"mean": "number", "sd": "positive", "n": "size"}


def prior_sd(key: str) -> schema.Number:
    """A prior standard deviation."""
    return schema.positive(key, "a standard deviation > 0")


@dataclass(frozen=True)
class NormalEndpoint:
    """``[endpoint]`` settings of a normal endpoint.

    Attributes
    ----------
    sd : float or None
        The known standard deviation of one subject's outcome; ``None`` when unknown.
    true_sd : float or None
        Unknown sd: the standard deviation that generates the simulated data.
    """

    type: str = "normal"
    sd: float | None = None
    true_sd: float | None = None

    @property
    def known_sd(self) -> bool:
        return self.sd is not None


@dataclass(frozen=True)
class NormalMixture:
    """A mixture of normal distributions on the mean (or difference in means)."""

    weights: tuple[float, ...]
    mean: tuple[float, ...]
    sd: tuple[float, ...]
    borrowing: Borrowing | None = None

    def describe(self) -> str:
        parts = [f"Normal({m:g}, {s:g}^2)" for m, s in zip(self.mean, self.sd, strict=True)]
        return describe(self.weights, parts, self.borrowing)

    @property
    def prior_mean(self) -> float:
        return float(np.dot(self.weights, self.mean))


@dataclass(frozen=True)
class Flat:
    """The improper flat prior on the mean (or difference): B is the one-sided z-test."""

    borrowing: Borrowing | None = None

    def describe(self) -> str:
        return "flat (improper uniform)"


@dataclass(frozen=True)
class NormalInverseGamma:
    """mu | sigma^2 ~ N(mean, sigma^2 / mean_n), sigma^2 ~ InvGamma(shape, scale)."""

    mean: float
    mean_n: float
    shape: float
    scale: float
    borrowing: Borrowing | None = None

    def describe(self) -> str:
        text = (f"Normal-inverse-gamma(mean {self.mean:g}, mean_n {self.mean_n:g}, "
                f"shape {self.shape:g}, scale {self.scale:g})")
        return text if self.borrowing is None else f"{text} ({self.borrowing.describe()})"


@dataclass(frozen=True, eq=False)
class NormalPosterior:
    """Normal-mixture posteriors of eta (benefit scale) at many scores: (points, J)."""

    weights: np.ndarray
    mean: np.ndarray
    precision: np.ndarray

    def sf(self, c: float) -> np.ndarray:
        """Pr(eta > c) per point."""
        return np.sum(self.weights * special.ndtr((self.mean - c) * np.sqrt(self.precision)),
                      axis=1)

    def variance(self) -> np.ndarray:
        m = np.sum(self.weights * self.mean, axis=1)
        return np.sum(self.weights * (1 / self.precision + self.mean**2), axis=1) - m**2


def benefit_components(prior: NormalMixture | Flat, sign: int) -> tuple[np.ndarray, ...]:
    """(weights, means, precisions) of the prior of eta = sign x parameter; a flat prior
    is one component of precision 0."""
    if isinstance(prior, Flat):
        return np.ones(1), np.zeros(1), np.zeros(1)
    sd = np.asarray(prior.sd)
    return np.asarray(prior.weights), sign * np.asarray(prior.mean), 1.0 / sd**2


def update(prior: NormalMixture | Flat, sign: int, information: float,
           score: np.ndarray) -> NormalPosterior:
    """Posterior of eta after score(s) S (benefit scale) with information I.

    Examples
    --------
    >>> import numpy as np
    >>> post = update(NormalMixture((1.0,), (0.0,), (1.0,)), 1, 4.0, np.array([2.0]))
    >>> float(post.mean[0, 0]), float(post.precision[0, 0])
    (0.4, 5.0)
    """
    w, m, p0 = benefit_components(prior, sign)
    s = np.asarray(score, dtype=float)[:, None]
    precision = np.broadcast_to(p0 + information, (s.shape[0], w.size))
    mean = (m * p0 + s) / precision
    if w.size == 1:
        weights = np.ones_like(mean)
    else:
        # marginal of S under component j: N(I m_j, I + I^2 / p0_j)
        var = information + information**2 / p0
        log_w = np.log(w) + stats.norm.logpdf(s, information * m, np.sqrt(var))
        weights = np.exp(log_w - special.logsumexp(log_w, axis=1, keepdims=True))
    return NormalPosterior(weights, mean, precision)


class NormalFamily(Family):
    """Normal outcomes; known sd exact by recursive numerical integration."""

    name = "normal"
    parameter = "mean"
    unit = "units of the endpoint"
    outcome_range_needed = True
    data_model = ("Each subject's outcome is normally distributed around the arm's true mean, "
                  "independently of other subjects, with the standard deviation stated in the "
                  "design (when the analysis treats the sd as unknown, the stated true sd "
                  "generates every scenario's data and the analysis estimates it).")
    comparisons = ("difference",)
    default_better = None
    difference_margin_below_one = False

    # -- design-file reading ---------------------------------------------------------
    # -- the family's parts in other layers -----------------------------------------
    def interim(self) -> EndpointInterim:
        from octrial.interim.normal import NormalInterim

        return NormalInterim()

    def check_model(self, design: Any) -> CheckModel:
        from octrial.checks.normal_model import normal_model

        return normal_model(design)

    draws_design_prior = True

    def design_prior_draws(
        self, design: Any, rng: np.random.Generator, size: int,
    ) -> tuple[np.ndarray, np.ndarray]:
        from octrial.simulation.normal import design_prior_draws

        return design_prior_draws(design, rng, size)

    prior_schema = schema.PriorSchema({
        **schema.with_mixture("normal", schema.Number("mean", example=0.0), prior_sd("sd"),
                              NormalMixture),
        "flat": schema.Distribution((), lambda v: Flat()),
        "normal-inverse-gamma": schema.Distribution(
            (schema.Number("mean", example=0.0),
             schema.prior_size("mean_n", f"a number > 0 and at most {PRIOR_SIZE:g} (observations "
                        "the prior mean is worth)"),
             schema.prior_size("shape"), schema.positive("scale")),
            lambda v: NormalInverseGamma(v["mean"], v["mean_n"], v["shape"], v["scale"])),
    })

    def read_endpoint(self, table: Table) -> NormalEndpoint:
        table.allow("type", "better", "sd", "true_sd")
        raw = table.raw("sd", f"the known sd (a number > 0) or '{UNKNOWN}'", required=True)
        if raw == UNKNOWN:
            true_sd = table.number("true_sd", check=lambda v: v > 0,
                                   expected="a number > 0 (the sd that generates the data "
                                            "when the analysis treats it as unknown)")
            return NormalEndpoint(sd=None, true_sd=true_sd)
        if raw is not None:
            sd = table.number("sd", check=lambda v: v > 0,
                              expected=f"a standard deviation > 0 or '{UNKNOWN}'")
            if table.has("true_sd"):
                table.fail("true_sd", "no true_sd when the sd is known (the known sd "
                           "generates the data)", table.data["true_sd"])
            return NormalEndpoint(sd=sd)
        return NormalEndpoint()

    def read_prior(self, table: Table) -> Any:
        kind, prior = schema.read_distribution(table, self.prior_schema)
        if kind is None:
            return None
        spec = read_borrowing(table, HISTORICAL)
        if spec is None or prior is None:
            return prior
        return _borrow(table, prior, spec)

    def true_value_problem(self, value: float) -> str | None:
        return None if math.isfinite(value) else "a finite number"

    def prior_on_effect(self, endpoint: Any, two_arm: bool) -> bool:
        return two_arm and endpoint.known_sd

    def check_design(self, parts: dict[str, Any], problems: Problems) -> None:
        endpoint, hypothesis = parts["endpoint"], parts["hypothesis"]
        if endpoint is None or hypothesis is None:
            return
        places = [("hypothesis", hypothesis)] if self.prior_on_effect(
            endpoint, parts["two_arm"]) else [(f"arms.{a.name}", a) for a in parts["arms"]]
        for where, holder in places:
            for key in ("prior", "design_prior"):
                prior = getattr(holder, key)
                if prior is None:
                    continue
                path = f"{where}.{key}"
                if endpoint.known_sd and isinstance(prior, NormalInverseGamma):
                    problems.add(f"{path}.distribution", "'normal', 'normal-mixture' or "
                                 "'flat' (the sd is known)", "normal-inverse-gamma")
                elif not endpoint.known_sd and not isinstance(prior, NormalInverseGamma):
                    problems.add(f"{path}.distribution", "'normal-inverse-gamma' (the sd is "
                                 "unknown)", Phrase(f"a {type(prior).__name__} prior"))
                elif key == "design_prior" and isinstance(prior, Flat):
                    problems.add(f"{path}.distribution", "a proper distribution (a design "
                                 "prior generates true values)", "flat")
                if where == "hypothesis" and getattr(prior, "borrowing", None) is not None:
                    problems.add(f"{path}.borrowing", "a one-arm design (historical data on "
                                 "one arm's mean cannot enter a prior on the difference in "
                                 "means)", Phrase("a two-arm design"))

    # -- maths -----------------------------------------------------------------------
    def information(self, design: Any, n: tuple[int, ...]) -> float:
        """Fisher information about the mean (difference) from per-arm sizes ``n``."""
        sd = design.endpoint.sd
        if len(n) == 1:
            return n[0] / sd**2
        return 1.0 / (sd**2 * (1.0 / n[0] + 1.0 / n[1]))

    def analysis_prior(self, design: Any) -> Any:
        """The prior of the parameter the hypothesis is about (mean or difference)."""
        return design.hypothesis.prior if design.two_arm else design.arms[0].prior

    def claim_value(self, design: Any) -> float:
        """c: the claim is eta > c on the benefit scale."""
        h = design.hypothesis
        return h.sign * h.benchmark if not design.two_arm else h.shift

    def decision_rule(self, design: Any, truths: np.ndarray | None = None) -> Any:
        if not design.endpoint.known_sd:
            return None
        from octrial.rules.normal import build_normal_rule

        return build_normal_rule(design)

    def boundary_table(self, design: Any, sds: tuple[float, ...] | None = None) -> Any:
        """``octrial boundaries``: the bounds as sample means and z (known sd), or as
        sample means at a few sample sds ``sds`` (unknown sd, one arm)."""
        rule = self.decision_rule(design)
        if rule is not None:
            return rule.boundary_table(design)
        if design.two_arm:
            raise single(design.source.path or design.name, "endpoint.sd",
                         "a known sd or one arm (with an unknown sd and two arms the "
                         "decision depends on both arms' means and sds: use octrial "
                         "decide)", UNKNOWN)
        from octrial.rules import unknown_sd

        return unknown_sd.boundary_table(design, sds)

    def boundaries_without_rule(self, design: Any) -> Any:
        """Unknown sd, one arm: the bounds on the mean at a few sample sds."""
        if design.endpoint.known_sd or design.two_arm:
            return None
        return self.boundary_table(design)

    def prior_data_conflict(self, design: Any, arm: int, informative: Any,
                            vague: Any) -> list[dict[str, Any]] | None:
        if not design.endpoint.known_sd:
            return None  # normal-inverse-gamma priors: not yet
        from octrial.checks.conflict import normal_conflict

        return normal_conflict(design, arm, informative, vague)

    def bounds_depend_on_sd(self, design: Any) -> bool:
        return not design.endpoint.known_sd

    def committee_table(self, design: Any, table: Any) -> str:
        if not design.endpoint.known_sd:
            from octrial.rules.unknown_sd import committee_text as unknown_text

            return unknown_text(design, table)
        from octrial.rules.normal import committee_text

        return committee_text(design, table)

    def prior_components(self, prior: Any) -> list[tuple[float, Any]] | None:
        if not isinstance(prior, NormalMixture):
            return None
        return [(w, stats.norm(m, s)) for w, m, s in zip(prior.weights, prior.mean, prior.sd,
                                                          strict=True)]

    def prior_probability_of_claim(self, design: Any) -> float | None:
        h = design.hypothesis
        if design.endpoint.known_sd:
            prior = self.analysis_prior(design)
            if prior is None or isinstance(prior, Flat):
                return None
            w, m, p = benefit_components(prior, h.sign)
            return float(np.sum(w * special.ndtr((m - self.claim_value(design)) * np.sqrt(p))))
        if any(arm.prior is None for arm in design.arms):
            return None
        marginals = [stats.t(2 * nig.shape, nig.mean,
                             math.sqrt(nig.scale / (nig.shape * nig.mean_n)))
                     for nig in (arm.prior for arm in design.arms)]
        if not design.two_arm:
            t = marginals[0]
            return float(t.sf(h.benchmark) if h.better == "higher" else t.cdf(h.benchmark))
        # Pr(sign (mu_T - mu_C) > shift) for independent t marginals (Behrens-Fisher)
        better, worse = marginals if h.sign > 0 else marginals[::-1]
        value = integrate.quad(lambda u: worse.pdf(u) * better.sf(u + h.shift), -np.inf,
                               np.inf, epsabs=1e-12, limit=200)[0]
        return float(min(max(value, 0.0), 1.0))

    def effective_sample_size(self, design: Any) -> dict[str, Any] | None:
        if not design.endpoint.known_sd:
            return self._nig_sizes(design)
        prior = self.analysis_prior(design)
        if prior is None:
            return None
        n_final = design.looks.per_arm[-1]
        n = float(sum(n_final))
        information = self.information(design, n_final)
        if isinstance(prior, Flat):
            simple, fda = 0.0, fda_summary(n, 1 / information, 1 / information)
        else:
            unit = n / information  # variance of one subject's contribution (sd^2 one arm)
            simple = float(np.dot(prior.weights, unit / np.asarray(prior.sd) ** 2))
            post = update(prior, 1, information, np.array([information * prior.prior_mean]))
            fda = fda_summary(n, 1 / information, float(post.variance()[0]))
        formula = "sd^2 / s0^2" if not design.two_arm else "sd^2 (1/w_T + 1/w_C) / s0^2"
        label = "difference" if design.two_arm else design.arms[0].name
        return {label: arm_summary(prior.describe(), simple, formula, fda,
                                   getattr(prior, "borrowing", None))}

    def _nig_sizes(self, design: Any) -> dict[str, Any] | None:
        out = {}
        for j, arm in enumerate(design.arms):
            nig = arm.prior
            if nig is None:
                return None
            n = design.looks.per_arm[-1][j]
            fda = None
            if nig.shape > 1 and n > 3:
                # data at their prior expectation: mean m, sample variance E[sigma^2]
                s2 = nig.scale / (nig.shape - 1)
                v1 = s2 / n * (n - 1) / (n - 3)  # t_{n-1}(xbar, s^2/n), Jeffreys prior
                k, a = nig.mean_n + n, nig.shape + n / 2
                b = nig.scale + (n - 1) * s2 / 2
                v2 = b / (a * k) * a / (a - 1)
                fda = fda_summary(n, v1, v2)
            out[arm.name] = arm_summary(nig.describe(), nig.mean_n,
                                        "mean_n", fda,
                                        nig.borrowing)
        return out

    # == simulation =================================================================
    # Known and unknown sd keep their numba kernels (simulation.normal and
    # simulation.normal_unknown); the protocol methods below serve known-sd designs,
    # with the statistic of an arm the sum of its outcomes.
    def simulation_unsupported(self, design: Any) -> str | None:
        from octrial.simulation.normal import unsupported

        return unsupported(design)

    def simulator(self, design: Any, truth: tuple[float, ...], level: float) -> Any:
        if design.conduct is not None:  # calendar time: the protocol's study loop
            return super().simulator(design, truth, level)
        from octrial.simulation.normal import NormalSimulator

        return NormalSimulator(design, truth, level)

    def increment_distribution(self, design: Any, arm: int, truth: Any, n: int) -> Any:
        """Sum of ``n`` new outcomes with a known sd: Normal(n mean, sd sqrt(n))."""
        sd = design.endpoint.sd if design.endpoint.known_sd else design.endpoint.true_sd
        return stats.norm(n * np.asarray(truth, dtype=float), sd * math.sqrt(n))

    def draw_statistics(self, design: Any, arm: int, truth: float, n: int,
                        rng: np.random.Generator, size: int) -> np.ndarray:
        sd = design.endpoint.sd if design.endpoint.known_sd else design.endpoint.true_sd
        return rng.normal(n * truth, sd * math.sqrt(n), size)

    def _posterior_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                      n: tuple[int, ...]) -> NormalPosterior:
        if not design.endpoint.known_sd:
            raise NotImplementedError("per-study posteriors here need a known sd")
        sign = design.hypothesis.sign
        means = [np.asarray(x, dtype=float) / m for x, m in zip(statistics, n, strict=True)]
        estimate = means[0] if len(means) == 1 else means[0] - means[1]
        information = self.information(design, n)
        return update(self.analysis_prior(design), sign, information,
                      sign * information * estimate)

    def benefit_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                   n: tuple[int, ...]) -> np.ndarray:
        return self._posterior_at(design, statistics, n).sf(self.claim_value(design))

    def estimate_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                    n: tuple[int, ...], value: float,
                    ) -> tuple[np.ndarray, np.ndarray] | None:
        """Target = sign x eta (the mean, or the difference in means)."""
        post = self._posterior_at(design, statistics, n)
        sign = design.hypothesis.sign
        mean = sign * np.sum(post.weights * post.mean, axis=1)
        below = post.sf(-value) if sign < 0 else 1.0 - post.sf(value)
        return mean, below


def _borrow(table: Table, prior: Any, spec: dict) -> Any:
    """Power prior or robust mixture from historical { mean, sd, n }."""
    data = spec["historical"]
    x0, sd0, n0, a0 = data["mean"], data["sd"], data["n"], spec["a0"]
    record = make_borrowing(spec, x0, n0)
    robust = spec["method"] == "robust-mixture"
    if isinstance(prior, NormalInverseGamma):
        if robust:
            table.fail("borrowing", "method = 'power' (a robust mixture of "
                       "normal-inverse-gamma priors is not available)", "robust-mixture")
            return None
        m0 = a0 * n0
        k = prior.mean_n + m0
        mean = (prior.mean_n * prior.mean + m0 * x0) / k
        scale = (prior.scale + a0 * (n0 - 1) * sd0**2 / 2
                 + prior.mean_n * m0 * (x0 - prior.mean) ** 2 / (2 * k))
        return NormalInverseGamma(mean, k, prior.shape + m0 / 2, scale, record)
    if isinstance(prior, Flat):
        if robust:
            table.fail("borrowing", "a proper initial prior for a robust mixture (its vague "
                       "component cannot be flat)", "flat")
            return None
        if a0 == 0:
            return Flat(record)
        return NormalMixture((1.0,), (x0,), (sd0 / math.sqrt(a0 * n0),), record)
    if a0 == 0:
        informative = prior
    else:
        v_hist = sd0**2 / (a0 * n0)  # the historical likelihood as N(x0, v_hist)
        m, s = np.asarray(prior.mean), np.asarray(prior.sd)
        precision = 1 / s**2 + 1 / v_hist
        means = (m / s**2 + x0 / v_hist) / precision
        log_w = np.log(prior.weights) + stats.norm.logpdf(x0, m, np.sqrt(s**2 + v_hist))
        w = np.exp(log_w - special.logsumexp(log_w))
        informative = NormalMixture(tuple(w), tuple(means), tuple(1 / np.sqrt(precision)))
    if not robust:
        return NormalMixture(informative.weights, informative.mean, informative.sd, record)
    w_vague = spec["vague_weight"]
    parts = [((1 - w_vague) * w, m, s) for w, m, s in zip(
        informative.weights, informative.mean, informative.sd, strict=True)] + [
        (w_vague * w, m, s) for w, m, s in zip(prior.weights, prior.mean, prior.sd, strict=True)]
    parts = [p for p in parts if p[0] > 0]
    weights, means, sds = (tuple(float(v) for v in col) for col in zip(*parts, strict=True))
    return NormalMixture(weights, means, sds, record)
