"""Check model of the time-to-event family (gamma priors on each period's hazard).

Each arm's parameter is its hazard in every period of ``[endpoint] periods``; the
analysis model gives each period's hazard the arm's gamma (mixture) prior, independently
given the mixture component (:meth:`TimeToEventFamily.posterior`), and truths are drawn
from exactly that model. A study's data at a look are each arm's events and exposure per
period, simulated subject by subject with the study's conduct
(:mod:`octrial.checks.time_to_event_data`, the patient-level simulator's own numba parts).

Quantities (the target first, judged at every look):

* one arm, one period: the hazard; its posterior CDF is the decision's own computation,
  the patient-level kernel's :func:`octrial.simulation.event_driven.benefit_at` for
  designs it simulates, else :meth:`TimeToEventFamily.benefit_from` (the generic loop and
  ``octrial decide``) with the benchmark moved to the value asked about;
* one arm, several periods: the cumulative hazard at the landmark,
  Lambda(L) = sum_j |period j within [0, L)| h_j, whose CDF is the sum of independent
  gammas by the Moschopoulos series (:func:`octrial.endpoints.survival_maths.
  gamma_sum_cdf`) that the family's landmark claim Pr(S(L) > S0(L)) uses;
* two arms: the log hazard ratio log(h_T / h_C), by the beta form of the gamma ratio in
  the same two functions (the margin moved to the value asked about);
* every arm's hazard in every period at the final look (the gamma-mixture update).

Posterior draws (the rank statistic, tail accuracy) are gamma draws of the mixture's
components.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
from scipy import special

from octrial.checks.model import ANALYSIS, CheckModel, Posteriors, Quantity, benchmark
from octrial.checks.predictive import Predictive
from octrial.checks.settings import CheckSettings, generator
from octrial.checks.time_to_event_data import EventData, simulate_studies
from octrial.design.model import Design
from octrial.endpoints import survival_maths as sm
from octrial.endpoints.count import GammaMixture
from octrial.endpoints.time_to_event import TimeToEventEndpoint
from octrial.plurals import noun, series
from octrial.simulation import event_driven


def uses_kernel(design: Design) -> bool:
    """Whether the patient-level kernel decides this design's simulated studies (the
    family's simulator choice: ``[conduct]`` or looks at events or calendar times)."""
    return design.conduct is not None or design.looks.trigger in ("events", "time")


SMALLEST_HAZARD = 1e-300
"""Drawn hazards are raised to at least this, so that event times (about 1 / hazard) and
their sums stay finite; a gamma prior with shape 0.01 puts about 0.1% of its mass below
it (the calibration it distorts is far inside the tests' tolerance)."""


def draw_gamma_mixture(prior: GammaMixture, rng: np.random.Generator, size: int,
                       periods: int) -> np.ndarray:
    """Hazards (size, periods): one mixture component per study, then each period's
    hazard drawn independently from that component (the analysis model)."""
    w = np.asarray(prior.weights, dtype=float)
    pick = rng.choice(w.size, size=size, p=w / w.sum())
    a = np.asarray(prior.a, dtype=float)[pick][:, None]
    b = np.asarray(prior.b, dtype=float)[pick][:, None]
    return np.maximum(rng.gamma(np.broadcast_to(a, (size, periods)), 1.0 / b),
                      SMALLEST_HAZARD)


