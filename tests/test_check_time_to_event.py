"""Workflow checks (``octrial check``) of time-to-event designs, against outside sources.

Sources named beside each test: scipy.stats distributions (gamma, beta prime, negative
binomial, binomial) and scipy.integrate.quad; the conjugate gamma-Poisson identities of
the hazard (the likelihood of d events in exposure E is proportional to h^d exp(-h E));
the law of total expectation (posterior z-scores have mean 0 and mean square 1 when the
truths come from the analysis prior); Talts et al. (2018) for simulation-based
calibration, with scipy's chi-square and Kolmogorov-Smirnov tests. Seeds are fixed, so
every test is deterministic; each can fail (the wrong-prior test shows the calibration
check has power).
"""

from __future__ import annotations

import json
import math
from typing import Any

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import integrate, special, stats

from octrial.checks import CheckSettings, check
from octrial.checks.model import model_for
from octrial.checks.prior_predictive import run_prior_predictive
from octrial.checks.sbc import run_sbc
from octrial.checks.sensitivity import run_sensitivity
from octrial.checks.settings import generator
from octrial.checks.time_to_event_conflict import events_p_values
from octrial.checks.time_to_event_data import EventData, simulate_studies
from octrial.cli import main
from octrial.design.write import dumps
from octrial.endpoints.count import GammaMixture
from octrial.simulation.event_driven import EventDrivenSimulator
from tests.helpers import DESIGNS, build
from tests.report_pages import parse, table_rows

GAMMA_MIX = {"distribution": "gamma-mixture",
             "components": [{"weight": 0.6, "shape": 3.0, "rate": 150.0},
                            {"weight": 0.4, "shape": 1.0, "rate": 25.0}]}

ONE_CONDUCT: dict[str, Any] = {
    "schema": 1, "name": "tte-check-one",
    "endpoint": {"type": "time-to-event", "better": "lower"},
    "hypothesis": {"benchmark": 0.02},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 3.0, "rate": 150.0}}},
    "conduct": {"enrolment_rate": 10.0, "max_enrolment": 200, "dropout_hazard": 0.005},
    "looks": {"events": [15, 40], "efficacy": [0.99, 0.975]},
    "scenarios": {"treatment": [0.02, 0.012]},
    "simulation": {"seed": 4},
}
ONE_PLAIN: dict[str, Any] = {
    "schema": 1, "name": "tte-check-plain",
    "endpoint": {"type": "time-to-event", "better": "lower"},
    "hypothesis": {"benchmark": 0.05},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 2.0, "rate": 40.0}}},
    "looks": {"n": [10, 30], "efficacy": [0.99, 0.95]},
    "scenarios": {"treatment": [0.05, 0.03]},
}
ONE_PIECEWISE: dict[str, Any] = {
    "schema": 1, "name": "tte-check-piecewise",
    "endpoint": {"type": "time-to-event", "better": "lower", "periods": [0, 6],
                 "relative_hazard": [1.0, 0.5], "benchmark_scale": "survival",
                 "landmark": 12},
    "hypothesis": {"benchmark": 0.8},
    "arms": {"treatment": {"prior": GAMMA_MIX}},
    "looks": {"n": [20, 50], "efficacy": [0.99, 0.95]},
    "scenarios": {"treatment": [0.02, 0.01]},
}
TWO_CONDUCT: dict[str, Any] = {
    "schema": 1, "name": "tte-check-two",
    "endpoint": {"type": "time-to-event", "better": "lower"},
    "hypothesis": {"comparison": "ratio", "margin": 0.0},
    "arms": {"treatment": {"prior": GAMMA_MIX},
             "control": {"prior": {"distribution": "gamma", "shape": 2.0, "rate": 60.0}}},
    "conduct": {"enrolment_rate": [8.0, 20.0], "period_starts": [0.0, 3.0],
                "max_enrolment": 300, "dropout_hazard": 0.004},
    "looks": {"events": [30, 80], "efficacy": [0.995, 0.975]},
    "scenarios": {"control": [0.04], "ratio": [1.0, 0.7]},
    "simulation": {"seed": 8, "replicates": 2000},
}
TWO_PLAIN: dict[str, Any] = {
    "schema": 1, "name": "tte-check-two-plain",
    "endpoint": {"type": "time-to-event", "better": "lower"},
    "hypothesis": {"comparison": "ratio", "margin": 0.0},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 2.0, "rate": 50.0}},
             "control": {"prior": {"distribution": "gamma", "shape": 3.0, "rate": 60.0}}},
    "looks": {"n": [20, 40], "efficacy": [0.99, 0.95]},
    "scenarios": {"control": [0.05], "ratio": [1.0, 0.7]},
}
TWO_NORMAL: dict[str, Any] = {
    "schema": 1, "name": "tte-check-log-hr",
    "endpoint": {"type": "time-to-event", "analysis": "normal-log-hazard-ratio"},
    "hypothesis": {"comparison": "ratio",
                   "prior": {"distribution": "normal", "mean": -0.2, "sd": 0.3}},
    "arms": {"treatment": {}, "control": {}},
    "conduct": {"enrolment_rate": 20.0, "max_enrolment": 500},
    "looks": {"events": [100, 200], "efficacy": [0.99, 0.975]},
    "scenarios": {"control": [0.05], "ratio": [1.0, 0.75]},
}

