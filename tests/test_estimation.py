"""Exact bias, RMSE and coverage at the stopping look, against path enumeration.

The reference walks every outcome path (scipy.stats.binom probabilities), applies the
rule, and at the stopping point takes the posterior mean (``scipy.stats.beta.mean``) and
the equal-tailed interval's end points (``scipy.stats.beta.ppf``; two arms: quantiles of
p_T - p_C by ``scipy.optimize.brentq`` on a ``scipy.integrate.quad`` CDF). It shares no
code with octrial, and it uses the interval's end points where octrial uses the posterior
CDF at the truth.
"""

from __future__ import annotations

import functools
import itertools

import numpy as np
import pytest
from scipy import integrate, optimize, stats

from octrial.evaluation import compute
from tests.helpers import ONE_ARM, TWO_ARM, build


def one_arm_paths(looks: list[int], truth: float):
    """Every outcome path of a one-arm binary design: (probability by scipy.stats.binom,
    [(look, n, responses so far) per look])."""
    sizes = np.diff([0, *looks])
    for path in itertools.product(*(range(s + 1) for s in sizes)):
        prob = np.prod([stats.binom.pmf(y, s, truth) for y, s in zip(path, sizes, strict=True)])
        yield prob, [(k, n, int(x)) for k, (n, x) in enumerate(zip(looks, np.cumsum(path),
                                                                    strict=True))]


def enumerate_one_arm(prior, looks, efficacy, futility, p0, truth, level):
    a0, b0 = prior
    moments, coverage = np.zeros(3), 0.0
    for prob, path in one_arm_paths(looks, truth):
        for k, n, x in path:
            a, b = a0 + x, b0 + n - x
            benefit = stats.beta.sf(p0, a, b)
            last = k == len(looks) - 1
            if last or benefit >= efficacy[k] or benefit < futility[k]:
                e = stats.beta.mean(a, b) - truth
                moments += prob * np.array([e, e**2, e**4])
                lo, hi = stats.beta.ppf([(1 - level) / 2, (1 + level) / 2], a, b)
                coverage += prob * (lo <= truth <= hi)
                break
    return moments, coverage


@pytest.mark.parametrize("truth", [0.15, 0.3, 0.5])
@pytest.mark.parametrize("level", [0.95, 0.8])
def test_exact_estimation_matches_enumeration(truth: float, level: float) -> None:
    looks, efficacy, futility = [5, 10, 15], [0.99, 0.97, 0.9], [0.1, 0.2, -1.0]
    design = build(ONE_ARM, arms__treatment__prior={"distribution": "beta", "a": 0.6,
                                                    "b": 1.4},
                   hypothesis__benchmark=0.25, looks__n=looks, looks__efficacy=efficacy,
                   looks__futility=futility[:2], scenarios__treatment=[truth],
                   simulation={"interval_level": level})
    oc = compute(design).oc
    moments, coverage = enumerate_one_arm((0.6, 1.4), looks, efficacy, futility, 0.25,
                                          truth, level)
    assert oc["bias"].iloc[0] == pytest.approx(moments[0], abs=1e-12)
    assert oc["rmse"].iloc[0] == pytest.approx(np.sqrt(moments[1]), abs=1e-12)
    assert oc["coverage"].iloc[0] == pytest.approx(coverage, abs=1e-12)
    assert oc["bias_se"].iloc[0] == oc["coverage_se"].iloc[0] == 0.0


def two_arm_paths(per_arm: list[int], truth: tuple[float, float]):
    """Every outcome path of a two-arm binary design with ``per_arm`` subjects per arm at
    each look: (probability by scipy.stats.binom, [(look, n, x_t, x_c) per look])."""
    sizes = np.diff([0, *per_arm])
    for path in itertools.product(*(range(s + 1) for s in sizes for _ in (0, 1))):
        incs = np.array(path).reshape(len(sizes), 2)
        prob = np.prod([stats.binom.pmf(incs[k, 0], s, truth[0]) * stats.binom.pmf(
            incs[k, 1], s, truth[1]) for k, s in enumerate(sizes)])
        counts = np.cumsum(incs, axis=0)
        yield prob, [(k, n, int(counts[k, 0]), int(counts[k, 1]))
                     for k, n in enumerate(per_arm)]


