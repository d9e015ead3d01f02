"""Checks of the time-to-event family against sources outside octrial.

Sources: the gamma-Poisson and gamma-chi-square identities of the incomplete gamma
function (Abramowitz & Stegun 1964, 6.5.13 and 26.4.2; recalled from memory), the beta
form of a ratio of independent gammas checked against scipy quadrature of the two gamma
densities, the series of Moschopoulos (1985) checked against scipy quadrature and Monte
Carlo, Schoenfeld's (1981) and Freedman's (1982) event counts for the log-rank test, and
the exponential median and survival formulas (S(t) = exp(-lambda t)).
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import integrate, special, stats

import octrial
from octrial.cli import main
from octrial.design.write import dumps
from octrial.endpoints import survival_maths as sm
from tests.helpers import build, changed

ONE_ARM: dict[str, Any] = {
    "schema": 1, "name": "tte-one-arm",
    "endpoint": {"type": "time-to-event", "better": "lower"},
    "hypothesis": {"benchmark": 0.05},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 2, "rate": 30}}},
    "looks": {"n": [20, 40], "efficacy": [0.99, 0.95], "futility": [0.1]},
    "scenarios": {"treatment": [0.05, 0.03]},
}

TWO_ARM_NORMAL: dict[str, Any] = {
    "schema": 1, "name": "tte-two-arm-normal",
    "endpoint": {"type": "time-to-event", "analysis": "normal-log-hazard-ratio"},
    "hypothesis": {"comparison": "ratio",
                   "prior": {"distribution": "normal", "mean": 0.0, "sd": 1000.0}},
    "arms": {"treatment": {}, "control": {}},
    "looks": {"n": [100], "efficacy": [0.975]},
    "scenarios": {"control": [0.05], "ratio": [0.7]},
}


def _one_arm(**changes: Any) -> Any:
    return build(ONE_ARM, **changes)


# -- gamma-exponential identities ----------------------------------------------------
@pytest.mark.parametrize(("shape", "rate", "events", "exposure", "x"), [
    (1, 10.0, 7, 120.0, 0.05), (3, 25.0, 0, 10.0, 0.2), (2, 1.0, 40, 900.0, 0.03)])
def test_posterior_tail_is_a_poisson_and_a_chi_square_tail(
        shape: int, rate: float, events: int, exposure: float, x: float) -> None:
    """Pr(lambda > x | d, E) = Pr(Poisson(x b') < a') = Pr(chi2(2 a') > 2 b' x) for the
    posterior Gamma(a' = a + d, b' = b + E) with integer a' (A&S 6.5.13, 26.4.2)."""
    design = _one_arm(endpoint__better="higher", hypothesis__benchmark=x,
                      arms__treatment__prior={"distribution": "gamma", "shape": shape,
                                              "rate": rate})
    tail = design.family.benefit_from(design, (np.array([[events]]),),
                                      (np.array([[exposure]]),))[0]
    a, b = shape + events, rate + exposure
    assert tail == pytest.approx(stats.poisson.cdf(a - 1, x * b), rel=1e-12)
    assert tail == pytest.approx(stats.chi2.sf(2 * b * x, 2 * a), rel=1e-10)


def test_gamma_mixture_posterior_matches_quadrature() -> None:
    """The mixture's posterior tail against scipy quadrature of prior x likelihood."""
    prior = {"distribution": "gamma-mixture", "components": [
        {"weight": 0.6, "shape": 2.0, "rate": 40.0}, {"weight": 0.4, "shape": 1.0,
                                                      "rate": 5.0}]}
    design = _one_arm(arms__treatment__prior=prior)
    d, e = 9, 150.0
    got = design.family.benefit_from(design, (np.array([[d]]),), (np.array([[e]]),))[0]

    def density(lam: float) -> float:
        p = 0.6 * stats.gamma.pdf(lam, 2, scale=1 / 40) + 0.4 * stats.gamma.pdf(lam, 1,
                                                                              scale=1 / 5)
        return p * lam**d * math.exp(-lam * e)
    total = integrate.quad(density, 0, np.inf, epsabs=0, epsrel=1e-12, limit=200)[0]
    below = integrate.quad(density, 0, 0.05, epsabs=0, epsrel=1e-12, limit=200)[0]
    assert got == pytest.approx(below / total, abs=1e-9)


# -- benchmarks on other scales ------------------------------------------------------
def test_median_and_landmark_benchmarks_are_the_exponential_hazards() -> None:
    """S(t) = exp(-lambda t): median m gives lambda0 = log 2 / m; survival s at L gives
    -log(s) / L."""
    median = _one_arm(endpoint__benchmark_scale="median", hypothesis__benchmark=14.0)
    assert median.hypothesis.benchmark == pytest.approx(math.log(2) / 14.0, rel=1e-14)
    landmark = _one_arm(endpoint__benchmark_scale="survival", endpoint__landmark=12.0,
                        hypothesis__benchmark=0.8)
    assert landmark.hypothesis.benchmark == pytest.approx(-math.log(0.8) / 12.0, rel=1e-14)


def test_piecewise_landmark_benchmark_gives_the_stated_survival() -> None:
    """With periods, lambda0 makes S(L) = exp(-lambda0 H0(L)) equal the stated s."""
    design = _one_arm(endpoint__periods=[0, 3, 9], endpoint__relative_hazard=[1, 0.5, 0.25],
                      endpoint__benchmark_scale="survival", endpoint__landmark=12.0,
                      hypothesis__benchmark=0.75)
    e = design.endpoint
    s = sm.survival(e.starts, e.relative_hazard, design.hypothesis.benchmark, 12.0)
    assert float(s) == pytest.approx(0.75, rel=1e-14)
    # H0(12) by hand: 3 x 1 + 6 x 0.5 + 3 x 0.25
    assert float(sm.base_cumulative_hazard(e.starts, e.relative_hazard, 12.0)) == 6.75


# -- sums of gammas (piecewise landmark) ---------------------------------------------
def test_gamma_sum_series_matches_quadrature_for_two_periods() -> None:
    """Moschopoulos (1985) against scipy quad of f1(u) F2(x - u)."""
    a, r = np.array([[3.5, 7.0]]), np.array([[2.0, 0.6]])
    for x in (1.0, 8.0, 15.0, 40.0):
        got, error = sm.gamma_sum_cdf(np.array([x]), a, r)
        want = integrate.quad(lambda u, x=x: stats.gamma.pdf(u, 3.5, scale=0.5)
                              * stats.gamma.cdf(x - u, 7.0, scale=1 / 0.6), 0, x,
                              epsabs=1e-14, epsrel=1e-12, limit=200)[0]
        assert error < 1e-11
        assert got[0] == pytest.approx(want, abs=1e-10)


def test_gamma_sum_series_with_a_short_period_matches_quadrature() -> None:
    """A landmark just past a period start (overlap 0.01 of a 6-month period: scales 300
    times apart, thousands of terms, summed as a negative binomial convolution) against
    scipy quad; and the two ways of summing the series agree on a moderate case."""
    a, r = np.array([[20.0, 8.0]]), np.array([[50.0, 15000.0]])
    for x in (0.3, 0.4, 0.6):
        got, error = sm.gamma_sum_cdf(np.array([x]), a, r)
        want = integrate.quad(lambda u, x=x: stats.gamma.pdf(u, 8.0, scale=1 / 15000.0)
                              * stats.gamma.cdf(x - u, 20.0, scale=1 / 50.0), 0, x,
                              points=[8 / 15000.0], epsabs=1e-14, epsrel=1e-12,
                              limit=400)[0]
        assert error < 1e-11
        assert got[0] == pytest.approx(want, abs=1e-10)
    shapes, rates = np.array([[3.0, 5.0, 2.0]]), np.array([[1.0, 2.5, 0.7]])
    beta = 1 / rates
    together, _ = sm._series_together(np.array([4.0]), shapes, beta, beta.min(axis=1,
                                                                               keepdims=True))
    alone, _ = sm._series_alone(4.0, shapes[0], beta.min() / beta[0], float(beta.min()))
    assert together[0] == pytest.approx(alone, abs=1e-12)


def test_gamma_sum_series_matches_monte_carlo_for_three_periods() -> None:
    """Three gammas: the series against 400,000 simulated sums (within 4 SE)."""
    rng = np.random.default_rng(2026)
    a, r = np.array([2.0, 5.0, 1.5]), np.array([1.0, 3.0, 0.4])
    draws = sum(rng.gamma(a_j, 1 / r_j, 400_000) for a_j, r_j in zip(a, r, strict=True))
    for x in (2.0, 5.0, 9.0):
        got = sm.gamma_sum_cdf(np.array([x]), a[None], r[None])[0][0]
        p = float(np.mean(draws <= x))
        assert abs(got - p) < 4 * math.sqrt(p * (1 - p) / draws.size)


def test_piecewise_benefit_is_the_posterior_probability_of_landmark_survival() -> None:
    """Pr(S(L) > s0 | data) by the series against Monte Carlo draws of the periods'
    gamma posteriors (within 4 SE)."""
    design = _one_arm(endpoint__periods=[0, 6], endpoint__relative_hazard=[1, 0.5],
                      endpoint__benchmark_scale="survival", endpoint__landmark=12.0,
                      hypothesis__benchmark=0.7)
    events, exposure = np.array([[6.0, 2.0]]), np.array([[180.0, 90.0]])
    got = design.family.benefit_from(design, (events,), (exposure,))[0]
    rng = np.random.default_rng(7)
    h1 = rng.gamma(2 + 6, 1 / (30 + 180), 400_000)
    h2 = rng.gamma(2 + 2, 1 / (30 + 90), 400_000)
    p = float(np.mean(np.exp(-(6 * h1 + 6 * h2)) > 0.7))
    assert abs(got - p) < 4 * math.sqrt(p * (1 - p) / h1.size)


# -- two arms: gamma ratio -----------------------------------------------------------
def test_hazard_ratio_beta_form_matches_quadrature_of_the_two_gammas() -> None:
    """Pr(h_T / h_C < c) = I_{k/(1+k)}(a_T, a_C) against scipy quad of
    int f_C(y) F_T(c y) dy."""
    design = build({
        "schema": 1, "name": "tte-ratio",
        "endpoint": {"type": "time-to-event"},
        "hypothesis": {"comparison": "ratio", "margin": 0.2, "kind": "non-inferiority"},
        "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 0.5, "rate": 2}},
                 "control": {"prior": {"distribution": "gamma", "shape": 1.5, "rate": 4}}},
        "looks": {"n": [40], "efficacy": [0.975]},
        "scenarios": {"control": [0.1], "ratio": [1.0]},
    })
    c = design.hypothesis.threshold
    assert c == pytest.approx(1.2)
    d_t, e_t, d_c, e_c = 14, 210.0, 22, 190.0
    got = design.family.benefit_from(design, (np.array([[d_t]]), np.array([[d_c]])),
                                     (np.array([[e_t]]), np.array([[e_c]])))[0]
    a_t, b_t, a_c, b_c = 0.5 + d_t, 2 + e_t, 1.5 + d_c, 4 + e_c
    want = integrate.quad(lambda y: stats.gamma.pdf(y, a_c, scale=1 / b_c)
                          * stats.gamma.cdf(c * y, a_t, scale=1 / b_t), 0, np.inf,
                          epsabs=0, epsrel=1e-12, limit=200)[0]
    assert got == pytest.approx(want, abs=1e-10)


# -- normal approximation: Schoenfeld and Freedman -----------------------------------
@pytest.mark.parametrize(("hr", "alpha", "power", "allocation"), [
    (0.7, 0.025, 0.9, 1), (0.75, 0.025, 0.8, 2), (0.6, 0.05, 0.85, 1)])
def test_schoenfeld_events_give_the_stated_power(
        hr: float, alpha: float, power: float, allocation: int) -> None:
    """Schoenfeld (1981): d = (z_a + z_b)^2 (1 + q)^2 / (q log(HR)^2). The flat-prior
    normal-approximation design with one look at d events and efficacy threshold 1 - alpha
    has power Phi(|log HR| sqrt(d q) / (1 + q) - z_a), which is 1 - beta at the unrounded d;
    at the design's whole number of events it lies between the powers at floor and ceil."""
    d = sm.schoenfeld_events(hr, alpha, power, allocation)
    if allocation == 1:
        z = stats.norm.isf(alpha) + stats.norm.isf(1 - power)
        assert d == pytest.approx(4 * z**2 / math.log(hr) ** 2, rel=1e-14)
    events = math.ceil(d / (1 + allocation)) * (1 + allocation)
    design = build(TWO_ARM_NORMAL, looks__n=[events], looks__efficacy=[1 - alpha],
                   arms__treatment__allocation=allocation, scenarios__ratio=[hr])
    got = float(octrial.evaluate(design)["prob_success"].iloc[0])
    z_a = stats.norm.isf(alpha)

    def closed(dd: float) -> float:
        return float(stats.norm.cdf(abs(math.log(hr)) * math.sqrt(dd * allocation)
                                    / (1 + allocation) - z_a))
    # the 1000-sd prior moves the posterior by about 1e-6 of the estimate
    assert got == pytest.approx(closed(events), abs=2e-5)
    assert power - 1e-9 <= got <= closed(events + 1e-9) + 2e-5
    assert closed(d) == pytest.approx(power, abs=1e-12)


def test_freedman_events_are_close_to_schoenfeld_and_reach_the_power() -> None:
    """Freedman (1982): d = (z_a + z_b)^2 (1 + HR)^2 / (1 - HR)^2 at 1:1. For HR < 1 it
    exceeds Schoenfeld's count by under 5% (8.3% at HR = 0.5: (1 + HR)^2 / (1 - HR)^2
    against 4 / log(HR)^2), so the normal-approximation design at Freedman's d (rounded
    up to an even count) has at least the stated power and at most 0.02 more."""
    for hr in (0.6, 0.7, 0.8):
        d_s = sm.schoenfeld_events(hr, 0.025, 0.9)
        d_f = sm.freedman_events(hr, 0.025, 0.9)
        assert 1.0 < d_f / d_s < 1.05
        events = 2 * math.ceil(d_f / 2)
        design = build(TWO_ARM_NORMAL, looks__n=[events], scenarios__ratio=[hr])
        got = float(octrial.evaluate(design)["prob_success"].iloc[0])
        assert 0.9 <= got < 0.92


def test_normal_approximation_engine_agrees_with_the_closed_form_at_two_looks() -> None:
    """Two looks, flat-like prior, efficacy only: Pr(stop at look 1) = Phi(drift_1 -
    z_1) (the first look of the recursion; Jennison & Turnbull 2000 ch. 3)."""
    design = build(TWO_ARM_NORMAL, looks__n=[150, 300], looks__efficacy=[0.999, 0.975])
    oc = octrial.evaluate(design)
    drift = abs(math.log(0.7)) * math.sqrt(150 / 4)
    assert float(oc["look1_stop_efficacy"].iloc[0]) == pytest.approx(
        stats.norm.cdf(drift - stats.norm.isf(0.001)), abs=2e-5)
    assert list(oc["look2_events"]) == [300.0]


def test_simulated_log_hazard_ratio_has_the_approximate_variance() -> None:
    """The estimate the simulator and `decide` use, log(d_T / E_T) - log(d_C / E_C),
    has variance close to 1/d_T + 1/d_C (the delta method; exponential data simulated
    with numpy, 100 events per arm, censoring at a fixed follow-up)."""
    rng = np.random.default_rng(11)
    design = build(TWO_ARM_NORMAL)
    estimates, variances = [], []
    for _ in range(4000):
        times = [rng.exponential(1 / h, 300) for h in (0.035, 0.05)]
        ev = [np.minimum(t, 6.0) for t in times]
        d = tuple(np.array([[np.sum(t < 6.0)]], dtype=float) for t in times)
        e = tuple(np.array([[np.sum(x)]]) for x in ev)
        est, info = design.family.log_hazard_ratio_estimate(design, d, e)
        estimates.append(est[0])
        variances.append(1 / info[0])
    assert np.var(estimates) == pytest.approx(np.mean(variances), rel=0.08)
    assert np.mean(estimates) == pytest.approx(math.log(0.7), abs=0.01)


# -- sufficient statistics -----------------------------------------------------------
def test_split_exposure_matches_a_hand_count() -> None:
    """Events and exposure per period from subject times (counted by hand)."""
    d, e = sm.split_exposure(np.array([2.0, 7.0, 12.0, 4.0]), np.array([1, 1, 0, 0]),
                             (0.0, 6.0))
    assert d.tolist() == [1.0, 1.0]
    assert e.tolist() == [2 + 6 + 6 + 4, 1 + 6]


# -- bad input -----------------------------------------------------------------------
@pytest.mark.parametrize(("changes", "key"), [
    ({"endpoint__periods": [0, 6, 6], "endpoint__relative_hazard": [1, 1, 1]},
     "endpoint.periods"),
    ({"endpoint__periods": [2, 6]}, "endpoint.periods"),
    ({"endpoint__periods": [0, 6], "endpoint__relative_hazard": [1, 0]},
     "endpoint.relative_hazard"),
    ({"scenarios__treatment": [0.0]}, "scenarios.treatment"),
    ({"hypothesis__benchmark": -0.1}, "hypothesis.benchmark"),
    ({"endpoint__benchmark_scale": "survival", "endpoint__landmark": 12,
      "hypothesis__benchmark": 1.2}, "hypothesis.benchmark"),
    ({"endpoint__benchmark_scale": "survival"}, "endpoint.landmark"),
    ({"arms__treatment__prior": {"distribution": "normal", "mean": 0, "sd": 1}},
     "arms.treatment.prior.distribution"),
    ({"endpoint__analysis": "normal-log-hazard-ratio"}, "endpoint.analysis"),
])
def test_bad_input_exits_2_naming_the_key(tmp_path: Path, changes: dict[str, Any],
                                          key: str) -> None:
    path = tmp_path / "bad.toml"
    path.write_text(dumps(changed(ONE_ARM, **changes)))
    out = tmp_path / "out"
    result = CliRunner().invoke(main, ["run", str(path), "--out", str(out)])
    assert result.exit_code == 2, result.output
    assert key in result.output
    assert not out.exists()


def test_piecewise_two_arm_gamma_is_refused_with_the_key() -> None:
    with pytest.raises(octrial.errors.DesignError, match=r"endpoint\.analysis"):
        build({**TWO_ARM_NORMAL, "endpoint": {"type": "time-to-event",
                                              "periods": [0, 6],
                                              "relative_hazard": [1, 0.5]},
               "hypothesis": {"comparison": "ratio"},
               "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1,
                                                "rate": 1}},
                        "control": {"prior": {"distribution": "gamma", "shape": 1,
                                              "rate": 1}}}})


