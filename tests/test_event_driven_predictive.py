"""The predictive probability of final success of event-driven time-to-event studies
(:mod:`octrial.endpoints.survival_predictive`, the kernel's
:func:`~octrial.simulation.event_driven_decisions.one_arm_predictive` and
:func:`~octrial.simulation.event_driven_decisions.two_arm_predictive`, the family's
:meth:`~octrial.endpoints.time_to_event.TimeToEventFamily.predictive_from`) against
brute-force simulation of the study's continuation.

The reference (:func:`continuation`) is written here with numpy and scipy only: a study's
subjects are drawn by the kernel's own sampler and cut at an interim look (the D_k-th
event); then, for each of many hazards drawn from the conjugate gamma posterior
(``scipy.stats.gamma``; gamma-Poisson conjugacy), every subject still at risk gets a new
residual time to the event and to loss (exponential, memoryless), subjects not yet
enrolled enter at the study's own later enrolment times (independent of the hazards) with
fresh times, and the final analysis happens at the D-th event (or when follow-up ends if
the events run out); final success is the posterior probability of benefit at that
analysis (``scipy.stats.gamma.cdf`` for one arm, ``scipy.special.betainc`` for the
hazard ratio's beta form) against the final threshold. This is the definition of the
predictive probability (Lee & Liu 2008, Clinical Trials 5, 93-106) applied to the whole
continuation, with no use of the compound-gamma law or the split approximation being
tested.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest
from scipy import special, stats

from octrial.conduct.model import Accrual
from octrial.endpoints import survival_predictive as sp
from octrial.simulation import event_driven as ed
from octrial.simulation import event_driven_decisions as decisions

LAMBDA_C = math.log(2.0) / 12.0  # a 12-month median (invented)
Z = 4.0


def _setup(arms: int, **change: object) -> ed.EventDrivenSetup:
    prior = ((0.5,),)
    rate = ((6.0,),)
    base: dict[str, object] = dict(
        hazards=((0.75 * LAMBDA_C,), (LAMBDA_C,))[:arms] if arms == 2 else
        ((0.8 * LAMBDA_C,),), claim=1.0 if arms == 2 else LAMBDA_C,
        efficacy=(0.999, 0.99, 0.975), futility=(None, None, None),
        futility_predictive=(0.1, 0.1, None), targets=(30.0, 60.0, 90.0),
        accrual=Accrual(rates=(8.0,)), max_enrolment=160, prior_a=(prior,) * arms,
        prior_b=(rate,) * arms, dropout_hazard=0.01)
    base.update(change)
    return ed.EventDrivenSetup(**base)  # type: ignore[arg-type]


def _cut(s: ed.EventDrivenSetup, seed: int, look: int) -> dict[str, np.ndarray | float]:
    """One study's subjects and its statistics at interim look ``look`` (from 0)."""
    sim = ed.PatientLevelSimulator(s)
    subj = sim.subjects(np.random.default_rng(seed))
    ends = subj["enrolled"] + subj["follow"]
    tau = float(np.sort(ends[subj["seen"]])[int(s.targets[look]) - 1])
    entered = subj["enrolled"] <= tau
    ended = entered & (ends <= tau)
    exposure = np.where(ended, subj["follow"], np.where(entered, tau - subj["enrolled"], 0))
    d = np.array([np.sum(ended & subj["seen"] & (subj["arm"] == j)) for j in range(s.arms)],
                 dtype=float)
    x = np.array([np.sum(exposure[subj["arm"] == j]) for j in range(s.arms)])
    return {**subj, "tau": tau, "entered": entered, "ended": ended, "d": d, "x": x}


