"""Checks of the patient-level simulator of event-driven studies
(:mod:`octrial.simulation.event_driven`) against sources outside the project: scipy's
distributions, closed forms of censoring, lifelines' estimators on the same subjects,
scipy's gamma cdf and quadrature for the posterior probabilities, the exact type I error
of a one-look design and an independent numpy implementation.

Every Monte Carlo comparison uses a tolerance of 4 standard errors (or a KS p-value above
1e-4) with a fixed seed, so it is deterministic and fails only if the model is wrong.
"""

from __future__ import annotations

import dataclasses
import math
import re

import numpy as np
import pytest
from scipy import integrate, stats

from octrial.conduct.model import Accrual
from octrial.rules.stop import CONTINUE, EFFICACY, Rule
from octrial.simulation import event_driven as ed
from octrial.simulation.calendar import HEAD
from tests.event_driven_reference import numpy_studies

LAMBDA_C = math.log(2.0) / 12.0  # control median 12 months


def setup(**change) -> ed.EventDrivenSetup:
    """A two-arm, three-look event-driven study (invented numbers)."""
    base = dict(hazards=((0.75 * LAMBDA_C,), (LAMBDA_C,)), claim=1.0,
                efficacy=(0.999, 0.99, 0.975), futility=(0.2, 0.5, None),
                targets=(30.0, 60.0, 90.0), accrual=Accrual(rates=(10.0,)),
                max_enrolment=150, prior_a=(((0.01,),), ((0.01,),)),
                prior_b=(((0.01,),), ((0.01,),)), dropout_hazard=0.01)
    base.update(change)
    return ed.EventDrivenSetup(**base)


def subjects(s: ed.EventDrivenSetup, seed: int) -> dict[str, np.ndarray]:
    return ed.PatientLevelSimulator(s).subjects(np.random.default_rng(seed))


def statistics_at(subj: dict[str, np.ndarray], tau: float, arms: int,
                  starts: tuple[float, ...] = (0.0,)) -> tuple[np.ndarray, np.ndarray, int]:
    events = np.zeros((arms, len(starts)))
    exposure = np.zeros((arms, len(starts)))
    entered = ed.piece_statistics(subj["enrolled"], subj["follow"], subj["seen"],
                                  subj["arm"], tau, np.asarray(starts), events, exposure)
    return events, exposure, entered


def test_event_times_follow_scipy_expon() -> None:
    """Source: scipy.stats.expon (scale = 1 / hazard); no dropout, so every follow-up
    time is the event time."""
    s = setup(dropout_hazard=0.0, max_enrolment=4000)
    subj = subjects(s, 1)
    assert subj["seen"].all()
    for j, (hazard,) in enumerate(s.hazards):
        times = subj["follow"][subj["arm"] == j]
        assert stats.kstest(times, stats.expon(scale=1.0 / hazard).cdf).pvalue > 1e-4


def piecewise_cdf(t: np.ndarray, hazards: tuple[float, ...],
                  starts: tuple[float, ...]) -> np.ndarray:
    """1 - exp(-H(t)) with the cumulative hazard H summed piece by piece (the definition
    of the piecewise-exponential distribution)."""
    ends = (*starts[1:], np.inf)
    h = sum(rate * np.clip(t - a, 0.0, b - a) for rate, a, b in
            zip(hazards, starts, ends, strict=True))
    return 1.0 - np.exp(-h)


def test_piecewise_event_times_follow_the_piecewise_cdf() -> None:
    """Source: the piecewise-exponential cdf 1 - exp(-H(t)) (definition), a delayed effect
    (treatment's hazard drops after 6 months); also the pieces' boundaries are hit."""
    starts = (0.0, 6.0, 18.0)
    s = setup(dropout_hazard=0.0, max_enrolment=6000, hazard_starts=starts,
              hazards=((LAMBDA_C, 0.5 * LAMBDA_C, 0.2), (LAMBDA_C, LAMBDA_C, LAMBDA_C)))
    subj = subjects(s, 2)
    for j, row in enumerate(s.hazards):
        times = subj["follow"][subj["arm"] == j]
        assert stats.kstest(times, lambda t, row=row: piecewise_cdf(t, row, starts)
                            ).pvalue > 1e-4
    # and the two arms differ (the check can fail if the pieces were ignored)
    assert stats.ks_2samp(subj["follow"][subj["arm"] == 0],
                          subj["follow"][subj["arm"] == 1]).pvalue < 1e-6