def test_designs_with_conduct_say_the_simulator_is_missing_or_use_it() -> None:
    """Without the patient-level simulator the family says so plainly (no silent
    fallback to a model without censoring)."""
    import dataclasses

    design = _one_arm()
    looks = dataclasses.replace(design.looks, trigger="events", at=(20.0, 40.0))
    reason = design.family.simulation_unsupported(dataclasses.replace(design, looks=looks))
    try:
        import octrial.simulation.event_driven  # noqa: F401
    except ImportError:
        assert reason is not None and "event_driven" in reason
    else:
        assert reason is None


def test_exposure_bounds_reproduce_the_threshold() -> None:
    """At each look's exposure bound the posterior probability equals the threshold."""
    design = _one_arm()
    table = design.family.boundary_table(design)
    for k, row in table.iterrows():
        b = design.family.benefit_from(design, (np.array([[row["events"]]]),),
                                       (np.array([[row["efficacy_bound"]]]),))[0]
        assert b == pytest.approx(design.looks.efficacy[k], abs=1e-8)
    assert special.gammainc(2 + 40, (30 + table["efficacy_bound"].iloc[1]) * 0.05) == (
        pytest.approx(0.95, abs=1e-8))


# -- octrial decide --------------------------------------------------------------------
TWO_ARM_GAMMA: dict[str, Any] = {
    "schema": 1, "name": "tte-two-arm-gamma",
    "endpoint": {"type": "time-to-event"},
    "hypothesis": {"comparison": "ratio"},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1, "rate": 20}},
             "control": {"prior": {"distribution": "gamma", "shape": 1, "rate": 20}}},
    "looks": {"n": [100, 200], "efficacy": [0.995, 0.975], "futility": [0.2]},
    "scenarios": {"control": [0.05], "ratio": [1.0, 0.7]},
}