def continuation(s: ed.EventDrivenSetup, cut: dict, draws: int,
                 rng: np.random.Generator) -> tuple[float, float]:
    """Brute-force predictive probability of final success and its standard error (module
    docstring), for one prior component per arm."""
    arms, final = s.arms, int(s.targets[-1])
    arm = cut["arm"]
    lam = np.column_stack([
        stats.gamma(s.prior_a[j][0][0] + cut["d"][j], scale=1.0 / (
            s.prior_b[j][0][0] + cut["x"][j])).rvs(draws, random_state=rng)
        for j in range(arms)])
    at_risk = cut["entered"] & ~cut["ended"]
    later = ~cut["entered"]
    tau = cut["tau"]
    # start of the new follow-up (calendar) and follow-up already spent
    start = np.where(at_risk, tau, cut["enrolled"])
    spent = np.where(at_risk, tau - cut["enrolled"], 0.0)
    open_ = at_risk | later
    m = int(np.sum(open_))
    hazard = lam[:, arm[open_]]
    t_event = stats.expon.rvs(size=(draws, m), random_state=rng) / hazard
    t_loss = (stats.expon.rvs(size=(draws, m), random_state=rng) / s.dropout_hazard
              if s.dropout_hazard > 0 else np.full((draws, m), np.inf))
    seen = t_event <= t_loss
    end = start[open_] + np.minimum(t_event, t_loss)
    old = int(cut["d"].sum())
    event_end = np.where(seen, end, np.inf)
    need = final - old
    kth = np.sort(event_end, axis=1)[:, need - 1]
    resolved = end.max(axis=1)
    t_final = np.where(np.isfinite(kth), kth, resolved)
    # exposure and events at the final analysis: the earlier subjects' part is fixed
    closed = ~open_ & cut["entered"]
    d_fin = np.zeros((draws, arms))
    x_fin = np.zeros((draws, arms))
    for j in range(arms):
        fixed = closed & (arm == j)
        d_fin[:, j] = np.sum(cut["seen"][fixed])
        x_fin[:, j] = np.sum(cut["follow"][fixed])
        mine = arm[open_] == j
        stop = np.minimum(end[:, mine], t_final[:, None])
        x_fin[:, j] += np.sum(np.maximum(stop - start[open_][mine], 0.0)
                              + spent[open_][mine] * (start[open_][mine] <= t_final[:, None]),
                              axis=1)
        d_fin[:, j] += np.sum(seen[:, mine] & (end[:, mine] <= t_final[:, None]), axis=1)
    a = [s.prior_a[j][0][0] + d_fin[:, j] for j in range(arms)]
    b = [s.prior_b[j][0][0] + x_fin[:, j] for j in range(arms)]
    if arms == 1:
        benefit = stats.gamma.cdf(s.claim, a[0], scale=1.0 / b[0])
    else:
        k = s.claim * b[0] / b[1]
        benefit = special.betainc(a[0], a[1], k / (1 + k))
    if not s.lower_better:
        benefit = 1.0 - benefit
    success = benefit >= s.efficacy[-1]
    p = float(success.mean())
    return p, math.sqrt(max(p * (1 - p), 1.0 / draws) / draws)


@pytest.mark.parametrize(("seed", "look"), [(1, 0), (2, 1), (5, 0)])
def test_one_arm_predictive_equals_the_simulated_continuation(seed: int, look: int) -> None:
    """One arm: the compound-gamma closed form (future exposure Gamma(D - d, lambda) by
    the random time change) equals the brute-force continuation within 4 standard
    errors, with staggered entry, dropout and administrative censoring."""
    s = _setup(1)
    cut = _cut(s, seed, look)
    sim = ed.PatientLevelSimulator(s)
    value = decisions.one_arm_predictive(cut["d"][0], cut["x"][0], s.targets[-1], sim.log_w,
                                  sim.a, sim.b, sim.bound, True)
    p, se = continuation(s, cut, 40_000, np.random.default_rng(seed))
    assert abs(value - p) <= Z * se, (value, p, se)


def test_two_arm_split_approximation_is_close_to_the_continuation() -> None:
    """Two arms: the kernel's split approximation (future exposure in the ratio of the
    posterior rates; binomial split of the future events; here in its closed form, one
    prior component per arm) against the brute-force continuation at both interim looks
    of 8 simulated studies (a small study: 160 subjects, 90 events, so the at-risk sets
    change much before the final analysis):
    every difference within 4 standard errors plus 0.05 and the mean absolute
    difference below 0.02. Measured when written: largest 0.034, mean 0.009; the
    approximation is stated in docs/methods.md with these numbers."""
    s = _setup(2)
    sim = ed.PatientLevelSimulator(s)
    gaps = []
    for seed in range(1, 9):
        for look in (0, 1):
            cut = _cut(s, seed, look)
            value = decisions.two_arm_predictive(np.random.default_rng(seed), cut["d"], cut["x"],
                                          s.targets[-1], sim.log_w, sim.a, sim.b, s.claim,
                                          True, s.efficacy[-1] - 1e-12, sim.quantiles, 0)
            p, se = continuation(s, cut, 40_000, np.random.default_rng(seed + 100))
            # the closed form has no Monte Carlo error of its own
            assert abs(value - p) <= Z * se + 0.05, (seed, look, value, p)
            gaps.append(abs(value - p))
    assert np.mean(gaps) < 0.02, gaps


