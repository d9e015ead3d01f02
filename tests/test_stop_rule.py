"""The stop rule's three forms (Python, arrays, numba) against a restatement of the
rule as the design-file reference states it (docs/design-files.md, [looks]: efficacy
first, futility below, predictive futility at interim looks, the final look fails
without efficacy), on random thresholds and probabilities that include exact ties."""

from __future__ import annotations

import math

import numpy as np
import pytest

from octrial.rules.stop import (
    CONTINUE,
    DECISION_TOLERANCE,
    EFFICACY,
    FUTILITY,
    Rule,
    look_decision,
    predictive_decision,
    wants_predictive,
)


def stated_rule(eff, fut, pred, k, last, b, pp, tol=DECISION_TOLERANCE):
    """The rule in words, one branch per sentence (the reference)."""
    reaches = eff[k] is not None and b >= eff[k] - tol
    if k == last:
        return EFFICACY if reaches else FUTILITY
    if reaches:
        return EFFICACY
    if fut[k] is not None and b < fut[k] - tol:
        return FUTILITY
    if pred[k] is not None and pp < pred[k] - tol:
        return FUTILITY
    return CONTINUE


def random_case(rng):
    looks = int(rng.integers(1, 5))
    grid = np.round(np.linspace(0, 1, 21), 2)

    def thresholds():
        return [None if rng.random() < 0.3 else float(rng.choice(grid)) for _ in range(looks)]

    return thresholds(), thresholds(), thresholds()


@pytest.mark.parametrize("seed", range(20))
def test_three_forms_agree_with_the_stated_rule(seed):
    rng = np.random.default_rng(seed)
    eff, fut, pred = random_case(rng)
    looks = type("Looks", (), {"efficacy": eff, "futility": fut,
                               "futility_predictive": pred})()
    rule = Rule.of(looks)
    last = rule.last
    grid = np.round(np.linspace(0, 1, 21), 2)
    # ties with the thresholds, just below and just above them, and random values
    b = np.concatenate([grid, grid - 1e-13, grid - 1e-11, rng.random(40)])
    pp = rng.permutation(np.concatenate([grid, grid - 1e-11, grid + 1e-13, rng.random(40)]))
    for k in range(len(eff)):
        expected = np.array([stated_rule(eff, fut, pred, k, last, bi, pi)
                             for bi, pi in zip(b, pp, strict=True)])
        many = rule.decide_many(k, b, pp)
        assert np.array_equal(many, expected)
        one = np.array([rule.decide(k, bi, pi) for bi, pi in zip(b, pp, strict=True)])
        assert np.array_equal(one, expected)
        e, f, g, tol = rule.arrays()
        compiled = []
        for bi, pi in zip(b, pp, strict=True):
            code = look_decision(e, f, k, last, bi, tol)
            if code == CONTINUE and wants_predictive(g, k, last):
                code = predictive_decision(g, k, pi, tol)
            compiled.append(code)
        assert np.array_equal(np.array(compiled), expected)


def test_without_a_predictive_value_the_predictive_step_is_skipped():
    looks = type("Looks", (), {"efficacy": (0.99, 0.95), "futility": (None, None),
                               "futility_predictive": (0.5, None)})()
    rule = Rule.of(looks)
    assert rule.decide(0, 0.5) == CONTINUE
    assert rule.decide(0, 0.5, 0.1) == FUTILITY
    assert math.isnan(rule.futility[0])
    assert rule.decide(1, 0.95 - 1e-13) == EFFICACY
    assert rule.decide(1, 0.95 - 1e-11) == FUTILITY