def _subjects_file(tmp_path: Path, scale_t: float, shape: float = 1.0,
                   seed: int = 5) -> Path:
    """Weibull(shape) times (exponential when shape = 1) with uniform censoring."""
    rng = np.random.default_rng(seed)
    rows = ["arm,time,event"]
    for arm, scale in (("treatment", scale_t), ("control", 20.0)):
        t = scale * rng.weibull(shape, 150)
        c = rng.uniform(6, 30, 150)
        rows += [f"{arm},{min(a, b):.6f},{int(a <= b)}" for a, b in zip(t, c, strict=True)]
    path = tmp_path / "subjects.csv"
    path.write_text("\n".join(rows) + "\n")
    return path


def test_decide_on_events_and_exposure_is_the_beta_form() -> None:
    """`decide` with ARM=events/exposure: Pr(HR < 1) = I_{k/(1+k)}(a_T, a_C) (scipy)
    and the hazards' intervals are gamma quantiles (scipy)."""
    from octrial.interim import decide

    design = build(TWO_ARM_GAMMA)
    result = decide(design, 1, ["treatment=40/1100", "control=60/1050"], level=0.95)
    k = (20 + 1100) / (20 + 1050)
    want = special.betainc(41, 61, k / (1 + k))
    assert result.assessment.benefit == pytest.approx(want, rel=1e-12)
    treatment = result.posterior[0]
    post = stats.gamma(41, scale=1 / 1120)
    assert (treatment.lower, treatment.upper) == pytest.approx(post.ppf([0.025, 0.975]),
                                                               rel=1e-9)
    ratio = result.posterior[-1]
    # the interval's ends are where the beta form gives 0.025 and 0.975
    for end, q in ((ratio.lower, 0.025), (ratio.upper, 0.975)):
        kk = end * 1120 / 1070
        assert special.betainc(41, 61, kk / (1 + kk)) == pytest.approx(q, abs=1e-9)


