"""Time-to-event endpoints: exponential event times, gamma-mixture priors on the hazard.

Data model: each subject's time from enrolment to the event is Exponential(hazard lambda)
(constant hazard), censored by loss to follow-up (an independent exponential time,
``[conduct] dropout_hazard``) and administratively at each analysis. Subjects enter in
calendar time as ``[conduct]`` states and looks happen when the study has seen a stated
number of events (``[looks] events``).

Sufficient statistic of an arm: its events d and total exposure E (time at risk). With a
Gamma(a, b) prior (shape a, rate b) the likelihood lambda^d exp(-lambda E) gives the
posterior Gamma(a + d, b + E); a mixture updates each component and reweights it by its
marginal likelihood, as for counts (the same maths as :mod:`octrial.endpoints.count`
with the exposure observed rather than fixed; e.g. Gelman et al., Bayesian Data
Analysis, 3rd ed., section 2.6, recalled from memory).

* One arm: B = Pr(lambda < lambda_0 | data) (lower hazard is better by default), with the
  benchmark stated as a hazard lambda_0, a median m_0 (lambda_0 = log 2 / m_0) or the
  survival s_0 at a landmark time t_0 (lambda_0 = -log(s_0) / t_0); under a constant
  hazard the three statements are the same claim.
* Two arms, on the hazard ratio HR = lambda_T / lambda_C: with independent gamma
  posteriors Gamma(a_T, b_T) and Gamma(a_C, b_C), b_T lambda_T / (b_T lambda_T +
  b_C lambda_C) ~ Beta(a_T, a_C), so Pr(HR < c) = I_u(a_T, a_C) with u = c b_T / (c b_T +
  b_C) (the gamma-ratio identity; the same identity as the count family's rate ratio).

Monte Carlo only: :mod:`octrial.simulation.event_driven` simulates every subject.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np
from scipy import special, stats

import octrial.endpoints.schema as schema
from octrial.design.reader import Phrase, Problems, Table
from octrial.endpoints.base import Family
from octrial.endpoints.borrowing import borrow_mixture, read_borrowing
from octrial.endpoints.count import GammaMixture, GammaPosterior, update
from octrial.endpoints.prior_size import arm_summary

BENCHMARK_KEYS = ("benchmark", "benchmark_median", "benchmark_survival", "landmark")


@dataclass(frozen=True)
class TimeToEventEndpoint:
    """``[endpoint]`` of a time-to-event design (exponential event times)."""

    type: str = "time-to-event"


def hazard_from_median(median: float) -> float:
    """The constant hazard whose median time to event is ``median``: log 2 / median."""
    return math.log(2.0) / median


def hazard_from_survival(survival: float, landmark: float) -> float:
    """The constant hazard with Pr(no event by ``landmark``) = ``survival``."""
    return -math.log(survival) / landmark


class TimeToEventFamily(Family):
    """Exponential event times with gamma-mixture priors on each arm's hazard."""

    name = "time-to-event"
    parameter = "hazard"
    comparisons = ("ratio",)
    default_better = "lower"
    parameter_range = (0.0, math.inf)
    event_driven = True
    look_unit = "events"
    statistic = "events"
    unit = "events per subject-time unit"
    data_model = ("Each subject's time to the event is exponential (a constant hazard), "
                  "censored by an independent exponential loss to follow-up and at each "
                  "analysis; subjects enter in calendar time as [conduct] states, and looks "
                  "happen at the stated numbers of events.")
    prior_size_note = ("A Gamma(a, b) prior on a hazard is worth a events in b units of "
                       "exposure (subject-time).")
    benchmark_keys: ClassVar[tuple[str, ...]] = BENCHMARK_KEYS

    prior_schema = schema.PriorSchema(
        schema.with_mixture("gamma", schema.prior_size("shape"), schema.positive("rate"),
                            GammaMixture))

    # -- design-file reading ---------------------------------------------------------
    def read_endpoint(self, table: Table) -> TimeToEventEndpoint:
        table.allow("type", "better")
        return TimeToEventEndpoint()

    def read_prior(self, table: Table) -> GammaMixture | None:
        kind, prior = schema.read_distribution(table, self.prior_schema)
        if kind is None:
            return None
        spec = read_borrowing(table, {"events": "count", "exposure": "positive"})
        if spec is None or prior is None:
            return prior
        x0, t0 = spec["historical"]["events"], spec["historical"]["exposure"]
        return borrow_mixture(prior, update, t0, x0, spec, x0 / t0)

    def read_benchmark(self, table: Table) -> float | None:
        """One arm: the benchmark hazard, stated as ``benchmark`` (a hazard),
        ``benchmark_median`` (a median time to event) or ``benchmark_survival`` with
        ``landmark`` (event-free proportion at that time)."""
        given = [k for k in ("benchmark", "benchmark_median", "benchmark_survival")
                 if table.has(k)]
        if len(given) != 1:
            table.fail("benchmark", "exactly one of benchmark (a hazard), benchmark_median "
                       "or benchmark_survival (with landmark)",
                       Phrase(", ".join(given) if given else "none of them"))
            return None
        if given[0] != "benchmark_survival" and table.has("landmark"):
            table.fail("landmark", "a landmark time only with benchmark_survival",
                       table.data["landmark"])
        if given[0] == "benchmark":
            return table.number("benchmark", check=lambda v: v > 0,
                                expected="a hazard > 0 (events per subject-time unit)")
        if given[0] == "benchmark_median":
            median = table.number("benchmark_median", check=lambda v: v > 0,
                                  expected="a median time to event > 0")
            return None if median is None else hazard_from_median(median)
        survival = table.number("benchmark_survival", check=lambda v: 0 < v < 1,
                                expected="an event-free proportion between 0 and 1 "
                                         "(exclusive) at the landmark time")
        landmark = table.number("landmark", check=lambda v: v > 0,
                                expected="a landmark time > 0 for benchmark_survival")
        if survival is None or landmark is None:
            return None
        return hazard_from_survival(survival, landmark)

    def true_value_problem(self, value: float) -> str | None:
        return None if value > 0 and math.isfinite(value) else "a hazard > 0"

    def check_design(self, parts: dict[str, Any], problems: Problems) -> None:
        """The [conduct] table against the looks: events are the outcome (no lag), and the
        final number of events must be within reach."""
        super().check_design(parts, problems)
        conduct, looks = parts.get("conduct"), parts.get("looks")
        if conduct is None or looks is None:
            return
        if conduct.lag != 0:
            problems.add("conduct.outcome_lag", "no outcome lag for time-to-event endpoints "
                         "(the event time is the outcome)", conduct.lag)
        if conduct.analyse_pipeline:
            problems.add("conduct.analyse_pipeline", "false: analysing the pipeline after a "
                         "stop is not built for time-to-event endpoints yet", True)
        final = looks.n[-1]
        if final > conduct.max_enrolment:
            problems.add("looks.events", f"event counts that {conduct.max_enrolment} "
                         "subjects (conduct.max_enrolment) can reach: each subject has at "
                         "most one event", looks.n)
            return
        scenarios = parts.get("scenarios")
        if conduct.dropout_hazard > 0 and scenarios is not None and len(scenarios):
            fastest = max(max(row) for row in scenarios.values)
            reach = conduct.max_enrolment * fastest / (fastest + conduct.dropout_hazard)
            if final > reach:
                problems.add("looks.events", f"a final event count the study can reach: at "
                             f"most {reach:.1f} events are expected from "
                             f"{conduct.max_enrolment} subjects at the largest scenario "
                             f"hazard ({fastest:g}) with dropout hazard "
                             f"{conduct.dropout_hazard:g}", final)

    # -- maths -------------------------------------------------------------------------
    def target_value(self, hypothesis: Any, truth: tuple[float, ...]) -> float:
        """One arm: the hazard. Two arms: the log hazard ratio."""
        return truth[0] if len(truth) == 1 else math.log(truth[0] / truth[1])

    def posterior(self, design: Any, arm: int, events: Any, exposure: Any) -> GammaPosterior:
        """The gamma-mixture posterior of ``arm``'s hazard after ``events`` in ``exposure``
        (arrays broadcast together; one row per pair)."""
        prior: GammaMixture = design.arms[arm].prior
        d, t = np.broadcast_arrays(np.atleast_1d(np.asarray(events, dtype=float)),
                                   np.atleast_1d(np.asarray(exposure, dtype=float)))
        a0, b0 = np.asarray(prior.a)[None, :], np.asarray(prior.b)[None, :]
        a, b = a0 + d[:, None], b0 + t[:, None]
        log_w = (np.log(np.asarray(prior.weights))[None, :] + a0 * np.log(b0)
                 + special.gammaln(a) - special.gammaln(a0) - a * np.log(b))
        weights = np.exp(log_w - special.logsumexp(log_w, axis=1, keepdims=True))
        return GammaPosterior(weights, a, b)

    def benefit_of(self, design: Any, posteriors: tuple[GammaPosterior, ...]) -> np.ndarray:
        """B per row: Pr(hazard beyond the benchmark) for one arm, Pr(HR beyond the
        threshold) for two arms (the arms' rows paired)."""
        h = design.hypothesis
        lower = h.better == "lower"
        if len(posteriors) == 1:
            post = posteriors[0]
            return post.cdf(h.null_value) if lower else post.sf(h.null_value)
        t, c = posteriors
        out = np.zeros(len(t))
        for i in range(t.weights.shape[1]):
            for j in range(c.weights.shape[1]):
                k = h.threshold * t.b[:, i] / c.b[:, j]
                below = special.betainc(t.a[:, i], c.a[:, j], k / (1.0 + k))
                out += t.weights[:, i] * c.weights[:, j] * (below if lower else 1.0 - below)
        return np.clip(out, 0.0, 1.0)

    def prior_probability_of_claim(self, design: Any) -> float | None:
        if any(arm.prior is None for arm in design.arms):
            return None
        zero = np.zeros(1)
        posts = tuple(self.posterior(design, j, zero, zero) for j in range(len(design.arms)))
        return float(self.benefit_of(design, posts)[0])

    def effective_sample_size(self, design: Any) -> dict[str, Any] | None:
        """Each arm's prior in events: a Gamma(a, b) prior is worth a events (b units of
        exposure); a mixture, its weighted shape."""
        if any(arm.prior is None for arm in design.arms):
            return None
        out = {}
        for arm in design.arms:
            prior: GammaMixture = arm.prior
            simple = float(sum(w * a for w, a in zip(prior.weights, prior.a, strict=True)))
            out[arm.name] = arm_summary(prior.describe(), simple,
                                        "a (events the prior is worth)", None,
                                        getattr(prior, "borrowing", None))
        return out

    def prior_components(self, prior: Any) -> list[tuple[float, Any]] | None:
        return [(w, stats.gamma(a, scale=1 / b)) for w, a, b in zip(
            prior.weights, prior.a, prior.b, strict=True)]

    # -- simulation ----------------------------------------------------------------------
    # The generic protocol reads an arm's statistic as its exposure after n events: with
    # a constant hazard the events form a Poisson process of rate lambda in the arm's
    # exposure (a time change; entry and independent censoring do not alter it), so the
    # exposure accumulated over n events is Gamma(n, rate lambda). This is what the common
    # family suite checks; studies themselves are simulated subject by subject
    # (:meth:`simulator`), whose one-arm looks must agree with it.
    def increment_distribution(self, design: Any, arm: int, truth: Any, n: int) -> Any:
        """The exposure accumulated over ``n`` further events: Gamma(n, rate hazard)."""
        return stats.gamma(n, scale=1.0 / np.asarray(truth, dtype=float))

    def benefit_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                   n: tuple[int, ...]) -> np.ndarray:
        """B per study from each arm's exposure (``statistics``) after ``n`` events."""
        posts = tuple(self.posterior(design, j, n[j], x) for j, x in enumerate(statistics))
        return self.benefit_of(design, posts)

    def estimate_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                    n: tuple[int, ...], value: float,
                    ) -> tuple[np.ndarray, np.ndarray] | None:
        """Posterior mean of the target (one arm: the hazard; two arms: the log hazard
        ratio) and its posterior distribution function at ``value``."""
        posts = tuple(self.posterior(design, j, n[j], x) for j, x in enumerate(statistics))
        if len(posts) == 1:
            return posts[0].mean(), posts[0].cdf(value)
        t, c = posts
        mean = (np.sum(t.weights * (special.digamma(t.a) - np.log(t.b)), axis=1)
                - np.sum(c.weights * (special.digamma(c.a) - np.log(c.b)), axis=1))
        cdf = np.zeros(len(t))
        for i in range(t.weights.shape[1]):
            for j in range(c.weights.shape[1]):
                k = math.exp(value) * t.b[:, i] / c.b[:, j]
                cdf += t.weights[:, i] * c.weights[:, j] * special.betainc(
                    t.a[:, i], c.a[:, j], k / (1.0 + k))
        return mean, cdf

    def simulation_unsupported(self, design: Any) -> str | None:
        if any(arm.prior is None for arm in design.arms):
            return "time-to-event designs need an analysis prior on every arm's hazard"
        if any(t is not None for t in design.looks.futility_predictive[:-1]):
            return ("predictive futility is not offered for time-to-event endpoints yet "
                    "(use futility on the posterior probability)")
        return None

    def simulator(self, design: Any, truth: tuple[float, ...], level: float) -> Any:
        from octrial.simulation.event_driven import EventDrivenSimulator

        return EventDrivenSimulator(design, truth, level)
