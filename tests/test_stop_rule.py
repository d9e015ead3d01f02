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
    CountRule,
    Rule,
    look_decision,
    look_decision_at,
    predictive_decision,
    predictive_decision_at,
    wants_predictive,
    wants_predictive_at,
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
            per_look = look_decision_at(e[k], f[k], k == last, bi, tol)
            if per_look == CONTINUE and wants_predictive_at(g[k], k == last):
                per_look = predictive_decision_at(g[k], pi, tol)
            assert per_look == code
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


def test_a_callable_predictive_is_called_only_when_the_rule_needs_it():
    looks = type("Looks", (), {"efficacy": (0.99, 0.95), "futility": (0.1, None),
                               "futility_predictive": (0.5, None)})()
    rule = Rule.of(looks)
    calls = []

    def pp():
        calls.append(1)
        return 0.2

    assert rule.decide(0, 0.995, pp) == EFFICACY  # efficacy first: no predictive
    assert rule.decide(0, 0.05, pp) == FUTILITY  # futile on the benefit alone
    assert rule.decide(1, 0.5, pp) == FUTILITY  # final look: no predictive
    assert calls == []
    assert rule.decide(0, 0.5, pp) == FUTILITY
    assert calls == [1]


@pytest.mark.parametrize("seed", range(10))
def test_one_look_is_the_look_of_a_full_rule(seed):
    rng = np.random.default_rng(100 + seed)
    eff, fut, pred = random_case(rng)
    looks = type("Looks", (), {"efficacy": eff, "futility": fut,
                               "futility_predictive": pred})()
    rule = Rule.of(looks)
    b, pp = rng.random(50), rng.random(50)
    for k in range(len(eff)):
        one = Rule.one_look(eff[k], fut[k], pred[k], final=k == rule.last)
        assert np.array_equal(one.decide_many(0, b, pp), rule.decide_many(k, b, pp))


def stated_count_rule(eff, fut, k, last, x, higher):
    """The count rule as docs/design-files.md states it ([looks] efficacy_count,
    futility_count): success at look k if x >= efficacy_count_k (<= when lower is
    better), futility if x <= futility_count_k (>= when lower is better), efficacy
    first, failure at the last look without success."""
    reaches = eff[k] is not None and (x >= eff[k] if higher else x <= eff[k])
    if reaches:
        return EFFICACY
    if k == last:
        return FUTILITY
    if fut[k] is not None and (x <= fut[k] if higher else x >= fut[k]):
        return FUTILITY
    return CONTINUE


@pytest.mark.parametrize("seed", range(20))
def test_count_rule_agrees_with_the_stated_count_rule(seed):
    rng = np.random.default_rng(200 + seed)
    looks = int(rng.integers(1, 5))
    higher = bool(seed % 2)
    eff = [None if rng.random() < 0.3 else int(rng.integers(0, 30)) for _ in range(looks)]
    fut = [None if rng.random() < 0.3 else int(rng.integers(0, 30)) for _ in range(looks)]
    rule = CountRule.of(type("Looks", (), {"efficacy_count": eff, "futility_count": fut})(),
                        higher)
    x = np.arange(40)  # every count, so every tie with a bound is included
    for k in range(looks):
        expected = np.array([stated_count_rule(eff, fut, k, rule.last, xi, higher)
                             for xi in x])
        assert np.array_equal(rule.decide_many(k, x), expected)
        assert np.array_equal([rule.decide(k, int(xi)) for xi in x], expected)
        e, f, _, tol = rule.rule.arrays()
        compiled = [look_decision(e, f, k, rule.last, float(rule.sign * xi), tol) for xi in x]
        assert np.array_equal(compiled, expected)


WORDS = {EFFICACY: "stop for efficacy", FUTILITY: "stop for futility", CONTINUE: "continue"}
FINAL_WORDS = {EFFICACY: "success", FUTILITY: "failure"}


@pytest.mark.parametrize("seed", range(10))
def test_interim_decisions_agree_with_the_stated_rules(seed):
    """``octrial decide``'s readings (interim/rule.py) against the restatements above."""
    from octrial.interim.rule import Thresholds, count_decision, probability_decision

    rng = np.random.default_rng(300 + seed)
    eff, fut, pred = random_case(rng)
    last = len(eff) - 1
    if eff[last] is None:
        eff[last] = 0.95  # a design always has a final success threshold
    grid = np.round(np.linspace(0, 1, 21), 2)
    b = np.concatenate([grid, grid - 1e-13, grid - 1e-11])
    pp = rng.permutation(np.concatenate([grid, grid - 1e-11, grid + 1e-13]))
    for k in range(len(eff)):
        final = k == last
        th = Thresholds(eff[k], None if final else fut[k], None if final else pred[k])
        words = FINAL_WORDS if final else WORDS
        for bi, pi in zip(b, pp, strict=True):
            decision, reason = probability_decision(th, float(bi), float(pi), final)
            assert decision == words[stated_rule(eff, fut, pred, k, last, bi, pi)]
            # a futility stop names every futility threshold crossed
            both = (not final and fut[k] is not None and pred[k] is not None
                    and bi < fut[k] - DECISION_TOLERANCE and pi < pred[k] - DECISION_TOLERANCE)
            assert (";" in reason) == both or decision != "stop for futility"

    higher = bool(seed % 2)
    a = [None if rng.random() < 0.3 else int(rng.integers(0, 30)) for _ in eff]
    r = [None if rng.random() < 0.3 else int(rng.integers(0, 30)) for _ in eff]
    a[last], r[last] = int(rng.integers(0, 30)), None
    for k in range(len(eff)):
        final = k == last
        words = FINAL_WORDS if final else WORDS
        th = Thresholds(efficacy_count=a[k], futility_count=r[k])
        for x in range(40):
            decision, _ = count_decision(th, x, higher, final, "responses")
            assert decision == words[stated_count_rule(a, r, k, last, x, higher)]
