"""The Monte Carlo engine's policy: kernels, seeds, batches, precision, memory, resumption."""

from __future__ import annotations

import io
import tracemalloc

import numpy as np
import pytest

from octrial.engines import MonteCarloSettings
from octrial.engines.monte_carlo import batch_generator
from octrial.evaluation import compute
from octrial.execution import Execution
from octrial.execution.progress import ProgressBar
from octrial.results import proportion_se, zero_estimate_bound
from octrial.rules.estimates import lattice_estimates
from octrial.rules.lattice import build_rule
from octrial.simulation.lattice import LatticeSimulator, lattice_plan
from tests.helpers import ONE_ARM, build
from tests.test_count_engine import TWO_ARM as COUNT_TWO_ARM
from tests.test_monte_carlo_vs_exact import DESIGN_MAKERS

GENERAL_DESIGNS = ["demo-one-arm", "one-arm-lower-predictive", "one-arm-mixture-predictive",
                   "simon-counts", "simon-posterior", "two-arm", "two-arm-2-to-1",
                   "demo-event-rate", "count-one-arm-predictive",
                   "count-one-arm-higher-mixture", "count-two-arm-superiority"]


def simulate(design, **settings):
    return compute(design, "monte-carlo", MonteCarloSettings(**settings)).oc


def _reference_kernel(design):
    """The former numba general kernels (tests/references), one per lattice family."""
    from tests.references.binary_kernel import BinarySimulator
    from tests.references.count_kernel import CountSimulator

    return {"binary": BinarySimulator, "count": CountSimulator}[design.family.name]


@pytest.mark.parametrize("name", GENERAL_DESIGNS)
def test_reference_kernels_reach_the_table_kernels_decisions(name: str, monkeypatch) -> None:
    # The reference kernels compute every posterior and predictive probability per study
    # (numba incomplete beta; two arms numba quadrature); the table kernel looks
    # decisions up in tables built with scipy. Same seed, same draws: every stopping
    # count must be identical, and the summaries equal up to rounding.
    design = (DESIGN_MAKERS[name] if name in DESIGN_MAKERS else EXTRA_DESIGNS[name])()
    replicates = 1000 if design.two_arm else 3000
    table = simulate(design, replicates=replicates, seed=11, kernel="table")
    kernel = _reference_kernel(design)
    family = type(design.family)
    monkeypatch.setattr(family, "simulator", lambda self, d, truth, level: kernel(d, truth,
                                                                                   level))
    monkeypatch.setattr(family, "simulation_unsupported", lambda self, d: None)
    general = simulate(design, replicates=replicates, seed=11, kernel="general")
    looks = [c for c in table.columns if c.startswith("look") and not c.endswith("_se")]
    np.testing.assert_array_equal(table[looks].to_numpy(), general[looks].to_numpy())
    for column in ("bias", "rmse", "coverage"):
        if column in table:
            np.testing.assert_allclose(general[column], table[column], rtol=1e-11, atol=1e-14)


EXTRA_DESIGNS = {
    # two-arm counts without predictive futility, which the reference kernel leaves out
    "count-two-arm-superiority": lambda: build(
        COUNT_TWO_ARM, hypothesis__margin=0.2, looks__futility_predictive=None,
        arms__control__prior={"distribution": "gamma-mixture", "components": [
            {"weight": 0.5, "shape": 2, "rate": 2}, {"weight": 0.5, "shape": 0.5, "rate": 0.5}]},
        scenarios={"control": [1.0, 2.0], "ratio": [1.0, 0.5]}),
}

LOOP_DESIGNS = ["one-arm-lower-predictive", "one-arm-mixture-predictive", "two-arm",
                "two-arm-2-to-1", "one-arm-logit-normal", "demo-event-rate",
                "count-one-arm-predictive", "two-arm-non-inferiority-predictive",
                "count-two-arm", "count-negative-binomial"]


