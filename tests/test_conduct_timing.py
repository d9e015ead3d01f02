"""Deterministic look counts and the calendar tally.

Look times are checked against closed forms worked by hand (common practice, no outside
source needed): under even accrual at rate r from time 0, subject i is enrolled at i / r,
and with lag L its outcome is observed at i / r + L.
"""

from __future__ import annotations

import numpy as np
import pytest

from octrial.conduct.model import Accrual, Conduct
from octrial.conduct.timing import allocation_block, arm_counts, look_timing
from octrial.design.load import load_design
from octrial.simulation.base import Tally, tally_problems
from octrial.simulation.calendar import (
    calendar_columns,
    calendar_size,
    count_edges,
    duration_edges,
    record_studies,
    record_study,
)

DEMO = "designs/delayed-response.toml"


def test_even_accrual_look_times_match_closed_form():
    conduct = Conduct(Accrual(rates=(4.0,), arrivals="even"), max_enrolment=100, lag=6.0)
    timing = look_timing(conduct, "complete", [40, 100], [1.0, 1.0])
    assert timing.time == pytest.approx((40 / 4 + 6, 100 / 4 + 6))
    # at t = 16, 64 enrolled (16 x 4), 40 complete
    assert timing.enrolled[0] == (32, 32) and timing.complete[0] == (20, 20)
    assert timing.pipeline[0] == (12, 12)
    by_time = look_timing(conduct, "time", [12.0], [1.0, 1.0])
    assert sum(by_time.enrolled[0]) == 48 and sum(by_time.complete[0]) == 24


def test_ramp_up_periods():
    # 2 per month for 5 months, then 10 per month: subject 30 at 5 + 20 / 10 = 7
    accrual = Accrual(rates=(2.0, 10.0), starts=(0.0, 5.0), arrivals="even")
    conduct = Conduct(accrual, max_enrolment=60, lag=1.0)
    timing = look_timing(conduct, "enrolled", [30], [1.0])
    assert timing.time == pytest.approx((7.0,))
    assert timing.complete[0] == (20,)  # outcomes by 7: enrolled by 6 = 10 + 10


def test_fixed_times_and_unreachable():
    conduct = Conduct(Accrual(times=(0.0, 1.0, 1.0, 3.0), arrivals="fixed"), 4, lag=0.5)
    timing = look_timing(conduct, "complete", [3], [1.0])
    assert timing.time == (1.5,) and timing.enrolled[0] == (3,)
    with pytest.raises(ValueError):
        look_timing(conduct, "enrolled", [5], [1.0])
    random = Conduct(Accrual(rates=(1.0,)), 4)
    with pytest.raises(ValueError):
        look_timing(random, "time", [1.0], [1.0])


def test_blocks_match_the_design_split():
    assert allocation_block([1.5, 1.0]) == (3, 2)
    counts = arm_counts(np.arange(11), (2, 1))
    assert counts[9].tolist() == [6, 3] and counts[10].tolist() == [7, 3]
    assert np.all(counts.sum(axis=1) == np.arange(11))


def test_batch_record_equals_study_by_study():
    """record_studies (a batch) adds what record_study (one study at a time) adds."""
    rng = np.random.default_rng(1)
    design = load_design(DEMO)
    edges = duration_edges(design)
    studies, looks = 300, design.looks.count
    duration = rng.uniform(1, 40, studies)
    enrolled = rng.integers(1, 160, studies).astype(float)
    times = np.sort(rng.uniform(0, 30, (studies, looks)), axis=1)
    stop = rng.integers(0, looks, studies)
    times[np.arange(looks)[None, :] > stop[:, None]] = np.nan
    counts = count_edges(design)
    batch = np.zeros(calendar_size(looks))
    record_studies(batch, edges, duration, enrolled, enrolled, times, 0, counts)
    one = np.zeros(calendar_size(looks))
    for s_ in range(studies):
        for k in range(stop[s_] + 1):
            ended = k == stop[s_]
            record_study(one, edges, k, duration[s_] if ended else times[s_, k],
                         enrolled[s_], 0.0, ended, counts)
    # sums agree to rounding (numpy sums pairwise); look counts and histogram exactly
    assert np.allclose(batch[:6], one[:6], rtol=1e-12)
    head = calendar_size(0)
    assert np.array_equal(batch[head:head + 3 * looks:3], one[head:head + 3 * looks:3])
    assert np.array_equal(batch[calendar_size(looks) - (batch.size - head
                                                        - 3 * looks):],
                          one[calendar_size(looks) - (one.size - head - 3 * looks):])
    tally = Tally(studies, np.array([0, studies]), np.array([0, 0]), calendar=batch)
    assert tally_problems(tally.to_arrays(), looks, studies) == []
    back = Tally.from_arrays(tally.to_arrays())
    assert back.calendar is not None and np.array_equal(back.calendar, batch)


def test_duration_quantiles_and_means_against_numpy():
    rng = np.random.default_rng(2)
    design = load_design(DEMO)
    duration = rng.uniform(5, 40, 20_000)
    calendar = np.zeros(calendar_size(design.looks.count))
    record_studies(calendar, duration_edges(design), duration, duration, duration,
                   np.full((20_000, design.looks.count), np.nan), 0, count_edges(design))
    columns = calendar_columns(design, calendar[None, :], np.array([20_000]))
    for q in (10, 50, 90):
        # log-spaced bins: at most 0.7% of the value (simulation/calendar.py)
        assert columns[f"duration_q{q}"][0] == pytest.approx(np.quantile(duration, q / 100),
                                                             rel=0.007)
    assert columns["expected_duration"][0] == pytest.approx(duration.mean())
    assert columns["expected_duration_se"][0] == pytest.approx(
        duration.std() / 20_000**0.5)
    assert "look1_events" not in columns and "prob_efficacy_reversed" in columns


def test_enrolment_quantiles_are_the_discrete_quantiles():
    # Whole numbers of subjects (at most 1000: one bin each at most): the quantile is the
    # least count whose cumulative share reaches q, numpy's 'inverted_cdf' quantile.
    rng = np.random.default_rng(3)
    design = load_design(DEMO)
    enrolled = rng.integers(40, design.conduct.max_enrolment + 1, 20_000).astype(float)
    analysed = np.minimum(enrolled, rng.integers(30, 161, 20_000)).astype(float)
    calendar = np.zeros(calendar_size(design.looks.count))
    record_studies(calendar, duration_edges(design), np.full(20_000, 10.0), enrolled,
                   analysed, np.full((20_000, design.looks.count), np.nan), 0,
                   count_edges(design))
    columns = calendar_columns(design, calendar[None, :], np.array([20_000]))
    for q in (10, 50, 90):
        assert columns[f"enrolled_q{q}"][0] == np.quantile(enrolled, q / 100,
                                                           method="inverted_cdf")
        assert columns[f"analysed_q{q}"][0] == np.quantile(analysed, q / 100,
                                                           method="inverted_cdf")
