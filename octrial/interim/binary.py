"""Interim looks for binary endpoints: x/n per arm, beta-mixture posteriors.

Posterior mean and equal-tailed credible interval of each arm's rate (mixture quantiles by
root finding on the mixture CDF), and for two arms of the difference in rates, whose CDF is
the two-arm posterior probability of :func:`octrial.endpoints.binary.prob_difference_exceeds`
(the same quadrature as the decision rule).

Logit-normal priors have no closed form: their posteriors are the grid engine's
(:mod:`octrial.endpoints.grid_family`) on the logit scale. Means are grid expectations,
quantiles roots of the interpolated grid CDF (:func:`octrial.numerics.parameter_grid.cdf_at`);
two arms (compared on the odds-ratio scale, as such priors must be) add the odds ratio,
from the CDF of the difference in logits that the decision rule uses.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
from scipy import optimize, special

import octrial.endpoints.grid_family as grid_family
from octrial.design.model import Design
from octrial.endpoints.binary import BetaPosterior, LogitNormal, prob_difference_exceeds, update
from octrial.interim.base import EndpointInterim, PosteriorSummary
from octrial.interim.observations import BINARY, BinaryData
from octrial.interim.subjects import read_subjects
from octrial.numerics import parameter_grid as pg
from octrial.numerics.parameter_grid import GridPosterior

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


def _grid_cdf(post: GridPosterior, theta: np.ndarray) -> np.ndarray:
    """Pr(theta_arm < theta) for the one row of a grid posterior."""
    g = post.grid
    return pg.cdf_at(post, (np.asarray(theta, dtype=float) - g.anchor) / g.step)[0]


def _root(cdf: Any, q: float, lo: float, hi: float) -> float:
    """Where a nondecreasing ``cdf`` crosses ``q`` in [lo, hi] (an end when it does not)."""
    if cdf(lo) >= q:
        return lo
    if cdf(hi) <= q:
        return hi
    return optimize.brentq(lambda x: cdf(x) - q, lo, hi, xtol=XTOL)


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
        if any(isinstance(arm.prior, LogitNormal) for arm in design.arms):
            return self._grid_summaries(design, observed, (tail, 1.0 - tail))
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

    def _grid_summaries(self, design: Design, observed: dict[str, Any],
                        qs: tuple[float, float]) -> tuple[PosteriorSummary, ...]:
        posts = [grid_family.posterior(design, j, observed[arm].n,
                                       np.array([observed[arm].responses]))
                 for j, arm in enumerate(design.arm_names)]
        out = []
        for arm, post in zip(design.arm_names, posts, strict=True):
            nodes = post.grid.nodes
            lo, hi = float(nodes[0]), float(nodes[-1])
            logits = [_root(lambda t, p=post: float(_grid_cdf(p, np.array([t]))[0]), q, lo, hi)
                      for q in qs]
            out.append(PosteriorSummary(
                f"rate ({arm})", float(post.weights[0] @ special.expit(nodes)),
                float(special.expit(logits[0])), float(special.expit(logits[1]))))
        if not design.two_arm:
            return tuple(out)
        treatment, control = posts  # on the odds-ratio scale (load.py checks)
        spread = (float(treatment.grid.nodes[0] - control.grid.nodes[-1]),
                  float(treatment.grid.nodes[-1] - control.grid.nodes[0]))
        bounds = [_root(lambda v: float(pg.difference_cdf(treatment, control, v)[0, 0]),
                        q, *spread) for q in qs]
        mean = (float(treatment.weights[0] @ np.exp(treatment.grid.nodes))
                * float(control.weights[0] @ np.exp(-control.grid.nodes)))
        out.append(PosteriorSummary("odds ratio (treatment / control)", mean,
                                    float(np.exp(bounds[0])), float(np.exp(bounds[1]))))
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