@functools.cache
def difference_cdf(a_t, b_t, a_c, b_c, d):
    """Pr(p_T - p_C <= d) by quad (scipy.integrate)."""
    lo, hi = max(0.0, -d), min(1.0, 1.0 - d)
    value = integrate.quad(lambda u: stats.beta.pdf(u, a_c, b_c) * stats.beta.sf(u + d, a_t, b_t),
                           lo, hi, epsabs=1e-13, limit=200)[0]
    return 1.0 - value - (stats.beta.cdf(-d, a_c, b_c) if d < 0 else 0.0)


@functools.cache
def difference_interval(a_t, b_t, a_c, b_c, level):
    """Equal-tailed interval of p_T - p_C by root finding (scipy.optimize.brentq)."""
    return tuple(optimize.brentq(lambda d, q=q: difference_cdf(a_t, b_t, a_c, b_c, d) - q,
                                 -1 + 1e-12, 1 - 1e-12, xtol=1e-13)
                 for q in ((1 - level) / 2, (1 + level) / 2))


def test_two_arm_exact_estimation_matches_enumeration() -> None:
    per_arm, efficacy, futility, level = [3, 6], [0.95, 0.9], [0.2], 0.9
    truth = (0.55, 0.3)
    design = build(TWO_ARM, looks__n=[6, 12], looks__efficacy=efficacy,
                   looks__futility=futility, simulation={"interval_level": level},
                   scenarios={"control": [truth[1]], "treatment": [truth[0]]})
    oc = compute(design).oc
    delta = truth[0] - truth[1]
    moments, coverage = np.zeros(3), 0.0
    for prob, looks in two_arm_paths(per_arm, truth):
        for k, n, x_t, x_c in looks:
            shapes = (1 + x_t, 1 + n - x_t, 1 + x_c, 1 + n - x_c)
            benefit = 1.0 - difference_cdf(*shapes, 0.0)
            if k == len(per_arm) - 1 or benefit >= efficacy[k] or benefit < futility[k]:
                e = stats.beta.mean(*shapes[:2]) - stats.beta.mean(*shapes[2:]) - delta
                moments += prob * np.array([e, e**2, e**4])
                lo, hi = difference_interval(*shapes, level)
                coverage += prob * (lo <= delta <= hi)
                break
    assert oc["bias"].iloc[0] == pytest.approx(moments[0], abs=1e-10)
    assert oc["rmse"].iloc[0] == pytest.approx(np.sqrt(moments[1]), abs=1e-10)
    assert oc["coverage"].iloc[0] == pytest.approx(coverage, abs=1e-10)


def test_count_rules_without_priors_have_no_estimation_columns() -> None:
    design = build(ONE_ARM, arms__treatment__prior=None,
                   looks={"n": [10, 29], "futility_count": [1, "none"],
                          "efficacy_count": ["none", 6]})
    for method in ("exact", "monte-carlo"):
        oc = compute(design, method).oc
        assert not {"bias", "rmse", "coverage"} & set(oc.columns)


# -- posteriors on a grid --------------------------------------------------------------


@functools.cache
def logit_normal_posterior(mean: float, sd: float, n: int, x: int):
    """Posterior mean of p and its CDF (a function) under a logit-normal prior after x
    responses in n, by scipy.integrate.quad over the logit (independent of the grid)."""
    def density(t: float) -> float:
        p = 1 / (1 + np.exp(-t))
        return stats.norm.pdf(t, mean, sd) * stats.binom.pmf(x, n, p)

    lo, hi = mean - 12 * sd, mean + 12 * sd
    opts = {"epsabs": 0.0, "epsrel": 1e-12, "limit": 400}
    total = integrate.quad(density, lo, hi, **opts)[0]
    first = integrate.quad(lambda t: density(t) / (1 + np.exp(-t)), lo, hi, **opts)[0]

    def cdf(p: float) -> float:
        return integrate.quad(density, lo, np.log(p / (1 - p)), **opts)[0] / total
    return first / total, cdf


