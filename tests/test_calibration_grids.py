"""Grid searches around the calibrated threshold: eta of the efficacy function (the
largest-power criterion of Zhou, Lee & Yuan 2017) and predictive futility, checked against
calibrating each grid value separately."""

from __future__ import annotations

import pytest

from octrial.calibration import calibrate
from octrial.calibration.knobs import ETA_GRID, PREDICTIVE_GRID
from tests.helpers import ONE_ARM, build


def test_eta_grid_picks_the_most_powerful_calibrated_design() -> None:
    def design(eta: float):
        return build(ONE_ARM, hypothesis__benchmark=0.2, looks__n=[10, 20, 30],
                     looks__futility=None,
                     looks__efficacy={"function": "1 - lambda * t^eta", "lambda": 0.05,
                                      "eta": eta})

    result = calibrate(design(1.0), alpha=0.05, alternative=[0.4], vary="eta",
                       criterion="power", null_points=5)
    separately = [calibrate(design(eta), alpha=0.05, alternative=[0.4], vary="efficacy",
                            null_points=5).summary["power"] for eta in ETA_GRID]
    assert result.summary["power"] == pytest.approx(max(separately), abs=1e-14)
    assert result.summary["type1_error"] <= 0.05
    assert result.data["looks"]["efficacy"]["eta"] in ETA_GRID


def test_predictive_futility_grid_optimal() -> None:
    base = build(ONE_ARM, hypothesis__benchmark=0.2, looks__n=[12, 30],
                 looks__efficacy=["none", 0.95], looks__futility=None)
    result = calibrate(base, alpha=0.05, power=0.7, alternative=[0.42],
                       vary="futility-predictive", null_points=5)
    chosen = result.design.looks.futility_predictive[0]
    assert chosen in PREDICTIVE_GRID
    best = None
    for g in PREDICTIVE_GRID:
        d = build(ONE_ARM, hypothesis__benchmark=0.2, looks__n=[12, 30],
                  looks__efficacy=["none", 0.95], looks__futility=None,
                  looks__futility_predictive=[g])
        s = calibrate(d, alpha=0.05, alternative=[0.42], null_points=5).summary
        if s["power"] >= 0.7 and (best is None or s["expected_n_null"] < best - 1e-12):
            best = s["expected_n_null"]
    assert result.summary["expected_n_null"] == pytest.approx(best, abs=1e-12)
