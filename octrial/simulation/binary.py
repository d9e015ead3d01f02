"""The general kernel for binary endpoints: posterior and predictive probabilities per study.

Where the table kernel looks decisions up on the response lattice, this kernel computes
them for each simulated study as the analysis would: the beta-mixture posterior after x
responses in n subjects, B = Pr(rate beyond the benchmark | data) by the regularized
incomplete beta (:mod:`octrial.simulation.special`), and the predictive probability of
final success as the beta-binomial-weighted sum over the remaining subjects' responses
(Lee & Liu 2008), each final outcome judged by its own posterior probability. It draws
the same increments from the same random words as the table kernel, so on any binary
design the two must reach the same decision in every study; the tests hold them to that.

One arm only for now: two-arm posterior probabilities need a quadrature per study (see
docs/methods.md); two-arm designs use the table kernel.
"""

from __future__ import annotations

import math
from typing import Any

import numba
import numpy as np

from octrial.design.model import Design
from octrial.rules.lattice import DECISION_TOLERANCE
from octrial.simulation.base import Simulator, Tally
from octrial.simulation.draws import DrawTables, draw
from octrial.simulation.special import betainc_pair, log_beta

NONE = -1


def unsupported(design: Design) -> str | None:
    """Why the general binary kernel cannot simulate ``design``, or ``None``."""
    if design.two_arm:
        return "the general binary kernel covers one-arm designs (two arms use the table kernel)"
    return None


@numba.njit(cache=True)
def _posterior_weights(weights, a, b, x, n, out):
    """Posterior mixture weights after x responses in n subjects, into ``out``."""
    top = -np.inf
    for j in range(weights.size):
        out[j] = (math.log(weights[j]) + log_beta(a[j] + x, b[j] + n - x)
                  - log_beta(a[j], b[j]))
        top = max(top, out[j])
    total = 0.0
    for j in range(weights.size):
        out[j] = math.exp(out[j] - top)
        total += out[j]
    for j in range(weights.size):
        out[j] /= total


@numba.njit(cache=True)
def _benefit(weights, a, b, x, n, p0, higher, w):
    """B = Pr(rate > p0 | x of n) (or < p0 when lower is better)."""
    _posterior_weights(weights, a, b, x, n, w)
    total = 0.0
    for j in range(weights.size):
        lower, upper = betainc_pair(a[j] + x, b[j] + n - x, p0)
        total += w[j] * (upper if higher else lower)
    return total


@numba.njit(cache=True)
def _predictive(weights, a, b, x, n, n_final, p0, higher, final_threshold, tol, w, wf):
    """Predictive probability of final success from x of n (Lee & Liu 2008)."""
    _posterior_weights(weights, a, b, x, n, w)
    m = n_final - n
    total = 0.0
    for y in range(m + 1):
        if _benefit(weights, a, b, x + y, n_final, p0, higher, wf) < final_threshold - tol:
            continue
        log_choose = math.lgamma(m + 1.0) - math.lgamma(y + 1.0) - math.lgamma(m - y + 1.0)
        for j in range(weights.size):
            aj, bj = a[j] + x, b[j] + n - x
            total += w[j] * math.exp(log_choose + log_beta(aj + y, bj + m - y)
                                     - log_beta(aj, bj))
    return total


