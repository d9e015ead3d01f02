"""Monte Carlo of binary, count and normal designs in calendar time (``[conduct]``).

Each check names what it is checked against:

* lag 0, even accrual, no dropout, looks by ``n``: every number equals the generic study
  loop's for the same seed (the same random numbers, drawn in the same order: the
  calendar draws nothing);
* deterministic timing: stopping probabilities against the exact lattice engine (which
  needs no timing: with looks by ``n`` each look's counts are the design's) and the
  expected duration and enrolment against their closed forms from those probabilities,
  within 4 standard errors;
* Poisson arrivals with lag 0 and looks by ``n``: the stopping probabilities do not depend
  on the arrival times, so they match the exact engine within 4 standard errors;
* efficacy stops reversed by the pipeline: against brute-force enumeration of the
  interim and pipeline responses with scipy's binomial and beta distributions;
* samplers: scipy Kolmogorov-Smirnov tests (exponential gaps, Poisson counts in a window)
  and the proportion lost against 1 - exp(-hazard x lag).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy import stats

from octrial.conduct.arrivals import dropout_times, enrolment_times
from octrial.conduct.model import Accrual, Conduct
from octrial.conduct.timing import look_timing
from octrial.design.load import load_design
from octrial.engines.exact_lattice import ExactLatticeEngine
from octrial.engines.monte_carlo import MonteCarloEngine, MonteCarloSettings, batch_generator
from octrial.execution import Execution
from octrial.simulation.calendar_studies import CalendarStudies
from octrial.simulation.generic import StudyLoop
from tests.helpers import ONE_ARM, build

Z = 4.0


def _with(design, **conduct):
    accrual = conduct.pop("accrual", Accrual(rates=(5.0,), arrivals="even"))
    made = Conduct(accrual, conduct.pop("max_enrolment", design.looks.n[-1]), **conduct)
    return dataclasses.replace(design, conduct=made)


@pytest.mark.parametrize("name", ["two-arm-randomised", "single-arm-event-rate",
                                  "two-arm-continuous-score", "single-arm-response"])
def test_zero_lag_equals_the_generic_study_loop(name):
    design = load_design(f"designs/{name}.toml")
    if not design.family.offers_predictive():
        design = dataclasses.replace(design, looks=dataclasses.replace(
            design.looks, futility_predictive=(None,) * design.looks.count))
    timed = _with(design)
    for i, truth in enumerate(design.scenarios.values[:3]):
        plain = StudyLoop(design, truth, 0.95).simulate(batch_generator(11, i, 0), 2000)
        calendar = timed.family.simulator(timed, truth, 0.95)
        assert isinstance(calendar, CalendarStudies)
        got = calendar.simulate(batch_generator(11, i, 0), 2000)
        assert np.array_equal(plain.efficacy, got.efficacy)
        assert np.array_equal(plain.futility, got.futility)
        assert (plain.error_sums is None) == (got.error_sums is None)
        if plain.error_sums is not None:
            assert np.array_equal(plain.error_sums, got.error_sums)
            assert plain.covered == got.covered
    # looks at n / rate; nobody waits
    truths = np.asarray(design.scenarios.values[:1], dtype=float)
    outcome = MonteCarloEngine.run(timed, truths, settings=MonteCarloSettings(
        replicates=500, seed=1))
    for k, n in enumerate(design.looks.n):
        seen = outcome.extra[f"look{k + 1}_time"][0]  # NaN when every study stopped before
        assert (np.isnan(seen) and k > 0) or seen == pytest.approx(n / 5.0)


def _exact(design, truths):
    return ExactLatticeEngine.run(dataclasses.replace(design, conduct=None), truths)


def test_deterministic_timing_duration_against_closed_form():
    design = load_design("designs/delayed-response.toml")
    conduct = design.conduct
    truths = np.array([[0.3, 0.3], [0.5, 0.3]])
    mc = MonteCarloEngine.run(design, truths,
                              settings=MonteCarloSettings(replicates=20_000, seed=3))
    exact = _exact(design, truths)
    r = 20_000
    for got, want in ((mc.efficacy, exact.efficacy), (mc.futility, exact.futility)):
        se = np.sqrt(want * (1 - want) / r)
        assert np.all(np.abs(got - want) <= Z * se + 1e-12)
    timing = look_timing(conduct, "complete", design.looks.n, [1, 1])
    stop1 = exact.efficacy[:, 0] + exact.futility[:, 0]
    enrolled1 = sum(timing.enrolled[0])
    pipeline_end = conduct.accrual.time_of(enrolled1) + conduct.lag
    duration = stop1 * pipeline_end + (1 - stop1) * timing.time[1]
    enrolled = stop1 * enrolled1 + (1 - stop1) * conduct.max_enrolment
    # each is a two-point variable: its standard deviation is |a - b| sqrt(p (1 - p))
    se_d = abs(pipeline_end - timing.time[1]) * np.sqrt(stop1 * (1 - stop1) / r)
    se_e = abs(enrolled1 - conduct.max_enrolment) * np.sqrt(stop1 * (1 - stop1) / r)
    assert np.all(np.abs(mc.extra["expected_duration"] - duration) <= Z * se_d)
    assert np.all(np.abs(mc.extra["expected_enrolled"] - enrolled) <= Z * se_e)
    assert np.allclose(mc.extra["look1_time"], timing.time[0])
    assert np.all(mc.extra["prob_efficacy_reversed"] <= mc.efficacy[:, 0])


def test_poisson_arrivals_leave_stopping_probabilities_unchanged():
    design = load_design("designs/two-arm-randomised.toml")
    timed = _with(design, accrual=Accrual(rates=(3.0, 12.0), starts=(0.0, 4.0)))
    truths = np.array([[0.3, 0.3], [0.5, 0.3]])
    mc = MonteCarloEngine.run(timed, truths,
                              settings=MonteCarloSettings(replicates=20_000, seed=5))
    exact = _exact(design, truths)
    for got, want in ((mc.efficacy, exact.efficacy), (mc.futility, exact.futility)):
        se = np.sqrt(want * (1 - want) / 20_000)
        assert np.all(np.abs(got - want) <= Z * se + 1e-12)
    # look 1 at the 100th arrival: 12 by time 4 at rate 3, then 88 at rate 12
    assert mc.extra["look1_time"] == pytest.approx(4 + 88 / 12, rel=0.01)


def _reversal_by_enumeration(theta, n1, pipeline, benchmark, interim, final):
    """Pr(stop for efficacy at look 1, then fail the final threshold with the pipeline),
    beta(1, 1) prior, by enumeration."""
    total = 0.0
    for x in range(n1 + 1):
        if stats.beta.sf(benchmark, 1 + x, 1 + n1 - x) < interim:
            continue
        y = np.arange(pipeline + 1)
        fails = stats.beta.sf(benchmark, 1 + x + y, 1 + n1 + pipeline - x - y) < final
        total += stats.binom.pmf(x, n1, theta) * np.sum(stats.binom.pmf(y, pipeline, theta)
                                                         * fails)
    return total


def test_efficacy_reversal_against_enumeration():
    data = {**ONE_ARM, "looks": {"n": [20, 40], "efficacy": [0.99, 0.95]},
            "scenarios": {"treatment": [0.2, 0.3]},
            "conduct": {"arrivals": "even", "enrolment_rate": 4.0, "max_enrolment": 40,
                        "outcome_lag": 3.0, "analyse_pipeline": True}}
    design = build(data)
    truths = np.array([[0.2], [0.3]])
    r = 40_000
    mc = MonteCarloEngine.run(design, truths,
                              settings=MonteCarloSettings(replicates=r, seed=9))
    # look 1 when the 20th outcome is seen: time 20 / 4 + 3 = 8, 32 enrolled: 12 waiting
    for i, theta in enumerate((0.2, 0.3)):
        want = _reversal_by_enumeration(theta, 20, 12, 0.2, 0.99, 0.95)
        se = np.sqrt(want * (1 - want) / r)
        assert want > 0
        assert abs(mc.extra["prob_efficacy_reversed"][i] - want) <= Z * se


def test_results_do_not_depend_on_jobs():
    design = load_design("designs/delayed-response.toml")
    timed = dataclasses.replace(design, conduct=dataclasses.replace(
        design.conduct, accrual=Accrual(rates=(8.0,)), dropout_hazard=0.02))
    truths = np.array([[0.3, 0.3], [0.5, 0.3]])
    settings = MonteCarloSettings(replicates=3000, seed=1, batch_size=1000)
    one = MonteCarloEngine.run(timed, truths, settings=settings)
    two = MonteCarloEngine.run(timed, truths, settings=settings,
                               execution=Execution(jobs=2))
    assert np.array_equal(one.efficacy, two.efficacy)
    for name, values in one.extra.items():
        assert np.array_equal(values, two.extra[name], equal_nan=True), name


# -- samplers ----------------------------------------------------------------------------
def test_poisson_gaps_are_exponential_and_counts_poisson():
    rng = np.random.default_rng(2026)
    accrual = Accrual(rates=(2.0, 10.0), starts=(0.0, 5.0))
    times = enrolment_times(accrual, rng.standard_exponential((4000, 60)), 4000, 60)
    # one rate: every gap (the first from time 0) is exponential with that rate
    steady = enrolment_times(Accrual(rates=(2.0,)), rng.standard_exponential((400, 20)),
                             400, 20)
    gaps = np.diff(steady, axis=1, prepend=0.0).ravel()
    assert stats.kstest(gaps, stats.expon(scale=0.5).cdf).pvalue > 1e-3
    # arrivals in [0, 5): Poisson(10); in [5, 7): Poisson(20) (60 subjects never run out)
    early = (times < 5.0).sum(axis=1)
    later = ((times >= 5.0) & (times < 7.0)).sum(axis=1)
    # counts are discrete (ties break the KS statistic): a chi-square goodness-of-fit
    # test against scipy's Poisson pmf, tails pooled
    for counts, mean in ((early, 10), (later, 20)):
        cuts = np.arange(int(mean - 2.5 * mean**0.5), int(mean + 2.5 * mean**0.5) + 1)
        cdf = stats.poisson(mean).cdf
        expected = np.diff(np.concatenate(([0.0], cdf(cuts[:-1]), [1.0]))) * counts.size
        observed = np.bincount(np.searchsorted(cuts[:-1], counts, side="left"),
                               minlength=cuts.size)
        assert observed.sum() == counts.size
        assert stats.chisquare(observed, expected).pvalue > 1e-3
    assert abs(later.mean() - 20) <= Z * np.sqrt(20 / 4000)


def test_proportion_lost_matches_the_closed_form():
    rng = np.random.default_rng(7)
    hazard, lag, n = 0.05, 6.0, 200_000
    lost = np.mean(dropout_times(rng.standard_exponential(n), hazard) < lag)
    want = 1 - np.exp(-hazard * lag)
    assert abs(lost - want) <= Z * np.sqrt(want * (1 - want) / n)
    assert Conduct(Accrual(rates=(1.0,)), 10, lag=lag,
                   dropout_hazard=hazard).lost_before_outcome == pytest.approx(want)


def test_auto_method_simulates_designs_in_calendar_time():
    # only the lattice engine models [conduct] (deterministic timing, tests/test_pipeline.py):
    # random timing is simulated under 'auto', and 'exact' is refused plainly
    from octrial.engines import choose
    from octrial.errors import InputError

    design = load_design("designs/delayed-response.toml")
    assert choose(design, "auto") is ExactLatticeEngine
    random = dataclasses.replace(design, conduct=dataclasses.replace(
        design.conduct, accrual=Accrual(rates=(8.0,))))
    assert choose(random, "auto") is MonteCarloEngine
    with pytest.raises(InputError, match="Poisson arrivals"):
        choose(random, "exact")
    assert choose(dataclasses.replace(design, conduct=None), "auto") is ExactLatticeEngine
    normal = load_design("designs/two-arm-continuous-score.toml")
    normal = dataclasses.replace(normal, conduct=design.conduct, looks=dataclasses.replace(
        normal.looks, futility_predictive=(None,) * normal.looks.count))
    assert choose(normal, "auto") is MonteCarloEngine
    with pytest.raises(InputError, match="calendar-time conduct"):
        choose(normal, "exact")


def test_interrupted_run_resumes_with_its_calendar_totals(tmp_path):
    # the calendar vector is saved with each finished scenario and restored on resuming
    design = load_design("designs/delayed-response.toml")
    truths = np.array([[0.3, 0.3], [0.5, 0.3]])
    settings = MonteCarloSettings(replicates=2000, seed=4, batch_size=1000)
    whole = MonteCarloEngine.run(design, truths, settings=settings)

    class Stop(Exception):
        pass

    def interrupt(index: int) -> None:
        raise Stop

    partial = tmp_path / ".partial"
    with pytest.raises(Stop):
        MonteCarloEngine.run(design, truths, settings=settings, execution=Execution(
            checkpoints=partial, on_saved=interrupt))
    resumed = MonteCarloEngine.run(design, truths, settings=settings,
                                   execution=Execution(checkpoints=partial))
    assert resumed.info["scenarios_resumed"] == 1
    for name, values in whole.extra.items():
        assert np.array_equal(values, resumed.extra[name], equal_nan=True), name


def test_normal_design_in_calendar_time_against_the_exact_normal_engine():
    # lag 6, even accrual, looks by n: each look's data are the design's, so the exact
    # known-variance recursion (no [conduct]) gives the stopping probabilities
    from octrial.engines.exact_normal import NormalRecursionEngine

    design = load_design("designs/two-arm-continuous-score.toml")
    design = dataclasses.replace(design, looks=dataclasses.replace(
        design.looks, futility_predictive=(None,) * design.looks.count))
    timed = _with(design, lag=6.0)
    truths = np.asarray(design.scenarios.values, dtype=float)[:3]
    r = 20_000
    mc = MonteCarloEngine.run(timed, truths, settings=MonteCarloSettings(replicates=r,
                                                                         seed=8))
    exact = NormalRecursionEngine.run(design, truths)
    for got, want in ((mc.efficacy, exact.efficacy), (mc.futility, exact.futility)):
        se = np.sqrt(want * (1 - want) / r)
        assert np.all(np.abs(got - want) <= Z * se + 1e-9)
    n = np.asarray(design.looks.n, dtype=float)
    assert mc.extra["look1_time"][0] == pytest.approx(n[0] / 5.0 + 6.0)
