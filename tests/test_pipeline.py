"""Pipeline subjects on the count lattice: the exact engine under deterministic timing.

Each check names what it is checked against:

* zero lag: every number of the exact engine equals the engine's own numbers for the same
  design without ``[conduct]`` (byte-identical arrays), and the calendar columns equal
  their closed forms (look k at n_k / rate);
* predictive probability through the pipeline: brute-force enumeration written here,
  over every response sequence of the pipeline and future subjects (beta-binomial
  probabilities of sequences from scipy.special.betaln), over event counts for a count
  endpoint (negative binomial sums from scipy.special.gammaln), and over both arms'
  pipeline and future counts with the two-arm posterior probability by scipy quadrature;
* efficacy reversal: enumeration of the interim and pipeline responses with scipy's
  binomial and beta distributions (binary) and Poisson and gamma distributions (count);
* exact against a Monte Carlo written here with numpy (independent of the library: its
  own timing, thresholds from scipy, its own predictive probability), within 4 standard
  errors, for the stopping probabilities, reversal, duration, enrolment and analysed
  subjects.
"""

from __future__ import annotations

import dataclasses
import itertools

import numpy as np
import pytest
from scipy import integrate, special, stats

from octrial.conduct.model import Accrual, Conduct
from octrial.design.load import load_design
from octrial.engines import choose
from octrial.engines.exact_lattice import ExactLatticeEngine
from octrial.engines.pipeline import pipeline_predictive
from octrial.rules.lattice import build_rule
from tests.helpers import ONE_ARM, TWO_ARM, build

Z = 4.0
EVEN = {"arrivals": "even", "enrolment_rate": 4.0}


def _timed(base, *, lag, max_enrolment, pipeline=True, **changes):
    conduct = {**EVEN, "max_enrolment": max_enrolment, "outcome_lag": lag,
               "analyse_pipeline": pipeline}
    return build(base, conduct=conduct, **changes)


# -- zero lag ---------------------------------------------------------------------------
@pytest.mark.parametrize("name", ["two-arm-randomised", "single-arm-event-rate",
                                  "single-arm-response", "delayed-response"])
def test_zero_lag_equals_the_engine_without_conduct(name):
    design = load_design(f"designs/{name}.toml")
    plain = dataclasses.replace(design, conduct=None)
    timed = dataclasses.replace(design, conduct=Conduct(
        Accrual(rates=(5.0,), arrivals="even"), design.looks.n[-1], 0.0,
        analyse_pipeline=True))
    truths = np.asarray(design.scenarios.values[:4], dtype=float)
    a = ExactLatticeEngine.run(plain, truths)
    b = ExactLatticeEngine.run(timed, truths)
    assert np.array_equal(a.efficacy, b.efficacy)
    assert np.array_equal(a.futility, b.futility)
    # run.json gains only the error bound of the pipeline's final analysis
    assert a.info == {k: v for k, v in b.info.items() if k != "pipeline_quadrature_error_bound"}
    assert np.array_equal(a.estimation.error_moments, b.estimation.error_moments)
    assert np.array_equal(a.estimation.coverage, b.estimation.coverage)
    assert a.extra == {}
    # closed forms: look k at n_k / 5; nobody waits, so enrolled = analysed = n at the stop
    n = np.array(design.looks.n, dtype=float)
    stops = b.efficacy + b.futility
    assert np.allclose(b.extra["expected_enrolled"], stops @ n, rtol=0, atol=1e-12)
    assert np.allclose(b.extra["expected_analysed"], stops @ n, rtol=0, atol=1e-12)
    assert np.allclose(b.extra["expected_duration"], stops @ (n / 5.0), rtol=0, atol=1e-12)
    assert b.extra["look1_time"] == pytest.approx(n[0] / 5.0)
    assert np.all(b.extra["expected_duration_se"] == 0)
    # an empty pipeline reverses nothing when each interim efficacy threshold is at least
    # the final one (the same data meet the lower threshold)
    eff = [e for e in design.looks.efficacy[:-1] if e is not None]
    if all(e >= design.looks.efficacy[-1] for e in eff):
        assert np.all(b.extra["prob_efficacy_reversed"] == 0.0)


# -- predictive probability through the pipeline ----------------------------------------
def _beta_sequence_predictive(a, b, x, n, m, final_n, benchmark, threshold):
    """Brute force: every sequence of m future responses (pipeline then later), each with
    probability B(a + x + s, b + n - x + m - s) / B(a + x, b + n - x)."""
    total = 0.0
    for seq in itertools.product((0, 1), repeat=m):
        s = sum(seq)
        p = np.exp(special.betaln(a + x + s, b + n - x + m - s) - special.betaln(a + x, b + n - x))
        post = stats.beta.sf(benchmark, a + x + s, b + final_n - x - s)
        total += p * (post > threshold)
    return total