ONE_CALENDAR = {**ONE_CONDUCT, "name": "tte-check-calendar",
                "looks": {"time": [10.0, 20.0], "efficacy": [0.99, 0.975]}}

CASES = {
    "one arm, event-driven (kernel)": ONE_CONDUCT,
    "one arm, looks at calendar times (kernel)": ONE_CALENDAR,
    "one arm, no censoring (benefit_from)": ONE_PLAIN,
    "one arm, two periods (landmark, Moschopoulos)": ONE_PIECEWISE,
    "two arms, event-driven, mixture (kernel)": TWO_CONDUCT,
    "two arms, no censoring (benefit_from)": TWO_PLAIN,
    "two arms, normal log hazard ratio": TWO_NORMAL,
}


def settings(**kw: Any) -> CheckSettings:
    return CheckSettings(**{"simulations": 800, "seed": 5, "bins": 10, "draws": 49,
                            "checks": ("sbc",), **kw})


# -- the check model exists and is the one the command runs ------------------------------

def test_demo_designs_have_checks_instead_of_exit_2(tmp_path) -> None:
    """Before this model the command exited 2 for time-to-event designs."""
    for name in ("single-arm-event-free", "two-arm-event-driven"):
        out = tmp_path / name
        result = CliRunner().invoke(main, ["check", str(DESIGNS / f"{name}.toml"), "--out",
                                           str(out), "--simulations", "300", "--bins", "10",
                                           "--draws", "49", "--quiet"])
        assert result.exit_code == 0, result.output
        record = json.loads((out / "checks.json").read_text())
        assert record["sbc"]["verdict"] == "pass"
        assert (out / "prior-predictive.png").is_file()


# -- simulated data against scipy and the simulator ----------------------------------

def test_study_data_are_the_patient_level_simulators_subjects() -> None:
    """The first simulated study equals one study of the event-driven simulator with the
    same seed (:meth:`PatientLevelSimulator.subjects`), with its look times, events and
    exposure recomputed here with plain numpy from those subjects (the D_k-th event's
    calendar time; exposure min(follow-up, tau - entry))."""
    design = build(TWO_CONDUCT)
    truth = (0.03, 0.045)
    subjects = EventDrivenSimulator(design, truth, 0.0).subjects(np.random.default_rng(21))
    data = simulate_studies(design, np.random.default_rng(21),
                            np.array(truth)[None, :, None])
    ends = subjects["enrolled"] + subjects["follow"]
    event_times = np.sort(ends[subjects["seen"]])
    for k, target in enumerate(design.looks.at):
        tau = event_times[int(target) - 1]
        assert data.time[k, 0] == tau
        entered = subjects["enrolled"] <= tau
        assert data.enrolled[k, 0] == entered.sum()
        for j in range(2):
            mine = entered & (subjects["arm"] == j)
            follow = np.minimum(subjects["follow"], tau - subjects["enrolled"])[mine]
            seen = (subjects["seen"] & (ends <= tau))[mine]
            assert data.events[k, j, 0, 0] == seen.sum()
            assert data.exposure[k, j, 0, 0] == pytest.approx(follow.sum(), rel=1e-12)
        assert data.events[k, :, 0, 0].sum() == target