@pytest.mark.parametrize("name", LOOP_DESIGNS)
def test_generic_loop_agrees_with_the_table_kernel(name: str) -> None:
    # The generic study loop (binomial, Poisson, negative binomial draws from numpy;
    # probabilities from the family per study) and the table kernel (inverse-CDF draws,
    # decision tables) use different random numbers, so they agree in distribution: every
    # per-look stopping probability within 4 combined standard errors (about 1 in 16 000
    # per comparison under normality; common practice).
    design = DESIGN_MAKERS[name]()
    replicates = 2000
    table = simulate(design, replicates=replicates, seed=5, kernel="table")
    loop = simulate(design, replicates=replicates, seed=6, kernel="general")
    looks = [c for c in table.columns if c.startswith("look") and not c.endswith("_se")]
    a, b = table[looks].to_numpy(), loop[looks].to_numpy()
    se = np.sqrt((a * (1 - a) + b * (1 - b)) / replicates)
    assert np.all(np.abs(a - b) <= 4 * se + 1e-12), (name, np.abs(a - b) / (se + 1e-12))
    assert "coverage" in loop.columns


def test_generic_loop_limits_are_clear() -> None:
    # a rule stated in counts has no posterior probability to decide on per study
    design = DESIGN_MAKERS["simon-counts"]()
    with pytest.raises(ValueError, match=r"rule stated in counts.*kernel 'table'"):
        simulate(design, replicates=100, seed=1, kernel="general")


def test_generic_loop_is_reproducible_whatever_the_workers() -> None:
    # one seed in, the same numbers out with one worker or two (the rule of STYLE.md)
    design = DESIGN_MAKERS["count-one-arm-predictive"]()
    settings = MonteCarloSettings(replicates=3000, seed=9, batch_size=1000, kernel="general")
    one = compute(design, "monte-carlo", settings, Execution(jobs=1), assurance=False).oc
    two = compute(design, "monte-carlo", settings, Execution(jobs=2), assurance=False).oc
    np.testing.assert_array_equal(one.to_numpy(), two.to_numpy())


def test_bad_settings_are_reported_together() -> None:
    from octrial.errors import InputError

    with pytest.raises(InputError) as info:
        MonteCarloSettings(replicates=0, target_se=0.7, kernel="fast")
    text = str(info.value)
    assert "replicates: expected a whole number >= 1; got 0" in text
    assert "target_se: expected a standard error in (0, 0.5]; got 0.7" in text
    assert "kernel: expected one of auto, table, general; got 'fast'" in text


def test_batch_seeds_are_spawned_children() -> None:
    # SeedSequence(seed, spawn_key=(i, b)) is what SeedSequence(seed).spawn(.)[i].spawn(.)[b]
    # gives (numpy's documented spawn_key mechanism).
    root = np.random.SeedSequence(123)
    child = root.spawn(5)[3].spawn(4)[2]
    expected = np.random.Generator(np.random.PCG64(child)).random(5)
    np.testing.assert_array_equal(batch_generator(123, 3, 2).random(5), expected)


def test_target_se_runs_until_every_se_is_small_enough() -> None:
    design = build(ONE_ARM)
    oc = simulate(design, seed=3, target_se=0.004, batch_size=5000)
    se = [c for c in oc.columns if c.endswith("_se") and not c.startswith(("bias", "rmse",
                                                                            "expected"))]
    assert (oc[se].to_numpy() <= 0.004).all()
    assert oc["target_se_met"].all()
    assert (oc["replicates"] % 5000 == 0).all() and (oc["replicates"] >= 5000).all()
    # Needed at the worst probability: p (1 - p) / se^2 <= 0.25 / 0.004^2 = 15625.
    assert (oc["replicates"] <= 20000).all()


def test_target_with_cap_equals_fixed_replicates() -> None:
    # An unreachable target stops at the cap; batches are seeded by index, so the result
    # is the fixed-replicate run of the same size, to the last bit.
    design = build(ONE_ARM)
    capped = compute(design, "monte-carlo", MonteCarloSettings(
        seed=5, target_se=1e-6, max_replicates=30000, batch_size=10000))
    fixed = simulate(design, seed=5, replicates=30000, batch_size=10000)
    assert not capped.oc["target_se_met"].any()
    assert capped.info["scenarios_short_of_target"] == [1, 2, 3]
    numeric = fixed.select_dtypes("number").columns
    np.testing.assert_array_equal(capped.oc[numeric].to_numpy(), fixed[numeric].to_numpy())