class TimeToEventModel(CheckModel):
    """Time-to-event designs with gamma priors per arm (see module docstring)."""

    def __init__(self, design: Design) -> None:
        super().__init__(design)
        self.family = design.family
        self.endpoint = design.endpoint
        self.periods = self.endpoint.periods
        self.kernel = uses_kernel(design)
        self.arm_names = design.arm_names
        if not design.two_arm and self.periods > 1:
            landmark = self.endpoint.landmark_time(benchmark(design))
            self.overlap = np.asarray(sm.period_overlap(self.endpoint.starts, landmark))
            self.landmark = float(landmark)

    # -- parameters and quantities ---------------------------------------------------
    def _column(self, arm: int, period: int) -> int:
        return arm * self.periods + period

    @property
    def parameters(self) -> tuple[str, ...]:
        if self.periods == 1:
            return self.arm_names
        return tuple(f"{a}_period{p + 1}" for a in self.arm_names for p in range(self.periods))

    def _mixture(self) -> bool:
        return any(len(a.prior.weights) > 1 for a in self.design.arms)

    def _decision_words(self) -> str:
        if self.kernel:
            return "the patient-level kernel's posterior (simulation.event_driven.benefit_at)"
        return "the family's benefit_from"

    def quantities(self) -> tuple[Quantity, ...]:
        mixture = self._mixture()
        update = ("gamma-mixture update (posterior weights from marginal likelihoods)"
                  if mixture else "conjugate gamma update (closed form)")
        per_arm = []
        for arm in self.arm_names:
            for p in range(self.periods):
                name = f"hazard_{arm}" + (f"_period{p + 1}" if self.periods > 1 else "")
                label = f"hazard ({arm}" + (f", period {p + 1})" if self.periods > 1 else ")")
                per_arm.append(Quantity(name, label, False, update, not mixture))
        unit = self.endpoint.time_unit
        if self.design.two_arm:
            target = Quantity("log_hazard_ratio", "log hazard ratio, treatment to control",
                              True, "beta form of the gamma ratio in "
                              + self._decision_words(), not mixture)
        elif self.periods > 1:
            target = Quantity("cumulative_hazard", f"cumulative hazard to {self.landmark:g} "
                              f"{unit}s (treatment)", True, "sum of gammas by the "
                              "Moschopoulos series (survival_maths.gamma_sum_cdf, as "
                              "benefit_from's landmark claim)", False)
        else:
            target = Quantity("hazard_treatment", "hazard (treatment)", True,
                              "regularized incomplete gamma in " + self._decision_words(),
                              not mixture)
            return (target,)
        return (target, *per_arm)

    def hazards(self, truths: np.ndarray) -> np.ndarray:
        """Truths as (studies, arms, periods)."""
        return truths.reshape(truths.shape[0], len(self.arm_names), self.periods)

    def true_value(self, quantity: Quantity, truths: np.ndarray) -> np.ndarray:
        h = self.hazards(truths)
        if quantity.name == "log_hazard_ratio":
            return np.log(h[:, 0, 0] / h[:, 1, 0])
        if quantity.name == "cumulative_hazard":
            return h[:, 0, :] @ self.overlap
        arm, period = self._arm_period(quantity)
        return h[:, arm, period]

    def _arm_period(self, quantity: Quantity) -> tuple[int, int]:
        rest = quantity.name.removeprefix("hazard_")
        arm, _, period = rest.partition("_period")
        return self.arm_names.index(arm), int(period) - 1 if period else 0

    def kernel_prior(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The prior arrays the patient-level kernel decides with (built once)."""
        if not hasattr(self, "_kernel_arrays"):
            self._kernel_arrays = _kernel_prior(self.design)
        return self._kernel_arrays

    # -- priors ----------------------------------------------------------------------
    def cannot_draw(self, source: str) -> str | None:
        key = "prior" if source == ANALYSIS else "design_prior"
        missing = [a.name for a in self.design.arms
                   if not isinstance(getattr(a, key), GammaMixture)]
        if not missing:
            return None
        what = "analysis prior" if source == ANALYSIS else "design prior"
        return f"no gamma {what} on the {series(missing)} {noun(len(missing), 'arm')}"

    def draw_truths(self, rng: np.random.Generator, size: int, source: str) -> np.ndarray:
        key = "prior" if source == ANALYSIS else "design_prior"
        return np.column_stack([draw_gamma_mixture(getattr(a, key), rng, size, self.periods)
                                for a in self.design.arms])

    def prior(self) -> TimeToEventPosteriors:
        zero = np.zeros((1, self.periods))
        return self._posteriors(tuple(zero for _ in self.arm_names),
                                tuple(zero for _ in self.arm_names))

    # -- data and posteriors ---------------------------------------------------------
    def simulate(self, rng: np.random.Generator, truths: np.ndarray) -> EventData:
        return simulate_studies(self.design, rng, self.hazards(truths))

    def posterior(self, data: EventData, look: int) -> TimeToEventPosteriors:
        parts = [data.at(look, j) for j in range(len(self.arm_names))]
        return self._posteriors(tuple(p[0] for p in parts), tuple(p[1] for p in parts))

    def _posteriors(self, events: tuple[np.ndarray, ...],
                    exposure: tuple[np.ndarray, ...]) -> TimeToEventPosteriors:
        posts = tuple(self.family.posterior(arm.prior, d, x) for arm, d, x in zip(
            self.design.arms, events, exposure, strict=True))
        return TimeToEventPosteriors(self, posts, events, exposure)

    def typical_data(self) -> EventData:
        """The final look's events split by allocation (and evenly over the periods),
        each with the exposure that makes the estimate the prior mean."""
        looks = self.design.looks
        shape = (looks.count, len(self.arm_names), 1, self.periods)
        events, exposure = np.zeros(shape), np.zeros(shape)
        for k, sizes in enumerate(looks.per_arm):
            for j, arm in enumerate(self.design.arms):
                d = max(sizes[j], 1) / self.periods
                events[k, j, 0, :] = d
                exposure[k, j, 0, :] = d / arm.prior.mean
        none = np.zeros((looks.count, 1))
        return EventData(events, exposure, none, none)

    # -- prior predictive ------------------------------------------------------------
    def predictive(self, source: str) -> list[Predictive]:
        """The simulated prior predictive with a fixed stream (``octrial check`` uses
        :meth:`predictive_from` with the check's seed)."""
        return self.predictive_from(source, CheckSettings(seed=0, simulations=4000))

    def predictive_from(self, source: str, settings: CheckSettings) -> list[Predictive]:
        """Each look's events and exposure per arm, the observed hazard (one arm) or log
        hazard ratio (two arms) and, with ``[conduct]``, the calendar time of each look,
        from ``settings.simulations`` studies with truths from the ``source`` prior:
        empirical distributions (the study's conduct has no closed form)."""
        rng = generator(settings.seed, f"prior-predictive-{source}")
        truths = self.draw_truths(rng, settings.simulations, source)
        data = self.simulate(rng, truths)
        return simulated_predictive(self.design, data, settings.simulations)

    def plausible_effect(self) -> tuple[float, float, str] | None:
        if self.design.two_arm:
            return (math.log(0.1), math.log(10.0),
                    "an observed hazard ratio within a factor 10 of no effect (log scale "
                    "±2.30)")
        rate = benchmark(self.design)
        return (rate / 10, rate * 10,
                "an observed hazard within a factor 10 of the benchmark hazard")


def simulated_predictive(design: Design, data: EventData, studies: int) -> list[Predictive]:
    """Empirical prior predictive distributions of simulated studies (see
    :meth:`TimeToEventModel.predictive_from`)."""
    e = design.endpoint
    unit = e.time_unit
    r = np.asarray(e.relative_hazard, dtype=float)
    weight = np.full(studies, 1.0 / studies)
    out: list[Predictive] = []
    names = design.arm_names
    for k in range(design.looks.count):
        look = f"look {k + 1}"
        # per look: events per arm and the estimate, then exposure per arm and the time
        # (a row each in the drawing's three columns)
        estimates, exposures = [], []
        for j, arm in enumerate(names):
            d, x = data.at(k, j)
            events = d.sum(axis=1)
            if np.ptp(events) > 0:
                out.append(Predictive.from_pmf(f"events_{arm}_look{k + 1}",
                                               f"events ({arm}, {look})", events, weight))
            exposures.append(Predictive.from_pmf(f"exposure_{arm}_look{k + 1}",
                                                 f"time at risk, {unit}s ({arm}, {look})",
                                                 x.sum(axis=1), weight))
            estimates.append((events, x @ r))
        if len(estimates) == 1:
            events, at_risk = estimates[0]
            out.append(Predictive.from_pmf(
                f"observed_hazard_look{k + 1}",
                f"observed hazard, events / time at risk ({look})"
                if e.periods == 1 else
                f"observed hazard multiplier, events / sum of r_j x time at risk ({look})",
                events / at_risk, weight, effect=True))
            median = observed_median(e, events / at_risk)
            finite = median[np.isfinite(median)]
            if finite.size:
                # a study without events has no finite median: the studies with one
                out.append(Predictive.from_pmf(
                    f"observed_median_look{k + 1}",
                    f"median time at the observed hazard, {unit}s ({look}; the "
                    f"{finite.size / studies:.1%} of studies with an event)",
                    finite, np.full(finite.size, 1.0 / finite.size)))
        else:
            # 0.5 added to each arm's events, as for counts, so that no event is finite
            (d_t, x_t), (d_c, x_c) = estimates
            out.append(Predictive.from_pmf(
                f"observed_log_hazard_ratio_look{k + 1}",
                f"observed log hazard ratio, T to C, 0.5 added to events ({look})",
                np.log((d_t + 0.5) / x_t) - np.log((d_c + 0.5) / x_c), weight, effect=True))
        out += exposures
        if design.conduct is not None:
            out.append(Predictive.from_pmf(f"look_time_look{k + 1}",
                                           f"calendar time of {look}, {unit}s",
                                           data.time[k], weight))
    last = f"_look{design.looks.count}"
    # the drawing shows the final look; the record (and the report's table) every look
    return [p if p.name.endswith(last) else dataclasses.replace(p, drawn=False)
            for p in out]


def observed_median(endpoint: TimeToEventEndpoint, multiplier: np.ndarray) -> np.ndarray:
    """The median time of the (piecewise) exponential model at each estimated hazard
    multiplier (:func:`~octrial.endpoints.survival_maths.median_time`); infinite at 0."""
    out = np.full(multiplier.shape, np.inf)
    seen = multiplier > 0
    if endpoint.periods == 1:
        out[seen] = math.log(2.0) / multiplier[seen]
        return out
    out[seen] = [sm.median_time(endpoint.starts, endpoint.relative_hazard, float(m))
                 for m in multiplier[seen]]
    return out


class TimeToEventPosteriors(Posteriors):
    """Per-arm gamma-mixture posteriors per period, with the data they came from (the
    decision functions take events and exposure)."""

    def __init__(self, model: TimeToEventModel,
                 posts: tuple[tuple[np.ndarray, np.ndarray, np.ndarray], ...],
                 events: tuple[np.ndarray, ...], exposure: tuple[np.ndarray, ...]) -> None:
        self.model = model
        self.posts = posts
        self.events = events
        self.exposure = exposure

    def __len__(self) -> int:
        return self.posts[0][0].shape[0]

    # -- CDF -------------------------------------------------------------------------
    def cdf(self, quantity: Quantity, values: np.ndarray) -> np.ndarray:
        values = np.broadcast_to(np.asarray(values, dtype=float), (len(self),))
        if quantity.name == "cumulative_hazard":
            w, a, b = self.posts[0]
            used = self.model.overlap > 0
            out = np.zeros(len(self))
            for c in range(w.shape[1]):
                cdf, _ = sm.gamma_sum_cdf(values, a[:, c, used],
                                          b[:, c, used] / self.model.overlap[used])
                out += w[:, c] * cdf
            return out
        if quantity.target:
            return self._decision_cdf(values)
        arm, period = self.model._arm_period(quantity)
        w, a, b = self.posts[arm]
        x = np.clip(values, 0.0, None)[:, None]
        return np.sum(w * special.gammainc(a[:, :, period], b[:, :, period] * x), axis=1)

    def _decision_cdf(self, values: np.ndarray) -> np.ndarray:
        """Pr(target <= value) per study from the decision's own function, asked
        whether the hazard (ratio) is below the value with a lower-is-better claim."""
        model = self.model
        two = model.design.two_arm
        claims = np.exp(values) if two else np.clip(values, 0.0, None)
        out = np.empty(len(self))
        if model.kernel:
            log_w, a, b = model.kernel_prior()
            for i, claim in enumerate(claims):
                d = np.array([x[i, 0] for x in self.events])
                e = np.array([x[i, 0] for x in self.exposure])
                out[i] = event_driven.benefit_at(d, e, log_w, a, b, float(claim), True)
            return out
        design = model.design
        h = design.hypothesis
        for i, claim in enumerate(claims):
            if two:
                moved = dataclasses.replace(h, better="lower", kind="superiority",
                                            margin=1.0 - float(claim))
            else:
                moved = dataclasses.replace(h, better="lower", benchmark=float(claim))
            out[i] = model.family.benefit_from(
                dataclasses.replace(design, hypothesis=moved),
                tuple(x[i:i + 1] for x in self.events),
                tuple(x[i:i + 1] for x in self.exposure))[0]
        return out

    # -- moments ---------------------------------------------------------------------
    def _moments(self, quantity: Quantity) -> tuple[np.ndarray, np.ndarray]:
        if quantity.name == "log_hazard_ratio":
            mean_t, var_t = _log_moments(*self.posts[0])
            mean_c, var_c = _log_moments(*self.posts[1])
            return mean_t - mean_c, var_t + var_c
        if quantity.name == "cumulative_hazard":
            w, a, b = self.posts[0]
            delta = self.model.overlap
            m = np.sum(a / b * delta, axis=2)
            v = np.sum(a / b**2 * delta**2, axis=2)
        else:
            arm, period = self.model._arm_period(quantity)
            w, a, b = self.posts[arm]
            m = a[:, :, period] / b[:, :, period]
            v = m / b[:, :, period]
        mean = np.sum(w * m, axis=1)
        return mean, np.clip(np.sum(w * (v + m**2), axis=1) - mean**2, 0.0, None)

    def mean(self, quantity: Quantity) -> np.ndarray:
        return self._moments(quantity)[0]

    def variance(self, quantity: Quantity) -> np.ndarray:
        return self._moments(quantity)[1]

    # -- draws -----------------------------------------------------------------------
    def _hazard_draws(self, arm: int, rng: np.random.Generator, draws: int) -> np.ndarray:
        """Draws of every period's hazard, shape (rows, draws, periods)."""
        w, a, b = self.posts[arm]
        cum = np.cumsum(w, axis=1)
        u = rng.random((w.shape[0], draws)) * cum[:, -1:]
        pick = np.minimum((u[:, :, None] > cum[:, None, :]).sum(axis=2), w.shape[1] - 1)
        rows = np.arange(w.shape[0])[:, None]
        return rng.gamma(a[rows, pick], 1.0 / b[rows, pick])

    def draw(self, quantity: Quantity, rng: np.random.Generator, draws: int) -> np.ndarray:
        if quantity.name == "log_hazard_ratio":
            t = self._hazard_draws(0, rng, draws)[..., 0]
            c = self._hazard_draws(1, rng, draws)[..., 0]
            with np.errstate(divide="ignore"):  # draws that underflow to 0 rank as -inf
                return np.log(t) - np.log(c)
        if quantity.name == "cumulative_hazard":
            return self._hazard_draws(0, rng, draws) @ self.model.overlap
        arm, period = self.model._arm_period(quantity)
        return self._hazard_draws(arm, rng, draws)[..., period]


def _log_moments(w: np.ndarray, a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mean and variance of the first period's log hazard: E = digamma(a) - log b,
    Var = trigamma(a) per component, mixed."""
    m = special.digamma(a[:, :, 0]) - np.log(b[:, :, 0])
    mean = np.sum(w * m, axis=1)
    second = np.sum(w * (special.polygamma(1, a[:, :, 0]) + m**2), axis=1)
    return mean, np.clip(second - mean**2, 0.0, None)


def _kernel_prior(design: Design) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The arrays the patient-level kernel decides with, as the simulator builds them
    (:class:`octrial.simulation.event_driven.PatientLevelSimulator`)."""
    truth = tuple(float(a.prior.mean) for a in design.arms)
    simulator = event_driven.PatientLevelSimulator(event_driven.setup_of_design(design,
                                                                                 truth))
    return simulator.log_w, simulator.a, simulator.b



def time_to_event_model(design: Design) -> CheckModel:
    """The check model of a time-to-event design: gamma priors per arm, or the normal
    approximation on the log hazard ratio."""
    if design.family.prior_on_effect(design.endpoint, design.two_arm):
        from octrial.checks.log_hazard_ratio_model import LogHazardRatioModel

        return LogHazardRatioModel(design)
    return TimeToEventModel(design)
