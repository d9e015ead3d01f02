"""Calibration of designs evaluated by simulation: common random numbers.

Every candidate is simulated with one seed, so every candidate sees the same studies; the
kernels draw each study's data independently of the rule, so a study that succeeds under
a stricter threshold succeeds under a looser one, and the estimated probability of
success is monotone in the threshold (not just up to Monte Carlo noise), which the
bisection relies on. Checked here on the estimates themselves, with a control showing
that independent seeds break monotonicity; and the calibrated value against the exact
answer of the single-look z-test (identity: flat prior, known sd, threshold 1 - alpha).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from octrial.calibration import calibrate
from octrial.calibration.evaluator import EngineEvaluator
from octrial.calibration.nulls import null_truths
from octrial.engines import MonteCarloSettings
from octrial.engines.monte_carlo import MonteCarloEngine
from octrial.evaluation import compute
from tests.helpers import build
from tests.test_normal_engine import ONE_ARM as KNOWN_SD
from tests.test_normal_unknown_sd import ONE_ARM as UNKNOWN_SD

THRESHOLDS = [0.95, 0.95001, 0.96, 0.975, 0.97501, 0.99]


def with_final(design_dict: dict, value: float, **changes) -> object:
    efficacy = list(design_dict["looks"]["efficacy"])
    efficacy[-1] = value
    return build(design_dict, looks__efficacy=efficacy, **changes)


def test_common_random_numbers_make_success_monotone_in_the_threshold() -> None:
    # Unknown sd, predictive futility at the interims (which depends on the final
    # threshold too); no seed in the design: the evaluator draws one and keeps it.
    base = {**UNKNOWN_SD, "looks": {**UNKNOWN_SD["looks"], "futility_predictive": 0.1},
            "simulation": {"replicates": 3000}}
    first = with_final(base, THRESHOLDS[0])
    truths = null_truths(first, points=3)
    ev = EngineEvaluator(truths)
    found = [ev.assess(with_final(base, value)).prob_success for value in THRESHOLDS]
    assert ev.seed is not None and ev.replicates == 3000 and not ev.exact
    for looser, stricter in itertools.pairwise(found):
        assert (stricter <= looser).all()
    assert (found[-1] < found[0]).all()
    # control: the same comparison on independent seeds is not monotone
    independent = [
        MonteCarloEngine.run(with_final(base, value), truths.values,
                             settings=MonteCarloSettings(seed=100 + i)).efficacy.sum(axis=1)
        for i, value in enumerate(THRESHOLDS)]
    assert any((b > a).any() for a, b in itertools.pairwise(independent))


def test_calibrated_threshold_meets_alpha_and_a_looser_one_does_not() -> None:
    design = build(UNKNOWN_SD, simulation={"replicates": 4000, "seed": 31})
    result = calibrate(design, alpha=0.05, null_points=2)
    value = result.summary["chosen"]["final"]["value"]
    assert result.summary["method"] == "monte-carlo"
    assert result.summary["simulation"]["seed"] == 31
    truths = result.truths
    settings = MonteCarloSettings(seed=31)

    def type1(threshold: float) -> float:
        oc = MonteCarloEngine.run(with_final(UNKNOWN_SD, threshold,
                                             simulation={"replicates": 4000, "seed": 31}),
                                  truths.values, settings=settings)
        return float(oc.efficacy.sum(axis=1)[: truths.nulls].max())

    assert type1(value) <= 0.05 < type1(value - 1e-6)
    assert result.summary["type1_error"] == type1(value)


def test_simulated_calibration_lands_on_the_z_test_threshold() -> None:
    # Identity: flat prior, known sd, one look: Pr(mean > 0 | data) >= gamma is the z-test
    # at level 1 - gamma, so the exact answer at alpha = 0.025 is 0.975. Calibrated by
    # simulation (20,000 studies at the benchmark) it must land within the Monte Carlo
    # error of the type I error (4 SE of a proportion at 0.025) expressed as a threshold.
    design = build(KNOWN_SD, looks={"n": [50], "efficacy": 0.9},
                   scenarios__treatment=[0.0, 0.4],
                   simulation={"replicates": 20_000, "seed": 5})
    result = calibrate(design, alpha=0.025, null_points=2, method="monte-carlo")
    value = result.summary["chosen"]["final"]["value"]
    se = np.sqrt(0.025 * 0.975 / 20_000)
    assert abs(value - 0.975) <= 4 * se
    assert result.summary["type1_error"] <= 0.025
    oc = compute(result.design, "monte-carlo").oc
    assert oc.loc[oc["true_treatment"] == 0.0, "prob_success"].item() == pytest.approx(
        result.summary["type1_error"], abs=0)