def test_predictive_through_pipeline_binary_against_sequences():
    # looks at 6 and 12 outcomes; lag 1 at rate 4: 4 subjects waiting at look 1
    design = _timed(ONE_ARM, lag=1.0, max_enrolment=12,
                    looks={"n": [6, 12], "efficacy": [0.99, 0.9], "futility": 0.05,
                           "futility_predictive": 0.2})
    rule = build_rule(design)
    for x in range(7):
        got = pipeline_predictive(design, (x,), (6,), (10,))
        want = _beta_sequence_predictive(1, 1, x, 6, 6, 12, 0.2, 0.9)
        assert got == pytest.approx(want, abs=1e-12)
        # the engine's one-stage table (all 6 unobserved subjects at once) is the same
        assert rule.looks[0].predictive[x] == pytest.approx(want, abs=1e-12)


def _negative_binomial(shape, rate, m, y):
    """Gamma-Poisson predictive of y events among m subjects of exposure 1."""
    return np.exp(special.gammaln(shape + y) - special.gammaln(shape) - special.gammaln(y + 1)
                  + shape * np.log(rate / (rate + m)) + y * np.log(m / (rate + m)))


def test_predictive_through_pipeline_count_against_sums():
    data = {**ONE_ARM, "endpoint": {"type": "count", "exposure": 1.0, "better": "lower"},
            "hypothesis": {"benchmark": 1.5},
            "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1.5,
                                             "rate": 1.0}}},
            "scenarios": {"treatment": [1.0, 1.5]}}
    design = _timed(data, lag=1.0, max_enrolment=16,
                    looks={"n": [8, 16], "efficacy": [0.999, 0.9], "futility": 0.05,
                           "futility_predictive": 0.2})
    shape, rate = 1.5, 1.0
    for x in (0, 3, 8, 14):
        a, r = shape + x, rate + 8
        total = 0.0
        for yp in range(200):  # pipeline: 4 subjects; then 4 more
            pp = _negative_binomial(a, r, 4, yp)
            yf = np.arange(400)
            pf = _negative_binomial(a + yp, r + 4, 4, yf)
            ok = stats.gamma.cdf(1.5, shape + x + yp + yf, scale=1 / (rate + 16)) > 0.9
            total += pp * np.sum(pf * ok)
        got = pipeline_predictive(design, (x,), (8,), (12,))
        assert got == pytest.approx(total, abs=1e-9)


def _two_arm_benefit(xt, nt, xc, nc):
    """Pr(p_T - p_C > 0) with beta(1, 1) priors, by scipy quadrature."""
    f = lambda p: stats.beta.pdf(p, 1 + xc, 1 + nc - xc) * stats.beta.sf(p, 1 + xt, 1 + nt - xt)  # noqa: E731
    return integrate.quad(f, 0, 1, epsabs=1e-12, epsrel=1e-12)[0]


def test_predictive_through_pipeline_two_arms_against_sums():
    # 1:1, looks at 8 and 16 outcomes; lag 1 at rate 4: 2 + 2 subjects waiting at look 1
    design = _timed(TWO_ARM, lag=1.0, max_enrolment=16,
                    looks={"n": [8, 16], "efficacy": [0.99, 0.9], "futility": 0.05},
                    scenarios={"control": [0.3], "effect": [0.0]})

    def bb(x, n, m):
        y = np.arange(m + 1)
        log_choose = special.gammaln(m + 1) - special.gammaln(y + 1) - special.gammaln(m - y + 1)
        return np.exp(log_choose + special.betaln(1 + x + y, 1 + n - x + m - y)
                      - special.betaln(1 + x, 1 + n - x))

    for xt, xc in ((3, 1), (2, 2), (4, 0)):
        total = 0.0
        for ypt, ppt in enumerate(bb(xt, 4, 2)):
            for ypc, ppc in enumerate(bb(xc, 4, 2)):
                for yft, pft in enumerate(bb(xt + ypt, 6, 2)):
                    for yfc, pfc in enumerate(bb(xc + ypc, 6, 2)):
                        st, sc = xt + ypt + yft, xc + ypc + yfc
                        ok = _two_arm_benefit(st, 8, sc, 8) > 0.9
                        total += ppt * ppc * pft * pfc * ok
        got = pipeline_predictive(design, (xt, xc), (4, 4), (6, 6))
        assert got == pytest.approx(total, abs=1e-9)