def censoring_setup(arrivals: str, m: int) -> ed.EventDrivenSetup:
    return setup(hazards=((0.05,),), claim=0.05, targets=(30.0,), trigger="time",
                 efficacy=(0.9,), futility=(None,),
                 accrual=Accrual(rates=(10.0,), arrivals=arrivals), max_enrolment=m,
                 prior_a=(((1.0,),),), prior_b=(((1.0,),),), dropout_hazard=0.02)


def test_censoring_proportions_against_closed_forms_uniform_entry() -> None:
    """Closed form (exponential competing risks): a subject enrolled at s has its event
    seen by calendar time tau with probability lambda / nu (1 - exp(-nu (tau - s))) and
    is lost to follow-up by then with mu / nu times the same, nu = lambda + mu; even
    arrivals enter at s_i = i / rate (uniform entry). Counts over 400 studies within 4 SE
    (sum of Bernoulli variances)."""
    lam, mu, tau = 0.05, 0.02, 30.0
    s = censoring_setup("even", 200)
    sim = ed.PatientLevelSimulator(s)
    rng = np.random.default_rng(3)
    entry = np.arange(1, 201) / 10.0
    nu = lam + mu
    reach = np.where(entry <= tau, -np.expm1(-nu * np.clip(tau - entry, 0, None)), 0.0)
    seen = lost = 0
    for _ in range(400):
        subj = sim.subjects(rng)
        assert np.allclose(subj["enrolled"], entry)
        ended = subj["enrolled"] + subj["follow"] <= tau
        seen += int((ended & subj["seen"]).sum())
        lost += int((ended & ~subj["seen"]).sum())
    for observed, share in ((seen, lam / nu), (lost, mu / nu)):
        p = share * reach
        expected, variance = 400 * p.sum(), 400 * (p * (1 - p)).sum()
        assert abs(observed - expected) < 4 * math.sqrt(variance)


def test_censoring_proportions_against_closed_forms_poisson_entry() -> None:
    """Closed form (marking theorem of the Poisson process; Kingman 1993, Poisson
    Processes, section 5.2, recalled from memory): with Poisson entry at rate r (the
    maximum enrolment not reached by tau), the events seen by tau are Poisson with mean
    r lambda / nu [tau - (1 - exp(-nu tau)) / nu], and the losses the same with mu.
    Means over 400 studies within 4 SE (Poisson variance)."""
    lam, mu, rate, tau = 0.05, 0.02, 10.0, 30.0
    s = censoring_setup("poisson", 1000)
    sim = ed.PatientLevelSimulator(s)
    rng = np.random.default_rng(13)
    seen, lost = [], []
    for _ in range(400):
        subj = sim.subjects(rng)
        assert subj["enrolled"][-1] > tau  # the cap is not reached by tau
        ended = subj["enrolled"] + subj["follow"] <= tau
        seen.append(int((ended & subj["seen"]).sum()))
        lost.append(int((ended & ~subj["seen"]).sum()))
    nu = lam + mu
    covered = rate * (tau - (-np.expm1(-nu * tau)) / nu)
    for observed, share in ((seen, lam / nu), (lost, mu / nu)):
        mean = share * covered
        assert abs(np.mean(observed) - mean) < 4 * math.sqrt(mean / 400)


def test_events_and_exposure_agree_with_lifelines() -> None:
    """Source: lifelines (KaplanMeierFitter event table, ExponentialFitter and
    PiecewiseExponentialFitter maximum likelihood: hazard = events / exposure per piece)
    on the same subjects, administratively censored at an interim analysis."""
    lifelines = pytest.importorskip("lifelines")
    starts = (0.0, 6.0, 12.0)
    s = setup(max_enrolment=400, analysis_starts=starts,
              prior_a=(((1.0,),) * 3,) * 2, prior_b=(((1.0,),) * 3,) * 2)
    subj = subjects(s, 4)
    tau = 30.0
    events, exposure, entered = statistics_at(subj, tau, 2, starts)
    whole_events, whole_exposure, _ = statistics_at(subj, tau, 2)  # the one-piece path
    for j in range(2):
        mine = (subj["arm"] == j) & (subj["enrolled"] <= tau)
        ended = subj["enrolled"] + subj["follow"] <= tau
        durations = np.where(ended, subj["follow"], tau - subj["enrolled"])[mine]
        observed = (ended & subj["seen"])[mine]
        km = lifelines.KaplanMeierFitter().fit(durations, observed)
        assert km.event_table["observed"].sum() == events[j].sum()
        exp_fit = lifelines.ExponentialFitter().fit(durations, observed)
        # lifelines' exponential: S(t) = exp(-t / lambda_), so lambda_ = exposure / events
        assert exp_fit.lambda_ == pytest.approx(exposure[j].sum() / events[j].sum(),
                                                rel=1e-5)
        assert exp_fit.lambda_ == pytest.approx(whole_exposure[j, 0] / whole_events[j, 0],
                                                rel=1e-5)
        pw = lifelines.PiecewiseExponentialFitter(breakpoints=list(starts[1:])).fit(
            durations, observed)
        for p in range(3):
            assert pw.params_[f"lambda_{p}_"] == pytest.approx(
                exposure[j, p] / events[j, p], rel=1e-4)
    assert entered == int((subj["enrolled"] <= tau).sum())