@numba.njit(cache=True)
def one_arm_studies(words, n, weights, a, b, p0, higher, efficacy, futility, predictive,
                    efficacy_count, futility_count, uses_counts, has_prior, truth, tail, tol,
                    bounds, t_start, t_length, guide, guide_start, shift,
                    stops_efficacy, stops_futility, sums):
    """Simulate one-arm studies; add stops per look and error sums; return covered count.

    Thresholds are NaN (counts: -1) where a look has none.
    """
    n_studies, n_looks, _ = words.shape
    w = np.empty(weights.size)
    wf = np.empty(weights.size)
    covered = 0
    last = n_looks - 1
    for r in range(n_studies):
        x = 0
        for k in range(n_looks):
            x += draw(words[r, k, 0], k, bounds, t_start, t_length, guide, guide_start, shift)
            if uses_counts:
                e = efficacy_count[k]
                f = futility_count[k]
                eff = e != NONE and ((x >= e) if higher else (x <= e))
                fut = f != NONE and ((x <= f) if higher else (x >= f))
            else:
                benefit = _benefit(weights, a, b, x, n[k], p0, higher, w)
                eff = not math.isnan(efficacy[k]) and benefit >= efficacy[k] - tol
                fut = not math.isnan(futility[k]) and benefit < futility[k] - tol
                if k < last and not eff and not fut and not math.isnan(predictive[k]):
                    pp = _predictive(weights, a, b, x, n[k], n[last], p0, higher,
                                     efficacy[last], tol, w, wf)
                    fut = pp < predictive[k] - tol
            if k == last:
                fut = not eff
            if not (eff or fut):
                continue
            if eff:
                stops_efficacy[k] += 1
            else:
                stops_futility[k] += 1
            if has_prior:
                _posterior_weights(weights, a, b, x, n[k], w)
                mean = 0.0
                cdf = 0.0
                for j in range(weights.size):
                    aj, bj = a[j] + x, b[j] + n[k] - x
                    mean += w[j] * aj / (aj + bj)
                    cdf += w[j] * betainc_pair(aj, bj, truth)[0]
                err = mean - truth
                sums[0] += err
                sums[1] += err * err
                sums[2] += err * err * err * err
                if tail <= cdf <= 1.0 - tail:
                    covered += 1
            break
    return covered


def _thresholds(values: tuple[float | None, ...]) -> np.ndarray:
    return np.array([np.nan if v is None else v for v in values], dtype=float)


def _counts(values: tuple[int | None, ...] | None, k: int) -> np.ndarray:
    if values is None:
        return np.full(k, NONE, dtype=np.int64)
    return np.array([NONE if v is None else v for v in values], dtype=np.int64)


class BinarySimulator(Simulator):
    """One-arm binary studies by the general kernel (see module docstring)."""

    kernel = "general"

    def __init__(self, design: Design, truth: tuple[float, ...], level: float) -> None:
        family = design.family
        looks = design.looks
        self.looks = looks.count
        n = np.array([per[0] for per in looks.per_arm], dtype=np.int64)
        increments = np.diff(n, prepend=0)
        self.tables = DrawTables.from_pmfs(
            [family.increment_pmf(design, truth[0], int(m), int(m) + 1) for m in increments])
        prior = design.arms[0].prior
        has_prior = prior is not None
        mix = prior if has_prior else None
        self.arguments: tuple[Any, ...] = (
            n,
            np.array(mix.weights if has_prior else (1.0,), dtype=float),
            np.array(mix.a if has_prior else (1.0,), dtype=float),
            np.array(mix.b if has_prior else (1.0,), dtype=float),
            float(design.hypothesis.benchmark), design.hypothesis.better == "higher",
            _thresholds(looks.efficacy), _thresholds(looks.futility),
            _thresholds(looks.futility_predictive),
            _counts(looks.efficacy_count, looks.count), _counts(looks.futility_count,
                                                                looks.count),
            looks.uses_counts, has_prior, float(truth[0]), (1.0 - level) / 2.0,
            DECISION_TOLERANCE,
        )
        self.has_prior = has_prior

    def simulate(self, rng: np.random.Generator, replicates: int) -> Tally:
        words = rng.bit_generator.random_raw(replicates * self.looks).reshape(
            replicates, self.looks, 1)
        efficacy = np.zeros(self.looks, dtype=np.int64)
        futility = np.zeros(self.looks, dtype=np.int64)
        sums = np.zeros(3)
        covered = one_arm_studies(words, *self.arguments, *self.tables.arrays(), efficacy,
                                  futility, sums)
        if not self.has_prior:
            return Tally(replicates, efficacy, futility)
        return Tally(replicates, efficacy, futility, sums, int(covered))
