"""Time-to-event endpoints: the family's maths, the subject-level simulator of
event-driven studies, the [conduct] table and the calendar columns, each against a
source outside the project (named beside each check)."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy import integrate, optimize, stats

import octrial
from octrial.cli import main
from octrial.conduct.arrivals import fill_enrolment_times
from octrial.conduct.model import Accrual
from octrial.simulation import event_driven as ed
from tests.helpers import build

Z = 4.0  # Monte Carlo agreement within 4 standard errors

ONE_ARM: dict[str, Any] = {
    "schema": 1, "name": "tte-one-arm",
    "endpoint": {"type": "time-to-event", "benchmark_scale": "survival", "landmark": 12.0},
    "hypothesis": {"benchmark": 0.8},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1.0, "rate": 50.0}}},
    "conduct": {"enrolment_rate": [2.0, 6.0], "period_starts": [0.0, 4.0],
                "max_enrolment": 400, "dropout_hazard": 0.01},
    "looks": {"events": [20, 45], "efficacy": [0.995, 0.975], "futility": 0.1},
    "scenarios": {"treatment": [0.0186, 0.011]},
    "simulation": {"replicates": 20000, "seed": 5},
}

TWO_ARM: dict[str, Any] = {
    "schema": 1, "name": "tte-two-arm",
    "endpoint": {"type": "time-to-event"},
    "hypothesis": {"comparison": "ratio", "margin": 0.0},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 0.01, "rate": 0.01}},
             "control": {"prior": {"distribution": "gamma", "shape": 0.01, "rate": 0.01}}},
    "conduct": {"enrolment_rate": 30.0, "max_enrolment": 700},
    "looks": {"events": [247], "efficacy": [0.975]},
    "scenarios": {"control": [0.05], "ratio": [0.7]},
    "simulation": {"replicates": 4000, "seed": 9},
}


# -- posterior maths ------------------------------------------------------------------
def _kernel_benefit(events: list[float], exposure: list[float], priors: list[tuple],
                    claim: float, lower: bool = True) -> float:
    arms, width = len(priors), max(len(p[0]) for p in priors)
    log_w, a, b = np.full((arms, width), -np.inf), np.ones((arms, width)), np.ones((arms, width))
    for j, (w, aj, bj) in enumerate(priors):
        log_w[j, :len(w)], a[j, :len(w)], b[j, :len(w)] = np.log(w), aj, bj
    return ed.benefit_at(np.array(events, float), np.array(exposure, float), log_w, a, b,
                         claim, lower)


@pytest.mark.parametrize(("a", "b", "d", "e", "x"), [(1.0, 50.0, 20, 900.0, 0.0186),
                                                     (3.0, 10.0, 7, 120.0, 0.05)])
def test_one_arm_posterior_tail_is_a_poisson_and_a_chi_square_tail(a, b, d, e, x) -> None:
    # Gamma-Poisson identity for integer shape n: Pr(Gamma(n, rate r) <= x) =
    # Pr(Poisson(r x) >= n), and 2 r lambda ~ chi-square(2 n) (scipy.stats; e.g. Johnson,
    # Kotz & Balakrishnan, Continuous Univariate Distributions, recalled from memory).
    n, r = a + d, b + e
    value = _kernel_benefit([d], [e], [([1.0], [a], [b])], x)
    assert value == pytest.approx(stats.poisson.sf(n - 1, r * x), rel=1e-10)
    assert value == pytest.approx(stats.chi2.cdf(2 * r * x, 2 * n), rel=1e-10)


def test_two_arm_hazard_ratio_probability_against_quadrature() -> None:
    # Pr(lambda_T / lambda_C < c) for independent gamma posteriors, by scipy.integrate.quad
    # of the control density times the treatment CDF at c lambda_C (no beta identity).
    post_t, post_c, c = (12.5, 900.0), (20.2, 1000.0), 0.8
    value = _kernel_benefit([12.0, 20.0], [880.0, 990.0],
                            [([1.0], [0.5], [20.0]), ([1.0], [0.2], [10.0])], c)

    def integrand(lam: float) -> float:
        return (stats.gamma.pdf(lam, post_c[0], scale=1 / post_c[1])
                * stats.gamma.cdf(c * lam, post_t[0], scale=1 / post_t[1]))

    expected = integrate.quad(integrand, 0, np.inf, epsabs=0, epsrel=1e-12, limit=200)[0]
    assert value == pytest.approx(expected, rel=1e-8)


def test_kernel_posterior_equals_the_family_posterior_for_mixtures() -> None:
    # The numba kernel and the family's numpy maths (what reports and checks use) give
    # the same B for a two-component mixture prior on both arms.
    design = build(TWO_ARM, **{
        "arms__treatment__prior": {"distribution": "gamma-mixture", "components": [
            {"weight": 0.6, "shape": 2.0, "rate": 40.0}, {"weight": 0.4, "shape": 0.5,
                                                          "rate": 5.0}]}})
    family = design.family
    events, exposure = (14.0, 25.0), (300.0, 410.0)
    numpy_value = family.benefit_at(design, (np.array([exposure[0]]), np.array([exposure[1]])),
                                    events)[0]
    priors = [(a.prior.weights, a.prior.a, a.prior.b) for a in design.arms]
    assert _kernel_benefit(list(events), list(exposure), priors,
                           design.hypothesis.threshold) == pytest.approx(numpy_value, abs=1e-12)


# -- samplers -------------------------------------------------------------------------
def test_poisson_enrolment_counts_per_period_follow_scipy_poisson() -> None:
    # A Poisson process with rate 2 on [0, 4) and 6 afterwards: counts in [0, 4) and in
    # [4, 10) are Poisson(8) and Poisson(36) (chi-square against scipy.stats.poisson).
    rng = np.random.default_rng(3)
    rates, starts = np.array([2.0, 6.0]), np.array([0.0, 4.0])
    out = np.empty(120)
    first, second = [], []
    for _ in range(4000):
        fill_enrolment_times(rng.standard_exponential(120), 0, rates, starts, np.zeros(1), out)
        first.append(np.count_nonzero(out < 4.0))
        second.append(np.count_nonzero((out >= 4.0) & (out < 10.0)))
    for counts, mean in ((np.array(first), 8.0), (np.array(second), 36.0)):
        support = np.arange(int(stats.poisson.ppf(1e-4, mean)), int(stats.poisson.isf(1e-4, mean)))
        expected = stats.poisson.pmf(support, mean) * counts.size
        observed = np.array([np.count_nonzero(counts == k) for k in support])
        keep = expected >= 5
        obs = np.append(observed[keep], counts.size - observed[keep].sum())
        exp = np.append(expected[keep], counts.size - expected[keep].sum())
        assert stats.chisquare(obs, exp).pvalue > 1e-3


def test_even_and_fixed_enrolment_are_the_stated_times() -> None:
    # Even arrivals: subject i enters when the cumulative rate reaches i (the definition
    # in docs/design-files.md), computed independently by Accrual.time_of.
    accrual = Accrual((2.0, 10.0), (0.0, 3.0), arrivals="even")
    out = np.empty(40)
    fill_enrolment_times(np.zeros(40), 1, np.array(accrual.rates), np.array(accrual.starts),
                       np.zeros(1), out)
    assert out == pytest.approx([accrual.time_of(i) for i in range(1, 41)], abs=1e-12)
    times = np.sort(np.random.default_rng(1).uniform(0, 9, 40))
    fill_enrolment_times(np.zeros(40), 2, np.ones(1), np.zeros(1), times, out)
    assert np.array_equal(out, times)


def _subjects(data: dict[str, Any], truth: tuple[float, ...], seed: int) -> dict[str, Any]:
    """One simulated study's subjects, drawn by the simulator's own routine."""
    design = build(data)
    return ed.EventDrivenSimulator(design, truth, 0.95).subjects(np.random.default_rng(seed))


def test_follow_up_and_censoring_against_exponential_closed_forms() -> None:
    # Competing exponential event (hazard l) and loss (hazard h): the follow-up
    # min(T, C) is Exponential(l + h) and Pr(the event comes first) = l / (l + h)
    # (closed forms; KS and binomial tests in scipy.stats).
    lam, h, n = 0.03, 0.01, 20000
    subjects = _subjects({**ONE_ARM, "conduct": {"enrolment_rate": 100.0, "max_enrolment": n,
                                                 "dropout_hazard": h}}, (lam,), 8)
    follow, seen = subjects["follow"], subjects["seen"]
    assert stats.kstest(follow, stats.expon(scale=1 / (lam + h)).cdf).pvalue > 1e-3
    assert stats.binomtest(int(seen.sum()), n, lam / (lam + h)).pvalue > 1e-3
    assert stats.kstest(follow[seen], stats.expon(scale=1 / (lam + h)).cdf).pvalue > 1e-3


def test_events_and_exposure_agree_with_lifelines() -> None:
    # The per-arm statistics at an analysis time (administrative censoring there) against
    # lifelines on the same subjects: the exponential fit's hazard d / E
    # (ExponentialFitter, lambda = 1 / scale), the event count of the Kaplan-Meier table.
    lifelines = pytest.importorskip("lifelines")
    m, tau = 300, 30.0
    subjects = _subjects({**TWO_ARM, "conduct": {"enrolment_rate": 10.0, "max_enrolment": m,
                                                 "dropout_hazard": 0.01},
                          "looks": {"events": [100], "efficacy": [0.975]}}, (0.02, 0.04), 21)
    enrolled, follow, seen, arm_of = (subjects[k] for k in ("enrolled", "follow", "seen",
                                                             "arm"))
    events, exposure = np.zeros((2, 1)), np.zeros((2, 1))
    entered = ed.piece_statistics(enrolled, follow, seen, arm_of, tau, np.zeros(1), events,
                                  exposure)
    inside = enrolled <= tau
    assert entered == inside.sum()
    for j in range(2):
        mine = inside & (arm_of == j)
        duration = np.minimum(follow[mine], tau - enrolled[mine])
        observed = seen[mine] & (follow[mine] <= tau - enrolled[mine])
        fit = lifelines.ExponentialFitter().fit(duration, observed)
        # lifelines maximises the likelihood numerically: agreement to its tolerance
        assert 1.0 / fit.lambda_ == pytest.approx(events[j, 0] / exposure[j, 0], rel=1e-5)
        assert exposure[j, 0] == pytest.approx(duration.sum(), rel=1e-12)
        km = lifelines.KaplanMeierFitter().fit(duration, observed)
        assert km.event_table["observed"].sum() == events[j, 0]


# -- the simulator against exact results ----------------------------------------------
def _exact_two_looks(design: Any, lam: float) -> tuple[float, float, float]:
    """Pr(efficacy at look 1), Pr(futility at look 1), Pr(success at look 2) of a one-arm
    two-look design, by the gamma-process identity: with a constant hazard the exposure
    at the d-th event is Gamma(d, rate lambda) whatever the entry times and independent
    censoring (the events are a Poisson process in exposure time; time change of a
    counting process, e.g. Andersen et al. 1993, recalled from memory). B increases
    with the exposure, so each rule is an exposure bound; scipy brentq and quad."""
    prior = design.arms[0].prior
    a, b = prior.a[0], prior.b[0]
    d1, d2 = design.looks.n
    lam0 = design.hypothesis.null_value
    tol = 1e-12

    def bound(d: int, threshold: float) -> float:
        return optimize.brentq(lambda e: stats.gamma.cdf(lam0, a + d, scale=1 / (b + e))
                               - (threshold - tol), 1e-9, 1e7, xtol=1e-12)

    e1, f1, e2 = bound(d1, 0.995), bound(d1, 0.1), bound(d2, 0.975)
    first = stats.gamma(d1, scale=1 / lam)
    rest = stats.gamma(d2 - d1, scale=1 / lam)
    success2 = integrate.quad(lambda x: first.pdf(x) * rest.sf(e2 - x), f1, e1,
                              epsabs=0, epsrel=1e-10, limit=200)[0]
    return first.sf(e1), first.cdf(f1), success2


@pytest.mark.parametrize("arrivals", ["poisson", "even"])
def test_one_arm_simulation_matches_the_gamma_process_identity(arrivals: str) -> None:
    design = build(ONE_ARM, conduct__arrivals=arrivals)
    oc = octrial.evaluate(design)
    r = design.simulation.replicates
    for row, lam in zip(oc.itertuples(), design.scenarios.values, strict=True):
        exact = _exact_two_looks(design, lam[0])
        for simulated, p in zip((row.look1_stop_efficacy, row.look1_stop_futility,
                                 row.look2_stop_efficacy), exact, strict=True):
            se = math.sqrt(p * (1 - p) / r)
            assert abs(simulated - p) <= Z * se + 1e-12, (arrivals, lam, simulated, p)
        assert row.look1_events == 20 and row.look2_events == 45


def _schoenfeld_events(hr: float, alpha: float, power: float) -> int:
    """Schoenfeld (1981): d = 4 (z_alpha + z_beta)^2 / log(HR)^2 for 1:1 allocation."""
    z = stats.norm.isf(alpha) + stats.norm.isf(1 - power)
    return math.ceil(4 * z**2 / math.log(hr) ** 2)


def _freedman_events(hr: float, alpha: float, power: float) -> int:
    """Freedman (1982): d = (1 + HR)^2 / (1 - HR)^2 (z_alpha + z_beta)^2 for 1:1."""
    z = stats.norm.isf(alpha) + stats.norm.isf(1 - power)
    return math.ceil((1 + hr) ** 2 / (1 - hr) ** 2 * z**2)


def test_power_at_schoenfeld_and_freedman_event_counts() -> None:
    # A single analysis with vague gamma priors is the Bayesian twin of a one-sided
    # log-rank test at 0.025; at HR 0.7 Schoenfeld's count (247) and Freedman's (253)
    # should give power close to 0.80. Both formulas are approximations (common
    # practice: accurate to about 1-2 points at this size), so within 0.03.
    assert _schoenfeld_events(0.7, 0.025, 0.8) == 247
    assert _freedman_events(0.7, 0.025, 0.8) == 253
    for events in (247, 253):
        design = build(TWO_ARM, looks__events=[events])
        power = float(octrial.evaluate(design)["prob_success"].iloc[0])
        assert abs(power - 0.80) < 0.03, (events, power)


def test_jobs_do_not_change_the_numbers(tmp_path: Any) -> None:
    # Reproducibility: one seed, the same oc.csv whatever --jobs or backend.
    path = tmp_path / "design.toml"
    path.write_text(_toml(build_data(ONE_ARM, replicates=3000)))
    runs = []
    # the scenarios are spread over the workers
    for name, options in (("one", ["--jobs", "1"]), ("two", ["--jobs", "2"]),
                          ("dask", ["--jobs", "2", "--backend", "dask"])):
        if name == "dask":
            pytest.importorskip("distributed")
        out = tmp_path / name
        result = CliRunner().invoke(main, ["run", str(path), "--out", str(out), *options,
                                           "--quiet"])
        assert result.exit_code == 0, result.output
        runs.append((out / "oc.csv").read_text())
    assert runs[0] == runs[1] == runs[2]
    oc = pd.read_csv(tmp_path / "one" / "oc.csv")
    assert {"expected_duration", "duration_q50", "look2_time", "look2_events"} <= set(oc)


# -- bad input ------------------------------------------------------------------------
BAD = [
    ({"conduct": {"enrolment_rate": 0, "max_enrolment": 400}}, "conduct.enrolment_rate"),
    ({"conduct": {"enrolment_rate": [2, 6], "period_starts": [0, 0], "max_enrolment": 400}},
     "conduct.period_starts"),
    ({"conduct": {"enrolment_rate": 5, "max_enrolment": 40}}, "looks.events"),
    ({"conduct": {"enrolment_times": [0, 1, 2], "max_enrolment": 400}},
     "conduct.enrolment_times"),
    ({"conduct": {"enrolment_rate": 5, "enrolment_times": [0], "max_enrolment": 400}},
     "conduct.enrolment_rate"),
    ({"conduct": {"enrolment_rate": 5, "max_enrolment": 400, "outcome_lag": 3}},
     "conduct.outcome_lag"),
    ({"conduct": {"enrolment_rate": 5, "max_enrolment": 400, "dropout_proportion": 1.2,
                  "dropout_by": 12}}, "conduct.dropout_proportion"),
    ({"conduct": {"enrolment_rate": 5, "max_enrolment": 50, "dropout_hazard": 0.5}},
     "looks.events"),
]


@pytest.mark.parametrize(("change", "key"), BAD, ids=[k for _, k in BAD])
def test_bad_conduct_exits_2_naming_the_key(change: dict, key: str, tmp_path: Any) -> None:
    path = tmp_path / "design.toml"
    path.write_text(_toml({**ONE_ARM, **change}))
    result = CliRunner().invoke(main, ["run", str(path), "--out", str(tmp_path / "out")])
    assert result.exit_code == 2, result.output
    assert key in result.output and "expected" in result.output
    assert not (tmp_path / "out").exists()


def test_looks_by_events_on_other_endpoints_are_refused_plainly(tmp_path: Any) -> None:
    # [conduct] serves every endpoint (tests/test_conduct_input.py); events only these
    from tests.helpers import ONE_ARM as BINARY

    looks = {k: v for k, v in BINARY["looks"].items() if k != "n"}
    path = tmp_path / "design.toml"
    path.write_text(_toml({**BINARY, "looks": {**looks, "events": [10, 20, 30]},
                           "conduct": {"enrolment_rate": 5, "max_enrolment": 30}}))
    out = tmp_path / "out"
    result = CliRunner().invoke(main, ["run", str(path), "--out", str(out)])
    assert not out.exists()
    assert result.exit_code == 2
    assert "looks.events" in result.output and "time-to-event" in result.output


def build_data(data: dict[str, Any], replicates: int) -> dict[str, Any]:
    return {**data, "simulation": {**data["simulation"], "replicates": replicates}}


def _toml(data: dict[str, Any]) -> str:
    from octrial.design.write import dumps

    return dumps(data)
