"""Time-to-event endpoint: exponential and piecewise-exponential hazards.

Each arm's parameter is a hazard multiplier lambda: the hazard in period j is lambda r_j
for the relative shape r (``[endpoint] periods`` and ``relative_hazard``; r_0 = 1, so with
one period lambda is the hazard per time unit). The statistic of an arm is, per period,
its events and its exposure (time at risk); the maths is in
:mod:`octrial.endpoints.survival_maths`.

* One arm: the benchmark is stated as a hazard, a median time or the survival at a
  landmark time (``benchmark_scale``) and converted to a multiplier lambda0
  (:func:`~octrial.endpoints.survival_maths.benchmark_multiplier`). One period: B =
  Pr(h < lambda0 | data), a gamma cdf. Several periods: B = Pr(S(L) > S0(L) | data) at
  the landmark L (the median itself for a median benchmark), the cdf of a sum of
  independent gammas (Moschopoulos series); the claim is about survival at L, which is
  what a benchmark stated at L means when the periods' hazards move separately.
* Two arms on the hazard ratio HR = lambda_T / lambda_C: gamma priors per arm give the
  beta form of the ratio (one period), or, with ``analysis = 'normal-log-hazard-ratio'``,
  a normal prior on log HR (``hypothesis.prior``) and the usual normal approximation
  (information D q / (1 + q)^2 from D events): the known-variance recursion of
  :mod:`octrial.engines.exact_normal` then gives the operating characteristics with
  looks at event counts (:class:`LogHazardRatioEngine`).
* Without ``[conduct]`` every subject's event is observed (nobody is censored), so the
  generic study loop simulates one-period designs from the total time on study,
  Gamma(n, lambda); designs with censoring, accrual or event-driven looks need the
  patient-level simulator (:mod:`octrial.simulation.event_driven`).

Historical borrowing: ``historical = { events, exposure }`` with a power prior or a robust
mixture, as for counts (one period; the historical data are pooled into every period's
component otherwise: see docs/methods.md).
"""

from __future__ import annotations

import dataclasses
import itertools
import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np
from scipy import special, stats

import octrial.endpoints.schema as schema
from octrial.design.reader import Phrase, Problems, Table
from octrial.endpoints import survival_maths as sm
from octrial.endpoints.base import Family
from octrial.endpoints.count import GammaMixture, read_rate_prior, update
from octrial.endpoints.normal import NormalFamily, NormalMixture, benefit_components

if TYPE_CHECKING:
    from octrial.checks.model import CheckModel
    from octrial.interim.base import EndpointInterim

ANALYSES = ("gamma", "normal-log-hazard-ratio")
"""Values of ``endpoint.analysis``: gamma priors per arm, or (two arms) a normal prior on
the log hazard ratio with the normal approximation."""

NOT_YET = ("time-to-event designs with a [conduct] table or looks at event counts or "
           "calendar times need the patient-level simulator "
           "(octrial/simulation/event_driven.py), which this version does not have yet")


@dataclass(frozen=True)
class TimeToEventEndpoint:
    """``[endpoint]`` settings of a time-to-event endpoint.

    Attributes
    ----------
    starts : tuple of float
        Start of each hazard period (``periods``; the first is 0).
    relative_hazard : tuple of float
        The shape r_j of the hazard across periods (r_0 = 1).
    benchmark_scale : {'hazard', 'median', 'survival'}
    landmark : float or None
        The time at which a survival benchmark is stated (needed for 'survival', and for
        a 'hazard' benchmark with several periods).
    analysis : {'gamma', 'normal-log-hazard-ratio'}
    time_unit : str
        The unit of every time and the inverse unit of every hazard (words only).
    """

    type: str = "time-to-event"
    starts: tuple[float, ...] = (0.0,)
    relative_hazard: tuple[float, ...] = (1.0,)
    benchmark_scale: str = "hazard"
    landmark: float | None = None
    analysis: str = "gamma"
    time_unit: str = "month"

    @property
    def periods(self) -> int:
        return len(self.starts)

    def landmark_time(self, multiplier: float) -> float:
        """L: the landmark, or the median time at the benchmark multiplier."""
        if self.benchmark_scale == "median":
            return sm.median_time(self.starts, self.relative_hazard, multiplier)
        assert self.landmark is not None  # read_endpoint requires it
        return self.landmark