# -- efficacy reversal ------------------------------------------------------------------
def test_reversal_binary_against_enumeration():
    # looks at 20 and 40 outcomes; lag 3 at rate 4: look 1 at time 8 with 32 enrolled
    design = _timed(ONE_ARM, lag=3.0, max_enrolment=40,
                    looks={"n": [20, 40], "efficacy": [0.99, 0.95]},
                    scenarios={"treatment": [0.2, 0.3, 0.45]})
    out = ExactLatticeEngine.run(design, np.array([[0.2], [0.3], [0.45]]))
    for i, theta in enumerate((0.2, 0.3, 0.45)):
        want = 0.0
        for x in range(21):
            if stats.beta.sf(0.2, 1 + x, 21 - x) <= 0.99:
                continue
            y = np.arange(13)
            fails = stats.beta.sf(0.2, 1 + x + y, 1 + 32 - x - y) <= 0.95
            want += stats.binom.pmf(x, 20, theta) * np.sum(stats.binom.pmf(y, 12, theta) * fails)
        assert want > 0
        assert out.extra["prob_efficacy_reversed"][i] == pytest.approx(want, rel=1e-9, abs=1e-15)
    assert np.array_equal(out.extra["look1_time"], [8.0] * 3)
    # without analyse_pipeline there is no reversal column and nobody waits for it
    plain = _timed(ONE_ARM, lag=3.0, max_enrolment=40, pipeline=False,
                   looks={"n": [20, 40], "efficacy": [0.99, 0.95]})
    got = ExactLatticeEngine.run(plain, np.array([[0.3]]))
    assert "prob_efficacy_reversed" not in got.extra
    stop = got.efficacy[0, 0] + got.futility[0, 0]
    assert got.extra["expected_analysed"][0] == pytest.approx(20 * stop + 40 * (1 - stop))
    assert got.extra["expected_enrolled"][0] == pytest.approx(32 * stop + 40 * (1 - stop))


def test_reversal_count_against_enumeration():
    data = {**ONE_ARM, "endpoint": {"type": "count", "exposure": 1.0, "better": "lower"},
            "hypothesis": {"benchmark": 1.5},
            "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1.5,
                                             "rate": 1.0}}},
            "looks": {"n": [10, 20], "efficacy": [0.99, 0.95]},
            "scenarios": {"treatment": [0.8, 1.0]}}
    design = _timed(data, lag=2.0, max_enrolment=20)  # look 1 at 4.5: 18 enrolled, 8 waiting
    out = ExactLatticeEngine.run(design, np.array([[0.8], [1.0]]))
    for i, lam in enumerate((0.8, 1.0)):
        want = 0.0
        for x in range(80):
            if stats.gamma.cdf(1.5, 1.5 + x, scale=1 / 11) <= 0.99:
                continue
            y = np.arange(120)
            fails = stats.gamma.cdf(1.5, 1.5 + x + y, scale=1 / 19) <= 0.95
            want += stats.poisson.pmf(x, 10 * lam) * np.sum(stats.poisson.pmf(y, 8 * lam) * fails)
        assert want > 0
        assert out.extra["prob_efficacy_reversed"][i] == pytest.approx(want, rel=1e-7, abs=1e-14)


# -- exact against a Monte Carlo written here -------------------------------------------
def _simulate_binary(theta, r, rng, *, n, enrolled, final_pp, eff, fut, fut_pp, final_thr,
                     times, pipeline_end):
    """Two looks, one arm, beta(1, 1) prior, benchmark 0.2; even arrivals, fixed lag."""
    x1 = rng.binomial(n[0], theta, r)
    post1 = stats.beta.sf(0.2, 1 + x1, 1 + n[0] - x1)
    pp1 = final_pp[x1]
    efficacy1 = post1 > eff
    futility1 = ~efficacy1 & ((post1 < fut) | (pp1 < fut_pp))
    stop = efficacy1 | futility1
    y = rng.binomial(enrolled - n[0], theta, r)
    after = stats.beta.sf(0.2, 1 + x1 + y, 1 + enrolled - x1 - y)
    reversed_ = efficacy1 & ~(after > final_thr)
    x2 = x1 + rng.binomial(n[1] - n[0], theta, r)
    success = ~stop & (stats.beta.sf(0.2, 1 + x2, 1 + n[1] - x2) > final_thr)
    duration = np.where(stop, pipeline_end, times[1])
    enrolled_ = np.where(stop, enrolled, n[1])
    return {"eff1": efficacy1, "fut1": futility1, "success": success,
            "reversed": reversed_, "duration": duration, "enrolled": enrolled_}