def test_uncensored_exposure_is_gamma_and_period_events_binomial() -> None:
    """Without [conduct] an arm's exposure after n subjects is the sum of n exponential
    times, Gamma(n, rate h) (scipy.stats.gamma, KS); with periods [0, 6) and [6, inf)
    the events in the first period are Binomial(n, 1 - exp(-6 h)) (scipy.stats.binom,
    chi-square over the counts)."""
    design = build(ONE_PLAIN)
    h = 0.04
    data = simulate_studies(design, np.random.default_rng(3), np.full((4000, 1, 1), h))
    for k, n in enumerate(design.looks.n):
        assert np.all(data.events[k, 0, :, 0] == n)
        assert stats.kstest(data.exposure[k, 0, :, 0], stats.gamma(n, scale=1 / h).cdf
                            ).pvalue > 1e-3
    design = build(ONE_PIECEWISE)
    data = simulate_studies(design, np.random.default_rng(4),
                            np.broadcast_to([[[0.05, 0.02]]], (4000, 1, 2)))
    n = design.looks.n[-1]
    first = data.events[-1, 0, :, 0]
    assert np.all(data.events[-1, 0].sum(axis=1) == n)
    counts = np.bincount(first.astype(int), minlength=n + 1)
    expected = stats.binom.pmf(np.arange(n + 1), n, 1 - math.exp(-6 * 0.05)) * first.size
    keep = expected > 5
    observed = np.append(counts[keep], counts[~keep].sum())
    wanted = np.append(expected[keep], expected[~keep].sum())
    assert stats.chisquare(observed, wanted * observed.sum() / wanted.sum()).pvalue > 1e-3


# -- posteriors against scipy ---------------------------------------------------------

def _one_look(events: list[list[float]], exposure: list[list[float]]) -> EventData:
    """One study's data at every look: events[arm][period], exposure likewise."""
    e = np.asarray(events, dtype=float)[None, :, None, :]
    x = np.asarray(exposure, dtype=float)[None, :, None, :]
    return EventData(np.repeat(e, 2, axis=0), np.repeat(x, 2, axis=0), np.zeros((2, 1)),
                     np.zeros((2, 1)))


@pytest.mark.parametrize("base", [ONE_CONDUCT, ONE_PLAIN])
def test_hazard_posterior_quantiles_are_scipy_gamma_quantiles(base) -> None:
    """Gamma(a, b) prior, d events in exposure E: the posterior is Gamma(a + d, b + E)
    (conjugacy); its CDF at scipy.stats.gamma's q-quantile is q, through the decision's
    own function (the kernel's benefit_at, or benefit_from)."""
    design = build(base)
    model = model_for(design)
    prior = design.arms[0].prior
    d, exposure = 17.0, 900.0
    post = model.posterior(_one_look([[d]], [[exposure]]), 1)
    target = model.target()
    reference = stats.gamma(prior.a[0] + d, scale=1 / (prior.b[0] + exposure))
    for q in (0.01, 0.2, 0.5, 0.9, 0.999):
        assert post.cdf(target, np.array([reference.ppf(q)]))[0] == pytest.approx(q,
                                                                                  abs=1e-10)
    assert post.mean(target)[0] == pytest.approx(reference.mean(), rel=1e-12)
    assert post.variance(target)[0] == pytest.approx(reference.var(), rel=1e-10)


def _mixture_posterior(prior: Any, d: float, e: float) -> list[tuple[float, Any]]:
    """Posterior components of a gamma mixture, the weights from the negative binomial
    marginal likelihood of d given E (scipy.stats.nbinom; the factor E^d / d! is common
    to every component)."""
    w = np.array([wc * stats.nbinom.pmf(d, a, b / (b + e))
                  for wc, a, b in zip(prior.weights, prior.a, prior.b, strict=True)])
    w /= w.sum()
    return [(float(wc), stats.gamma(a + d, scale=1 / (b + e)))
            for wc, a, b in zip(w, prior.a, prior.b, strict=True)]


