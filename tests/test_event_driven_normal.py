"""The normal approximation on the log hazard ratio in the patient-level kernel
(:func:`~octrial.simulation.event_driven_decisions.log_hazard_ratio_score`,
:func:`~octrial.simulation.event_driven_decisions.normal_benefit`,
:func:`~octrial.simulation.event_driven_decisions.normal_predictive`): its probabilities against
the known-variance rule's own functions (:mod:`octrial.rules.normal`, checked against
scipy and published constants in tests/test_normal_engine.py), and simulated studies
against the exact recursion on the event scale (Armitage, McPherson & Rowe 1969;
Jennison & Turnbull 2000 ch. 19; the information D q / (1 + q)^2 of Schoenfeld 1981)."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest

import octrial
from octrial.endpoints.normal import NormalMixture
from octrial.rules import normal as rules
from octrial.simulation import event_driven as ed
from octrial.simulation import event_driven_decisions as decisions
from tests.helpers import build

Z = 4.0

NORMAL_EVENT_DRIVEN: dict[str, Any] = {
    "schema": 1, "name": "tte-normal-event-driven",
    "endpoint": {"type": "time-to-event", "analysis": "normal-log-hazard-ratio"},
    "hypothesis": {"comparison": "ratio", "margin": 0.0,
                   "prior": {"distribution": "normal-mixture", "components": [
                       {"weight": 0.5, "mean": 0.0, "sd": 0.2},
                       {"weight": 0.5, "mean": 0.0, "sd": 2.0}]}},
    "arms": {"treatment": {}, "control": {}},
    "conduct": {"enrolment_rate": 40.0, "max_enrolment": 600},
    "looks": {"events": [100, 200, 300], "efficacy": [0.999, 0.995, 0.975],
              "futility": [0.1, 0.3], "futility_predictive": [0.05, 0.1]},
    "scenarios": {"control": [0.05], "ratio": [1.0, 0.75]},
    "simulation": {"replicates": 20000, "seed": 17},
}


def test_kernel_normal_probabilities_equal_the_known_variance_rule() -> None:
    """B and the predictive probability from the kernel's numba functions equal
    octrial.rules.normal.benefit and .predictive (scipy) at several scores, for a
    two-component prior, to 1e-12; the score is sign x I x log HR-hat with I = D/4."""
    prior = NormalMixture((0.3, 0.7), (0.1, -0.2), (0.5, 1.5))
    sign, claim = -1, 0.0
    w = np.array(prior.weights)
    m = sign * np.array(prior.mean)
    p0 = 1.0 / np.array(prior.sd) ** 2
    info, final = 100 / 4, 300 / 4
    upper = rules.benefit_score(prior, sign, final, claim, 0.975)
    for score in (-8.0, 0.0, 3.5, 9.0):
        want_b = float(rules.benefit(prior, sign, info, claim, np.array([score]))[0])
        want_pp = float(rules.predictive(prior, sign, info, final, upper,
                                         np.array([score]))[0])
        assert decisions.normal_benefit(score, info, w, m, p0, claim) == pytest.approx(
            want_b, abs=1e-12)
        assert decisions.normal_predictive(score, info, final, upper, w, m, p0) == pytest.approx(
            want_pp, abs=1e-12)
    events = np.array([[40.0], [60.0]])
    exposure = np.array([[900.0], [800.0]])
    score, information = decisions.log_hazard_ratio_score(events, exposure, np.ones(1), -1.0,
                                                   0.25)
    assert information == 25.0
    assert score == pytest.approx(-25.0 * math.log((40 / 900) / (60 / 800)), rel=1e-14)


def test_kernel_agrees_with_the_exact_recursion_without_dropout() -> None:
    """Three looks at 100, 200 and 300 events, 1:1, no dropout, a two-component normal
    prior on log HR, efficacy, futility and predictive futility: every per-look stopping
    probability of 20,000 simulated studies within 4 standard errors of the exact
    recursion on the event scale (LogHazardRatioEngine), at HR 1 and 0.75."""
    design = build(NORMAL_EVENT_DRIVEN)
    assert design.family.simulation_unsupported(design) is None
    # the recursion reads the events of the looks; without [conduct] they are looks.n
    plain = {k: v for k, v in NORMAL_EVENT_DRIVEN.items() if k != "conduct"}
    plain["looks"] = {**{k: v for k, v in plain["looks"].items() if k != "events"},
                      "n": plain["looks"]["events"]}
    exact = octrial.evaluate(build(plain), method="exact")
    columns = [c for c in exact.columns if c.startswith("look") and c.endswith(
        ("_stop_efficacy", "_stop_futility"))]
    replicates = 20_000
    for i, truth in enumerate(design.scenarios.values):
        sim = ed.EventDrivenSimulator(design, tuple(truth), 0.95)
        tally = sim.simulate(np.random.default_rng(100 + i), replicates)
        counts = np.concatenate([[e, f] for e, f in zip(tally.efficacy, tally.futility,
                                                        strict=True)])
        for column, count in zip(columns, counts, strict=True):
            p = float(exact[column].iloc[i])
            se = math.sqrt(max(p * (1 - p), 1.0 / replicates) / replicates)
            assert abs(count / replicates - p) <= Z * se, (truth, column, count, p)
