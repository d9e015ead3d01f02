"""The common suite every endpoint family must pass (in the manner of scikit-learn's
``check_estimator``): check functions that take a design of the family and read only the
family protocol (:class:`octrial.endpoints.base.Family`), so a new family gets them by
being registered. tests/test_family_suite.py runs them over every family in
:data:`octrial.endpoints.FAMILIES` and the test-only toy family.

Each check names the outside source it compares with. Run time is kept to a few seconds
per family: a few thousand draws, one-dimensional quadrature, small designs.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
import pytest
from scipy import integrate, stats

from octrial.errors import DesignError
from octrial.rules.stop import EFFICACY, Rule
from tests.helpers import build

Z = 4.0
"""Monte Carlo comparisons allow 4 standard errors (two-sided normal tail 6.3e-5;
common practice)."""

P_MIN = 1e-3
"""Goodness-of-fit tests must not reject at this level (common practice)."""


def _increments(design: Any, arm: int) -> list[int]:
    n = [per[arm] for per in design.looks.per_arm]
    return [b - a for a, b in zip([0, *n[:-1]], n, strict=True)]


def _is_discrete(dist: Any) -> bool:
    return isinstance(dist.dist, stats.rv_discrete)


def _prior_draws(family: Any, prior: Any, rng: np.random.Generator, size: int) -> np.ndarray:
    """Draws from the prior mixture of ``family.prior_components`` (component by weight,
    then the component's own scipy sampler)."""
    parts = family.prior_components(prior)
    weights = np.array([w for w, _ in parts])
    which = rng.choice(len(parts), size=size, p=weights / weights.sum())
    out = np.empty(size)
    for j, (_, dist) in enumerate(parts):
        mask = which == j
        out[mask] = dist.rvs(size=int(mask.sum()), random_state=rng)
    return out


def _prior_pdf(family: Any, prior: Any) -> Callable[[float], float]:
    parts = family.prior_components(prior)
    return lambda theta: sum(w * dist.pdf(theta) for w, dist in parts)


def _likelihood(dist: Any, x: float) -> float:
    return float(dist.pmf(x) if _is_discrete(dist) else dist.pdf(x))


def _analysis_prior(design: Any) -> Any:
    return design.arms[0].prior


def check_sampler(family: Any, design: Any) -> None:
    """The family's sampler (:meth:`draw_statistics`) against its scipy distribution
    (:meth:`increment_distribution`) for every arm's first and last increments at every
    scenario: chi-square goodness of fit over cells with at least 5 expected (discrete)
    or Kolmogorov-Smirnov (continuous), 4000 draws, ``scipy.stats``. The distribution's
    mean must also be n times the mean of one subject's (an identity of sums)."""
    rng = np.random.default_rng(20261205)
    for truth in design.scenarios.values:
        for arm in range(len(design.arms)):
            steps = _increments(design, arm)
            for n in {steps[0], steps[-1]}:
                dist = family.increment_distribution(design, arm, truth[arm], n)
                one = family.increment_distribution(design, arm, truth[arm], 1)
                assert dist.mean() == pytest.approx(n * one.mean(), rel=1e-12)
                draws = family.draw_statistics(design, arm, truth[arm], n, rng, 4000)
                assert draws.shape == (4000,)
                if _is_discrete(dist):
                    lo, hi = (int(v) for v in dist.ppf([1e-9, 1 - 1e-9]))
                    support = np.arange(lo, hi + 1)
                    expected = dist.pmf(support) * draws.size
                    observed = np.array([np.count_nonzero(draws == s) for s in support])
                    assert np.all(draws == np.round(draws))
                    keep = expected >= 5
                    # cells with few expected draws pooled into one
                    obs = np.append(observed[keep], draws.size - observed[keep].sum())
                    exp = np.append(expected[keep], draws.size - expected[keep].sum())
                    if exp[-1] < 5:
                        obs, exp = obs[:-1], exp[:-1] * obs[:-1].sum() / exp[:-1].sum()
                    if obs.size < 2:
                        assert obs[0] == draws.size
                        continue
                    p = stats.chisquare(obs, exp).pvalue
                else:
                    p = stats.kstest(draws, dist.cdf).pvalue
                assert p > P_MIN, (family.name, truth, arm, n, p)


def check_benefit_against_quadrature(family: Any, design: Any) -> None:
    """One arm: the posterior probability of benefit (:meth:`benefit_at`) against the
    ratio of integrals of prior x likelihood over the benefit region and the whole
    parameter range (``scipy.integrate.quad``; prior from :meth:`prior_components`,
    likelihood from :meth:`increment_distribution`), at statistics from the 10th, 50th
    and 90th percentiles of the first and last looks' data at each scenario, to 1e-7."""
    assert not design.two_arm
    prior = _analysis_prior(design)
    h = design.hypothesis
    pdf = _prior_pdf(family, prior)
    parts = family.prior_components(prior)
    lo = min(d.ppf(1e-12) for _, d in parts)
    hi = max(d.isf(1e-12) for _, d in parts)
    lo, hi = max(lo, family.parameter_range[0]), min(hi, family.parameter_range[1])
    for truth in design.scenarios.values:
        for n in (design.looks.per_arm[0], design.looks.per_arm[-1]):
            data = family.increment_distribution(design, 0, truth[0], n[0])
            for q in (0.1, 0.5, 0.9):
                x = float(data.ppf(q))

                def post(theta: float, x: float = x, n: int = n[0]) -> float:
                    return pdf(theta) * _likelihood(
                        family.increment_distribution(design, 0, theta, n), x)

                pieces = [integrate.quad(post, a, b, epsabs=0, epsrel=1e-11, limit=400)[0]
                          for a, b in ((lo, h.benchmark), (h.benchmark, hi))]
                total = sum(pieces)
                expected = pieces[1] if h.better == "higher" else pieces[0]
                value = float(family.benefit_at(design, (np.array([x]),), n)[0])
                assert value == pytest.approx(expected / total, abs=1e-7), (
                    family.name, truth, n, x)


def check_predictive_by_continuation(family: Any, design: Any) -> None:
    """One arm: the predictive probability of final success (:meth:`predictive_at`)
    against simulated continuations of the study (the definition in Lee & Liu 2008):
    rates from the prior weighted by the likelihood of the data so far (self-normalised
    importance sampling; e.g. Owen, Monte Carlo theory, methods and examples, ch. 9,
    recalled from memory), the remaining subjects' statistic drawn from
    :meth:`increment_distribution`, final success judged by :meth:`benefit_at` and the
    stop rule; within 4 standard errors of the weighted mean (delta method)."""
    assert not design.two_arm
    if not family.offers_predictive():
        pytest.skip(f"{family.name} offers no predictive probability")
    rng = np.random.default_rng(7)
    rule = Rule.of(design.looks)
    prior = _analysis_prior(design)
    n_now, n_end = design.looks.per_arm[0], design.looks.per_arm[-1]
    truth = design.scenarios.values[0][0]
    data = family.increment_distribution(design, 0, truth, n_now[0])
    draws = 40_000
    for q in (0.25, 0.5, 0.75):
        x = float(data.ppf(q))
        value = float(family.predictive_at(design, (np.array([x]),), n_now)[0])
        theta = _prior_draws(family, prior, rng, draws)
        dist = family.increment_distribution(design, 0, theta, n_now[0])
        weight = dist.pmf(x) if _is_discrete(dist) else dist.pdf(x)
        future = family.increment_distribution(design, 0, theta, n_end[0] - n_now[0])
        final = x + np.asarray(future.rvs(random_state=rng))
        success = rule.decide_many(rule.last, family.benefit_at(design, (final,),
                                                                 n_end)) == EFFICACY
        total = weight.sum()
        estimate = float(weight @ success / total)
        se = math.sqrt(float(np.sum(weight**2 * (success - estimate) ** 2))) / total
        assert abs(value - estimate) <= Z * se + 1e-9, (family.name, x, value, estimate, se)


def check_loop_against_exact(family: Any, design: Any) -> None:
    """The generic study loop (:class:`octrial.simulation.generic.StudyLoop`, whatever
    simulator the family prefers) against the exact engine where one applies: every
    per-look stopping probability within 4 standard errors sqrt(p (1 - p) / R) of the
    exact value, or, where R p (1 - p) < 5, not rejected by the exact two-sided binomial
    test at 6.3e-5 (``scipy.stats.binomtest``); 4000 studies per scenario. The exact
    engines are themselves checked against path enumeration, published constants and
    scipy integration (tests/test_exact_engine.py, tests/test_normal_engine.py)."""
    from octrial.engines import choose
    from octrial.engines.monte_carlo import batch_generator
    from octrial.errors import InputError
    from octrial.evaluation import compute
    from octrial.simulation.generic import StudyLoop

    try:
        choose(design, "exact")
    except InputError:
        pytest.skip(f"no exact engine for this {family.name} design")
    if (reason := family.simulation_unsupported(design)) and "predictive" in reason:
        pytest.skip(reason)
    exact = compute(design, "exact", assurance=False).oc
    looks = [c for c in exact.columns if c.startswith("look") and not c.endswith("_se")]
    replicates = 4000
    for i, truth in enumerate(design.scenarios.values):
        loop = StudyLoop(design, tuple(truth), design.simulation.interval_level)
        tally = loop.simulate(batch_generator(99, i, 0), replicates)
        counts = np.concatenate([[e, f] for e, f in zip(tally.efficacy, tally.futility,
                                                        strict=True)])
        for column, count in zip(looks, counts, strict=True):
            p = float(exact[column].iloc[i])
            if replicates * p * (1 - p) >= 5:
                z = abs(count / replicates - p) / math.sqrt(p * (1 - p) / replicates)
                assert z <= Z, (family.name, truth, column, count, p)
            elif p in (0.0, 1.0):
                assert count == round(p * replicates), (family.name, truth, column)
            else:
                assert stats.binomtest(int(count), replicates, p).pvalue > 6.3e-5, (
                    family.name, truth, column, count, p)


def check_sbc(family: Any, design: Any) -> None:
    """Simulation-based calibration of the family's posterior (Cook, Gelman & Rubin
    2006; Talts et al. 2018): with the rate drawn from the analysis prior and the data
    from :meth:`increment_distribution`, the posterior distribution function at the true
    value (:meth:`estimate_at`) is uniform on (0, 1), the continuous limit of the rank
    statistic. 2000 replications at the first and last looks' sizes; Kolmogorov-Smirnov
    and a 10-cell chi-square against the uniform, each at p > 1e-3 (``scipy.stats``).
    One arm; the target is the arm's parameter."""
    assert not design.two_arm
    rng = np.random.default_rng(11)
    prior = _analysis_prior(design)
    replications = 2000
    for n in (design.looks.per_arm[0], design.looks.per_arm[-1]):
        theta = _prior_draws(family, prior, rng, replications)
        x = np.asarray(family.increment_distribution(design, 0, theta, n[0]).rvs(
            random_state=rng), dtype=float)
        u = np.empty(replications)
        for i in range(replications):
            found = family.estimate_at(design, (x[i: i + 1],), n, float(theta[i]))
            assert found is not None, f"{family.name} offers no posterior estimates"
            u[i] = found[1][0]
        assert stats.kstest(u, "uniform").pvalue > P_MIN, (family.name, n)
        counts = np.histogram(u, bins=10, range=(0.0, 1.0))[0]
        assert stats.chisquare(counts).pvalue > P_MIN, (family.name, n, counts)


GENERIC_BAD_INPUTS: list[tuple[str, Any, str]] = [
    ("endpoint__better", "sideways", "endpoint.better"),
    ("endpoint__colour", "red", "endpoint.colour"),
    ("hypothesis__benchmark", "high", "hypothesis.benchmark"),
    ("arms__treatment__prior__distribution", "uniform-ish",
     "arms.treatment.prior.distribution"),
    ("looks__n", [0, 5], "looks.n"),
    ("looks__efficacy", 1.5, "looks.efficacy"),
    ("scenarios__treatment", ["many"], "scenarios.treatment"),
]
"""Bad values every family must refuse: (dotted key, value, key path the message must
name). Families add their own cases beside their design in tests/test_family_suite.py."""


def check_bad_inputs(family: Any, data: dict[str, Any],
                     extra: list[tuple[str, Any, str]]) -> None:
    """Each bad design-file value gives a :class:`~octrial.errors.DesignError` that
    names the key path (the contract of PRODUCT.md: file, key, expected, got), for the
    generic table above and the family's own cases."""
    build(data)  # the base design is valid
    for dotted, value, key in [*GENERIC_BAD_INPUTS, *extra]:
        with pytest.raises(DesignError) as info:
            build(data, **{dotted: value})
        text = str(info.value)
        assert key in text and "expected" in text, (family.name, dotted, text)


CHECKS: list[Callable[[Any, Any], None]] = [
    check_sampler, check_benefit_against_quadrature, check_predictive_by_continuation,
    check_loop_against_exact, check_sbc,
]
"""The checks taking (family, design); :func:`check_bad_inputs` takes the design data."""


def check_two_arm_benefit_against_quadrature(family: Any, design: Any) -> None:
    """Two arms with a prior per arm: the posterior probability of benefit against the
    nested integral of the two posteriors (prior x likelihood, each normalised) over the
    region where the effect (:meth:`Family.effect`) is positive: the outer integral over
    the control parameter by ``scipy.integrate.quad``, the inner one as the treatment
    posterior's distribution function (``scipy.integrate.cumulative_simpson`` on 200 001
    points) at the boundary found by ``scipy.optimize.brentq``; at the median data of the
    first look at the last scenario, to 1e-6."""
    from scipy import optimize

    assert design.two_arm
    if family.prior_on_effect(design.endpoint, True):
        pytest.skip(f"{family.name}: the prior is on the effect, not per arm")
    h = design.hypothesis
    truth, n = design.scenarios.values[-1], design.looks.per_arm[0]
    xs, ranges, parts = [], [], []
    for j, arm in enumerate(design.arms):
        parts.append(family.prior_components(arm.prior))
        lo = max(min(d.ppf(1e-12) for _, d in parts[j]), family.parameter_range[0])
        hi = min(max(d.isf(1e-12) for _, d in parts[j]), family.parameter_range[1])
        ranges.append((lo, hi))
        xs.append(float(family.increment_distribution(design, j, truth[j], n[j]).ppf(0.5)))

    def density(j: int, theta: Any) -> Any:
        dist = family.increment_distribution(design, j, theta, n[j])
        like = dist.pmf(xs[j]) if _is_discrete(dist) else dist.pdf(xs[j])
        return sum(w * d.pdf(theta) for w, d in parts[j]) * like

    (lo_t, hi_t), (lo_c, hi_c) = ranges
    grid = np.linspace(lo_t, hi_t, 200_001)
    cdf = integrate.cumulative_simpson(density(0, grid), x=grid, initial=0.0)
    cdf /= cdf[-1]
    z_c = integrate.quad(lambda c: float(density(1, c)), lo_c, hi_c, epsabs=0,
                         epsrel=1e-11, limit=400)[0]

    def treatment_share(theta_c: float) -> float:
        def effect(theta_t: float) -> float:
            return family.effect(h, (theta_t, theta_c))

        start = lo_t + 1e-12 * (hi_t - lo_t)
        ends = effect(start), effect(hi_t)
        if (ends[0] > 0) == (ends[1] > 0):
            return 1.0 if ends[0] > 0 else 0.0
        below = float(np.interp(optimize.brentq(effect, start, hi_t, xtol=1e-14), grid, cdf))
        return 1.0 - below if ends[1] > 0 else below

    expected = integrate.quad(lambda c: float(density(1, c)) * treatment_share(c), lo_c,
                              hi_c, epsabs=1e-11, epsrel=1e-9, limit=200)[0] / z_c
    value = float(family.benefit_at(design, tuple(np.array([x]) for x in xs), n)[0])
    assert value == pytest.approx(expected, abs=1e-6), (family.name, xs, value, expected)


TWO_ARM_CHECKS: list[Callable[[Any, Any], None]] = [
    check_sampler, check_two_arm_benefit_against_quadrature,
]
"""The checks for a family's two-arm design, where it has one."""