def test_decide_reads_per_subject_times_like_lifelines(tmp_path: Path) -> None:
    """Per-subject file: events and time at risk as counted by lifelines'
    ExponentialFitter (MLE scale = exposure / events) and a Kaplan-Meier curve equal
    to lifelines' KaplanMeierFitter."""
    lifelines = pytest.importorskip("lifelines")
    from octrial.interim import decide
    from octrial.interim.time_to_event import kaplan_meier

    path = _subjects_file(tmp_path, 28.0)
    design = build(TWO_ARM_GAMMA)
    result = decide(design, 1, [], subjects=path)
    rows = np.genfromtxt(path, delimiter=",", names=True, dtype=None, encoding="utf-8")
    for arm in ("treatment", "control"):
        mine = rows[rows["arm"] == arm]
        fit = lifelines.ExponentialFitter().fit(mine["time"], mine["event"])
        got = result.observed[arm]
        assert got.exposure[0] / got.events[0] == pytest.approx(fit.lambda_, rel=1e-6)
        km = lifelines.KaplanMeierFitter().fit(mine["time"], mine["event"])
        times, surv = kaplan_meier(mine["time"], mine["event"])
        assert surv == pytest.approx(km.survival_function_at_times(times).to_numpy(),
                                     abs=1e-12)
    assert [c.statistic for c in result.checks] == ["Kaplan-Meier distance"] * 2


