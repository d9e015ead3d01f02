"""The predictive probability under random conduct: each study's own final counts.

References, each named at its check:

* final counts: a brute-force continuation of one study from its state at a look,
  written here with scipy.stats.expon (Poisson arrivals as exponential gaps from the look,
  memoryless; residual and future dropout times), whose mean final size per arm the
  method must match within one subject (it rounds down) plus 4 standard errors;
* under even arrivals without dropout: the looks' planned final counts (the loader's
  exact look timing, octrial.conduct.timing.look_timing);
* the predictive probability at given final sizes: exact enumeration with
  scipy.stats.betabinom and scipy.integrate.quad for the final posterior probability,
  and a brute-force continuation of the responses (scipy.stats.beta and binom draws)
  within 4 standard errors (Lee & Liu 2008's definition, recalled from memory).
"""

from __future__ import annotations

import math
import tempfile
from pathlib import Path

import numpy as np
import pytest
from scipy import integrate, stats

from octrial.design.load import load_design
from octrial.engines.monte_carlo import batch_generator
from octrial.rules.stop import DECISION_TOLERANCE
from octrial.simulation.calendar_studies import CalendarStudies
from octrial.simulation.counts_benefit import BetaCounts

DESIGN = """
schema = 1
name = "calendar-predictive"
[endpoint]
type = "binary"
better = "higher"
[hypothesis]
comparison = "difference"
kind = "superiority"
margin = 0.0
[arms.treatment]
allocation = {allocation}
prior = {{ distribution = "beta", a = 1, b = 1 }}
[arms.control]
allocation = 1
prior = {{ distribution = "beta", a = 1, b = 1 }}
[conduct]
arrivals = "{arrivals}"
enrolment_rate = 6
max_enrolment = 90
outcome_lag = 4
{dropout}
[looks]
{looks}
efficacy = [0.995, 0.975]
futility_predictive = 0.1
[scenarios]
control = [0.3]
effect = [0.0, 0.2]
[simulation]
method = "monte-carlo"
replicates = 2000
seed = 4
"""


def design_of(*, arrivals: str = "poisson", dropout: str = "dropout_hazard = 0.04",
              looks: str = "n = [30, 70]", allocation: int = 1) -> object:
    text = DESIGN.format(arrivals=arrivals, dropout=dropout, looks=looks,
                         allocation=allocation)
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "design.toml"
        path.write_text(text)
        return load_design(path)


def study_state(design, seed: int):
    """One simulated study's subject arrays and the time of its first look."""
    simulator = CalendarStudies(design, (0.5, 0.3), 0.95)
    enrol, observed, lost = simulator._timeline(np.random.default_rng(seed), 1)
    enrol = np.ascontiguousarray(np.broadcast_to(enrol, observed.shape))
    observed = np.ascontiguousarray(observed)
    ordered = np.sort(observed, axis=1)
    t, complete, _ = simulator._look(0, enrol, observed, ordered, np.zeros(1, dtype=np.int64))
    final = simulator._final_counts((enrol, observed, np.ascontiguousarray(lost)),
                                    np.zeros(1, dtype=np.int64), t)
    return simulator, enrol[0], observed[0], lost, float(t[0]), complete[0], final[0]


def continuation(design, simulator, enrol, observed, lost, t, runs: int, seed: int):
    """Final outcomes per arm of ``runs`` continuations of the study from time ``t``:
    what is known at ``t`` kept, the rest drawn with scipy.stats.expon."""
    conduct, looks = design.conduct, design.looks
    rng = np.random.default_rng(seed)
    m, lag, h = conduct.max_enrolment, conduct.lag, conduct.dropout_hazard
    rate = conduct.accrual.rates[0]
    arm_of = simulator.arm_of
    enrolled = int(np.count_nonzero(enrol <= t))
    times = np.empty((runs, m))
    times[:, :enrolled] = enrol[:enrolled]
    gaps = stats.expon.rvs(scale=1.0 / rate, size=(runs, m - enrolled), random_state=rng)
    times[:, enrolled:] = t + np.cumsum(gaps, axis=1)
    due = times + lag
    seen = observed <= t
    lost_time = np.broadcast_to(enrol + lost[0], (runs, m)) if h > 0 else None
    outcome = np.broadcast_to(seen, (runs, m)).copy()
    for i in range(m):
        if seen[i]:
            continue
        if i < enrolled:
            if h > 0 and lost_time[0, i] <= t:
                continue  # known lost at t
            residual = (stats.expon.rvs(scale=1.0 / h, size=runs, random_state=rng)
                        if h > 0 else np.full(runs, np.inf))
            outcome[:, i] = t + residual >= due[:, i]
        else:
            loss = (stats.expon.rvs(scale=1.0 / h, size=runs, random_state=rng)
                    if h > 0 else np.full(runs, np.inf))
            outcome[:, i] = loss >= lag
    when = np.where(outcome, np.where(seen, observed, due), np.inf)
    if looks.trigger == "time":
        final_time = np.full(runs, looks.at[-1])
    elif looks.trigger == "enrolled":
        final_time = times[:, int(looks.at[-1]) - 1]
    else:
        ordered = np.sort(when, axis=1)
        final_time = ordered[:, looks.n[-1] - 1]
        last = np.where(np.isfinite(ordered), ordered, -np.inf).max(axis=1)
        final_time = np.where(np.isfinite(final_time), final_time, last)
    counted = when <= final_time[:, None] + 1e-9
    return np.stack([counted[:, arm_of == j].sum(axis=1) for j in range(2)], axis=1)