def _increasing_from_zero(values: list[float]) -> bool:
    return bool(values) and values[0] == 0 and all(
        b > a for a, b in itertools.pairwise(values))


class TimeToEventFamily(Family):
    """Exponential / piecewise-exponential hazards with gamma priors."""

    name = "time-to-event"
    parameter = "hazard"
    statistic = "events and exposure"
    unit = "hazard (events per unit of time at risk)"
    data_model = ("Each subject's time to the event has a hazard that is constant within "
                  "each stated period (one period: an exponential time), equal to the arm's "
                  "hazard multiplier times the period's relative hazard, independently of "
                  "other subjects; censoring is independent of the event time.")
    comparisons = ("ratio",)
    default_better = "lower"
    parameter_range = (0.0, math.inf)
    event_driven: ClassVar[bool] = True
    look_unit = "events"
    """Looks may wait for a number of events (engineer C's conduct layer reads it)."""

    def assumptions(self, design: Any) -> tuple[str, ...]:
        """The data model, how a benchmark on another scale became a hazard, and (without
        ``[conduct]``) that nobody is censored."""
        e: TimeToEventEndpoint = design.endpoint
        out = [self.data_model]
        h = design.hypothesis
        if not design.two_arm and e.benchmark_scale != "hazard":
            unit = e.time_unit
            if e.benchmark_scale == "median":
                stated = (f"a median time of {e.landmark_time(h.benchmark):.6g} {unit}s")
            else:
                assert e.landmark is not None  # read_endpoint requires it for survival
                s0 = float(sm.survival(e.starts, e.relative_hazard, h.benchmark, e.landmark))
                stated = f"{s0:.6g} event-free at {e.landmark:g} {unit}s"
            out.append(f"The benchmark was stated as {stated}; it is used as the hazard "
                       f"{h.benchmark:.6g} per {unit} (of the first period).")
        if self.prior_on_effect(e, design.two_arm):
            out.append("The analysis prior of the effect is on the log hazard ratio; the "
                       "log hazard ratio estimate is taken as normal with variance "
                       "1/d_T + 1/d_C, information events x q / (1 + q)^2 at allocation "
                       "q:1 (Schoenfeld 1981).")
        if any(v is not None for v in design.looks.futility_predictive) and not (
                self.prior_on_effect(e, design.two_arm)):
            text = ("The predictive probability of final success takes the time at risk "
                    "still to come until the final number of events as gamma given the "
                    "hazard (exact for a constant hazard whatever the entry and "
                    "independent dropout; a final analysis held early because the events "
                    "run out is ignored)")
            if design.two_arm and design.conduct is not None:
                from octrial.simulation.event_driven import PREDICTIVE_DRAWS

                text += ("; for two arms the future time at risk keeps the ratio of the "
                         "arms' posterior rates (prior rate plus time at risk so far) and "
                         "the remaining events split binomially between the arms given the "
                         "hazards (an approximation)")
                if any(len(arm.prior.weights) > 1 for arm in design.arms):
                    text += (f", estimated from {PREDICTIVE_DRAWS:,} draws per study and "
                             "look with mixture priors")
            out.append(text + ".")
        if design.conduct is None:
            out.append("Without a [conduct] table every analysed subject's event is observed "
                       "(nobody is censored): a look's number of subjects is its number of "
                       "events.")
        return tuple(out)

    def interim(self) -> EndpointInterim:
        from octrial.interim.time_to_event import TimeToEventInterim

        return TimeToEventInterim()

    def check_model(self, design: Any) -> CheckModel:
        from octrial.checks.time_to_event_model import time_to_event_model

        return time_to_event_model(design)

    def prior_data_conflict(self, design: Any, arm: int, informative: Any,
                            vague: Any) -> list[dict[str, Any]] | None:
        from octrial.checks.time_to_event_conflict import event_conflict

        return event_conflict(design, arm, informative, vague)

    # -- design-file reading ---------------------------------------------------------
    prior_schema = schema.PriorSchema({
        **schema.with_mixture("gamma", schema.prior_size("shape"), schema.positive("rate"),
                              GammaMixture),
        **{k: NormalFamily.prior_schema.distributions[k] for k in ("normal",
                                                                   "normal-mixture")},
    })

    def read_endpoint(self, table: Table) -> TimeToEventEndpoint:
        table.allow("type", "better", "periods", "relative_hazard", "benchmark_scale",
                    "landmark", "analysis", "time_unit")
        starts = [0.0]
        if table.has("periods"):
            read = table.numbers("periods", check=lambda v: v >= 0,
                                 expected="period start times >= 0")
            if read is not None and all(v is not None for v in read):
                values = [float(v) for v in read if v is not None]
                if _increasing_from_zero(values):
                    starts = values
                else:
                    table.fail("periods", "strictly increasing start times beginning at 0",
                               values)
        shape = [1.0] * len(starts)
        if table.has("relative_hazard"):
            read = table.numbers("relative_hazard", check=lambda v: v > 0,
                                 expected="relative hazards > 0")
            if read is not None and all(v is not None for v in read):
                values = [float(v) for v in read if v is not None]
                if len(values) != len(starts) or values[0] != 1.0:
                    table.fail("relative_hazard", f"{len(starts)} relative hazards (one per "
                               "period) starting with 1", values)
                else:
                    shape = values
        elif len(starts) > 1:
            table.fail("relative_hazard", "one relative hazard per period, starting with 1 "
                       "(the shape of the hazard across periods)",
                       Phrase("nothing (the key is missing)"))
        scale = table.string("benchmark_scale", sm.BENCHMARK_SCALES, required=False,
                             default="hazard") or "hazard"
        landmark = table.number("landmark", required=scale == "survival",
                                check=lambda v: v > 0, expected="a landmark time > 0")
        analysis = table.string("analysis", ANALYSES, required=False,
                                default="gamma") or "gamma"
        unit = table.string("time_unit", None, required=False, default="month") or "month"
        return TimeToEventEndpoint("time-to-event", tuple(starts), tuple(shape), scale,
                                   landmark, analysis, unit)

    def read_prior(self, table: Table) -> Any:
        return read_rate_prior(table, self.prior_schema, "borrowing on the hazard")

    def true_value_problem(self, value: float) -> str | None:
        return None if value > 0 and math.isfinite(value) else "a hazard > 0"

    def prior_on_effect(self, endpoint: Any, two_arm: bool) -> bool:
        return two_arm and endpoint.analysis == "normal-log-hazard-ratio"

    def check_design(self, parts: dict[str, Any], problems: Problems) -> None:
        endpoint, hypothesis = parts["endpoint"], parts["hypothesis"]
        if endpoint is None or hypothesis is None:
            return
        two_arm = parts["two_arm"]
        if not two_arm:
            if endpoint.periods > 1 and endpoint.benchmark_scale == "hazard" and (
                    endpoint.landmark is None):
                problems.add("endpoint.landmark", "a landmark time: with several periods "
                             "the claim is about survival at a landmark",
                             Phrase("nothing (the key is missing)"))
        if endpoint.analysis == "normal-log-hazard-ratio" and not two_arm:
            problems.add("endpoint.analysis", "'gamma' for a one-arm design (the normal "
                         "approximation is on the log hazard ratio)", endpoint.analysis)
        if two_arm and endpoint.analysis == "gamma" and endpoint.periods > 1:
            problems.add("endpoint.analysis", "'normal-log-hazard-ratio' for two arms with "
                         "several periods (the gamma ratio needs one period)", "gamma")
        on_effect = self.prior_on_effect(endpoint, two_arm)
        holders = [("hypothesis", hypothesis)] if on_effect else [
            (f"arms.{a.name}", a) for a in parts["arms"]]
        for where, holder in holders:
            for key in ("prior", "design_prior"):
                prior = getattr(holder, key)
                if prior is None:
                    continue
                if on_effect and not isinstance(prior, NormalMixture):
                    problems.add(f"{where}.{key}.distribution", "'normal' or "
                                 "'normal-mixture' (a prior on the log hazard ratio)",
                                 Phrase(f"a {type(prior).__name__} prior"))
                if not on_effect and not isinstance(prior, GammaMixture):
                    problems.add(f"{where}.{key}.distribution", "'gamma' or "
                                 "'gamma-mixture' (a prior on the hazard)",
                                 Phrase(f"a {type(prior).__name__} prior"))
        self._check_conduct(parts, problems)

    @staticmethod
    def _check_conduct(parts: dict[str, Any], problems: Problems) -> None:
        """``[conduct]`` against the looks: events are the outcome (no lag, no pipeline
        analysis), and the final number of events must be within reach."""
        conduct, looks = parts.get("conduct"), parts.get("looks")
        if conduct is None or looks is None:
            return
        if conduct.lag != 0:
            problems.add("conduct.outcome_lag", "no outcome lag for time-to-event endpoints "
                         "(the event time is the outcome)", conduct.lag)
        if conduct.analyse_pipeline:
            problems.add("conduct.analyse_pipeline", "false: analysing the pipeline after a "
                         "stop is not built for time-to-event endpoints yet", True)
        if looks.trigger != "events":
            return
        final = looks.n[-1]
        if final > conduct.max_enrolment:
            problems.add("looks.events", f"event counts that {conduct.max_enrolment} "
                         "subjects (conduct.max_enrolment) can reach: each subject has at "
                         "most one event", list(looks.n))
            return
        scenarios = parts.get("scenarios")
        if conduct.dropout_hazard > 0 and scenarios is not None and len(scenarios):
            # the largest first-period hazard of any arm in any scenario
            fastest = max(max(row) for row in scenarios.values)
            reach = conduct.max_enrolment * fastest / (fastest + conduct.dropout_hazard)
            if final > reach:
                problems.add("looks.events", f"a final event count the study can reach: at "
                             f"most {reach:.1f} events are expected from "
                             f"{conduct.max_enrolment} subjects at the largest scenario "
                             f"hazard ({fastest:g}) with dropout hazard "
                             f"{conduct.dropout_hazard:g}", final)

    # -- hypotheses ------------------------------------------------------------------
    def convert_benchmark(self, endpoint: Any, value: float) -> tuple[float, str | None]:
        """The benchmark as a hazard multiplier lambda0, converted from a hazard, a
        median or a survival probability at the landmark (``benchmark_scale``)."""
        e: TimeToEventEndpoint = endpoint
        if e.benchmark_scale == "survival":
            if not 0 < value < 1:
                return value, ("a survival probability in (0, 1) (endpoint.benchmark_scale "
                               "= 'survival')")
            if e.landmark is None:
                return value, None  # the missing landmark is reported on its own key
        elif not (value > 0 and math.isfinite(value)):
            return value, ("a median time > 0" if e.benchmark_scale == "median"
                           else "a hazard > 0")
        return sm.benchmark_multiplier(e.benchmark_scale, value, e.starts,
                                       e.relative_hazard, e.landmark), None

    def target_value(self, hypothesis: Any, truth: tuple[float, ...]) -> float:
        """One arm: the hazard multiplier. Two arms: the log hazard ratio."""
        return truth[0] if len(truth) == 1 else math.log(truth[0] / truth[1])

    # -- posteriors ------------------------------------------------------------------
    @staticmethod
    def posterior(prior: GammaMixture, events: np.ndarray, exposure: np.ndarray,
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Per study: (weights (m, C), shapes (m, C, J), rates (m, C, J)) after
        ``events`` and ``exposure`` of shape (m, J) (periods J)."""
        d = np.atleast_2d(np.asarray(events, dtype=float))
        e = np.atleast_2d(np.asarray(exposure, dtype=float))
        a0 = np.asarray(prior.a)[None, :, None]
        b0 = np.asarray(prior.b)[None, :, None]
        a, b = a0 + d[:, None, :], b0 + e[:, None, :]
        log_w = np.log(np.asarray(prior.weights))[None, :] + np.sum(
            a0 * np.log(b0) + special.gammaln(a) - special.gammaln(a0) - a * np.log(b), axis=2)
        weights = np.exp(log_w - special.logsumexp(log_w, axis=1, keepdims=True))
        return weights, a, b

    def benefit_from(self, design: Any, events: tuple[np.ndarray, ...],
                     exposure: tuple[np.ndarray, ...]) -> np.ndarray:
        """Posterior probability of benefit per study from each arm's events and exposure
        per period (arrays of shape (studies, periods)); the interface the patient-level
        simulator and ``octrial decide`` call."""
        h = design.hypothesis
        e: TimeToEventEndpoint = design.endpoint
        lower = h.better == "lower"
        if self.prior_on_effect(e, design.two_arm):
            return self._normal_benefit(design, events, exposure)
        if not design.two_arm:
            w, a, b = self.posterior(design.arms[0].prior, events[0], exposure[0])
            lam0 = h.benchmark
            if e.periods == 1:
                below = np.sum(w * special.gammainc(a[..., 0], b[..., 0] * lam0), axis=1)
                above = np.sum(w * special.gammaincc(a[..., 0], b[..., 0] * lam0), axis=1)
                return below if lower else above
            below = self._landmark_below(design, w, a, b, lam0)
            return below if lower else 1.0 - below
        (w_t, a_t, b_t), (w_c, a_c, b_c) = (
            self.posterior(arm.prior, d, x) for arm, d, x in zip(design.arms, events,
                                                                 exposure, strict=True))
        out = np.zeros(w_t.shape[0])
        for i in range(w_t.shape[1]):
            for j in range(w_c.shape[1]):
                k = h.threshold * b_t[:, i, 0] / b_c[:, j, 0]
                p = (special.betainc(a_t[:, i, 0], a_c[:, j, 0], k / (1 + k)) if lower
                     else special.betainc(a_c[:, j, 0], a_t[:, i, 0], 1 / (1 + k)))
                out += w_t[:, i] * w_c[:, j] * p
        return np.clip(out, 0.0, 1.0)

    def _landmark_below(self, design: Any, w: np.ndarray, a: np.ndarray, b: np.ndarray,
                        lam0: float) -> np.ndarray:
        """Pr(Lambda(L) < lambda0 H0(L)) = Pr(S(L) > S0(L)), mixed over components."""
        e: TimeToEventEndpoint = design.endpoint
        landmark = e.landmark_time(lam0)
        delta = sm.period_overlap(e.starts, landmark)
        used = delta > 0
        limit = lam0 * float(sm.base_cumulative_hazard(e.starts, e.relative_hazard, landmark))
        out = np.zeros(w.shape[0])
        for c in range(w.shape[1]):
            cdf, _ = sm.gamma_sum_cdf(np.full(w.shape[0], limit), a[:, c, used],
                                      b[:, c, used] / delta[used])
            out += w[:, c] * cdf
        return out

    @staticmethod
    def log_hazard_ratio_estimate(design: Any, events: tuple[np.ndarray, ...],
                                  exposure: tuple[np.ndarray, ...],
                                  ) -> tuple[np.ndarray, np.ndarray]:
        """(log HR estimate, its information 1 / (1/d_T + 1/d_C)) per study: each arm's
        multiplier estimated as d / sum_j r_j E_j (the maximum likelihood estimate under
        the stated relative shape)."""
        r = np.asarray(design.endpoint.relative_hazard)
        logs, inverse = [], []
        for d, x in zip(events, exposure, strict=True):
            d_sum = np.atleast_2d(np.asarray(d, dtype=float)).sum(axis=1)
            weighted = np.atleast_2d(np.asarray(x, dtype=float)) @ r
            logs.append(np.log(d_sum / weighted))
            inverse.append(1.0 / d_sum)
        return logs[0] - logs[1], 1.0 / (inverse[0] + inverse[1])

    def _normal_benefit(self, design: Any, events: tuple[np.ndarray, ...],
                        exposure: tuple[np.ndarray, ...]) -> np.ndarray:
        """B from the log HR estimate by the known-variance rule's own function
        (:func:`octrial.rules.normal.benefit`) on the observed information."""
        from octrial.rules.normal import benefit

        h = design.hypothesis
        estimate, information = self.log_hazard_ratio_estimate(design, events, exposure)
        claim = h.sign * math.log(h.threshold)
        return np.array([float(benefit(h.prior, h.sign, float(i), claim,
                                       np.array([h.sign * i * x]))[0])
                         for x, i in zip(estimate, information, strict=True)])

    def normal_predictive(self, design: Any, look: int, events: tuple[np.ndarray, ...],
                          exposure: tuple[np.ndarray, ...]) -> float:
        """Normal approximation: the predictive probability of final success from one
        study's data at look ``look`` (from 1), by the known-variance rule's function
        (:func:`octrial.rules.normal.predictive`) with the final look's information and
        score bound."""
        from octrial.rules.normal import build_normal_rule, predictive

        h = design.hypothesis
        estimate, information = self.log_hazard_ratio_estimate(design, events, exposure)
        final = build_normal_rule(self.as_normal_design(design)).looks[-1]
        now = float(information[0])
        score = np.array([h.sign * now * float(estimate[0])])
        return float(predictive(h.prior, h.sign, now, max(final.information, now),
                                final.upper, score)[0])

    def prior_probability_of_claim(self, design: Any) -> float | None:
        h = design.hypothesis
        if self.prior_on_effect(design.endpoint, design.two_arm):
            w, m, p = benefit_components(h.prior, h.sign)
            return float(np.sum(w * special.ndtr((m - h.sign * math.log(h.threshold))
                                                  * np.sqrt(p))))
        periods = design.endpoint.periods
        zero = tuple(np.zeros((1, periods)) for _ in design.arms)
        return float(self.benefit_from(design, zero, zero)[0])

    prior_size_note = ("Effective sample size in events: a gamma prior with shape a on a "
                       "hazard is worth a events (weighted over a mixture's components); "
                       "FDA (2010) n V1 / V2 - n at the final look's events n, data at the "
                       "prior mean; a normal prior with sd s on log HR is worth "
                       "(1 + q)^2 / (q s^2) events at allocation q:1.")

    def effective_sample_size(self, design: Any) -> dict[str, Any] | None:
        from octrial.endpoints.prior_size import arm_summary, fda_summary

        e: TimeToEventEndpoint = design.endpoint
        events = self.event_targets(design)[-1] if design.looks.trigger in (
            "events", "complete") else None
        if self.prior_on_effect(e, design.two_arm):
            prior = design.hypothesis.prior
            q = design.arms[0].allocation / design.arms[1].allocation
            simple = float(sum(w * (1 + q) ** 2 / (q * sd**2) for w, sd in zip(
                prior.weights, prior.sd, strict=True)))
            return {"hazard ratio": arm_summary(prior.describe(), simple,
                                                "(1 + q)^2 / (q sd^2) events", None)}
        if any(not isinstance(arm.prior, GammaMixture) for arm in design.arms):
            return None
        out = {}
        for arm in design.arms:
            prior = arm.prior
            simple = float(sum(w * a for w, a in zip(prior.weights, prior.a, strict=True)))
            fda = None
            if e.periods == 1 and events is not None:
                n = events * arm.allocation / sum(a.allocation for a in design.arms)
                exposure = n / prior.mean
                # Gamma(n, exposure): the posterior under a prior flat on the log hazard
                v1 = n / exposure**2
                v2 = float(update(prior, exposure, np.array([n])).variance()[0])
                fda = fda_summary(n, v1, v2)
            out[arm.name] = arm_summary(prior.describe(), simple, "shape (prior events)",
                                        fda, prior.borrowing)
        return out

    def prior_components(self, prior: Any) -> list[tuple[float, Any]] | None:
        if isinstance(prior, GammaMixture):
            return [(w, stats.gamma(a, scale=1.0 / b)) for w, a, b in zip(
                prior.weights, prior.a, prior.b, strict=True)]
        if isinstance(prior, NormalMixture):
            return [(w, stats.norm(m, s)) for w, m, s in zip(prior.weights, prior.mean,
                                                              prior.sd, strict=True)]
        return None

    # -- boundaries --------------------------------------------------------------------
    def event_targets(self, design: Any) -> tuple[int, ...]:
        """Total events at each look: ``looks.at`` for event-driven looks; without
        censoring (no ``[conduct]``) every analysed subject has had the event, so the
        looks' sample sizes."""
        looks = design.looks
        if looks.trigger == "events":
            return tuple(int(v) for v in looks.at)
        return tuple(looks.n)

    def boundary_table(self, design: Any, sds: tuple[float, ...] | None = None) -> Any:
        from octrial.endpoints.survival_bounds import boundary_table

        return boundary_table(design)

    def boundaries_without_rule(self, design: Any) -> Any:
        """``boundaries.csv`` of a run: the committee's table (:meth:`boundary_table`)."""
        return self.boundary_table(design)

    def committee_table(self, design: Any, table: Any) -> str | None:
        from octrial.endpoints.survival_bounds import committee_text

        return committee_text(design, table)

    # == simulation ================================================================
    def simulation_unsupported(self, design: Any) -> str | None:
        e: TimeToEventEndpoint = design.endpoint
        if design.conduct is not None or design.looks.trigger in ("events", "time"):
            import importlib.util

            if importlib.util.find_spec("octrial.simulation.event_driven") is None:
                return NOT_YET
            # the patient-level simulator decides on one period's gamma posteriors (two
            # arms), the landmark survival (one arm) or the normal approximation on the
            # log hazard ratio; check_design refuses two-arm gamma with several periods
            if getattr(design.simulation, "event_driven_engine", "subjects") == "events" \
                    and e.periods > 1:
                return ("simulation.event_driven_engine = 'events' simulates one hazard "
                        "period (constant hazards); this endpoint has "
                        f"{e.periods} periods: use 'subjects'")
            return self.predictive_unsupported(design)
        if e.periods > 1:
            return ("a piecewise-exponential design is simulated subject by subject: add a "
                    "[conduct] table (the patient-level simulator)")
        return self.predictive_unsupported(design)

    # -- predictive probability of final success ---------------------------------------
    def predictive_unsupported(self, design: Any) -> str | None:
        """Why the predictive probability of final success of a gamma analysis
        (:meth:`predictive_from`) is not available for ``design``'s predictive futility
        (``looks.futility_predictive``), or ``None``."""
        if all(v is None for v in design.looks.futility_predictive):
            return None
        if design.looks.trigger == "time":
            return ("predictive futility (looks.futility_predictive) of time-to-event "
                    "designs needs looks at event counts (the final analysis at a fixed "
                    "number of events), not at calendar times")
        if self.prior_on_effect(design.endpoint, design.two_arm):
            if design.conduct is None:
                return ("with the normal approximation on the log hazard ratio and no "
                        "[conduct], predictive futility (looks.futility_predictive) is "
                        "evaluated by the exact engine (simulation.method = 'exact')")
            return None  # the patient-level kernel's normal predictive probability
        if design.endpoint.periods > 1:
            return ("predictive futility (looks.futility_predictive) of time-to-event "
                    "designs needs one hazard period (endpoint.periods)")
        return None

    def predictive_from(self, design: Any, events: tuple[np.ndarray, ...],
                        exposure: tuple[np.ndarray, ...], *, seed: int = 0,
                        draws: int = 200_000) -> np.ndarray:
        """Predictive probability of final success per study (gamma analysis, one
        period) from each arm's events and exposure (arrays of shape (studies, 1)), by
        :mod:`octrial.endpoints.survival_predictive`: exact for one arm and, without
        ``[conduct]`` (events per arm fixed), for two arms; two event-driven arms by the
        split approximation with ``draws`` draws from ``seed``."""
        from octrial.endpoints.survival_predictive import design_predictive

        return design_predictive(design, events, exposure, seed=seed, draws=draws)

    def predictive_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                      n: tuple[int, ...]) -> np.ndarray:
        """Predictive probability of final success per study of the generic study loop
        (no ``[conduct]``: each arm's statistic its total time on study, ``n`` its
        events so far): :meth:`predictive_from`."""
        events = tuple(np.full((np.size(x), 1), float(m)) for x, m in zip(statistics, n,
                                                                          strict=True))
        exposure = tuple(np.asarray(x, dtype=float).reshape(-1, 1) for x in statistics)
        return self.predictive_from(design, events, exposure)

    def simulator(self, design: Any, truth: tuple[float, ...], level: float) -> Any:
        if design.conduct is not None or design.looks.trigger in ("events", "time"):
            # subject by subject, or event by event when the design asks for it
            # (simulation.event_driven_engine; one hazard period)
            from octrial.simulation.event_jump import event_driven_simulator

            return event_driven_simulator(design, truth, level)
        return super().simulator(design, truth, level)

    # Without [conduct], one period: each analysed subject contributes one event and its
    # whole time to the event, so an arm's statistic is its total time on study.
    def increment_distribution(self, design: Any, arm: int, truth: Any, n: int) -> Any:
        """Total time to the event of ``n`` subjects: Gamma(n, rate = hazard)."""
        return stats.gamma(n, scale=1.0 / np.asarray(truth, dtype=float))

    def draw_statistics(self, design: Any, arm: int, truth: float, n: int,
                        rng: np.random.Generator, size: int) -> np.ndarray:
        if n == 0:
            return np.zeros(size)
        return rng.gamma(n, 1.0 / truth, size)

    def benefit_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                   n: tuple[int, ...]) -> np.ndarray:
        events = tuple(np.full((np.size(x), 1), float(m)) for x, m in zip(statistics, n,
                                                                          strict=True))
        exposure = tuple(np.asarray(x, dtype=float).reshape(-1, 1) for x in statistics)
        return self.benefit_from(design, events, exposure)

    def estimate_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                    n: tuple[int, ...], value: float,
                    ) -> tuple[np.ndarray, np.ndarray] | None:
        if self.prior_on_effect(design.endpoint, design.two_arm):
            return None
        posts = [self.posterior(arm.prior, np.full((np.size(x), 1), float(m)),
                                np.asarray(x, dtype=float).reshape(-1, 1))
                 for arm, x, m in zip(design.arms, statistics, n, strict=True)]
        if len(posts) == 1:
            (w, a, b), = posts
            mean = np.sum(w * a[..., 0] / b[..., 0], axis=1)
            return mean, np.sum(w * special.gammainc(a[..., 0], b[..., 0] * value), axis=1)
        (w_t, a_t, b_t), (w_c, a_c, b_c) = posts
        mean = np.zeros(w_t.shape[0])
        cdf = np.zeros(w_t.shape[0])
        for i in range(w_t.shape[1]):
            for j in range(w_c.shape[1]):
                pair = w_t[:, i] * w_c[:, j]
                # E[log h] = digamma(a) - log(b); the beta form for Pr(log HR <= value)
                mean += pair * (special.digamma(a_t[:, i, 0]) - np.log(b_t[:, i, 0])
                                - special.digamma(a_c[:, j, 0]) + np.log(b_c[:, j, 0]))
                k = math.exp(value) * b_t[:, i, 0] / b_c[:, j, 0]
                cdf += pair * special.betainc(a_t[:, i, 0], a_c[:, j, 0], k / (1 + k))
        return mean, cdf

    # -- the normal approximation on the known-variance engine ----------------------
    def as_normal_design(self, design: Any) -> Any:
        """The one-arm normal design with known sd that the normal approximation makes
        of a two-arm ``normal-log-hazard-ratio`` design: the parameter is log HR, each
        event one 'observation' with sd (1 + q) / sqrt(q) (information D q / (1 + q)^2),
        the looks' sizes the event targets, the benchmark log(threshold)."""
        from octrial.design.model import Arm, Design, Hypothesis, Scenarios
        from octrial.endpoints.normal import NormalEndpoint

        h = design.hypothesis
        q = design.arms[0].allocation / design.arms[1].allocation
        events = self.event_targets(design)
        looks = dataclasses.replace(design.looks, n=events,
                                    per_arm=tuple((d,) for d in events), trigger="complete",
                                    at=())
        values = tuple((math.log(t / c),) for t, c in design.scenarios.values)
        return Design(
            design.name, design.title, NormalEndpoint(sd=(1 + q) / math.sqrt(q)),
            Hypothesis(h.better, benchmark=math.log(h.threshold),
                       relevant_effect=h.relevant_effect),
            (Arm("treatment", h.prior, 1.0, h.design_prior),), looks,
            Scenarios(("treatment",), values), design.simulation, design.source)