def test_piecewise_sufficient_statistics_match_lifelines(tmp_path: Path) -> None:
    """Per period: lifelines' PiecewiseExponentialFitter MLE scales equal exposure /
    events of :func:`split_exposure`."""
    lifelines = pytest.importorskip("lifelines")
    rng = np.random.default_rng(3)
    t = rng.exponential(12.0, 400)
    c = rng.uniform(3, 24, 400)
    time, event = np.minimum(t, c), (t <= c).astype(int)
    d, e = sm.split_exposure(time, event, (0.0, 6.0))
    fit = lifelines.PiecewiseExponentialFitter([6.0]).fit(time, event)
    assert (e / d) == pytest.approx(fit.summary["coef"].to_numpy()[:2], rel=1e-4)


def test_kaplan_meier_check_flags_a_strongly_non_exponential_arm(tmp_path: Path) -> None:
    """Weibull shape 3 times (an increasing hazard) against an exponential model: the
    Kaplan-Meier distance is flagged for that arm and not for the exponential arm."""
    from octrial.interim import decide

    path = _subjects_file(tmp_path, 28.0, shape=1.0, seed=8)
    text = path.read_text().splitlines()
    rng = np.random.default_rng(9)
    t = 25.0 * rng.weibull(3.0, 150)
    c = rng.uniform(6, 30, 150)
    weibull = [f"treatment,{min(a, b):.6f},{int(a <= b)}" for a, b in zip(t, c, strict=True)]
    path.write_text("\n".join([text[0], *weibull, *[r for r in text[1:]
                                                     if r.startswith("control")]]) + "\n")
    result = decide(build(TWO_ARM_GAMMA), 1, [], subjects=path)
    flagged = {c.arm: c.flagged for c in result.checks}
    assert flagged == {"treatment": True, "control": False}