def test_standard_errors_match_the_spread_over_independent_runs() -> None:
    # Common practice: SE of a proportion sqrt(p (1 - p) / R) (binomial variance); of a
    # mean sd / sqrt(R); RMSE by the delta method. 400 independent runs of R = 1000: the
    # reported SE must match the standard deviation of the estimates (ratio of variances
    # within 25%; the sample variance of 400 values has a relative sd of about 7%).
    design = build(ONE_ARM, looks__futility_predictive=0.1, scenarios__treatment=[0.3])
    rule, estimates = build_rule(design), lattice_estimates(design)
    simulator = LatticeSimulator(design, lattice_plan(design, rule, estimates), (0.3,),
                                 estimates, 0.95)
    n = np.array(design.looks.n, dtype=float)
    runs, reps = 400, 1000
    rows = []
    for seed in range(runs):
        t = simulator.simulate(batch_generator(seed, 0, 0), reps)
        stop = (t.efficacy + t.futility) / reps
        m1, m2, m4 = t.error_sums / reps
        rows.append((t.efficacy.sum() / reps, stop @ n, np.sqrt(stop @ n**2 - (stop @ n)**2),
                     m1, np.sqrt(m2 - m1**2), np.sqrt(m2), np.sqrt(m4 - m2**2),
                     t.covered / reps))
    success, en, sdn, bias, sd_e, rmse, sd_e2, cover = np.array(rows).T
    checks = {
        "success": (success, proportion_se(success, np.full(runs, reps))),
        "expected_n": (en, sdn / np.sqrt(reps)),
        "bias": (bias, sd_e / np.sqrt(reps)),
        "rmse": (rmse, sd_e2 / np.sqrt(reps) / (2 * rmse)),
        "coverage": (cover, proportion_se(cover, np.full(runs, reps))),
    }
    for name, (estimates_, ses) in checks.items():
        ratio = np.var(estimates_, ddof=1) / np.mean(ses**2)
        assert 0.75 <= ratio <= 1.25, (name, ratio)


def test_proportion_se_and_zero_bound_formulas() -> None:
    # sqrt(p (1 - p) / R) and 1 - 0.05^(1/R) (about 3/R, the rule of three).
    np.testing.assert_allclose(proportion_se(np.array([0.025]), np.array([97_500])),
                               np.sqrt(0.025 * 0.975 / 97_500))
    assert zero_estimate_bound(np.array([10_000]))[0] == pytest.approx(1 - 0.05**1e-4)
    assert zero_estimate_bound(np.array([10_000]))[0] == pytest.approx(3 / 10_000, rel=0.01)
    assert zero_estimate_bound(np.array([0]))[0] == 0.0 == proportion_se(
        np.array([0.3]), np.array([0]))[0]


def test_never_observed_type1_error_reports_the_upper_bound() -> None:
    design = build(ONE_ARM, looks__efficacy=[0.99999, 0.99999, 0.99999],
                   scenarios__treatment=[0.05, 0.1])
    ev = compute(design, "monte-carlo", MonteCarloSettings(replicates=2000, seed=1))
    assert (ev.oc["prob_success"] == 0).all() and (ev.oc["prob_success_se"] == 0).all()
    assert ev.info["type1"]["upper_bound_95"] == pytest.approx(1 - 0.05 ** (1 / 2000))


def test_memory_is_bounded_by_the_batch() -> None:
    # 4 million studies of 3 looks would need 96 MB of random words in one array; in
    # batches of 50,000 the peak must stay far below that.
    design = build(ONE_ARM, scenarios__treatment=[0.3])
    simulate(design, seed=1, replicates=20_000)  # compile and warm up first
    tracemalloc.start()
    simulate(design, seed=1, replicates=4_000_000)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert peak < 12e6, peak


def test_drawn_seed_is_recorded_and_reused_on_resume(tmp_path) -> None:
    design = build(ONE_ARM)
    store = tmp_path / ".partial"
    first = compute(design, "monte-carlo", MonteCarloSettings(replicates=2000),
                    execution=Execution(checkpoints=store))
    assert first.info["seed_drawn"] and isinstance(first.info["seed"], int)
    again = compute(design, "monte-carlo", MonteCarloSettings(replicates=2000),
                    execution=Execution(checkpoints=store))
    assert again.info["seed"] == first.info["seed"] and again.info["scenarios_resumed"] == 3
    explicit = compute(design, "monte-carlo", MonteCarloSettings(replicates=2000,
                                                                 seed=first.info["seed"]))
    numeric = explicit.oc.select_dtypes("number").columns
    np.testing.assert_array_equal(first.oc[numeric], explicit.oc[numeric])