@pytest.mark.parametrize("looks, seed", [
    ("n = [30, 70]", 1), ("n = [30, 70]", 2), ("time = [10, 14]", 3),
    ("enrolled = [50, 80]", 4),
])
def test_final_counts_against_a_continuation_with_scipy(looks, seed):
    design = design_of(looks=looks)
    simulator, enrol, observed, lost, t, complete, final = study_state(design, seed)
    assert np.all(final >= complete)
    counts = continuation(design, simulator, enrol, observed, lost, t, 4000, seed + 100)
    mean = counts.mean(axis=0)
    se = counts.std(axis=0, ddof=1) / math.sqrt(counts.shape[0])
    # the method rounds each arm's expected size down: within one subject, plus 4 SE
    assert np.all(np.abs(final - mean) <= 1.0 + 4.0 * se + 1e-9), (final, mean, se)


@pytest.mark.parametrize("looks", ["n = [30, 60]", "time = [10, 17.5]", "enrolled = [40, 90]"])
@pytest.mark.parametrize("allocation", [1, 2])
def test_final_counts_without_randomness_are_the_planned_counts(looks, allocation):
    """Even arrivals, no dropout: every probability is 1 and the final counts are the
    looks' planned final counts (exact look timing), from any state."""
    design = design_of(arrivals="even", dropout="", looks=looks, allocation=allocation)
    assert design.conduct.deterministic
    simulator = CalendarStudies(design, (0.5, 0.3), 0.95)
    enrol, observed, lost = simulator._timeline(np.random.default_rng(0), 1)
    enrol, observed = np.ascontiguousarray(enrol), np.ascontiguousarray(observed)
    row = np.zeros(1, dtype=np.int64)
    for k in range(design.looks.count):
        t, _, _ = simulator._look(k, enrol, observed, observed, row)
        final = simulator._final_counts((enrol, observed, np.ascontiguousarray(lost)), row, t)
        assert tuple(final[0]) == tuple(design.looks.per_arm[-1])


def _final_success(final_t: int, final_c: int, threshold: float) -> np.ndarray:
    """success[z_t, z_c] at the final sizes, Pr(p_T > p_C) by scipy quad, Beta(1, 1)."""
    out = np.zeros((final_t + 1, final_c + 1), dtype=bool)
    for z_t in range(final_t + 1):
        treat = stats.beta(1 + z_t, 1 + final_t - z_t)
        for z_c in range(final_c + 1):
            control = stats.beta(1 + z_c, 1 + final_c - z_c)
            value = integrate.quad(lambda u, c=control, tr=treat: c.pdf(u) * tr.sf(u),
                                   0.0, 1.0, epsabs=1e-12, limit=200)[0]
            out[z_t, z_c] = value >= threshold
    return out


@pytest.mark.parametrize("state", [(6, 14, 4, 13, 25, 24), (9, 15, 3, 15, 30, 31),
                                   (2, 10, 5, 10, 18, 18)])
