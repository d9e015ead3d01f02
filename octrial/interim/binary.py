"""Interim looks for binary endpoints: x/n per arm, beta-mixture posteriors.

Posterior mean and equal-tailed credible interval of each arm's rate (mixture quantiles by
root finding on the mixture CDF), and for two arms of the difference in rates, whose CDF is
the two-arm posterior probability of :func:`octrial.endpoints.binary.prob_difference_exceeds`
(the same quadrature as the decision rule).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
from scipy import optimize

from octrial.design.model import Design
from octrial.endpoints.binary import BetaPosterior, prob_difference_exceeds, update
from octrial.interim.base import EndpointInterim, PosteriorSummary
from octrial.interim.observations import BINARY, BinaryData
from octrial.interim.subjects import read_subjects

XTOL = 1e-12
EDGE = 1e-12


def rate_quantile(posterior: BetaPosterior, q: float) -> float:
    """The ``q`` quantile of a one-point beta-mixture posterior."""
    return optimize.brentq(lambda t: posterior.cdf(t)[0] - q, 0.0, 1.0, xtol=XTOL)


def difference_quantile(first: BetaPosterior, second: BetaPosterior, q: float) -> float:
    """The ``q`` quantile of p_1 - p_2 for one-point posteriors of p_1 and p_2."""
    def excess(d: float) -> float:
        return prob_difference_exceeds(first, second, d)[0][0, 0] - (1.0 - q)
    return optimize.brentq(excess, -1.0 + EDGE, 1.0 - EDGE, xtol=XTOL)


class BinaryInterim(EndpointInterim):
    """x/n per arm."""

    endpoint = "binary"
    syntax = BINARY

    def sizes(self, design: Design, observed: dict[str, Any]) -> tuple[int, ...]:
        return tuple(observed[arm].n for arm in design.arm_names)

    def statistics(self, design: Design, observed: dict[str, Any]) -> tuple[int, ...]:
        return tuple(observed[arm].responses for arm in design.arm_names)

    def statement(self, design: Design) -> str:
        h = design.hypothesis
        if not design.two_arm:
            return f"Pr(rate {'>' if h.better == 'higher' else '<'} {h.benchmark:g} | data)"
        if h.comparison == "odds-ratio":
            side = ">" if h.better == "higher" else "<"
            return f"Pr(odds ratio of rate_treatment to rate_control {side} {h.threshold:g} | data)"
        better, worse = ("treatment", "control") if h.better == "higher" else (
            "control", "treatment")
        return f"Pr(rate_{better} - rate_{worse} > {h.shift:g} | data)"

    def posteriors(self, design: Design, observed: dict[str, Any]) -> tuple[BetaPosterior, ...]:
        """One-point posteriors per arm."""
        return tuple(update(arm.prior, observed[arm.name].n,
                            np.array([observed[arm.name].responses]))
                     for arm in design.arms)

    def summaries(
        self, design: Design, observed: dict[str, Any], level: float,
    ) -> tuple[PosteriorSummary, ...]:
        tail = (1.0 - level) / 2.0
        posts = self.posteriors(design, observed)
        out = [PosteriorSummary(f"rate ({arm})", float(post.mean()[0]),
                                rate_quantile(post, tail), rate_quantile(post, 1.0 - tail))
               for arm, post in zip(design.arm_names, posts, strict=True)]
        if design.two_arm:
            treatment, control = posts
            out.append(PosteriorSummary(
                "difference in rates (treatment - control)",
                float(treatment.mean()[0] - control.mean()[0]),
                difference_quantile(treatment, control, tail),
                difference_quantile(treatment, control, 1.0 - tail)))
        return tuple(out)

    # -- per-subject data: responses 0/1 (x/n is all they say: no adequacy check) --------
    subject_outcome = "response"

    def read_subject_file(self, design: Design, path: Path) -> dict[str, dict[str, Any]]:
        return read_subjects(str(path), design.arm_names, "response", whole=True,
                             largest=1, minimum=1)

    def observed_from_subjects(self, design: Design, path: Path,
                               data: dict[str, dict[str, Any]]) -> dict[str, Any]:
        return {arm: BinaryData(int(data[arm]["response"].sum()), int(data[arm]["response"].size))
                for arm in design.arm_names}