def test_two_arm_kernel_table_and_mixture_paths_agree() -> None:
    """The kernel's two routes (the closed form for one prior component per arm; draws
    of the split approximation for mixtures) give the same predictive probability within
    Monte Carlo error when the mixture has one effective component (two equal
    components)."""
    single = _setup(2)
    double = _setup(2, prior_a=(((0.5, 0.5),),) * 2, prior_b=(((6.0, 6.0),),) * 2,
                    prior_weights=(((0.5, 0.5),),) * 2)
    cut = _cut(single, 2, 0)
    values = []
    for s in (single, double):
        sim = ed.PatientLevelSimulator(s)
        assert (sim.quantiles.size > 0) == (s is single)
        values.append(decisions.two_arm_predictive(
            np.random.default_rng(9), cut["d"], cut["x"], s.targets[-1], sim.log_w, sim.a,
            sim.b, s.claim, True, s.efficacy[-1] - 1e-12, sim.quantiles, 20_000))
    assert 0.05 < values[0] < 0.95
    assert abs(values[0] - values[1]) < 0.03, values


TWO_ARM_CONDUCT: dict[str, Any] = {
    "schema": 1, "name": "tte-two-arm-predictive-conduct",
    "endpoint": {"type": "time-to-event"},
    "hypothesis": {"comparison": "ratio", "margin": 0.0},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 0.5, "rate": 6}},
             "control": {"prior": {"distribution": "gamma", "shape": 0.5, "rate": 6}}},
    "conduct": {"enrolment_rate": 8.0, "max_enrolment": 160, "dropout_hazard": 0.01},
    "looks": {"events": [30, 60, 90], "efficacy": [0.999, 0.99, 0.975],
              "futility_predictive": [0.1, 0.1]},
    "scenarios": {"control": [0.058], "ratio": [1.0, 0.75]},
}


@pytest.mark.parametrize("which", ["one arm", "two arms"])
def test_kernel_decisions_equal_the_family_on_the_same_subjects(which: str) -> None:
    """Predictive futility at both interim looks, one arm with a mixture prior or two
    arms with one gamma component each (the kernel's closed forms draw no random
    numbers): the kernel's stops equal, study by study, a Python loop over the same
    subjects (drawn by
    :meth:`~octrial.simulation.event_driven.PatientLevelSimulator.subjects` from the same
    generator) deciding with the family's posterior probability and predictive
    probability (scipy: the compound-gamma tail, scipy.stats.betabinom; checked above
    against the continuation) and the stop rule's Python form."""
    from octrial.rules.stop import CONTINUE, EFFICACY, Rule
    from tests.helpers import build
    from tests.test_time_to_event_predictive import ONE_ARM_CONDUCT

    design = build(ONE_ARM_CONDUCT if which == "one arm" else TWO_ARM_CONDUCT)
    family = design.family
    arms = len(design.arms)
    rule = Rule.of(design.looks)
    studies = 600 if arms == 1 else 300
    predictive_stops = 0
    for truth in design.scenarios.values:
        sim = ed.EventDrivenSimulator(design, tuple(truth), 0.95)
        tally = sim.simulate(np.random.default_rng(21), studies)
        rng = np.random.default_rng(21)
        efficacy = np.zeros(3, dtype=int)
        futility = np.zeros(3, dtype=int)
        for _ in range(studies):
            subj = sim.subjects(rng)
            ends = subj["enrolled"] + subj["follow"]
            events = np.sort(ends[subj["seen"]])
            for k, target in enumerate(sim.targets):
                final = k == 2 or events.size < target
                tau = events[int(target) - 1] if events.size >= target else ends.max()
                d = np.zeros((arms, 1))
                x = np.zeros((arms, 1))
                ed.piece_statistics(subj["enrolled"], subj["follow"], subj["seen"],
                                    subj["arm"], tau, np.zeros(1), d, x)
                per_arm_d = tuple(d[j:j + 1] for j in range(arms))
                per_arm_x = tuple(x[j:j + 1] for j in range(arms))
                b = float(family.benefit_from(design, per_arm_d, per_arm_x)[0])
                look = 2 if final else k
                code = rule.decide(look, b, lambda dd=per_arm_d, xx=per_arm_x: float(
                    family.predictive_from(design, dd, xx)[0]))
                if code != CONTINUE and rule.decide(look, b) == CONTINUE:
                    predictive_stops += 1
                if code == EFFICACY:
                    efficacy[k] += 1
                if code != CONTINUE and code != EFFICACY:
                    futility[k] += 1
                if code != CONTINUE:
                    break
        assert list(tally.efficacy) == list(efficacy), (truth, tally.efficacy, efficacy)
        assert list(tally.futility) == list(futility), (truth, tally.futility, futility)
    assert predictive_stops > 10, predictive_stops


