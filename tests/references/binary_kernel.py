"""Test reference: the former general numba kernel for binary endpoints (posterior and
predictive probabilities per study). The library simulates per study with the generic
study loop (:mod:`octrial.simulation.generic`); this independent numba implementation
stays as a reference the table kernel must agree with study by study.

Where the table kernel looks decisions up on the response lattice, this kernel computes
them for each simulated study as the analysis would: the beta-mixture posterior after x
responses in n subjects, B = Pr(rate beyond the benchmark | data) by the regularized
incomplete beta (:mod:`octrial.simulation.special`), and the predictive probability of
final success as the beta-binomial-weighted sum over the remaining subjects' responses
(Lee & Liu 2008), each final outcome judged by its own posterior probability. It draws
the same increments from the same random words as the table kernel, so on any binary
design the two must reach the same decision in every study; the tests hold them to that.

Two arms: B = Pr(p_X - p_Y > d | data) by the same tanh-sinh quadrature as the decision
tables (:func:`octrial.endpoints.binary.prob_difference_exceeds`: the same nodes, step
halving to 1e-11), per study, skipping nodes whose weighted density is below e^-60 of
the largest. Predictive futility for two arms would need a double sum of such
quadratures per study and is not offered here (the table kernel covers it).
"""

from __future__ import annotations

import math
from typing import Any

import numba
import numpy as np

from octrial.design.model import Design
from octrial.rules.lattice import DECISION_TOLERANCE
from octrial.simulation.base import Simulator, Tally
from octrial.simulation.beta_difference import (
    QUADRATURE_TOLERANCE,
    prob_difference_exceeds,
    quadrature_nodes,
)
from octrial.simulation.draws import DrawTables, draw
from octrial.simulation.estimates import add_estimate
from octrial.simulation.special import betainc_pair, log_beta, normalise_log_weights

NONE = -1


def unsupported(design: Design) -> str | None:
    """Why the general binary kernel cannot simulate ``design``, or ``None``."""
    if design.family.on_grid(design):
        return ("the general binary kernel needs beta or beta-mixture priors on a rate "
                "difference (posteriors on a grid: the table kernel simulates these designs)")
    if design.two_arm and any(v is not None for v in design.looks.futility_predictive):
        return ("the general binary kernel has no two-arm predictive futility (the table "
                "kernel has)")
    return None


@numba.njit(cache=True)
def _posterior_weights(weights, a, b, x, n, out):
    """Posterior mixture weights after x responses in n subjects, into ``out``."""
    for j in range(weights.size):
        out[j] = (math.log(weights[j]) + log_beta(a[j] + x, b[j] + n - x)
                  - log_beta(a[j], b[j]))
    normalise_log_weights(out)


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
            (stops_efficacy if eff else stops_futility)[k] += 1
            if has_prior:
                _posterior_weights(weights, a, b, x, n[k], w)
                mean = 0.0
                cdf = 0.0
                for j in range(weights.size):
                    aj, bj = a[j] + x, b[j] + n[k] - x
                    mean += w[j] * aj / (aj + bj)
                    cdf += w[j] * betainc_pair(aj, bj, truth)[0]
                covered += add_estimate(mean - truth, cdf, tail, sums)
            break
    return covered


@numba.njit(cache=True)
def _posterior(weights, a, b, x, n, w, a_post, b_post):
    _posterior_weights(weights, a, b, x, n, w)
    for j in range(weights.size):
        a_post[j] = a[j] + x
        b_post[j] = b[j] + n - x


