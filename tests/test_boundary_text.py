"""Boundary tables where a count bound lies at or beyond the truncated lattice's edge, and
the rule statement of two-arm comparisons (differences, rate ratios, odds ratios).

Bounds are checked against scipy's gamma distribution (the conjugate posterior of a
Poisson rate under a gamma prior: shape a + x, rate b + exposure) and against the decision
``octrial decide`` takes at the bound and one count short of it.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from octrial.cli.boundaries import boundaries_for
from octrial.interim.binary import BinaryInterim
from octrial.reporting import wording
from octrial.rules import boundaries
from octrial.rules.boundaries import BEYOND, NEVER, boundary_table
from octrial.rules.lattice import build_rule
from tests.helpers import build
from tests.test_decide import table_decision
from tests.test_decide_endpoints import COUNT_TWO_ARM, decision_of

# One arm, fewer events better: a prior worth 60 subject-years at rate 0.5 pulls the
# posterior down so far that futility (Pr(rate < 1.5) < 0.05) at look 1 needs more
# events than the lattice holds (it is sized for the scenarios, rates up to 2).
STRONG_PRIOR = {
    "schema": 1,
    "name": "count-strong-prior",
    "endpoint": {"type": "count", "exposure": 1.0, "better": "lower"},
    "hypothesis": {"benchmark": 1.5},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 30, "rate": 60}}},
    "looks": {"n": [30, 60, 90], "efficacy": ["none", 0.995, 0.975], "futility": 0.05},
    "scenarios": {"treatment": [0.8, 1.5, 2.0]},
}


def scipy_futility_bound(n: int) -> int:
    """Smallest x with Pr(rate < 1.5 | x events in n subject-years) < 0.05 (gamma(30, 60)
    prior; scipy.stats.gamma)."""
    x = np.arange(1000)
    below = stats.gamma.cdf(1.5, 30 + x, scale=1 / (60 + n)) < 0.05
    return int(x[below][0])


def test_count_futility_bound_past_the_lattice_edge_is_stated() -> None:
    design = build(STRONG_PRIOR)
    rule = build_rule(design)
    expected = scipy_futility_bound(30)
    # the case under test: the bound is past the design's own lattice at look 1
    assert expected >= rule.looks[0].shape[0]
    table = boundary_table(design, rule)
    row = table.iloc[0]
    assert row["futility_rule"] != NEVER
    assert row["futility_bound"] == expected
    assert row["futility_rule"] == f">= {expected}"
    post = stats.gamma(30 + expected, scale=1 / 90)
    assert row["posterior_at_futility_bound"] == pytest.approx(post.cdf(1.5), rel=1e-10)
    # octrial decide stops exactly from the bound on
    assert decision_of(design, 1, [f"treatment={expected}/30"]).decision == "stop for futility"
    assert decision_of(design, 1, [f"treatment={expected - 1}/30"]).decision == "continue"
    # the committee text and the CLI say the same
    _, text = boundaries_for(design)
    assert f"stop for futility if events >= {expected}" in text
    look1 = text.split("Look 1")[1].split("Look 2")[0]
    assert "never" not in look1.split("stop for efficacy")[1].split("\n", 1)[1]


def test_count_bound_beyond_every_lattice_examined_says_so(monkeypatch) -> None:
    monkeypatch.setattr(boundaries, "MAX_POINTS", 1)  # no larger lattice allowed
    design = build(STRONG_PRIOR)
    rule = build_rule(design)
    edge = rule.looks[0].shape[0] - 1
    row = boundary_table(design, rule).iloc[0]
    assert row["futility_rule"] == f"none up to {edge} ({BEYOND})"
    assert pd.isna(row["futility_bound"])
    _, text = boundaries_for(design)
    assert f"stop for futility: none up to {edge} events ({BEYOND})" in text
    assert "Note: 'beyond the computed range'" in text
    assert "3.3e-11" in text  # 1e-10 / (3 looks x 1 arm): the truncation share


def test_two_arm_count_bounds_past_the_treatment_edge_match_decide() -> None:
    # A strong treatment prior: at high control counts every treatment count on the
    # design's lattice succeeds (the bound is past its edge); at low control counts
    # futility lies past it. Both used to be written as the edge or as 'never'.
    design = build(COUNT_TWO_ARM, arms__treatment__prior={
        "distribution": "gamma", "shape": 40.0, "rate": 80.0})
    rule = build_rule(design)
    table = boundary_table(design, rule).astype(object)
    table = table.where(table.notna(), None)
    e = design.endpoint.exposure
    k = 1  # the final look
    look = rule.looks[k]
    n_t, n_c = look.n
    rows = table[table["look"] == k + 1].to_dict("records")
    past = [r for r in rows if r["efficacy_bound"] is not None
            and r["efficacy_bound"] >= look.shape[0] - 1]
    assert past, "the design must have success bounds past the treatment lattice"
    for row in past[:: max(1, len(past) // 4)]:
        x_c, bound = row["control_events"], row["efficacy_bound"]
        for x_t in (bound, bound + 1):
            got = decision_of(design, k + 1, [f"treatment={x_t}/{n_t * e:g}",
                                              f"control={x_c}/{n_c * e:g}"])
            assert got.decision == table_decision(row, x_t, False, True), (x_t, x_c)


# -- rule statements --------------------------------------------------------------------

RATIO_COUNT = {**COUNT_TWO_ARM, "name": "ratio-margin"}
ODDS = {
    "schema": 1,
    "name": "odds-ratio",
    "endpoint": {"type": "binary", "better": "higher"},
    "hypothesis": {"comparison": "odds-ratio", "kind": "superiority", "margin": 0.25},
    "arms": {"treatment": {"prior": {"distribution": "logit-normal", "logit_mean": 0.0,
                                     "logit_sd": 2.0}},
             "control": {"prior": {"distribution": "logit-normal", "logit_mean": 0.0,
                                   "logit_sd": 2.0}}},
    "looks": {"n": [40, 80], "efficacy": [0.99, 0.975], "futility": 0.1},
    "scenarios": {"control": [0.3], "odds_ratio": [1.25, 2.0]},
}
DIFFERENCE = {
    "schema": 1,
    "name": "difference",
    "endpoint": {"type": "binary", "better": "lower"},
    "hypothesis": {"comparison": "difference", "kind": "superiority", "margin": 0.1},
    "arms": {"treatment": {"prior": {"distribution": "beta", "a": 1, "b": 1}},
             "control": {"prior": {"distribution": "beta", "a": 1, "b": 1}}},
    "looks": {"n": [20, 40], "efficacy": [0.99, 0.975], "futility": 0.1},
    "scenarios": {"control": [0.5], "effect": [-0.1, -0.3]},
}


@pytest.mark.parametrize("spec, changes, claim", [
    # ratio, lower better, superiority by a relative margin 0.2: ratio < 1 - 0.2
    (RATIO_COUNT, {}, "Pr(rate treatment / rate control < 0.8 | data)"),
    # non-inferiority with margin 0.2: ratio < 1 + 0.2
    (RATIO_COUNT, {"hypothesis__kind": "non-inferiority"},
     "Pr(rate treatment / rate control < 1.2 | data)"),
    # odds ratio, higher better, superiority by 0.25: odds ratio > 1.25
    (ODDS, {}, "Pr(odds ratio of rate treatment to rate control > 1.25 | data)"),
    # difference, lower better, superiority by 0.1: p_T - p_C < -0.1
    (DIFFERENCE, {}, "Pr(rate treatment - rate control < -0.1 | data)"),
    (DIFFERENCE, {"hypothesis__better": None, "endpoint__better": "higher",
                  "scenarios__effect": [0.1, 0.3]},
     "Pr(rate treatment - rate control > +0.1 | data)"),
])
def test_rule_statement_is_the_comparison_the_family_computes(spec, changes, claim) -> None:
    design = build(spec, **changes)
    _, text = boundaries_for(design)
    assert f"posterior = {claim}." in text.splitlines()[0]
    # the statement is the probability the boundary table holds at its bounds: for the
    # count ratio, scipy's F distribution (lambda_T / lambda_C of independent gamma
    # posteriors is a scaled F ratio) at the first row with a success bound
    if spec is RATIO_COUNT and not changes:
        rule = build_rule(design)
        table = boundary_table(design, rule)
        row = table[(table["look"] == 2) & table["efficacy_bound"].notna()].iloc[0]
        x_t, x_c = int(row["efficacy_bound"]), int(row["control_events"])
        n_t, n_c = rule.looks[1].n
        a_t, b_t = 2 + x_t, 2 + n_t * 0.5
        a_c, b_c = 1.5 + x_c, 1 + n_c * 0.5
        # (lambda_T / a_t * b_t) / (lambda_C / a_c * b_c) ~ F(2 a_t, 2 a_c)
        f = 0.8 * (b_t / a_t) / (b_c / a_c)
        assert row["posterior_at_efficacy_bound"] == pytest.approx(
            stats.f.cdf(f, 2 * a_t, 2 * a_c), rel=1e-9)


def test_decide_statement_of_an_odds_ratio_design() -> None:
    design = build(ODDS)
    assert BinaryInterim().statement(design) == (
        "Pr(odds ratio of rate_treatment to rate_control > 1.25 | data)")


def test_count_rule_stated_in_counts_past_the_lattice_keeps_its_count() -> None:
    # futility at 150 events after 30 subjects: past the lattice (sized for rates up to
    # 2, 118 points); the table must give the design file's own count
    design = build(STRONG_PRIOR, looks__efficacy=None, looks__futility=None,
                   looks__efficacy_count=["none", 40, 60],
                   looks__futility_count=[150, 80, "none"])
    rule = build_rule(design)
    assert rule.looks[0].shape[0] <= 150
    row = boundary_table(design, rule).iloc[0]
    assert (row["futility_bound"], row["futility_rule"]) == (150, ">= 150")
    assert decision_of(design, 1, ["treatment=150/30"]).decision == "stop for futility"
    assert decision_of(design, 1, ["treatment=149/30"]).decision == "continue"
    rules = wording.look_rules(design)
    assert rules[0]["futility"] == "events ≥ 150"  # not 'responses'