@pytest.mark.parametrize("truth", [0.2, 0.45])
def test_grid_estimation_matches_enumeration_with_quad(truth: float) -> None:
    # Source: path enumeration (scipy.stats.binom) with the logit-normal posterior by
    # scipy.integrate.quad at each stopping point.
    looks, efficacy, futility, level = [6, 12, 18], [0.99, 0.97, 0.9], [0.1, 0.2], 0.9
    prior = (-1.0, 1.2)
    design = build(ONE_ARM, arms__treatment__prior={"distribution": "logit-normal",
                                                    "logit_mean": prior[0],
                                                    "logit_sd": prior[1]},
                   hypothesis__benchmark=0.25, looks__n=looks, looks__efficacy=efficacy,
                   looks__futility=futility, scenarios__treatment=[truth],
                   simulation={"interval_level": level})
    oc = compute(design).oc
    rule = design.family.decision_rule(design)
    moments, coverage = np.zeros(3), 0.0
    for prob, path in one_arm_paths(looks, truth):
        for k, n, x in path:
            # the decision is read from octrial's table (checked against quad elsewhere)
            table = rule.looks[k]
            if table.efficacy[x] or table.futility[x]:
                mean, cdf = logit_normal_posterior(*prior, n, x)
                e = mean - truth
                moments += prob * np.array([e, e**2, e**4])
                coverage += prob * ((1 - level) / 2 <= cdf(truth) <= (1 + level) / 2)
                break
    assert abs(moments[0]) > 1e-3  # a shrinking prior: the check has something to find
    assert oc["bias"].iloc[0] == pytest.approx(moments[0], abs=1e-8)
    assert oc["rmse"].iloc[0] == pytest.approx(np.sqrt(moments[1]), abs=1e-8)
    assert oc["coverage"].iloc[0] == pytest.approx(coverage, abs=1e-8)


def test_grid_two_arm_odds_ratio_estimation_against_beta_identities() -> None:
    # Two arms on the odds-ratio scale with beta priors (posteriors on the grid). The
    # target is the log odds ratio: E[logit p] = digamma(a) - digamma(b) under Beta(a, b)
    # (identity: E[log p] = digamma(a) - digamma(a + b)), and Pr(log OR <= t) by
    # scipy.integrate.quad over the control rate; enumeration of every path as above.
    from scipy import special

    per_arm, efficacy, futility, level = [4, 8], [0.97, 0.95], [0.15], 0.8
    truth = (0.6, 0.35)
    design = build(TWO_ARM, hypothesis__comparison="odds-ratio", looks__n=[8, 16],
                   looks__efficacy=efficacy, looks__futility=futility,
                   simulation={"interval_level": level},
                   scenarios={"control": [truth[1]], "treatment": [truth[0]]})
    oc = compute(design).oc
    rule = design.family.decision_rule(design)
    target = special.logit(truth[0]) - special.logit(truth[1])

    @functools.cache
    def summaries(x_t: int, x_c: int, n: int) -> tuple[float, float]:
        a_t, b_t, a_c, b_c = 1 + x_t, 1 + n - x_t, 1 + x_c, 1 + n - x_c
        mean = (special.digamma(a_t) - special.digamma(b_t)
                - special.digamma(a_c) + special.digamma(b_c))

        def integrand(u: float) -> float:  # Pr(logit p_T <= logit u + target)
            p = special.expit(special.logit(u) + target)
            return stats.beta.pdf(u, a_c, b_c) * stats.beta.cdf(p, a_t, b_t)
        cdf = integrate.quad(integrand, 0, 1, epsabs=1e-14, limit=200)[0]
        return mean, cdf

    moments, coverage = np.zeros(3), 0.0
    for prob, looks in two_arm_paths(per_arm, truth):
        for k, n, x_t, x_c in looks:
            table = rule.looks[k]
            if table.efficacy[x_t, x_c] or table.futility[x_t, x_c]:
                mean, cdf = summaries(x_t, x_c, n)
                e = mean - target
                moments += prob * np.array([e, e**2, e**4])
                coverage += prob * ((1 - level) / 2 <= cdf <= (1 + level) / 2)
                break
    assert oc["bias"].iloc[0] == pytest.approx(moments[0], abs=1e-7)
    assert oc["rmse"].iloc[0] == pytest.approx(np.sqrt(moments[1]), abs=1e-7)
    assert oc["coverage"].iloc[0] == pytest.approx(coverage, abs=1e-7)