def test_log_hazard_ratio_cdf_against_quadrature_of_the_gamma_mixtures() -> None:
    """Pr(log h_T - log h_C <= v) = int f_C(c) F_T(c e^v) dc (scipy.integrate.quad) with
    the mixture posteriors built from scipy.stats (nbinom weights, gamma components)."""
    design = build(TWO_CONDUCT)
    model = model_for(design)
    data = ((12.0, 700.0), (25.0, 650.0))
    post = model.posterior(_one_look([[data[0][0]], [data[1][0]]],
                                     [[data[0][1]], [data[1][1]]]), 1)
    treat = _mixture_posterior(design.arms[0].prior, *data[0])
    control = _mixture_posterior(design.arms[1].prior, *data[1])
    target = model.target()
    for v in (-1.2, -0.5, 0.0, 0.3):
        def integrand(c: float, v: float = v) -> float:
            f_c = sum(w * g.pdf(c) for w, g in control)
            return f_c * sum(w * g.cdf(c * math.exp(v)) for w, g in treat)
        expected = integrate.quad(integrand, 0, 0.2, limit=200, epsabs=1e-12)[0]
        assert post.cdf(target, np.array([v]))[0] == pytest.approx(expected, abs=1e-8)
    per_arm = model.quantities()[1]
    assert per_arm.name == "hazard_treatment"
    x = 0.02
    assert post.cdf(per_arm, np.array([x]))[0] == pytest.approx(
        sum(w * g.cdf(x) for w, g in treat), abs=1e-12)


def test_cumulative_hazard_cdf_against_quadrature() -> None:
    """One arm, periods [0, 6) and [6, 12) up to the landmark: Lambda(12) = 6 h1 + 6 h2,
    Pr(Lambda <= v) = sum_c w_c int f_1c(x) F_2c((v - 6 x) / 6) dx (scipy quad), with
    the mixture weights from the product of each period's negative binomial marginal."""
    design = build(ONE_PIECEWISE)
    model = model_for(design)
    prior = design.arms[0].prior
    d, e = [9.0, 4.0], [400.0, 350.0]
    post = model.posterior(_one_look([d], [e]), 1)
    target = model.target()
    w = np.array([wc * np.prod([stats.nbinom.pmf(dj, a, b / (b + ej))
                                for dj, ej in zip(d, e, strict=True)])
                  for wc, a, b in zip(prior.weights, prior.a, prior.b, strict=True)])
    w /= w.sum()
    for v in (0.1, 0.25, 0.4):
        expected = 0.0
        for wc, a, b in zip(w, prior.a, prior.b, strict=True):
            g1 = stats.gamma(a + d[0], scale=1 / (b + e[0]))
            g2 = stats.gamma(a + d[1], scale=1 / (b + e[1]))
            expected += wc * integrate.quad(lambda x, g1=g1, g2=g2, v=v: g1.pdf(x) * g2.cdf(
                (v - 6 * x) / 6), 0, v / 6, limit=200, epsabs=1e-13)[0]
        assert post.cdf(target, np.array([v]))[0] == pytest.approx(expected, abs=1e-8)


# -- simulation-based calibration -----------------------------------------------------

@pytest.mark.parametrize("case", list(CASES))
def test_sbc_passes(case) -> None:
    """Conjugate posteriors (and, with many events, the normal approximation) are
    calibrated: Holm-adjusted p-values of scipy's chi-square and KS tests above 1%
    (Talts et al. 2018)."""
    design = build(CASES[case])
    record = run_sbc(model_for(design), settings()).record
    assert record["verdict"] == "pass", [(q["id"], q["p_adjusted"])
                                         for q in record["quantities"]]
    targets = [q for q in record["quantities"] if q["quantity"] == model_for(design)
               .target().name]
    assert len(targets) == design.looks.count + 1  # every look's CDF, the final ranks


def test_sbc_values_are_uniform_by_scipy() -> None:
    """The posterior CDF at the truth of sbc.csv, tested here directly with
    scipy.stats.kstest against Uniform(0, 1) at every look."""
    design = build(TWO_CONDUCT)
    values = run_sbc(model_for(design), settings(simulations=1500)).values
    cdf = values[values["statistic"] == "cdf"]
    for (_, _), part in cdf.groupby(["quantity", "look"]):
        assert stats.kstest(part["value"], "uniform").pvalue > 1e-3


