"""Designs the workflow-check tests run on: every posterior computation the engines use."""

from __future__ import annotations

import copy
from typing import Any

from tests.helpers import ONE_ARM, TWO_ARM

GAMMA_MIX = {"distribution": "gamma-mixture",
             "components": [{"weight": 0.7, "shape": 3.0, "rate": 2.0},
                            {"weight": 0.3, "shape": 1.0, "rate": 0.5}]}
BETA_MIX = {"distribution": "beta-mixture",
            "components": [{"weight": 0.6, "a": 2.0, "b": 8.0},
                           {"weight": 0.4, "a": 1.0, "b": 1.0}]}
LOGIT_NORMAL = {"distribution": "logit-normal", "logit_mean": -1.4, "logit_sd": 1.0}
NORMAL_MIX = {"distribution": "normal-mixture",
              "components": [{"weight": 0.6, "mean": 0.0, "sd": 0.3},
                             {"weight": 0.4, "mean": 0.5, "sd": 1.0}]}
NIG = {"distribution": "normal-inverse-gamma", "mean": 10.0, "mean_n": 2.0, "shape": 3.0,
       "scale": 8.0}

COUNT_ONE: dict[str, Any] = {
    "schema": 1, "name": "count-check",
    "endpoint": {"type": "count", "exposure": 0.5},
    "hypothesis": {"benchmark": 1.2},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1.5, "rate": 1.0}}},
    "looks": {"n": [20, 40], "efficacy": [0.99, 0.95]},
    "scenarios": {"treatment": [0.8, 1.2]},
}
COUNT_TWO: dict[str, Any] = {
    "schema": 1, "name": "count-two-check",
    "endpoint": {"type": "count", "exposure": 1.0},
    "hypothesis": {"comparison": "ratio", "kind": "superiority", "margin": 0.0},
    "arms": {"treatment": {"prior": GAMMA_MIX},
             "control": {"prior": {"distribution": "gamma", "shape": 2.0, "rate": 1.0}}},
    "looks": {"n": [30, 60], "efficacy": [0.99, 0.95]},
    "scenarios": {"control": [1.0], "ratio": [1.0, 0.7]},
}
NORMAL_ONE: dict[str, Any] = {
    "schema": 1, "name": "normal-check",
    "endpoint": {"type": "normal", "sd": 2.0, "better": "higher"},
    "hypothesis": {"benchmark": 0.0},
    "arms": {"treatment": {"prior": {"distribution": "normal", "mean": 0.2, "sd": 0.5}}},
    "looks": {"n": [20, 50], "efficacy": [0.99, 0.975]},
    "scenarios": {"treatment": [0.0, 0.5]},
}
NORMAL_TWO: dict[str, Any] = {
    "schema": 1, "name": "normal-two-check",
    "endpoint": {"type": "normal", "sd": 10.0, "better": "lower"},
    "hypothesis": {"comparison": "difference", "margin": 0.0,
                   "prior": {"distribution": "normal", "mean": -1.0, "sd": 4.0}},
    "arms": {"treatment": {"allocation": 1}, "control": {"allocation": 1}},
    "looks": {"n": [60, 120], "efficacy": [0.995, 0.975]},
    "scenarios": {"control": [10.0], "effect": [0.0, -3.0]},
}
UNKNOWN_ONE: dict[str, Any] = {
    "schema": 1, "name": "unknown-sd-check",
    "endpoint": {"type": "normal", "sd": "unknown", "true_sd": 2.0, "better": "higher"},
    "hypothesis": {"benchmark": 10.0},
    "arms": {"treatment": {"prior": NIG}},
    "looks": {"n": [10, 25], "efficacy": [0.99, 0.975]},
    "scenarios": {"treatment": [10.0, 11.0]},
    "simulation": {"method": "monte-carlo"},
}


def changed(base: dict[str, Any], **top: Any) -> dict[str, Any]:
    data = copy.deepcopy(base)
    data.update(top)
    return data


UNKNOWN_TWO = changed(UNKNOWN_ONE, name="unknown-sd-two-check",
                      hypothesis={"comparison": "difference", "margin": 0.0},
                      arms={"treatment": {"prior": NIG}, "control": {"prior": NIG}},
                      scenarios={"control": [10.0], "effect": [0.0, 1.0]},
                      looks={"n": [20, 50], "efficacy": [0.99, 0.975]})

CASES: dict[str, tuple[dict[str, Any], dict[str, Any]]] = {
    # name: (base, changes for tests.helpers.build)
    "beta one arm (closed form)": (ONE_ARM, {}),
    "beta mixture one arm (mixture update)": (ONE_ARM, {"arms__treatment__prior": BETA_MIX}),
    "logit-normal one arm (grid)": (ONE_ARM, {"arms__treatment__prior": LOGIT_NORMAL}),
    "two arms, difference (quadrature)": (TWO_ARM, {}),
    "two arms, odds ratio (grid)": (TWO_ARM, {
        "hypothesis__comparison": "odds-ratio",
        "arms__treatment__prior": LOGIT_NORMAL, "arms__control__prior": LOGIT_NORMAL,
        "scenarios": {"control": [0.3], "odds_ratio": [1.0, 2.0]}}),
    "robust mixture borrowing (mixture update)": (TWO_ARM, {
        "arms__control__prior": {"distribution": "beta", "a": 1, "b": 1,
                                 "historical": {"responses": 12, "n": 40},
                                 "borrowing": {"method": "robust-mixture",
                                               "vague_weight": 0.3}}}),
    "gamma one arm (closed form)": (COUNT_ONE, {}),
    "negative binomial one arm (grid)": (COUNT_ONE, {"endpoint__model": "negative-binomial",
                                                     "endpoint__dispersion": 0.5}),
    "log-normal one arm (grid)": (COUNT_ONE, {"arms__treatment__prior": {
        "distribution": "log-normal", "log_mean": 0.0, "log_sd": 0.7}}),
    "rate ratio, gamma mixture (Beta identity)": (COUNT_TWO, {}),
    "rate ratio, negative binomial (grid)": (COUNT_TWO, {
        "endpoint__model": "negative-binomial", "endpoint__dispersion": 0.4,
        "arms__treatment__prior": {"distribution": "gamma", "shape": 2.0, "rate": 2.0}}),
    "normal one arm (closed form)": (NORMAL_ONE, {}),
    "normal mixture one arm (mixture update)": (NORMAL_ONE, {
        "arms__treatment__prior": NORMAL_MIX}),
    "normal two arms, lower better": (NORMAL_TWO, {}),
    "unknown sd one arm (Student t)": (UNKNOWN_ONE, {}),
    "unknown sd two arms (difference of t)": (UNKNOWN_TWO, {}),
}