def test_decide_with_the_normal_approximation_at_the_table_bound() -> None:
    """At the planned events split evenly (information D / 4 exactly) and an estimate on
    the boundary table's hazard-ratio bound, B equals the efficacy threshold; the
    predictive probability equals the closed form sum_j w_j Phi((S + M D - u) / sqrt(D +
    D^2 / P)) (Jennison & Turnbull 2000, ch. 3; one normal prior component)."""
    from octrial.interim import decide

    design = build(TWO_ARM_NORMAL, looks__n=[200, 400], looks__efficacy=[0.999, 0.975],
                   looks__futility_predictive=[0.1],
                   hypothesis__prior={"distribution": "normal", "mean": 0.0, "sd": 0.5})
    table = design.family.boundary_table(design)
    bound = float(table["efficacy_bound"].iloc[0])
    # 100 events per arm; exposures chosen so that the estimated HR is the bound
    result = decide(design, 1, [f"treatment=100/{1000 / bound!r}", "control=100/1000"])
    assert result.assessment.benefit == pytest.approx(0.999, abs=1e-9)
    info, d_end = 50.0, 100.0 - 50.0  # D / 4 now and at the final look (400 / 4)
    score = -info * math.log(bound)  # benefit scale: eta = -log HR
    precision = 1 / 0.25 + info
    mean = score / precision
    # final success: Phi(S_K / sqrt(P_K)) >= 0.975 with P_K = 1 / 0.25 + 100
    upper = stats.norm.ppf(0.975) * math.sqrt(1 / 0.25 + 100)
    want = stats.norm.cdf((score + mean * d_end - upper)
                          / math.sqrt(d_end + d_end**2 / precision))
    assert result.assessment.predictive == pytest.approx(want, abs=1e-6)


