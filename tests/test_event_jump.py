"""The event-level (jump) simulator of event-driven studies
(:mod:`octrial.simulation.event_jump`), each check against a source outside the module:
the subject-level kernel (an independent algorithm: every subject drawn), scipy's
gamma and beta laws, Schoenfeld's (1981) event count, a plain-Python xoshiro256**."""

from __future__ import annotations

import dataclasses
import math
from typing import Any

import numba
import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy import stats

import octrial
from octrial.cli import main
from octrial.conduct.model import Accrual
from octrial.simulation import event_jump as ej
from octrial.simulation.calendar import HEAD
from octrial.simulation.event_driven import (
    EventDrivenSetup,
    PatientLevelSimulator,
    setup_of_design,
)
from tests.helpers import build
from tests.test_time_to_event_conduct import ONE_ARM, TWO_ARM, _toml, build_data

Z = 4.0  # Monte Carlo agreement within 4 standard errors
LAMBDA_C = math.log(2.0) / 12.0


def two_arm(hr: float, **changes: Any) -> EventDrivenSetup:
    """Two arms 1:1, Poisson entry 20 per month up to 300, looks at 60/120/180 events."""
    base = EventDrivenSetup(
        hazards=((hr * LAMBDA_C,), (LAMBDA_C,)), claim=1.0, efficacy=(0.999, 0.99, 0.975),
        futility=(0.2, 0.5, None), targets=(60.0, 120.0, 180.0),
        accrual=Accrual(rates=(20.0,)), max_enrolment=300,
        prior_a=(((0.01,),),) * 2, prior_b=(((0.01,),),) * 2)
    return dataclasses.replace(base, **changes)


def one_arm(**changes: Any) -> EventDrivenSetup:
    """One arm, ramped Poisson entry (2 then 6 per month), looks at 20/45 events."""
    base = EventDrivenSetup(
        hazards=((0.03,),), claim=0.04, efficacy=(0.995, 0.975), futility=(0.1, None),
        targets=(20.0, 45.0), accrual=Accrual(rates=(2.0, 6.0), starts=(0.0, 4.0)),
        max_enrolment=150, prior_a=(((1.0,),),), prior_b=(((50.0,),),),
        dropout_hazard=0.01)
    return dataclasses.replace(base, **changes)


DESIGNS = {
    "two arms, Poisson entry, dropout, HR 0.7": two_arm(0.7, dropout_hazard=0.01),
    "two arms, even entry, no dropout, HR 1": two_arm(
        1.0, accrual=Accrual(rates=(20.0,), arrivals="even")),
    "two arms 2:1, even entry, dropout, looks by calendar time, HR 0.7": two_arm(
        0.7, accrual=Accrual(rates=(20.0,), arrivals="even"), dropout_hazard=0.02,
        trigger="time", targets=(12.0, 24.0, 36.0), allocation=(2.0, 1.0)),
    "one arm, ramped Poisson entry, dropout": one_arm(),
    "one arm, even entry, events run out (few subjects)": one_arm(
        accrual=Accrual(rates=(6.0,), arrivals="even"), max_enrolment=50,
        dropout_hazard=0.03),
    "two arms, Poisson entry, predictive futility": two_arm(
        0.8, dropout_hazard=0.005, futility_predictive=(0.1, 0.1, None)),
}


def _columns(tally: Any) -> dict[str, tuple[float, float]]:
    """(estimate, standard error) of every column the tally gives an SE for: per-look
    efficacy and futility stops, expected duration, enrolled and analysed."""
    r = tally.replicates
    out = {}
    for name, counts in (("efficacy", tally.efficacy), ("futility", tally.futility)):
        for k, c in enumerate(counts):
            p = c / r
            out[f"{name}{k + 1}"] = (p, math.sqrt(max(p * (1 - p), 1.0 / r) / r))
    cal = tally.calendar
    for name, first in (("duration", 0), ("enrolled", 2), ("analysed", 4)):
        mean = cal[first] / r
        variance = max(cal[first + 1] / r - mean**2, 0.0)
        out[f"expected_{name}"] = (mean, math.sqrt(variance / r))
    return out


def _subject_level_looks(setup: EventDrivenSetup, studies: int,
                         seed: int) -> dict[str, np.ndarray]:
    """Per-study look times, enrolled and events of the subject-level kernel, one
    ``simulate`` of one study at a time (its calendar record: look k's time and events
    are the study's own)."""
    sim = PatientLevelSimulator(setup)
    rng = np.random.default_rng(seed)
    out = {name: np.full((studies, setup.looks), np.nan) for name in ("time", "events")}
    for i in range(studies):
        cal = sim.simulate(rng, 1).calendar
        for k in range(setup.looks):
            if cal[HEAD + 3 * k] > 0:
                out["time"][i, k] = cal[HEAD + 3 * k + 1]
                out["events"][i, k] = cal[HEAD + 3 * k + 2]
    return out