@pytest.mark.parametrize("base", [ONE_CONDUCT, TWO_CONDUCT, ONE_PLAIN])
def test_sbc_fails_when_the_posterior_doubles_the_prior_shape(base) -> None:
    """Truths from the analysis prior, posteriors computed with the treatment prior's
    gamma shapes doubled: the check must reject the target at the first look (so that a
    passing result means something)."""
    design = build(base)
    prior = design.arms[0].prior
    wrong = model_for(build(base, arms__treatment__prior={
        "distribution": "gamma-mixture",
        "components": [{"weight": w, "shape": 2 * a, "rate": b}
                       for w, a, b in zip(prior.weights, prior.a, prior.b, strict=True)]}))
    record = run_sbc(wrong, settings(), truth_model=model_for(design)).record
    assert record["verdict"] == "fail"
    first = next(q for q in record["quantities"] if q["id"].endswith("@look1"))
    assert first["p_adjusted"] < 1e-6


# -- shrinkage and z-score ------------------------------------------------------------

@pytest.mark.parametrize("base", [ONE_CONDUCT, ONE_PIECEWISE, TWO_CONDUCT, TWO_NORMAL])
def test_z_scores_have_mean_0_and_mean_square_1_under_the_analysis_prior(base) -> None:
    """With truths from the analysis prior, E[z] = E_y[E(theta | y) - E(theta | y)] / sd
    = 0 and E[z^2] = E_y[Var(theta | y) / Var(theta | y)] = 1 (law of total expectation)
    for an exact posterior; the normal approximation is close at 100+ events. Within 4
    standard errors of the 4000 studies."""
    design = build(base)
    record = run_sensitivity(model_for(design), settings(simulations=4000)).record
    points = run_sensitivity(model_for(design), settings(simulations=4000)).points
    for look, part in points.groupby("look"):
        z = part["z"].to_numpy()
        assert abs(z.mean()) < 4 * z.std() / math.sqrt(z.size), look
        assert abs(np.mean(z**2) - 1) < 4 * np.std(z**2) / math.sqrt(z.size), look
    assert record["truths_from"].startswith("analysis prior")


def test_shrinkage_and_z_against_scipy_gamma() -> None:
    """Each study's shrinkage 1 - Var(h | y) / Var(h) and z = (E(h | y) - h) / sd(h | y)
    with the moments of scipy.stats.gamma(a + n, b + E) (the same studies re-drawn from
    the check's random stream)."""
    design = build(ONE_PLAIN)
    model = model_for(design)
    s = settings(simulations=200)
    points = run_sensitivity(model, s).points
    rng = generator(s.seed, "sensitivity")
    truths = model.draw_truths(rng, 200, "analysis")
    data = model.simulate(rng, truths)
    a, b = design.arms[0].prior.a[0], design.arms[0].prior.b[0]
    prior_var = stats.gamma(a, scale=1 / b).var()
    for k, n in enumerate(design.looks.n):
        post = stats.gamma(a + n, scale=1 / (b + data.exposure[k, 0, :, 0]))
        part = points[points["look"] == k + 1]
        assert np.allclose(part["shrinkage"], 1 - post.var() / prior_var, rtol=1e-10)
        assert np.allclose(part["z"], (post.mean() - truths[:, 0]) / post.std(), rtol=1e-9)


# -- prior predictive -----------------------------------------------------------------

def test_prior_predictive_exposure_is_beta_prime() -> None:
    """No censoring, one period: the exposure after n subjects given h is Gamma(n, h); with
    h ~ Gamma(a, rate b) it is b times a beta prime (n, a) variable (compound gamma;
    scipy.stats.betaprime), so the simulated prior predictive must pass a KS test."""
    design = build(ONE_PLAIN)
    record = run_prior_predictive(model_for(design), settings(simulations=4000,
                                                              checks=("prior-predictive",)))
    a, b = design.arms[0].prior.a[0], design.arms[0].prior.b[0]
    shown = {p.name: p for p in record.distributions["analysis"]}
    for k, n in enumerate(design.looks.n):
        sample = shown[f"exposure_treatment_look{k + 1}"].values
        assert sample.size == 4000
        assert stats.kstest(sample, stats.betaprime(n, a, scale=b).cdf).pvalue > 1e-3
        hazard = shown[f"observed_hazard_look{k + 1}"]
        # n / (b BetaPrime(n, a)) = (n / b) BetaPrime(a, n)
        assert stats.kstest(hazard.values, stats.betaprime(a, n, scale=n / b).cdf
                            ).pvalue > 1e-3
    assert "events_treatment_look1" not in shown  # fixed at n without censoring


