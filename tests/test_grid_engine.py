"""The grid engine against closed forms (where both apply) and scipy quadrature."""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import integrate, special, stats

from octrial.cli import main
from octrial.endpoints import binary, count, grid_family
from octrial.errors import NumericalWarning
from octrial.evaluation import compute
from octrial.numerics import parameter_grid as pg
from tests.helpers import ONE_ARM, TWO_ARM, build
from tests.test_count_maths import COUNT_ONE_ARM

COUNT_TWO_ARM = {
    "schema": 1, "name": "count-two-arm",
    "endpoint": {"type": "count", "exposure": 1.0},
    "hypothesis": {"comparison": "ratio", "kind": "non-inferiority", "margin": 0.2},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 2, "rate": 1.5}},
             "control": {"prior": {"distribution": "gamma", "shape": 0.7, "rate": 0.4}}},
    "looks": {"n": [40, 80], "efficacy": [0.99, 0.95]},
    "scenarios": {"control": [1.0], "ratio": [1.0, 1.2]},
}


def test_grid_tails_converge_at_sixth_order() -> None:
    # Source: scipy.stats.norm.sf; halving the step divides the error by about 2^6.
    errors = []
    for points in (101, 201, 401):
        grid = pg.Grid(0.3, 20 / (points - 1), -(points // 2), points // 2)
        post = pg.posterior(grid, lambda t: pg.log_normal_density(t, 0.5, 1.3),
                            lambda t: np.zeros((1, t.size)), with_finer=False)
        errors.append(np.abs(post.survival()[0] - stats.norm.sf(grid.nodes, 0.5, 1.3)).max())
    assert errors[0] / errors[1] > 40 and errors[1] / errors[2] > 40
    assert errors[2] < 1e-10


@pytest.mark.parametrize("better", ["higher", "lower"])
def test_binary_grid_against_beta_closed_form(better: str) -> None:
    # Source: the conjugate beta posterior tail (scipy.special.betainc via BetaPosterior);
    # a beta prior run through the grid must agree within the error the grid reports.
    design = build(ONE_ARM, endpoint__better=better, looks__n=[30, 60],
                   looks__efficacy=[0.99, 0.95],
                   arms__treatment__prior={"distribution": "beta", "a": 0.6, "b": 2.4})
    x = np.arange(61)
    post = grid_family.posterior(design, 0, 60, x)
    value, error = grid_family.benefit(design, (post,))
    exact = binary.update(design.arms[0].prior, 60, x)
    expected = exact.sf(0.2) if better == "higher" else exact.cdf(0.2)
    assert np.max(np.abs(value - expected)) <= max(error, 1e-12)
    assert error < 1e-7


def test_count_grid_against_gamma_closed_forms() -> None:
    # Source: the gamma posterior tail (scipy.special.gammainc) and the Beta identity for
    # the rate ratio (scipy.special.betainc), both run through the grid.
    design = build(COUNT_TWO_ARM)
    x = np.arange(90)
    posts = tuple(grid_family.posterior(design, j, 80, x) for j in (0, 1))
    value, error = grid_family.benefit(design, posts)
    conj = tuple(count.update(design.arms[j].prior, 80.0, x) for j in (0, 1))
    expected = count.prob_ratio(*conj, 1.2, below=True)
    assert np.max(np.abs(value - expected)) <= max(error, 1e-12)
    assert error < 1e-7
    one = build(COUNT_ONE_ARM)
    post = grid_family.posterior(one, 0, 20, np.arange(40))
    value, error = grid_family.benefit(one, (post,))
    expected = count.update(one.arms[0].prior, 10.0, np.arange(40)).cdf(1.2)
    assert np.max(np.abs(value - expected)) <= max(error, 1e-12)


@pytest.mark.parametrize("x", [0, 3, 17, 40])
def test_logit_normal_against_quad(x: int) -> None:
    # Source: scipy.integrate.quad of the logit-normal prior density x binomial likelihood
    # on the rate scale.
    n, p0, mean, sd = 40, 0.25, -1.2, 0.8
    design = build(ONE_ARM, looks__n=[20, 40], looks__efficacy=[0.99, 0.95],
                   hypothesis__benchmark=p0,
                   arms__treatment__prior={"distribution": "logit-normal", "logit_mean": mean,
                                           "logit_sd": sd})

    def density(p: float) -> float:
        prior = stats.norm.pdf(special.logit(p), mean, sd) / (p * (1 - p))
        return prior * stats.binom.pmf(x, n, p)

    points = [p0, special.expit(mean), (x + 0.5) / (n + 1)]
    total = integrate.quad(density, 0, 1, epsabs=1e-300, points=points, limit=400)[0]
    above = integrate.quad(density, p0, 1, epsabs=1e-300, limit=400)[0]
    post = design.family.posterior(design, 0, n, np.array([x]))
    value, error = design.family.benefit(design, (post,))
    assert value[0] == pytest.approx(above / total, abs=max(error, 1e-10))


def test_odds_ratio_against_quad() -> None:
    # Source: scipy.integrate.quad over the control rate of the beta density times the
    # treatment posterior's survival at the rate giving odds ratio c.
    design = build(TWO_ARM, hypothesis__comparison="odds-ratio", hypothesis__margin=0.5,
                   scenarios={"control": [0.3], "odds_ratio": [1.5]})
    post_t = design.family.posterior(design, 0, 20, np.array([9]))
    post_c = design.family.posterior(design, 1, 20, np.array([4]))
    value, error = design.family.benefit(design, (post_t, post_c))
    c = 1.5  # superiority by 0.5 on the odds-ratio scale

    def integrand(u: float) -> float:
        t = c * u / (1 - u) / (1 + c * u / (1 - u))  # rate with odds c x odds(u)
        return stats.beta.pdf(u, 5, 17) * stats.beta.sf(t, 10, 12)

    expected = integrate.quad(integrand, 0, 1, epsabs=1e-14, limit=200)[0]
    assert value[0, 0] == pytest.approx(expected, abs=max(error, 1e-10))


def test_negative_binomial_posterior_and_predictive_against_quad() -> None:
    # Source: scipy.integrate.quad of the gamma prior x the negative binomial likelihood
    # of the total count (sum of n subjects: size n / dispersion), and the predictive pmf
    # as the integral of scipy.stats.nbinom over that posterior.
    design = build(COUNT_ONE_ARM, endpoint={"type": "count", "exposure": 0.5,
                                            "model": "negative-binomial", "dispersion": 0.8})
    n, s, m = 20, 13, 10
    size, e = n / 0.8, 0.5

    def density(lam: float) -> float:
        mean = lam * e * n
        return stats.gamma.pdf(lam, 1, scale=1.0) * stats.nbinom.pmf(s, size, size / (size + mean))

    total = integrate.quad(density, 0, np.inf, epsabs=1e-300, limit=400)[0]
    below = integrate.quad(density, 0, 1.2, epsabs=1e-300, limit=400)[0]
    post = design.family.posterior(design, 0, n, np.array([s]))
    value, error = design.family.benefit(design, (post,))
    assert value[0] == pytest.approx(below / total, abs=max(error, 1e-10))
    got = design.family.predictive_pmf(design, post, m, 30)[0]
    r = m / 0.8
    for y in (0, 4, 12):
        pmf = integrate.quad(lambda lam, y=y: density(lam) / total * stats.nbinom.pmf(
            y, r, r / (r + lam * e * m)), 0, np.inf, epsabs=1e-14, limit=400)[0]
        assert got[y] == pytest.approx(pmf, abs=1e-9)


def test_grid_design_boundaries_against_quad() -> None:
    # Source: the efficacy bound of each look found by scipy.integrate.quad posterior
    # probabilities at every count (independent of the grid).
    mean, sd, p0 = -1.0, 1.5, 0.2
    looks = [15, 30, 45]
    thresholds = [0.999, 0.99, 0.95]
    design = build(ONE_ARM, looks__n=looks, looks__efficacy=thresholds, looks__futility=None,
                   arms__treatment__prior={"distribution": "logit-normal", "logit_mean": mean,
                                           "logit_sd": sd})
    ev = compute(design)

    def tail(n: int, x: int) -> float:
        f = lambda t: stats.norm.pdf(t, mean, sd) * stats.binom.pmf(  # noqa: E731
            x, n, special.expit(t))
        cut = special.logit(p0)
        return integrate.quad(f, cut, 30)[0] / (integrate.quad(f, -30, cut)[0]
                                                 + integrate.quad(f, cut, 30)[0])

    for k, (n, t) in enumerate(zip(looks, thresholds, strict=True)):
        bound = next(x for x in range(n + 1) if tail(n, x) >= t)
        assert ev.boundaries["efficacy_bound"].iloc[k] == bound
    assert ev.info["posterior_grid"]["error_vs_half_step"] < 1e-7
    assert "warnings" not in ev.info


def test_coarse_grid_warns_with_the_measured_error(tmp_path) -> None:
    design = build(ONE_ARM, looks__n=[100, 200], looks__efficacy=[0.99, 0.95],
                   arms__treatment__prior={"distribution": "logit-normal", "logit_mean": 0.0,
                                           "logit_sd": 3.0},
                   simulation={"grid_points": 101})
    with pytest.warns(NumericalWarning, match=r"differ by up to \d\.\d\de-\d\d") as caught:
        ev = compute(design)
    message = str(caught[0].message)
    assert "grid of 101 points" in message and "raise simulation.grid_points" in message
    assert "prior's sd spans" in message
    measured = ev.info["posterior_grid"]["error_vs_half_step"]
    assert measured > pg.TOLERANCE and f"{measured:.2e}" in message
    assert ev.info["warnings"] == [message]
    assert ev.info.get("max_uncertain_mass", 0) > 0
    # The command line prints it and records it in run.json.
    path = tmp_path / "coarse.toml"
    path.write_text(COARSE_TOML)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        result = CliRunner().invoke(main, ["run", str(path), "--out", str(tmp_path / "out")])
    assert result.exit_code == 0, result.output
    assert "warning: posterior grid of 101 points is too coarse" in result.output
    record = json.loads((tmp_path / "out" / "run.json").read_text())
    assert record["warnings"] and math.isfinite(record["posterior_grid"]["error_vs_half_step"])


COARSE_TOML = """
schema = 1
name = "coarse"
[endpoint]
type = "binary"
better = "higher"
[hypothesis]
benchmark = 0.2
[arms.treatment]
prior = { distribution = "logit-normal", logit_mean = 0.0, logit_sd = 3.0 }
[looks]
n = [100, 200]
efficacy = [0.99, 0.95]
[scenarios]
treatment = [0.2, 0.3]
[simulation]
grid_points = 101
"""