# -- historical borrowing --------------------------------------------------------------
def test_power_prior_and_robust_mixture_on_the_hazard() -> None:
    """Power prior: Gamma(a + a0 d0, b + a0 E0) (Ibrahim & Chen 2000, conjugate form);
    robust mixture: the posterior tail against scipy quadrature of
    [(1 - w) Gamma(a + d0, b + E0) + w Gamma(a, b)] x likelihood."""
    power = _one_arm(arms__treatment__prior={
        "distribution": "gamma", "shape": 1, "rate": 1,
        "historical": {"events": 30, "exposure": 600.0},
        "borrowing": {"method": "power", "a0": 0.5}})
    prior = power.arms[0].prior
    assert (prior.a, prior.b) == ((1 + 15.0,), (1 + 300.0,))
    robust = _one_arm(arms__treatment__prior={
        "distribution": "gamma", "shape": 1, "rate": 1,
        "historical": {"events": 30, "exposure": 600.0},
        "borrowing": {"method": "robust-mixture", "vague_weight": 0.2}})
    d, e = 12, 150.0
    got = robust.family.benefit_from(robust, (np.array([[d]]),), (np.array([[e]]),))[0]

    def density(lam: float) -> float:
        p = (0.8 * stats.gamma.pdf(lam, 31, scale=1 / 601)
             + 0.2 * stats.gamma.pdf(lam, 1, scale=1.0))
        return p * lam**d * math.exp(-lam * e)
    points = [0.02, 0.05, 0.08]
    total = integrate.quad(density, 0, 5, points=points, epsabs=0, epsrel=1e-12,
                           limit=400)[0]
    below = integrate.quad(density, 0, 0.05, points=points[:1], epsabs=0, epsrel=1e-12,
                           limit=400)[0]
    assert got == pytest.approx(below / total, abs=1e-9)