@pytest.mark.parametrize("name", list(DESIGNS))
def test_every_column_agrees_with_the_subject_level_kernel(name: str) -> None:
    """Source: the subject-level kernel (:class:`PatientLevelSimulator`, every subject's
    entry, event and loss time drawn and sorted), an independent algorithm for the same
    model. Every per-look stop probability and the expected duration, enrolled and
    analysed within 4 combined SE (20,000 studies each); each look's mean time and
    events within 4 combined SE and the look times' laws by scipy.stats.ks_2samp
    (2,000 studies of each, one at a time)."""
    setup = DESIGNS[name]
    n = 20_000
    jump = ej.EventJumpSimulator(setup).simulate(np.random.default_rng(1), n)
    subject = PatientLevelSimulator(setup).simulate(np.random.default_rng(2), n)
    ours, theirs = _columns(jump), _columns(subject)
    for column, (value, se) in ours.items():
        other, other_se = theirs[column]
        assert abs(value - other) <= Z * math.hypot(se, other_se) + 1e-12, (
            column, value, other)
    m = 2_000
    mine = ej.EventJumpSimulator(setup).looks_of(np.random.default_rng(3), m)
    other_looks = _subject_level_looks(setup, m, 4)
    for k in range(setup.looks):
        for key, values in (("time", mine["time"][:, k]),
                            ("events", mine["events"][:, k].sum(axis=-1))):
            a = values[~np.isnan(values)]
            b = other_looks[key][:, k][~np.isnan(other_looks[key][:, k])]
            if a.size < 30 or b.size < 30:
                continue
            se = math.hypot(a.std() / math.sqrt(a.size), b.std() / math.sqrt(b.size))
            assert abs(a.mean() - b.mean()) <= Z * se + 1e-9, (key, k, a.mean(), b.mean())
            if key == "time" and np.unique(a).size > 10:
                assert stats.ks_2samp(a, b).pvalue > 1e-4, (k, a.mean(), b.mean())


def _entry_at_zero(n: int, hazard: float, d: int) -> ej.EventJumpSimulator:
    """One arm, n subjects entering at time 0, no dropout, one look at d events."""
    return ej.EventJumpSimulator(EventDrivenSetup(
        hazards=((hazard,),), claim=hazard, efficacy=(0.975,), futility=(None,),
        targets=(float(d),), accrual=Accrual(times=(0.0,) * n, arrivals="fixed"),
        max_enrolment=n, prior_a=(((1.0,),),), prior_b=(((1.0,),),)))


def test_exposure_at_the_dth_event_is_gamma() -> None:
    """The gamma-process identity (events against cumulative exposure are a Poisson
    process of rate lambda: Aalen, Borgan & Gjessing 2008, section 2.2, recalled from
    memory): one arm, everyone entered at 0, no dropout, the exposure at the d-th event
    is Gamma(d, rate lambda); scipy.stats.gamma, KS test on 5,000 studies."""
    hazard, d = 0.05, 30
    looks = _entry_at_zero(80, hazard, d).looks_of(np.random.default_rng(5), 5_000)
    assert np.all(looks["events"][:, 0, 0] == d)
    exposure = looks["exposure"][:, 0, 0]
    assert stats.kstest(exposure, stats.gamma(d, scale=1.0 / hazard).cdf).pvalue > 1e-4


def test_look_time_is_the_dth_order_statistic_of_n_exponentials() -> None:
    """Closed form: with n subjects entering at 0 and no dropout the d-th event is the
    d-th order statistic of n Exponential(lambda) times, Pr(T <= t) = Pr(Beta(d, n - d +
    1) <= 1 - exp(-lambda t)) (the uniform order statistic's beta law; scipy.stats.beta),
    KS test on 5,000 studies; the subjects enrolled are all n."""
    n, hazard, d = 80, 0.05, 30
    looks = _entry_at_zero(n, hazard, d).looks_of(np.random.default_rng(6), 5_000)
    law = stats.beta(d, n - d + 1)
    times = looks["time"][:, 0]
    assert stats.kstest(times, lambda t: law.cdf(-np.expm1(-hazard * t))).pvalue > 1e-4
    assert np.all(looks["enrolled"][:, 0] == n)


def test_power_at_schoenfelds_event_count() -> None:
    """Schoenfeld (1981): 247 events give 80% power at HR 0.7 for a one-sided 0.025
    log-rank test; the design of test_time_to_event_conduct's check of the subject-level
    kernel (vague gamma priors, success if Pr(HR < 1) >= 0.975). Schoenfeld's count is an
    approximation (about a point or two at this size), so within 4 SE + 0.01 of 0.80, and
    within 4 combined SE of the subject-level kernel (20,000 studies each)."""
    design = build(TWO_ARM, looks__events=[247])
    setup = setup_of_design(design, (0.035, 0.05))
    n = 20_000
    ours = ej.EventJumpSimulator(setup).simulate(np.random.default_rng(7), n)
    theirs = PatientLevelSimulator(setup).simulate(np.random.default_rng(8), n)
    p, q = ours.efficacy[0] / n, theirs.efficacy[0] / n
    se = math.sqrt(p * (1 - p) / n)
    assert abs(p - 0.80) < Z * se + 0.01, p
    assert abs(p - q) < Z * math.hypot(se, math.sqrt(q * (1 - q) / n)), (p, q)