def test_exact_against_independent_monte_carlo_binary():
    # looks at 20 and 40 outcomes, rate 4 and lag 3: look 1 at 8 (32 enrolled), look 2 at
    # 13; a stop at look 1 waits for the 32nd subject's outcome at 32/4 + 3 = 11
    looks = {"n": [20, 40], "efficacy": [0.99, 0.95], "futility": 0.1,
             "futility_predictive": 0.1}
    design = _timed(ONE_ARM, lag=3.0, max_enrolment=40, looks=looks,
                    scenarios={"treatment": [0.2, 0.35]})
    truths = np.array([[0.2], [0.35]])
    exact = ExactLatticeEngine.run(design, truths)
    # the test's own predictive probability at look 1: beta-binomial over the 20 subjects
    # without an outcome (12 in the pipeline, 8 to come)
    y = np.arange(21)
    final_pp = np.array([
        np.sum(np.exp(special.gammaln(21) - special.gammaln(y + 1) - special.gammaln(21 - y)
                      + special.betaln(1 + x + y, 21 - x + 20 - y) - special.betaln(1 + x, 21 - x))
               * (stats.beta.sf(0.2, 1 + x + y, 41 - x - y) > 0.95)) for x in range(21)])
    r = 200_000
    rng = np.random.default_rng(20261205)
    for i, theta in enumerate((0.2, 0.35)):
        sim = _simulate_binary(theta, r, rng, n=(20, 40), enrolled=32, final_pp=final_pp,
                               eff=0.99, fut=0.1, fut_pp=0.1, final_thr=0.95,
                               times=(8.0, 13.0), pipeline_end=11.0)
        pairs = [(exact.efficacy[i, 0], sim["eff1"]), (exact.futility[i, 0], sim["fut1"]),
                 (exact.efficacy[i, 1], sim["success"]),
                 (exact.extra["prob_efficacy_reversed"][i], sim["reversed"]),
                 (exact.extra["expected_duration"][i], sim["duration"]),
                 (exact.extra["expected_enrolled"][i], sim["enrolled"]),
                 (exact.extra["expected_analysed"][i], sim["enrolled"])]
        for want, draws in pairs:
            draws = draws.astype(float)
            se = draws.std() / np.sqrt(r)
            assert abs(draws.mean() - want) <= Z * se + 1e-12, (want, draws.mean(), se)
        assert exact.extra["look2_time"][i] == 13.0
        assert exact.extra["duration_q90"][i] in (11.0, 13.0)


def test_exact_against_independent_monte_carlo_count():
    # one arm, Poisson events, gamma(1.5, 1) prior, lower is better against 1.5; looks at
    # 10 and 20 outcomes, rate 4, lag 2: look 1 at 4.5 with 18 enrolled (8 waiting)
    data = {**ONE_ARM, "endpoint": {"type": "count", "exposure": 1.0, "better": "lower"},
            "hypothesis": {"benchmark": 1.5},
            "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1.5,
                                             "rate": 1.0}}},
            "looks": {"n": [10, 20], "efficacy": [0.99, 0.95], "futility": 0.1},
            "scenarios": {"treatment": [1.0, 1.5]}}
    design = _timed(data, lag=2.0, max_enrolment=20)
    truths = np.array([[1.0], [1.5]])
    exact = ExactLatticeEngine.run(design, truths)
    r = 200_000
    rng = np.random.default_rng(7)
    for i, lam in enumerate((1.0, 1.5)):
        x1 = rng.poisson(10 * lam, r)
        post1 = stats.gamma.cdf(1.5, 1.5 + x1, scale=1 / 11)
        eff1, fut1 = post1 > 0.99, post1 < 0.1
        y = rng.poisson(8 * lam, r)
        rev = eff1 & ~(stats.gamma.cdf(1.5, 1.5 + x1 + y, scale=1 / 19) > 0.95)
        x2 = x1 + rng.poisson(10 * lam, r)
        success = ~(eff1 | fut1) & (stats.gamma.cdf(1.5, 1.5 + x2, scale=1 / 21) > 0.95)
        duration = np.where(eff1 | fut1, 18 / 4 + 2.0, 20 / 4 + 2.0)
        for want, draws in ((exact.efficacy[i, 0], eff1), (exact.futility[i, 0], fut1),
                            (exact.efficacy[i, 1], success),
                            (exact.extra["prob_efficacy_reversed"][i], rev),
                            (exact.extra["expected_duration"][i], duration)):
            draws = draws.astype(float)
            se = draws.std() / np.sqrt(r)
            assert abs(draws.mean() - want) <= Z * se + 1e-12, (want, draws.mean(), se)