def decisions_with_scipy(s: ed.EventDrivenSetup, subj: dict[str, np.ndarray]
                         ) -> tuple[int, int]:
    """(look, code) of one study, recomputed in Python: look times from sorted event
    times, posterior probabilities with scipy (one arm: scipy.stats.gamma cdf; two arms:
    scipy.integrate.quad of the hazard ratio's probability, not the beta form)."""
    calendar = np.sort((subj["enrolled"] + subj["follow"])[subj["seen"]])
    resolved = float((subj["enrolled"] + subj["follow"]).max())
    rule = Rule.of(dataclasses.make_dataclass("L", ["efficacy", "futility",
                                                   "futility_predictive"])(
        s.efficacy, s.futility, (None,) * s.looks))
    for k, target in enumerate(s.targets):
        reached = s.trigger == "time" or target <= calendar.size
        tau = (target if s.trigger == "time" else calendar[int(target) - 1]) if reached \
            else resolved
        events, exposure, _ = statistics_at(subj, tau, s.arms, s.analysis_starts)
        p = s.decision_piece
        a = [s.prior_a[j][p][0] + events[j, p] for j in range(s.arms)]
        b = [s.prior_b[j][p][0] + exposure[j, p] for j in range(s.arms)]
        if s.arms == 1:
            below = stats.gamma(a[0], scale=1.0 / b[0]).cdf(s.claim)
        else:
            control = stats.gamma(a[1], scale=1.0 / b[1])
            treated = stats.gamma(a[0], scale=1.0 / b[0])
            below = integrate.quad(lambda lc, c=control, t=treated: c.pdf(lc) * t.cdf(s.claim * lc),
                                   0, np.inf, epsabs=1e-13, epsrel=1e-11, limit=400)[0]
        benefit = below if s.lower_better else 1.0 - below
        look = k if reached else s.looks - 1
        code = rule.decide(look, float(benefit)) if reached else \
            (EFFICACY if benefit >= s.efficacy[-1] - 1e-12 else 2)
        if code != CONTINUE:
            return k, code
    raise AssertionError("the final look always decides")


@pytest.mark.parametrize("case", ["one arm", "two arms", "delayed effect"])
def test_kernel_decisions_equal_scipy_study_by_study(case: str) -> None:
    """Each simulated study's stopping look and decision equal a Python recomputation
    with scipy's gamma cdf (one arm) and quadrature (two arms) on the same subjects (the
    kernel draws one study's subjects exactly as :meth:`subjects` does). The delayed
    effect: piecewise true hazards and a two-piece analysis deciding on the hazard ratio
    after 6 months."""
    if case == "one arm":
        s = setup(hazards=((LAMBDA_C,),), claim=1.1 * LAMBDA_C, prior_a=(((1.0,),),),
                  prior_b=(((12.0,),),), efficacy=(0.99, 0.95, 0.9))
    elif case == "two arms":
        s = setup(claim=0.9)
    else:
        s = setup(claim=0.9, hazard_starts=(0.0, 6.0),
                  hazards=((LAMBDA_C, 0.6 * LAMBDA_C), (LAMBDA_C, LAMBDA_C)),
                  analysis_starts=(0.0, 6.0), decision_piece=1,
                  prior_a=(((0.5,), (0.1,)),) * 2, prior_b=(((6.0,), (2.0,)),) * 2)
    sim = ed.PatientLevelSimulator(s)
    seen_codes = set()
    for seed in range(40):
        tally = sim.simulate(np.random.default_rng(seed), 1)
        k, code = decisions_with_scipy(s, sim.subjects(np.random.default_rng(seed)))
        stops = tally.efficacy if code == EFFICACY else tally.futility
        assert stops[k] == 1 and tally.efficacy.sum() + tally.futility.sum() == 1
        seen_codes.add((k, code))
    assert len(seen_codes) >= 3  # the studies end in several ways (the check can fail)