def _xoshiro_reference(state: list[int], count: int) -> list[int]:
    """xoshiro256** in plain Python, from its published definition (Blackman & Vigna,
    ACM TOMS 2021; the reference C code at prng.di.unimi.it, recalled from memory)."""
    mask = (1 << 64) - 1

    def rotl(x: int, k: int) -> int:
        return ((x << k) | (x >> (64 - k))) & mask

    s = list(state)
    out = []
    for _ in range(count):
        out.append(rotl((s[1] * 5) & mask, 7) * 9 & mask)
        t = (s[1] << 17) & mask
        s[2] ^= s[0]
        s[3] ^= s[1]
        s[1] ^= s[2]
        s[0] ^= s[3]
        s[2] ^= t
        s[3] = rotl(s[3], 45)
    return out


def test_inline_generator_is_xoshiro256starstar_seeded_by_splitmix64() -> None:
    """The kernel's generator against a plain-Python xoshiro256** (1,000 words), and
    splitmix64 of 0 against its first published output 0xE220A8397B1DCDAF (Steele, Lea &
    Flood 2014; recalled from memory)."""
    assert int(ej.splitmix64(np.uint64(0))) == 0xE220A8397B1DCDAF
    state = ej.seeded_state(np.random.default_rng(9))
    s = [int(v) for v in state]
    words = [int(w) for w in _kernel_words(state, 1000)]
    assert words == _xoshiro_reference(s, 1000)


@numba.njit
def _kernel_words(state: np.ndarray, count: int) -> np.ndarray:
    """Words drawn as the kernel draws them (the state read from a uint64 array)."""
    s0, s1, s2, s3 = state[0], state[1], state[2], state[3]
    out = np.empty(count, dtype=np.uint64)
    for i in range(count):
        out[i], s0, s1, s2, s3 = ej.xoshiro(s0, s1, s2, s3)
    return out


def test_bad_engine_for_hazard_periods_is_refused() -> None:
    """The event-level simulator needs constant hazards: a design with two periods
    asking for it is refused with the key named; the class refuses such a setup."""
    from tests.test_time_to_event_conduct import ONE_ARM as base

    design = build(base, endpoint__periods=[0.0, 6.0], endpoint__relative_hazard=[1.0, 0.5],
                   simulation__event_driven_engine="events")
    message = design.family.simulation_unsupported(design)
    assert message is not None and "event_driven_engine" in message
    with pytest.raises(ValueError, match="one hazard period"):
        ej.EventJumpSimulator(dataclasses.replace(
            one_arm(), hazards=((0.03, 0.02),), hazard_starts=(0.0, 6.0)))


def test_jobs_do_not_change_the_numbers(tmp_path: Any) -> None:
    """Reproducibility (seeds per scenario and batch, SeedSequence): the same oc.csv with
    --jobs 1 and 2, and a different one from the subject-level engine (so the key is
    what chose the simulator)."""
    runs = {}
    for name, engine, options in (("one", "events", ["--jobs", "1"]),
                                  ("two", "events", ["--jobs", "2"]),
                                  ("subjects", "subjects", ["--jobs", "1"])):
        path = tmp_path / f"{name}.toml"
        data = build_data(ONE_ARM, replicates=3000)
        data["simulation"]["event_driven_engine"] = engine
        path.write_text(_toml(data))
        out = tmp_path / name
        result = CliRunner().invoke(main, ["run", str(path), "--out", str(out), *options,
                                           "--quiet"])
        assert result.exit_code == 0, result.output
        runs[name] = (out / "oc.csv").read_text()
    assert runs["one"] == runs["two"]
    assert runs["one"] != runs["subjects"]
    oc = pd.read_csv(tmp_path / "one" / "oc.csv")
    assert {"expected_duration", "look2_time", "look2_events"} <= set(oc)


def test_unknown_engine_exits_2_naming_the_key(tmp_path: Any) -> None:
    """Bad input: an engine name that is not one of the choices is refused with the key
    named and exit code 2."""
    data = build_data(ONE_ARM, replicates=100)
    data["simulation"]["event_driven_engine"] = "jump"
    path = tmp_path / "bad.toml"
    path.write_text(_toml(data))
    result = CliRunner().invoke(main, ["run", str(path), "--out", str(tmp_path / "o"),
                                       "--quiet"])
    assert result.exit_code == 2
    assert "event_driven_engine" in result.output


def test_evaluate_uses_the_chosen_engine() -> None:
    """The library's evaluate follows the key too: the two engines give different
    numbers from one seed, equal within 4 combined SE (4,000 studies)."""
    a = octrial.evaluate(build(TWO_ARM, simulation__event_driven_engine="events"))
    b = octrial.evaluate(build(TWO_ARM))
    p, q = float(a["prob_success"].iloc[0]), float(b["prob_success"].iloc[0])
    n = 4000
    assert p != q
    assert abs(p - q) < Z * math.hypot(math.sqrt(p * (1 - p) / n),
                                       math.sqrt(q * (1 - q) / n))