def test_higher_hazard_better_predictive_equals_the_continuation() -> None:
    """Higher hazards better (a time to recovery, say): one arm's closed form within 4
    standard errors of the brute-force continuation, and two arms' split approximation
    (the beta-quantile table's upper side) within 4 standard errors plus 0.05,
    at an interim state of each with a predictive probability strictly inside (0, 1)."""
    one = _setup(1, hazards=((1.25 * LAMBDA_C,),), lower_better=False)
    cut = _cut(one, 5, 0)
    sim = ed.PatientLevelSimulator(one)
    value = decisions.one_arm_predictive(cut["d"][0], cut["x"][0], one.targets[-1], sim.log_w,
                                  sim.a, sim.b, sim.bound, False)
    p, se = continuation(one, cut, 40_000, np.random.default_rng(5))
    assert 0.01 < p < 0.99
    assert abs(value - p) <= Z * se, (value, p, se)
    two = _setup(2, hazards=((1.3 * LAMBDA_C,), (LAMBDA_C,)), lower_better=False)
    sim = ed.PatientLevelSimulator(two)
    for seed in (2, 4):
        cut = _cut(two, seed, 0)
        value = decisions.two_arm_predictive(np.random.default_rng(seed), cut["d"], cut["x"],
                                      two.targets[-1], sim.log_w, sim.a, sim.b, two.claim,
                                      False, two.efficacy[-1] - 1e-12, sim.quantiles,
                                      0)
        p, se = continuation(two, cut, 40_000, np.random.default_rng(seed + 100))
        assert abs(value - p) <= Z * se + 0.05, (seed, value, p)


def test_two_arm_closed_form_in_the_kernel_equals_scipy_betabinom() -> None:
    """One prior component per arm: the kernel's beta-binomial sum over the table of beta
    quantiles equals :func:`survival_predictive.two_arm_split_single`
    (``scipy.stats.betabinom`` and ``scipy.special.betainc``) to 1e-10, lower and higher
    hazards better, at both interim looks of three studies."""
    for lower in (True, False):
        s = _setup(2, lower_better=lower)
        sim = ed.PatientLevelSimulator(s)
        assert sim.quantiles.size == int(s.targets[-1]) + 1
        for seed in (1, 2, 5):
            for look in (0, 1):
                cut = _cut(s, seed, look)
                value = decisions.two_arm_predictive(np.random.default_rng(0), cut["d"], cut["x"],
                                              s.targets[-1], sim.log_w, sim.a, sim.b,
                                              s.claim, lower, s.efficacy[-1] - 1e-12,
                                              sim.quantiles, 10)
                a = [s.prior_a[j][0][0] + cut["d"][j] for j in range(2)]
                b = [s.prior_b[j][0][0] + cut["x"][j] for j in range(2)]
                m = int(s.targets[-1] - cut["d"].sum())
                want = sp.two_arm_split_single(a[0], b[0], a[1], b[1], m, s.claim,
                                               float(s.efficacy[-1]), lower)
                assert value == pytest.approx(want, abs=1e-10), (lower, seed, look)