def test_exposure_at_the_dth_event_is_gamma() -> None:
    """Source: the random time-change (total time on test) property of a constant
    hazard: events counted against the arm's cumulative exposure form a Poisson process
    of rate lambda, so the exposure at the D-th event is Gamma(D, rate lambda), whatever
    the staggered entry and the independent dropout (Aalen, Borgan & Gjessing 2008,
    Survival and Event History Analysis, section 2.2; recalled from memory). KS against
    scipy.stats.gamma; this is also the shortcut that would skip the subjects for one arm,
    checked here against the subject-level simulation."""
    lam, d = 0.05, 40
    s = setup(hazards=((lam,),), claim=lam, prior_a=(((1.0,),),), prior_b=(((1.0,),),),
              targets=(float(d),), efficacy=(0.9,), futility=(None,), max_enrolment=120,
              dropout_hazard=0.02, accrual=Accrual(rates=(2.0, 8.0), starts=(0.0, 5.0)))
    sim = ed.PatientLevelSimulator(s)
    rng = np.random.default_rng(5)
    exposures = []
    for _ in range(1500):
        subj = sim.subjects(rng)
        calendar = np.sort((subj["enrolled"] + subj["follow"])[subj["seen"]])
        if calendar.size < d:
            continue
        _, exposure, _ = statistics_at(subj, calendar[d - 1], 1)
        exposures.append(exposure[0, 0])
    assert len(exposures) > 1400
    assert stats.kstest(exposures, stats.gamma(d, scale=1.0 / lam).cdf).pvalue > 1e-4


def test_type_one_error_of_a_one_look_design_is_exact() -> None:
    """Exact result: one look at D events, no dropout, every subject eventually has the
    event (D <= max enrolment): the exposure is Gamma(D, lambda) (previous test) and
    Pr(lambda < lambda_0 | D, E) is increasing in E, so success is E >= e*, with e*
    solved with scipy's gamma ppf, and the type I error at lambda = lambda_0 is
    scipy.stats.gamma(D, scale=1 / lambda_0).sf(e*). The simulation is within 4 SE."""
    lam0, d, a, b, eta = 0.05, 50, 0.5, 5.0, 0.95
    s = setup(hazards=((lam0,),), claim=lam0, prior_a=(((a,),),), prior_b=(((b,),),),
              targets=(float(d),), efficacy=(eta,), futility=(None,), max_enrolment=80,
              dropout_hazard=0.0, accrual=Accrual(rates=(4.0,)))
    # Pr(lambda < lambda0) = P(a + d, (b + E) lambda0) >= eta  <=>  E >= e*
    e_star = stats.gamma(a + d).ppf(eta) / lam0 - b
    exact = stats.gamma(d, scale=1.0 / lam0).sf(e_star)
    n = 40_000
    tally = ed.PatientLevelSimulator(s).simulate(np.random.default_rng(6), n)
    simulated = tally.efficacy.sum() / n
    assert 0.01 < exact < 0.2
    assert abs(simulated - exact) < 4 * math.sqrt(exact * (1 - exact) / n)


@pytest.mark.parametrize("ratio", [1.0, 0.75])
def test_two_arm_three_look_rates_agree_with_a_numpy_implementation(ratio: float) -> None:
    """An independent vectorised numpy implementation (tests/event_driven_reference.py,
    scipy's betainc) with its own random numbers: per-look stopping probabilities and
    the first look's mean time within 4 SE, at the null boundary (HR = 1 = the margin:
    the type I error) and under the alternative."""
    s = setup(hazards=((ratio * LAMBDA_C,), (LAMBDA_C,)))
    n = 20_000
    tally = ed.PatientLevelSimulator(s).simulate(np.random.default_rng(7), n)
    eff, fut, time_sum = numpy_studies(
        np.random.default_rng(8), n, s.max_enrolment, 10.0, True,
        (s.hazards[0][0], s.hazards[1][0]), s.dropout_hazard, (30, 60, 90),
        (0.01, 0.01), (0.01, 0.01), 1.0, s.efficacy, (0.2, 0.5, math.nan))
    for mine, theirs in ((tally.efficacy, eff), (tally.futility, fut)):
        for x, y in zip(mine / n, theirs / n, strict=True):
            se = math.sqrt(max(x * (1 - x), y * (1 - y), 1.0 / n) * 2.0 / n)
            assert abs(x - y) < 4 * se
    # the compared probabilities are not all 0 or 1 (the check could fail)
    assert tally.efficacy.sum() > (0.2 if ratio < 1 else 0.005) * n
    cal = tally.calendar  # look k at HEAD + 3k: studies reaching it, sum of its times
    assert cal[HEAD] == n
    assert cal[HEAD + 1] / n == pytest.approx(time_sum[0] / n, rel=0.01)