class Stop(KeyboardInterrupt):
    pass


def test_interrupted_run_resumes_and_equals_an_uninterrupted_run(tmp_path) -> None:
    design = build(ONE_ARM, scenarios__treatment={"from": 0.1, "to": 0.5, "step": 0.05})
    settings = MonteCarloSettings(replicates=5000, seed=9)
    whole = compute(design, "monte-carlo", settings).oc
    store = tmp_path / ".partial"

    def interrupt_after_three(index: int) -> None:
        saved.append(index)
        if len(saved) == 3:
            raise Stop

    saved: list[int] = []
    with pytest.raises(Stop):
        compute(design, "monte-carlo", settings,
                execution=Execution(checkpoints=store, on_saved=interrupt_after_three))
    assert len(list(store.glob("*/scenario-*.npz"))) == 3
    computed: list[int] = []
    resumed = compute(design, "monte-carlo", settings,
                      execution=Execution(checkpoints=store, on_saved=computed.append))
    assert sorted(computed) == sorted(set(range(9)) - set(saved))
    assert resumed.info["scenarios_resumed"] == 3
    assert resumed.oc.equals(whole)


def test_other_arguments_never_reuse_saved_scenarios(tmp_path) -> None:
    design = build(ONE_ARM)
    store = tmp_path / ".partial"
    for replicates, seed in [(2000, 1), (3000, 1), (2000, 2)]:
        ev = compute(design, "monte-carlo", MonteCarloSettings(replicates=replicates,
                                                               seed=seed),
                     execution=Execution(checkpoints=store))
        assert ev.info["scenarios_resumed"] == 0
    assert len(list(store.iterdir())) == 3


class Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_progress_bar_draws_on_a_terminal_only() -> None:
    screen = Terminal()
    bar = ProgressBar(10, done=2, stream=screen)
    bar.advance()
    bar.close()
    text = screen.getvalue()
    assert "scenarios 3/10" in text and "left" in text and text.endswith("\n")
    assert "scenarios 2/10" in text and "estimating" in text
    quiet = io.StringIO()
    bar = ProgressBar(10, stream=quiet)
    bar.advance()
    bar.close()
    assert quiet.getvalue() == ""


def test_one_large_scenario_is_split_over_workers_with_the_same_numbers(monkeypatch) -> None:
    # A scenario of many batches runs as several tasks of BATCHES_PER_TASK batches (so
    # workers share it); every count equals the unsplit run's (each batch's generator
    # depends on (seed, scenario, batch) only), float sums agree to rounding, and the
    # result is bit-identical whatever --jobs (the split never depends on it).
    from octrial.engines import monte_carlo
    from octrial.engines.monte_carlo import MonteCarloEngine, ScenarioTask, _tasks

    design = build(ONE_ARM)
    truths = np.array(design.scenarios.values)
    settings = MonteCarloSettings(replicates=5500, seed=8, batch_size=500, kernel="general")
    tasks = _tasks(ScenarioTask(0, (0.3,), design, None, None,
                                monte_carlo.dataclasses.replace(settings, seed=8)))
    assert [t.batches for t in tasks] == [(0, 4), (4, 4), (8, 3)]
    assert sum(sum(t.sizes()) for t in tasks) == 5500
    assert len({str(t.identity()) for t in tasks}) == 3
    one = MonteCarloEngine.run(design, truths, settings=settings, execution=Execution(jobs=1))
    two = MonteCarloEngine.run(design, truths, settings=settings, execution=Execution(jobs=2))
    for a, b in ((one.efficacy, two.efficacy), (one.futility, two.futility),
                 (one.estimation.error_moments, two.estimation.error_moments)):
        assert np.array_equal(a, b)
    monkeypatch.setattr(monte_carlo, "BATCHES_PER_TASK", 10**9)
    whole = MonteCarloEngine.run(design, truths, settings=settings, execution=Execution(jobs=1))
    assert np.array_equal(one.efficacy, whole.efficacy)
    assert np.array_equal(one.futility, whole.futility)
    np.testing.assert_allclose(one.estimation.error_moments, whole.estimation.error_moments,
                               rtol=1e-12, atol=1e-15)