def test_prior_predictive_record_and_flags() -> None:
    """Every look's events and exposure per arm, the observed log hazard ratio and the
    look times are reported; a prior with shape 0.01 (mass at hazards of 1e-100) is
    flagged as implausible; the effective sample size is the family's (shape = prior
    events)."""
    vague = {"distribution": "gamma", "shape": 0.01, "rate": 0.01}
    design = build(TWO_CONDUCT, arms__treatment__prior=vague, arms__control__prior=vague)
    record = run_prior_predictive(model_for(design), settings(
        simulations=1000, checks=("prior-predictive",))).record
    names = [o["observable"] for o in record["analysis"]["outcomes"]]
    for k in (1, 2):
        for name in ("events_treatment", "events_control", "exposure_treatment",
                     "exposure_control", "observed_log_hazard_ratio", "look_time"):
            assert f"{name}_look{k}" in names
    assert record["analysis"]["verdict"] == "flag"
    assert record["effective_sample_size"]["treatment"]["simple"] == pytest.approx(0.01)
    sensible = build(TWO_CONDUCT, arms__treatment__prior={
        "distribution": "gamma", "shape": 10.0, "rate": 300.0},
        arms__control__prior={"distribution": "gamma", "shape": 10.0, "rate": 250.0})
    found = run_prior_predictive(model_for(sensible), settings(
        simulations=1000, checks=("prior-predictive",))).record
    assert found["analysis"]["verdict"] == "pass", found["analysis"]["flags"]


def test_prior_predictive_follows_the_seed() -> None:
    design = build(ONE_CONDUCT)
    first = run_prior_predictive(model_for(design), settings(seed=1)).record
    again = run_prior_predictive(model_for(design), settings(seed=1)).record
    other = run_prior_predictive(model_for(design), settings(seed=2)).record
    assert first["analysis"]["outcomes"] == again["analysis"]["outcomes"]
    assert first["analysis"]["outcomes"] != other["analysis"]["outcomes"]


# -- prior-data conflict ---------------------------------------------------------------

@pytest.mark.parametrize(("prior", "cases"), [
    (GammaMixture((1.0,), (4.0,), (200.0,)), [(0, 50.0), (3, 120.0), (25, 300.0)]),
    (GammaMixture((0.7, 0.3), (20.0, 1.0), (1000.0, 50.0)),
     [(0, 10.0), (8, 500.0), (60, 800.0), (19, 1000.0)]),
])
def test_conflict_p_value_is_the_negative_binomial_tail(prior, cases) -> None:
    """Box's p-value: the gamma-Poisson predictive of d events given exposure E is
    negative binomial (size a, probability b / (b + E)), mixed over components; p(d) sums
    the predictive probabilities no larger than pmf(d) (scipy.stats.nbinom, brute force
    over 0..20000)."""
    events = np.array([c[0] for c in cases], dtype=float)
    exposure = np.array([c[1] for c in cases])
    found = events_p_values(prior, events, exposure)
    support = np.arange(20001)
    for i, (d, e) in enumerate(cases):
        pmf = sum(w * stats.nbinom.pmf(support, a, b / (b + e))
                  for w, a, b in zip(prior.weights, prior.a, prior.b, strict=True))
        expected = pmf[pmf <= pmf[d] * (1 + 1e-9)].sum()
        assert found[i] == pytest.approx(expected, abs=1e-9), (d, e)