def test_calendar_looks_happen_at_their_times() -> None:
    """Looks by calendar time: look k is at its stated time in every study (identity) and
    the enrolled count at a look before the accrual ends is Poisson(rate x time) (scipy
    mean, 4 SE)."""
    s = setup(trigger="time", targets=(6.0, 12.0, 24.0), futility=(None, None, None))
    n = 4000
    tally = ed.PatientLevelSimulator(s).simulate(np.random.default_rng(9), n)
    cal = tally.calendar
    for k, t in enumerate(s.targets):
        if cal[HEAD + 3 * k] > 0:
            assert cal[HEAD + 1 + 3 * k] / cal[HEAD + 3 * k] == pytest.approx(t)
    enrolled_at_6 = [statistics_at(sub, 6.0, 2)[2] for sub in
                     (ed.PatientLevelSimulator(s).subjects(np.random.default_rng(100 + i))
                      for i in range(800))]
    assert abs(np.mean(enrolled_at_6) - 60.0) < 4 * math.sqrt(60.0 / 800)


def test_same_seed_same_numbers_whatever_the_batches() -> None:
    """Reproducibility: one generator, the same numbers; the kernel's draws are fixed per
    study, so two batches from one generator equal one batch of both sizes."""
    sim = ed.PatientLevelSimulator(setup())
    one = sim.simulate(np.random.default_rng(10), 300)
    rng = np.random.default_rng(10)
    two = sim.simulate(rng, 100) + sim.simulate(rng, 200)
    assert np.array_equal(one.efficacy, two.efficacy)
    # float sums of the calendar totals differ only by the order of addition
    assert np.allclose(one.calendar, two.calendar, rtol=1e-12, atol=0.0)


@pytest.mark.parametrize(("change", "name"), [
    (dict(hazard_starts=(0.0, 0.0)), "hazard_starts"),
    (dict(analysis_starts=(0.0, 5.0, 3.0)), "analysis_starts"),
    (dict(targets=(60.0, 30.0, 90.0)), "targets"),
    (dict(trigger="looks"), "trigger"),
    (dict(accrual=Accrual(rates=(0.0,))), "accrual.rates"),
    (dict(hazards=((0.1,), (-1.0,))), "hazards[1]"),
    (dict(decision_piece=2), "decision_piece"),
    (dict(accrual=Accrual(times=(0.0, 2.0, 1.0) + (3.0,) * 147, arrivals="fixed")),
     "accrual.times"),
])
def test_bad_setup_names_the_attribute(change: dict, name: str) -> None:
    with pytest.raises(ValueError, match=re.escape(name)):
        setup(**change)




@pytest.mark.parametrize("case", ["spread", "ties", "clustered", "zeros"])
def test_look_times_are_the_order_statistics_of_numpy_sort(case: str) -> None:
    """The bucket pass and selection that find each look's event time return exactly the
    values of ``numpy.sort`` at the look's ranks (ties, clusters in one bucket, all
    zero)."""
    rng = np.random.default_rng(11)
    count = 400
    values = {"spread": rng.exponential(10.0, count),
              "ties": rng.integers(0, 7, count).astype(float),
              "clustered": np.concatenate([rng.uniform(0, 1e-9, count - 3), [5.0, 9.0, 50.0]]),
              "zeros": np.zeros(count)}[case]
    ranks = np.array([0, 99, 199, 200, 299, 398, 399])
    out = np.empty(ranks.size)
    buffer = values.copy()
    ed.ranked_times(buffer, count, ranks, float(values.max()),
                    np.zeros(ed.BUCKETS + 1, dtype=np.int64), np.empty(count), out)
    assert np.array_equal(out, np.sort(values)[ranks])