class LogHazardRatioEngine:
    """Exact-to-quadrature OCs of a ``normal-log-hazard-ratio`` design: the known-variance
    recursion run on :meth:`TimeToEventFamily.as_normal_design`."""

    name = "exact"

    @staticmethod
    def serves(family: Any) -> bool:
        return isinstance(family, TimeToEventFamily)

    @staticmethod
    def unsupported(design: Any) -> str | None:
        family = design.family
        if not isinstance(family, TimeToEventFamily):
            return f"{family.name} endpoints are not time-to-event"
        if not family.prior_on_effect(design.endpoint, design.two_arm):
            return ("only the normal approximation on the log hazard ratio (endpoint."
                    "analysis = 'normal-log-hazard-ratio') has an exact engine")
        if design.looks.trigger not in ("events", "complete"):
            return "looks at calendar times need simulation"
        return None

    @staticmethod
    def run(design: Any, truths: np.ndarray, **options: Any) -> Any:
        from octrial.engines.exact_normal import NormalRecursionEngine

        normal = design.family.as_normal_design(design)
        truths = np.asarray(truths, dtype=float)
        log_ratio = np.log(truths[:, :1] / truths[:, 1:2])
        options.pop("rule", None)
        outcome = NormalRecursionEngine.run(normal, log_ratio, **{
            k: v for k, v in options.items() if k in ("points_per_sd", "estimate")})
        events = design.family.event_targets(design)
        for k, d in enumerate(events, start=1):
            outcome.extra[f"look{k}_events"] = np.full(len(truths), float(d))
        outcome.info["normal_approximation"] = (
            "log HR estimate ~ N(log HR, 1/d_T + 1/d_C), information D q / (1 + q)^2 "
            "(Schoenfeld 1981)")
        return outcome