def test_piecewise_mixture_benefit_matches_double_quadrature() -> None:
    """Two periods, a two-component gamma mixture shared by the periods: Pr(6 h1 + 6 h2 <
    limit | data) against scipy dblquad of the joint prior x likelihood over the region
    (the component weights across periods, the series and the landmark together)."""
    prior = {"distribution": "gamma-mixture", "components": [
        {"weight": 0.7, "shape": 2.0, "rate": 60.0}, {"weight": 0.3, "shape": 1.0,
                                                      "rate": 10.0}]}
    design = _one_arm(endpoint__periods=[0, 6], endpoint__relative_hazard=[1, 0.5],
                      endpoint__benchmark_scale="survival", endpoint__landmark=12.0,
                      hypothesis__benchmark=0.75, arms__treatment__prior=prior)
    d, e = np.array([5.0, 2.0]), np.array([140.0, 60.0])
    got = design.family.benefit_from(design, (d[None],), (e[None],))[0]
    limit = -math.log(0.75)

    def joint(h2: float, h1: float) -> float:
        p = sum(w * stats.gamma.pdf(h1, a, scale=1 / b) * stats.gamma.pdf(h2, a, scale=1 / b)
                for w, a, b in ((0.7, 2.0, 60.0), (0.3, 1.0, 10.0)))
        return p * h1**5 * h2**2 * math.exp(-140 * h1 - 60 * h2)
    top = 0.5  # beyond it the posterior mass is below 1e-12 in each period (Poisson tail)
    total = integrate.dblquad(joint, 0, top, 0, top, epsabs=0, epsrel=1e-9)[0]
    inside = integrate.dblquad(joint, 0, limit / 6, 0, lambda h1: limit / 6 - h1,
                               epsabs=0, epsrel=1e-9)[0]
    assert got == pytest.approx(inside / total, abs=1e-7)


def test_effective_sample_size_of_a_gamma_prior_is_its_shape_in_events() -> None:
    """Gamma(a, b) on a hazard: the FDA (2010) n V1 / V2 - n with a flat-on-log-hazard
    reference equals a exactly (V1 = n / E^2, V2 = (a + n) / (b + E)^2 at E = n b / a)."""
    design = _one_arm()
    ess = design.family.effective_sample_size(design)["treatment"]
    assert ess["simple"] == 2.0
    assert ess["fda"]["ess"] == pytest.approx(2.0, rel=1e-12)


def test_simulated_look_one_matches_the_gamma_law_of_the_time_at_risk() -> None:
    """Without [conduct], the time at risk of n subjects is Gamma(n, lambda) (scipy), so
    Pr(stop for efficacy at look 1) = Pr(T_1 >= exposure bound) and Pr(stop for futility
    at look 1) = Pr(T_1 < futility bound); the generic study loop's simulation agrees
    within 4 SE."""
    design = _one_arm(simulation={"method": "monte-carlo", "replicates": 40000, "seed": 5})
    table = design.family.boundary_table(design)
    oc = octrial.evaluate(design)
    for i, lam in enumerate(design.scenarios.values):
        gamma = stats.gamma(20, scale=1 / lam[0])
        for column, p in (("look1_stop_efficacy", gamma.sf(table["efficacy_bound"].iloc[0])),
                          ("look1_stop_futility", gamma.cdf(table["futility_bound"].iloc[0]))):
            got = float(oc[column].iloc[i])
            se = math.sqrt(p * (1 - p) / 40000)
            assert abs(got - p) < 4 * se + 1e-12, (column, got, p)