def test_conflict_grows_with_drift_and_reports_the_decision() -> None:
    """A control arm borrowing 40 events in 800 months (historical hazard 0.05): studies
    at a true hazard of 0.05 rarely conflict, at 0.15 most do; the robust mixture's vague
    weight follows; P(success) with and without borrowing comes from the engine."""
    design = build(TWO_CONDUCT, arms__control__prior={
        "distribution": "gamma", "shape": 1.0, "rate": 20.0,
        "historical": {"events": 40, "exposure": 800.0},
        "borrowing": {"method": "robust-mixture", "vague_weight": 0.2}},
        scenarios={"control": [0.05, 0.1, 0.15], "ratio": [1.0]})
    out = check(design, settings(checks=("conflict",)))
    entry = out.record["conflict"]
    rows = entry["arms"][0]["by_true_value"]
    assert [r["true_value"] for r in rows] == [0.05, 0.1, 0.15]
    final = [r["look2_conflict"] for r in rows]
    assert final[0] < 0.1 < 0.5 < final[2] and final == sorted(final)
    weights = [r["look2_vague_weight"] for r in rows]
    assert weights == sorted(weights)
    assert len(entry["decision"]) == 3


# -- the report ----------------------------------------------------------------------

def test_report_shows_time_to_event_checks(tmp_path) -> None:
    """`octrial check`, `run` and `report` on one folder: the checks section has the SBC
    table with the log hazard ratio, the sensitivity and prior predictive figures."""
    path = tmp_path / "design.toml"
    path.write_text(dumps(TWO_CONDUCT))
    out = tmp_path / "out"
    invoke = CliRunner().invoke
    args = ["--simulations", "300", "--bins", "10", "--draws", "49", "--quiet"]
    assert invoke(main, ["check", str(path), "--out", str(out), *args]).exit_code == 0
    assert invoke(main, ["run", str(path), "--out", str(out), "--quiet"]).exit_code == 0
    result = invoke(main, ["report", str(out), "--quiet"])
    assert result.exit_code == 0, result.output
    page = parse(out / "report.html")
    section = page.find(".//section[@id='checks']")
    for figure in ("sbc", "sensitivity", "prior-predictive"):
        assert section.find(f".//figure[@id='figure-checks-{figure}']") is not None
    ids = [r.cells["id"].text for r in table_rows(page, "checks-sbc")]
    assert "log_hazard_ratio@look1" in ids and "hazard_control@look2" in ids
    observables = [r.cells["observable"].text for r in table_rows(
        page, "checks-prior-predictive")]
    assert any("time at risk" in o for o in observables)


def test_kernel_and_family_paths_agree() -> None:
    """The two decision functions the target's CDF comes from (the kernel's numba
    benefit_at with [conduct], benefit_from without) give the same number on the same
    events and exposure (both against the regularized incomplete gamma of scipy)."""
    with_kernel = model_for(build(ONE_CONDUCT))
    plain = model_for(build(ONE_CONDUCT, conduct=None, looks={"n": [15, 40],
                                                              "efficacy": [0.99, 0.975]}))
    data = _one_look([[11.0]], [[640.0]])
    values = np.array([0.01, 0.02, 0.03])
    a, b = 3.0 + 11.0, 150.0 + 640.0
    for model in (with_kernel, plain):
        post = model.posterior(data, 0)
        found = np.array([post.cdf(model.target(), np.array([v]))[0] for v in values])
        assert np.allclose(found, special.gammainc(a, b * values), atol=1e-12)


def test_observed_median_solves_survival_one_half() -> None:
    """The prior predictive's observed median: exp(-m H0(t)) = 1/2 with H0 written out
    here for periods [0, 6) and [6, inf) with relative hazards 1 and 0.5, solved by
    scipy.optimize.brentq; one period: log 2 / m (the exponential median)."""
    from scipy import optimize

    from octrial.checks.time_to_event_model import observed_median

    piecewise = build(ONE_PIECEWISE).endpoint
    multipliers = np.array([0.01, 0.05, 0.2, 0.0])
    found = observed_median(piecewise, multipliers)
    for m, median in zip(multipliers[:3], found[:3], strict=True):
        def half(t: float, m: float = m) -> float:
            cumulative = min(t, 6.0) + 0.5 * max(t - 6.0, 0.0)
            return math.exp(-m * cumulative) - 0.5
        assert median == pytest.approx(optimize.brentq(half, 0, 1e4, xtol=1e-12), rel=1e-9)
    assert found[3] == np.inf
    plain = observed_median(build(ONE_PLAIN).endpoint, multipliers[:3])
    assert np.allclose(plain, stats.expon(scale=1 / multipliers[:3]).median(), rtol=1e-12)