def test_predictive_at_final_sizes_against_enumeration_and_continuation(state):
    x_t, n_t, x_c, n_c, final_t, final_c = state
    design = design_of()
    threshold = 0.975 - DECISION_TOLERANCE
    got = BetaCounts(design).predictive(
        (np.array([float(x_t)]), np.array([float(x_c)])), np.array([[n_t, n_c]]),
        np.array([[final_t, final_c]]), threshold)[0]
    success = _final_success(final_t, final_c, threshold)
    m_t, m_c = final_t - n_t, final_c - n_c
    # exact: beta-binomial predictive pmfs (scipy.stats.betabinom)
    pmf_t = stats.betabinom.pmf(np.arange(m_t + 1), m_t, 1 + x_t, 1 + n_t - x_t)
    pmf_c = stats.betabinom.pmf(np.arange(m_c + 1), m_c, 1 + x_c, 1 + n_c - x_c)
    exact = float(pmf_t @ success[x_t:x_t + m_t + 1, x_c:x_c + m_c + 1] @ pmf_c)
    assert got == pytest.approx(exact, abs=1e-12)
    # brute force: draw the rates from the posterior, then the future responses
    rng = np.random.default_rng(sum(state))
    runs = 40_000
    p_t = stats.beta.rvs(1 + x_t, 1 + n_t - x_t, size=runs, random_state=rng)
    p_c = stats.beta.rvs(1 + x_c, 1 + n_c - x_c, size=runs, random_state=rng)
    y_t = stats.binom.rvs(m_t, p_t, random_state=rng)
    y_c = stats.binom.rvs(m_c, p_c, random_state=rng)
    hits = success[x_t + y_t, x_c + y_c]
    se = math.sqrt(max(hits.mean() * (1 - hits.mean()), 1e-4) / runs)
    assert abs(got - hits.mean()) <= 4 * se


def test_simulated_decisions_equal_the_family_predictive_at_the_same_final_counts():
    """The compiled predictive (bisection on the final success edge) against the family's
    predictive on the lattice at each study's final counts: the same decisions."""
    design = design_of()
    fast = CalendarStudies(design, (0.45, 0.3), 0.95)
    assert fast.at_counts is not None
    slow = CalendarStudies(design, (0.45, 0.3), 0.95)
    slow.at_counts = None
    a = fast.simulate(batch_generator(2, 0, 0), 1500)
    b = slow.simulate(batch_generator(2, 0, 0), 1500)
    assert np.array_equal(a.efficacy, b.efficacy)
    assert np.array_equal(a.futility, b.futility)
    assert a.futility[0] > 0  # the predictive threshold stops some studies


ONE_ARM = """
schema = 1
name = "one-arm-predictive"
[endpoint]
type = "binary"
better = "lower"
[hypothesis]
benchmark = 0.4
[arms.treatment.prior]
distribution = "beta-mixture"
components = [{ weight = 0.6, a = 2, b = 3 }, { weight = 0.4, a = 1, b = 1 }]
[conduct]
arrivals = "poisson"
enrolment_rate = 5
max_enrolment = 60
outcome_lag = 2
dropout_hazard = 0.05
[looks]
time = [6, 10, 14]
efficacy = [0.995, 0.99, 0.95]
futility_predictive = 0.1
[scenarios]
treatment = [0.25, 0.4]
[simulation]
method = "monte-carlo"
replicates = 2000
seed = 3
"""


def test_one_arm_lower_better_mixture_equals_the_family_predictive():
    """One arm, lower rate better, a beta-mixture prior, looks by time: the compiled
    predictive against the family's lattice predictive at the same final sizes."""
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "design.toml"
        path.write_text(ONE_ARM)
        design = load_design(path)
    for truth in [(0.25,), (0.4,)]:
        fast = CalendarStudies(design, truth, 0.95)
        slow = CalendarStudies(design, truth, 0.95)
        slow.at_counts = None
        a = fast.simulate(batch_generator(1, 0, 0), 2000)
        b = slow.simulate(batch_generator(1, 0, 0), 2000)
        assert np.array_equal(a.efficacy, b.efficacy)
        assert np.array_equal(a.futility, b.futility)
        assert a.futility[:2].sum() > 0


def test_predictive_futility_under_random_conduct_does_not_depend_on_jobs():
    """Memos fill differently in one process and in two; the numbers do not."""
    from octrial.engines.monte_carlo import MonteCarloEngine, MonteCarloSettings
    from octrial.execution import Execution

    design = design_of()
    truths = np.array([[0.3, 0.3], [0.5, 0.3]])
    settings = MonteCarloSettings(replicates=1500, seed=9, batch_size=500)
    one = MonteCarloEngine.run(design, truths, settings=settings)
    two = MonteCarloEngine.run(design, truths, settings=settings,
                               execution=Execution(jobs=2))
    assert np.array_equal(one.efficacy, two.efficacy)
    assert np.array_equal(one.futility, two.futility)
    for name, values in one.extra.items():
        assert np.array_equal(values, two.extra[name], equal_nan=True), name
    assert one.estimation is not None and two.estimation is not None
    assert np.array_equal(one.estimation.error_moments, two.estimation.error_moments)
    assert np.array_equal(one.estimation.coverage, two.estimation.coverage)
