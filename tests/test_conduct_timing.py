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
from octrial.simulation.base import Tally, tally_problems
from octrial.simulation.calendar_tally import DURATION_BINS, CalendarTally


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


def _calendar(rng, studies, horizon=50.0):
    duration = rng.uniform(0, 40, studies)
    times = np.where(rng.random((studies, 2)) < 0.7, rng.uniform(0, 30, (studies, 2)), np.nan)
    return CalendarTally.of_studies(horizon, duration, rng.integers(1, 9, studies),
                                    rng.integers(1, 9, studies), times, reversed_=2)


def test_calendar_tally_adds_and_round_trips():
    rng = np.random.default_rng(1)
    a, b = _calendar(rng, 300), _calendar(rng, 200)
    total = a + b
    assert total.duration_bins.sum() == 500 and total.reversed == 4
    tally = Tally(500, np.array([100, 100]), np.array([0, 300]), calendar=total)
    arrays = tally.to_arrays()
    assert tally_problems(arrays, 2, 500) == []
    back = Tally.from_arrays(arrays)
    assert back.calendar is not None
    assert np.array_equal(back.calendar.duration_bins, total.duration_bins)
    broken = dict(arrays, calendar_duration_bins=np.zeros(DURATION_BINS, dtype=np.int64))
    assert tally_problems(broken, 2, 500)


def test_duration_quantiles_within_a_bin():
    rng = np.random.default_rng(2)
    duration = rng.uniform(0, 40, 20_000)
    tally = CalendarTally.of_studies(50.0, duration, duration, duration,
                                     np.zeros((20_000, 1)))
    for q in (0.1, 0.5, 0.9):
        assert tally.duration_quantile(q) == pytest.approx(np.quantile(duration, q),
                                                           abs=50.0 / DURATION_BINS)
    columns = tally.columns(20_000, pipeline=False, events=False)
    assert columns["expected_duration"] == pytest.approx(duration.mean())
    assert columns["expected_duration_se"] == pytest.approx(duration.std(ddof=1) / 20_000**0.5)
