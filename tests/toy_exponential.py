"""A test-only endpoint family: exponential outcomes with a gamma prior on the rate.

It exists to show that an endpoint family is one module: this file, registered inside
the tests (``FAMILIES[ToyExponentialFamily.name] = ToyExponentialFamily()``, see the
``toy_family`` fixture of tests/test_family_suite.py), passes the common family suite
and is evaluated by Monte Carlo through the generic study loop, with no other edit to
the library. Invented for the tests; it is not an endpoint octrial offers.

Maths (conjugate; e.g. Gelman et al., Bayesian Data Analysis, 3rd ed., section 2.6
(recalled from memory)): each subject's outcome is Exponential(rate lambda); the
statistic of an arm is the total of its outcomes, T ~ Gamma(n, rate lambda); a
Gamma(a, b) prior (shape a, rate b) gives the posterior Gamma(a + n, b + T). One arm:
B = Pr(lambda beyond the benchmark | data). Two arms, on the rate ratio: with
independent gamma posteriors, Pr(lambda_T / lambda_C < c) = I_{k/(1+k)}(a_T, a_C),
k = c b_T / b_C (the ratio X / (X + Y) of independent unit-rate gammas is beta). No
predictive probability: designs with predictive futility are refused.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special, stats

from octrial.design.reader import Table
from octrial.endpoints.base import Family


@dataclass(frozen=True)
class ToyEndpoint:
    """``[endpoint]`` of the toy family (nothing to set beside ``type`` and ``better``)."""

    type: str = "toy-exponential"


@dataclass(frozen=True)
class ToyGamma:
    """Gamma(shape, rate) prior on an arm's event rate."""

    shape: float
    rate: float

    def describe(self) -> str:
        """Plain-text form for tables and reports."""
        return f"Gamma(shape {self.shape:g}, rate {self.rate:g})"


class ToyExponentialFamily(Family):
    """Exponential outcomes, gamma prior on the rate; Monte Carlo only."""

    name = "toy-exponential"
    parameter = "rate"
    comparisons = ("ratio",)
    default_better = "lower"
    parameter_range = (0.0, math.inf)

    def read_endpoint(self, table: Table) -> ToyEndpoint:
        table.allow("type", "better")
        return ToyEndpoint()

    def read_prior(self, table: Table) -> ToyGamma | None:
        table.string("distribution", ("gamma",))
        table.allow("distribution", "shape", "rate")
        positive = {"check": lambda v: v > 0, "expected": "a number > 0"}
        shape, rate = table.number("shape", **positive), table.number("rate", **positive)
        return None if shape is None or rate is None else ToyGamma(shape, rate)

    def true_value_problem(self, value: float) -> str | None:
        return None if value > 0 and math.isfinite(value) else "a rate > 0"

    def target_value(self, hypothesis: Any, truth: tuple[float, ...]) -> float:
        """One arm: the rate. Two arms: the log rate ratio."""
        return truth[0] if len(truth) == 1 else math.log(truth[0] / truth[1])

    def prior_probability_of_claim(self, design: Any) -> float | None:
        n = (0,) * len(design.arms)
        zero = tuple(np.zeros(1) for _ in design.arms)
        return float(self.benefit_at(design, zero, n)[0])

    def prior_components(self, prior: Any) -> list[tuple[float, Any]] | None:
        return [(1.0, stats.gamma(prior.shape, scale=1.0 / prior.rate))]

    # -- simulation ------------------------------------------------------------------
    def increment_distribution(self, design: Any, arm: int, truth: Any, n: int) -> Any:
        """Total of ``n`` exponential outcomes: Gamma(n, rate)."""
        return stats.gamma(n, scale=1.0 / np.asarray(truth, dtype=float))

    def draw_statistics(self, design: Any, arm: int, truth: float, n: int,
                        rng: np.random.Generator, size: int) -> np.ndarray:
        if n == 0:
            return np.zeros(size)
        return rng.gamma(n, 1.0 / truth, size)

    @staticmethod
    def _posterior(design: Any, statistics: tuple[np.ndarray, ...],
                   n: tuple[int, ...]) -> list[tuple[float, np.ndarray]]:
        return [(arm.prior.shape + m, arm.prior.rate + np.asarray(x, dtype=float))
                for arm, x, m in zip(design.arms, statistics, n, strict=True)]

    def benefit_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                   n: tuple[int, ...]) -> np.ndarray:
        h = design.hypothesis
        posts = self._posterior(design, statistics, n)
        lower = h.better == "lower"
        if len(posts) == 1:
            (a, b), = posts
            below = special.gammainc(a, b * h.benchmark)
            return below if lower else 1.0 - below
        (a_t, b_t), (a_c, b_c) = posts
        k = h.threshold * b_t / b_c
        below = special.betainc(a_t, a_c, k / (1.0 + k))
        return below if lower else 1.0 - below

    def estimate_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                    n: tuple[int, ...], value: float,
                    ) -> tuple[np.ndarray, np.ndarray] | None:
        posts = self._posterior(design, statistics, n)
        if len(posts) == 1:
            (a, b), = posts
            return a / b, special.gammainc(a, b * value)
        (a_t, b_t), (a_c, b_c) = posts
        # E[log lambda] = digamma(a) - log(b); Pr(log ratio <= value) as in benefit_at
        mean = special.digamma(a_t) - np.log(b_t) - special.digamma(a_c) + np.log(b_c)
        k = math.exp(value) * b_t / b_c
        return mean, special.betainc(a_t, a_c, k / (1.0 + k))