@numba.njit(cache=True)
def two_arm_studies(words, n_t, n_c, weights_t, a_t, b_t, weights_c, a_c, b_c, shift_d,
                    higher, efficacy, futility, has_prior, truth_difference, tail, tol,
                    log_u_nodes, log_1mu_nodes, log_w_nodes, level_start,
                    bounds, t_start, t_length, guide, guide_start, shift,
                    stops_efficacy, stops_futility, sums):
    """Simulate two-arm studies with posterior-probability rules (see
    :func:`one_arm_studies` for the outputs)."""
    n_studies, n_looks, _ = words.shape
    wt, wc = np.empty(weights_t.size), np.empty(weights_c.size)
    at_post, bt_post = np.empty(weights_t.size), np.empty(weights_t.size)
    ac_post, bc_post = np.empty(weights_c.size), np.empty(weights_c.size)
    covered = 0
    last = n_looks - 1
    for r in range(n_studies):
        x_t = 0
        x_c = 0
        for k in range(n_looks):
            x_t += draw(words[r, k, 0], 2 * k, bounds, t_start, t_length, guide, guide_start,
                        shift)
            x_c += draw(words[r, k, 1], 2 * k + 1, bounds, t_start, t_length, guide,
                        guide_start, shift)
            _posterior(weights_t, a_t, b_t, x_t, n_t[k], wt, at_post, bt_post)
            _posterior(weights_c, a_c, b_c, x_c, n_c[k], wc, ac_post, bc_post)
            if higher:
                benefit = prob_difference_exceeds(wt, at_post, bt_post, wc, ac_post, bc_post,
                                                  shift_d, log_u_nodes, log_1mu_nodes,
                                                  log_w_nodes, level_start,
                                                  QUADRATURE_TOLERANCE)
            else:
                benefit = prob_difference_exceeds(wc, ac_post, bc_post, wt, at_post, bt_post,
                                                  shift_d, log_u_nodes, log_1mu_nodes,
                                                  log_w_nodes, level_start,
                                                  QUADRATURE_TOLERANCE)
            eff = not math.isnan(efficacy[k]) and benefit >= efficacy[k] - tol
            fut = not math.isnan(futility[k]) and benefit < futility[k] - tol
            if k == last:
                fut = not eff
            if not (eff or fut):
                continue
            (stops_efficacy if eff else stops_futility)[k] += 1
            if has_prior:
                mean = 0.0
                for j in range(wt.size):
                    mean += wt[j] * at_post[j] / (at_post[j] + bt_post[j])
                for j in range(wc.size):
                    mean -= wc[j] * ac_post[j] / (ac_post[j] + bc_post[j])
                cdf = 1.0 - prob_difference_exceeds(
                    wt, at_post, bt_post, wc, ac_post, bc_post, truth_difference,
                    log_u_nodes, log_1mu_nodes, log_w_nodes, level_start,
                    QUADRATURE_TOLERANCE)
                covered += add_estimate(mean - truth_difference, cdf, tail, sums)
            break
    return covered


def _thresholds(values: tuple[float | None, ...]) -> np.ndarray:
    return np.array([np.nan if v is None else v for v in values], dtype=float)


def _counts(values: tuple[int | None, ...] | None, k: int) -> np.ndarray:
    if values is None:
        return np.full(k, NONE, dtype=np.int64)
    return np.array([NONE if v is None else v for v in values], dtype=np.int64)


class BinarySimulator(Simulator):
    """Binary studies by the general kernel (see module docstring)."""

    kernel = "general"

    def __new__(cls, design: Design, truth: tuple[float, ...], level: float) -> Simulator:
        if design.two_arm and cls is BinarySimulator:
            return super().__new__(TwoArmBinarySimulator)
        return super().__new__(cls)

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


class TwoArmBinarySimulator(BinarySimulator):
    """Two-arm binary studies with posterior-probability rules, by the general kernel."""

    def __init__(self, design: Design, truth: tuple[float, ...], level: float) -> None:
        family = design.family
        looks = design.looks
        self.looks = looks.count
        n = np.array(looks.per_arm, dtype=np.int64)
        increments = np.diff(n, axis=0, prepend=0)
        self.tables = DrawTables.from_pmfs(
            [family.increment_pmf(design, truth[j], int(m), int(m) + 1)
             for row in increments for j, m in enumerate(row)])
        treatment, control = (arm.prior for arm in design.arms)
        hypothesis = design.hypothesis
        self.arguments = (
            n[:, 0].copy(), n[:, 1].copy(),
            np.array(treatment.weights), np.array(treatment.a), np.array(treatment.b),
            np.array(control.weights), np.array(control.a), np.array(control.b),
            float(hypothesis.shift), hypothesis.better == "higher",
            _thresholds(looks.efficacy), _thresholds(looks.futility), True,
            float(family.target_value(hypothesis, truth)), (1.0 - level) / 2.0,
            DECISION_TOLERANCE, *quadrature_nodes(),
        )
        self.has_prior = True

    def simulate(self, rng: np.random.Generator, replicates: int) -> Tally:
        words = rng.bit_generator.random_raw(replicates * self.looks * 2).reshape(
            replicates, self.looks, 2)
        efficacy = np.zeros(self.looks, dtype=np.int64)
        futility = np.zeros(self.looks, dtype=np.int64)
        sums = np.zeros(3)
        covered = two_arm_studies(words, *self.arguments, *self.tables.arrays(), efficacy,
                                  futility, sums)
        return Tally(replicates, efficacy, futility, sums, int(covered))