def test_setup_of_a_design_with_hazard_periods() -> None:
    """A design's endpoint with hazard periods becomes piecewise true hazards (truth x
    relative hazard per period), one analysis piece per period with the arm's prior, and
    the design's thresholds, targets and conduct (identity of the mapping); one arm with
    periods decides at the landmark (its overlaps and limit by hand)."""
    from types import SimpleNamespace as NS

    from octrial.conduct.model import Conduct

    prior = NS(a=(0.5, 2.0), b=(6.0, 20.0), weights=(0.3, 0.7))
    design = NS(
        conduct=Conduct(Accrual(rates=(5.0, 20.0), starts=(0.0, 3.0)), 300,
                        dropout_hazard=0.01),
        arms=(NS(prior=prior, allocation=2.0), NS(prior=prior, allocation=1.0)),
        hypothesis=NS(threshold=0.8, null_value=None, better="lower"),
        looks=NS(trigger="events", at=(), n=(50, 100), efficacy=(0.99, 0.95),
                 futility=(0.1, None)),
        endpoint=NS(starts=(0.0, 6.0), relative_hazard=(1.0, 0.5)))
    s = ed.setup_of_design(design, (0.04, 0.05))
    assert s.hazards == ((0.04, 0.02), (0.05, 0.025))
    assert s.hazard_starts == s.analysis_starts == (0.0, 6.0)
    assert s.prior_a == (((0.5, 2.0), (0.5, 2.0)),) * 2
    assert s.prior_weights == (((0.3, 0.7), (0.3, 0.7)),) * 2
    assert (s.claim, s.targets, s.trigger, s.allocation) == (0.8, (50.0, 100.0), "events",
                                                             (2.0, 1.0))
    tally = ed.PatientLevelSimulator(s).simulate(np.random.default_rng(12), 200)
    assert tally.efficacy.sum() + tally.futility.sum() == 200
    one_arm = NS(**{**design.__dict__, "arms": design.arms[:1],
                    "hypothesis": NS(benchmark=0.05, better="lower"),
                    "endpoint": NS(starts=(0.0, 6.0), relative_hazard=(1.0, 0.5),
                                   landmark_time=lambda multiplier: 12.0)})
    s = ed.setup_of_design(one_arm, (0.04,))
    # a landmark at 12 overlaps both periods for 6; H0(12) = 6 + 0.5 x 6 (by hand)
    assert s.landmark_overlap == (6.0, 6.0)
    assert s.landmark_limit == pytest.approx(0.05 * 9.0, rel=1e-15)


def test_arms_with_different_mixtures_against_scipy() -> None:
    """A robust mixture on the control hazard only (two components) and a single gamma
    on the treatment: each study's decision equals Pr(HR < c) computed with scipy's
    gamma distributions and quadrature, the control's mixture reweighted by its marginal
    likelihood (the gamma-Poisson marginal, written out here)."""
    from scipy import special

    s = setup(claim=1.0, prior_a=(((0.5,),), ((2.0, 0.1),)),
              prior_b=(((6.0,),), ((30.0, 1.0),)), prior_weights=(((1.0,),), ((0.8, 0.2),)))
    sim = ed.PatientLevelSimulator(s)
    ends = set()
    for seed in range(25):
        tally = sim.simulate(np.random.default_rng(seed), 1)
        subj = sim.subjects(np.random.default_rng(seed))
        calendar = np.sort((subj["enrolled"] + subj["follow"])[subj["seen"]])
        for k, target in enumerate(s.targets):
            events, exposure, _ = statistics_at(subj, calendar[int(target) - 1], 2)
            (dt, dc), (et, ec) = events[:, 0], exposure[:, 0]
            treated = stats.gamma(0.5 + dt, scale=1.0 / (6.0 + et))
            log_m = [math.log(w) + a * math.log(b) + special.gammaln(a + dc)
                     - special.gammaln(a) - (a + dc) * math.log(b + ec)
                     for w, a, b in ((0.8, 2.0, 30.0), (0.2, 0.1, 1.0))]
            weights = np.exp(np.array(log_m) - max(log_m))
            weights /= weights.sum()
            below = 0.0
            for w, a, b in zip(weights, (2.0, 0.1), (30.0, 1.0), strict=True):
                control = stats.gamma(a + dc, scale=1.0 / (b + ec))
                below += w * integrate.quad(
                    lambda lc, c=control, t=treated: c.pdf(lc) * t.cdf(lc), 0, np.inf,
                    epsabs=1e-13, limit=400)[0]
            code = Rule.of(dataclasses.make_dataclass(
                "L", ["efficacy", "futility", "futility_predictive"])(
                s.efficacy, s.futility, (None,) * 3)).decide(k, below)
            if code != CONTINUE:
                stops = tally.efficacy if code == EFFICACY else tally.futility
                assert stops[k] == 1
                ends.add((k, code))
                break
    assert len(ends) >= 2
