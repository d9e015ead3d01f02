"""Check model of two-arm time-to-event designs analysed on the log hazard ratio with the
normal approximation (``endpoint.analysis = 'normal-log-hazard-ratio'``).

The parameter is theta = log(h_T / h_C) with the normal (mixture) prior of
``hypothesis.prior``. The data model needs the control arm's hazard as well, which the
analysis does not model: it is the control hazard of the design's first scenario, with
the treatment's hazard exp(theta) times it in every period (the endpoint's relative
hazard shape in both arms). Studies are simulated subject by subject with the study's
conduct (:mod:`octrial.checks.time_to_event_data`), and the posterior is the one
``octrial decide`` and the simulated studies use: the family's estimate
(:meth:`TimeToEventFamily.log_hazard_ratio_estimate`: each arm's multiplier d / sum_j r_j
E_j, information 1 / (1/d_T + 1/d_C)) taken as a normal observation in the known-variance
update (:func:`octrial.endpoints.normal.update`).

That posterior is an approximation, so simulation-based calibration here checks the
approximation itself on patient-level data: it is close to calibrated when every arm has
many events, and can fail honestly when looks come after few events or when the prior
puts mass on hazard ratios so extreme that an arm sees almost none. An arm with no event
has no estimate; 0.5 is then added to its events (as for the observed log hazard ratio
of the prior predictive).
"""

from __future__ import annotations

import math
from typing import Any, cast

import numpy as np

from octrial.checks.model import ANALYSIS, CheckModel, Quantity
from octrial.checks.normal_model import KnownSdPosteriors
from octrial.checks.predictive import Predictive
from octrial.checks.settings import CheckSettings, generator
from octrial.checks.time_to_event_data import EventData, simulate_studies
from octrial.checks.time_to_event_model import simulated_predictive
from octrial.design.model import Design
from octrial.endpoints.normal import (
    NormalMixture,
    NormalPosterior,
    benefit_components,
    update,
)


class LogHazardRatioModel(CheckModel):
    """The normal approximation on the log hazard ratio (see module docstring)."""

    def __init__(self, design: Design) -> None:
        super().__init__(design)
        self.family = design.family
        self.sign = design.hypothesis.sign
        self.control = float(design.scenarios.values[0][1])
        self.shape = np.asarray(design.endpoint.relative_hazard, dtype=float)

    def _prior(self, source: str) -> Any:
        h = self.design.hypothesis
        return h.prior if source == ANALYSIS else h.design_prior

    @property
    def parameters(self) -> tuple[str, ...]:
        return ("log_hazard_ratio",)

    def quantities(self) -> tuple[Quantity, ...]:
        return (Quantity("log_hazard_ratio", "log hazard ratio, treatment to control", True,
                         "normal approximation: the family's log hazard ratio estimate "
                         "(information 1 / (1/d_T + 1/d_C)) in the known-variance "
                         "normal-mixture update", False),)

    def true_value(self, quantity: Quantity, truths: np.ndarray) -> np.ndarray:
        return truths[:, 0]

    def cannot_draw(self, source: str) -> str | None:
        prior = self._prior(source)
        what = "analysis prior" if source == ANALYSIS else "design prior"
        if not isinstance(prior, NormalMixture):
            return f"no normal {what} on the log hazard ratio"
        return None

    def draw_truths(self, rng: np.random.Generator, size: int, source: str) -> np.ndarray:
        prior = self._prior(source)
        w = np.asarray(prior.weights, dtype=float)
        pick = rng.choice(w.size, size=size, p=w / w.sum())
        theta = rng.normal(np.asarray(prior.mean)[pick], np.asarray(prior.sd)[pick])
        return theta[:, None]

    def prior(self) -> KnownSdPosteriors:
        w, m, p = benefit_components(self._prior(ANALYSIS), self.sign)
        return KnownSdPosteriors(NormalPosterior(w[None, :], m[None, :], p[None, :]),
                                 self.sign)

    def hazards(self, truths: np.ndarray) -> np.ndarray:
        """(studies, 2, periods): treatment exp(theta) h_C r_j, control h_C r_j."""
        control = self.control * self.shape
        ratio = np.exp(truths[:, :1])
        return np.stack([ratio * control[None, :],
                         np.broadcast_to(control, (truths.shape[0], control.size))], axis=1)

    def simulate(self, rng: np.random.Generator, truths: np.ndarray) -> EventData:
        return simulate_studies(self.design, rng, self.hazards(truths))

    def posterior(self, data: EventData, look: int) -> KnownSdPosteriors:
        events, exposure = [], []
        for j in range(2):
            d, x = data.at(look, j)
            d = d.copy()
            d[d.sum(axis=1) == 0, 0] = 0.5  # no event: no estimate (module docstring)
            events.append(d)
            exposure.append(x)
        estimate, information = self.family.log_hazard_ratio_estimate(
            self.design, tuple(events), tuple(exposure))
        # update() broadcasts a column of per-study information like a scalar
        per_study = cast(float, information[:, None])
        return KnownSdPosteriors(update(self._prior(ANALYSIS), self.sign, per_study,
                                        self.sign * information * estimate), self.sign)

    def typical_data(self) -> EventData:
        looks = self.design.looks
        prior = self._prior(ANALYSIS)
        theta = float(np.dot(prior.weights, prior.mean))
        periods = self.shape.size
        shape = (looks.count, 2, 1, periods)
        events, exposure = np.zeros(shape), np.zeros(shape)
        hazards = self.hazards(np.array([[theta]]))[0]
        for k, total in enumerate(self.family.event_targets(self.design)):
            q = self.design.arms[0].allocation / self.design.arms[1].allocation
            for j, share in enumerate((q / (1 + q), 1 / (1 + q))):
                d = total * share / periods
                events[k, j, 0, :] = d
                exposure[k, j, 0, :] = d / hazards[j]
        none = np.zeros((looks.count, 1))
        return EventData(events, exposure, none, none)

    def predictive(self, source: str) -> list[Predictive]:
        return self.predictive_from(source, CheckSettings(seed=0, simulations=4000))

    def predictive_from(self, source: str, settings: CheckSettings) -> list[Predictive]:
        rng = generator(settings.seed, f"prior-predictive-{source}")
        truths = self.draw_truths(rng, settings.simulations, source)
        return simulated_predictive(self.design, self.simulate(rng, truths),
                                    settings.simulations)

    def plausible_effect(self) -> tuple[float, float, str] | None:
        return (math.log(0.1), math.log(10.0),
                "an observed hazard ratio within a factor 10 of no effect (log scale ±2.30)")