# -- engine choice ----------------------------------------------------------------------
def test_exact_only_for_deterministic_conduct():
    design = _timed(ONE_ARM, lag=3.0, max_enrolment=40,
                    looks={"n": [20, 40], "efficacy": [0.99, 0.95]})
    assert choose(design, "auto") is ExactLatticeEngine
    poisson = dataclasses.replace(design, conduct=dataclasses.replace(
        design.conduct, accrual=Accrual(rates=(4.0,))))
    assert ExactLatticeEngine.unsupported(poisson) is not None
    assert choose(poisson, "auto") is not ExactLatticeEngine
    lost = dataclasses.replace(design, conduct=dataclasses.replace(
        design.conduct, dropout_hazard=0.01))
    assert choose(lost, "auto") is not ExactLatticeEngine
    normal = load_design("designs/two-arm-continuous-score.toml")
    normal = dataclasses.replace(normal, looks=dataclasses.replace(
        normal.looks, futility_predictive=(None,) * normal.looks.count))
    timed = dataclasses.replace(normal, conduct=Conduct(Accrual(rates=(5.0,), arrivals="even"),
                                                        normal.looks.n[-1], 1.0))
    assert choose(timed, "auto").name == "monte-carlo"


# -- exact against the library's calendar simulator -------------------------------------
def test_exact_against_calendar_simulation_looks_by_time_two_to_one():
    # 2:1 allocation, looks by calendar time; source of the check: the Monte Carlo engine
    # of simulation/calendar_studies.py (its own timeline, drawn study by study)
    from octrial.engines.monte_carlo import MonteCarloEngine, MonteCarloSettings

    design = build(TWO_ARM, arms__treatment__allocation=2,
                   conduct={**EVEN, "max_enrolment": 60, "outcome_lag": 2.5,
                            "analyse_pipeline": True},
                   looks={"time": [8.0, 17.5], "efficacy": [0.95, 0.9], "futility": 0.2,
                          "futility_predictive": 0.1},
                   scenarios={"control": [0.3], "effect": [0.0, 0.3]})
    truths = np.array([[0.3, 0.3], [0.6, 0.3]])
    exact = ExactLatticeEngine.run(design, truths)
    r = 40_000
    mc = MonteCarloEngine.run(design, truths,
                              settings=MonteCarloSettings(replicates=r, seed=17))
    for got, want in ((mc.efficacy, exact.efficacy), (mc.futility, exact.futility)):
        se = np.sqrt(want * (1 - want) / r)
        assert np.all(np.abs(got - want) <= Z * se + 1e-12)
    p = exact.extra["prob_efficacy_reversed"]
    assert np.all(p > 0)
    assert np.all(np.abs(mc.extra["prob_efficacy_reversed"] - p)
                  <= Z * np.sqrt(p * (1 - p) / r))
    for name in ("duration", "enrolled", "analysed"):
        got, se = mc.extra[f"expected_{name}"], mc.extra[f"expected_{name}_se"]
        assert np.all(np.abs(got - exact.extra[f"expected_{name}"]) <= Z * se + 1e-12), name
    for k in (1, 2):
        assert np.allclose(mc.extra[f"look{k}_time"], exact.extra[f"look{k}_time"])


def test_count_rule_in_calendar_time_without_pipeline_analysis():
    # a rule stated in counts decides at the looks' outcome counts; only the pipeline's
    # final analysis needs a probability threshold. Source: the engine without [conduct]
    # (looks by n: the same counts) and the closed form of the look times n_k / 4 + lag.
    data = {**ONE_ARM, "looks": {"n": [10, 20], "efficacy_count": ["none", 7],
                                 "futility_count": [1, "none"]}}
    plain = build(data)
    timed = _timed(data, lag=2.0, max_enrolment=20, pipeline=False)
    truths = np.array([[0.2], [0.4]])
    a, b = ExactLatticeEngine.run(plain, truths), ExactLatticeEngine.run(timed, truths)
    assert np.array_equal(a.efficacy, b.efficacy) and np.array_equal(a.futility, b.futility)
    assert b.extra["look1_time"][0] == 10 / 4 + 2.0
    refused = _timed(data, lag=2.0, max_enrolment=20, pipeline=True)
    assert "counts" in ExactLatticeEngine.unsupported(refused)
