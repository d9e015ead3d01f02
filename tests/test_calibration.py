"""Threshold calibration and sizing against brute force with scipy and the exact engine.

The references below share no code with the calibration: thresholds and type I errors of
single-look rules come from scipy.stats (beta posterior tails, binomial tails), and
multi-look rules are evaluated one candidate at a time by the exact engine
(``octrial.evaluation.compute``, itself checked against path enumeration in
test_exact_engine.py).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from octrial.calibration import calibrate
from octrial.calibration.evaluator import EngineEvaluator
from octrial.calibration.knobs import shortest_between
from octrial.calibration.nulls import null_truths
from octrial.calibration.variants import looks_at
from octrial.engines.exact_lattice import ExactLatticeEngine
from octrial.errors import InputError
from octrial.rules.lattice import build_rule
from tests.helpers import ONE_ARM, TWO_ARM, build


def single_look(n: int, p0: float, prior=(1, 1), better="higher", **changes):
    return build(ONE_ARM, hypothesis__benchmark=p0, endpoint__better=better,
                 arms__treatment__prior={"distribution": "beta", "a": prior[0], "b": prior[1]},
                 looks={"n": [n], "efficacy": 0.9}, scenarios__treatment=[p0], **changes)


def scipy_posterior(n: int, p0: float, prior, better: str) -> np.ndarray:
    """Pr(benefit | x responses of n) for x = 0..n, from scipy.stats.beta."""
    x = np.arange(n + 1)
    a, b = prior[0] + x, prior[1] + n - x
    return stats.beta.sf(p0, a, b) if better == "higher" else stats.beta.cdf(p0, a, b)


@pytest.mark.parametrize(("n", "p0", "prior", "better", "alpha"), [
    (30, 0.2, (1, 1), "higher", 0.05),
    (47, 0.3, (0.5, 0.5), "higher", 0.025),
    (25, 0.4, (2, 3), "lower", 0.1),
    (60, 0.15, (0.3, 1.7), "higher", 0.01),
])
def test_single_look_threshold_against_brute_force(n, p0, prior, better, alpha) -> None:
    """Every count bound, by scipy: the calibrated one is the least stringent meeting alpha,
    and the next less stringent one exceeds alpha (issue 5 check)."""
    design = single_look(n, p0, prior, better)
    result = calibrate(design, alpha=alpha, null_points=40)
    threshold = result.design.looks.efficacy[-1]

    b = scipy_posterior(n, p0, prior, better)
    x = np.arange(n + 1)
    # type I error at the benchmark of "success iff x >= s" (higher) / "x <= s" (lower)
    if better == "higher":
        type1 = stats.binom.sf(x - 1, n, p0)
        succeed = b >= threshold - 1e-12
        bound = int(x[succeed][0])
        feasible = x[type1 <= alpha]
        assert bound == feasible[0]                      # least stringent meeting alpha
        assert type1[bound] <= alpha < type1[bound - 1]  # the next one exceeds it
    else:
        type1 = stats.binom.cdf(x, n, p0)
        succeed = b >= threshold - 1e-12
        bound = int(x[succeed][-1])
        feasible = x[type1 <= alpha]
        assert bound == feasible[-1]
        assert type1[bound] <= alpha < type1[bound + 1]
    assert np.array_equal(succeed, (x >= bound) if better == "higher" else (x <= bound))
    assert result.summary["type1_error"] == pytest.approx(type1[bound], abs=1e-12)
    # the composite null is searched; its worst point is the benchmark (monotone rule)
    assert result.summary["worst_null_point"] == {"treatment": p0}
    # the written value lies in the range of thresholds giving this rule
    lo, hi = result.summary["chosen"]["final"]["equivalent"]
    assert lo < threshold <= hi


def test_every_candidate_of_the_sweep_matches_the_exact_engine() -> None:
    """The one-pass sweep over final thresholds against the engine, candidate by candidate."""
    design = build(ONE_ARM, looks__n=[12, 24, 36], looks__efficacy=[0.999, 0.995, 0.95],
                   looks__futility=0.1, hypothesis__benchmark=0.25)
    result = calibrate(design, alpha=0.05, alternative=[0.45], null_points=10)
    rows = result.candidates
    swept = rows[rows["efficacy"].str.split().str[-1].astype(float) < 1.0].head(37)
    truths = result.truths.values
    for _, row in swept.iterrows():
        final = float(row["efficacy"].split()[-1])
        candidate = build(ONE_ARM, looks__n=[12, 24, 36], looks__efficacy=[0.999, 0.995, final],
                          looks__futility=0.1, hypothesis__benchmark=0.25)
        outcome = ExactLatticeEngine.run(candidate, truths)
        success = outcome.efficacy.sum(axis=1)
        assert row["type1_error"] == pytest.approx(success[: result.truths.nulls].max(),
                                                   abs=1e-13)
        assert row["power"] == pytest.approx(success[-1], abs=1e-13)


def _brute_force_least_stringent(design, alpha, truths, key="efficacy"):
    """Every distinct final posterior probability as the threshold, by the exact engine."""
    rule = build_rule(design)
    values = np.unique(rule.final.benefit)
    best = None
    for v in values[::-1]:  # most stringent first
        looks = list(design.looks.efficacy)
        looks[-1] = float(v)
        candidate = build(ONE_ARM, looks__n=list(design.looks.n),
                          looks__efficacy=["none" if e is None else e for e in looks],
                          looks__futility=[design.looks.futility[0]],
                          looks__futility_predictive=[design.looks.futility_predictive[0]],
                          hypothesis__benchmark=design.hypothesis.benchmark)
        success = ExactLatticeEngine.run(candidate, truths).efficacy.sum(axis=1)
        if success.max() <= alpha:
            best = (v, success.max())
    return best


def test_predictive_futility_bisection_against_brute_force() -> None:
    """With predictive futility the interim rule depends on the final threshold, so the
    search bisects; the answer equals trying every candidate with the engine."""
    design = build(ONE_ARM, looks__n=[15, 35], looks__efficacy=["none", 0.95],
                   looks__futility=[0.05], looks__futility_predictive=[0.1],
                   hypothesis__benchmark=0.2)
    result = calibrate(design, alpha=0.05, null_points=20)
    truths = result.truths.values[: result.truths.nulls]
    value, type1 = _brute_force_least_stringent(design, 0.05, truths)
    chosen = result.summary["chosen"]["final"]
    assert chosen["exact"] == pytest.approx(value, abs=1e-15)
    assert result.summary["type1_error"] == pytest.approx(type1, abs=1e-13)
    assert result.summary["evaluations"] < 20  # bisection, not every candidate


def test_common_efficacy_and_lambda_calibration_against_fine_grids() -> None:
    """--vary efficacy: one threshold at every look, and the lambda of 1 - lambda t^eta;
    checked against a fine grid of values run through the exact engine."""
    base = dict(looks__n=[10, 20, 30], looks__futility=None, hypothesis__benchmark=0.3)
    constant = build(ONE_ARM, looks__efficacy=0.95, **base)
    result = calibrate(constant, alpha=0.05, vary="efficacy", null_points=5)
    c = result.design.looks.efficacy
    assert len(set(c)) == 1
    grid = np.linspace(0.80, 0.9999, 400)
    truths = result.truths.values
    ok = [v for v in grid if ExactLatticeEngine.run(
        build(ONE_ARM, looks__efficacy=float(v), **base), truths).efficacy.sum(axis=1).max()
          <= 0.05]
    # no grid value less stringent than the calibrated one meets alpha
    assert min(ok) >= result.summary["chosen"]["efficacy"]["equivalent"][0]
    assert result.summary["type1_error"] <= 0.05

    function = build(ONE_ARM, looks__efficacy={"function": "1 - lambda * t^eta", "lambda": 0.1,
                                               "eta": 2.0}, **base)
    result = calibrate(function, alpha=0.05, vary="efficacy", null_points=5)
    lam = result.summary["chosen"]["efficacy"]["value"]
    assert result.data["looks"]["efficacy"] == {"function": "1 - lambda * t^eta",
                                                "lambda": lam, "eta": 2.0}
    lams = np.linspace(0.0, 0.3, 601)
    meets = [v for v in lams if ExactLatticeEngine.run(build(
        ONE_ARM, looks__efficacy={"function": "1 - lambda * t^eta", "lambda": float(v),
                                  "eta": 2.0}, **base), truths).efficacy.sum(axis=1).max()
             <= 0.05]
    # larger lambda is less stringent: the calibrated lambda is the largest meeting alpha
    assert max(meets) <= result.summary["chosen"]["efficacy"]["equivalent"][1]
    assert max(meets) >= lam - 0.3 / 600 - 1e-12 or max(meets) >= lam


def test_futility_grid_is_optimal_among_all_grid_values() -> None:
    """--vary futility with the optimal criterion: among every futility value (each with
    the final threshold calibrated), the chosen one has the smallest expected N under the
    null while meeting alpha and power."""
    design = build(ONE_ARM, looks__n=[10, 25], looks__efficacy=["none", 0.95],
                   looks__futility=[0.05], hypothesis__benchmark=0.2)
    result = calibrate(design, alpha=0.05, power=0.65, alternative=[0.4], vary="futility",
                       null_points=8)
    rows = result.candidates
    best = rows[rows["chosen"]].iloc[0]
    feasible = rows[rows["passes"]]
    assert best["expected_n_null"] == pytest.approx(feasible["expected_n_null"].min())
    assert best["type1_error"] <= 0.05 and best["power"] >= 0.65
    # every futility value between grid points was tried: distinct values at look 1
    b1 = build_rule(design).looks[0].benefit
    tried = {float(f) for f in rows["futility"].unique() if f}
    assert len(tried) >= len(np.unique(b1[b1 < 1.0])) - 1


def test_generic_engine_path_agrees_with_the_lattice_fast_path(monkeypatch) -> None:
    """Calibration through any engine (continuous bisection) lands in the fast path's range
    of equivalent thresholds."""
    from octrial.calibration import core

    design = build(ONE_ARM, looks__n=[15, 30], looks__efficacy=["none", 0.9],
                   looks__futility=[0.1], hypothesis__benchmark=0.25)
    fast = calibrate(design, alpha=0.05, null_points=6)
    monkeypatch.setattr(core, "evaluator_for",
                        lambda design, truths, method=None, *simulation: EngineEvaluator(
                            truths, method, *simulation))
    slow = calibrate(design, alpha=0.05, null_points=6)
    lo, hi = fast.summary["chosen"]["final"]["equivalent"]
    value = slow.summary["chosen"]["final"]["value"]
    assert lo < value <= hi
    assert slow.summary["type1_error"] == pytest.approx(fast.summary["type1_error"], abs=1e-14)


def test_two_arm_null_line_against_the_engine_on_a_two_dimensional_grid() -> None:
    """Two arms: the worst null point found on the boundary line is the worst over a
    2-D grid of the whole null region (engine run directly)."""
    design = build(TWO_ARM, looks__n=[20, 40], looks__efficacy=[0.999, 0.97],
                   looks__futility=0.1)
    result = calibrate(design, alpha=0.05, alternative=[0.6, 0.3], null_points=30)
    grid = [(t, c) for c in np.linspace(0.02, 0.98, 25) for t in np.linspace(0.01, c, 6)]
    success = ExactLatticeEngine.run(result.design, np.array(grid)).efficacy.sum(axis=1)
    assert success.max() <= result.summary["type1_error"] + 1e-12
    worst = result.summary["worst_null_point"]
    assert worst["treatment"] == pytest.approx(worst["control"])
    assert result.summary["type1_error"] <= 0.05


def test_null_grid_spans_the_null_region() -> None:
    design = build(ONE_ARM, hypothesis__benchmark=0.3, scenarios__treatment=[0.05, 0.3, 0.5])
    truths = null_truths(design, 30, alternative=(0.5,))
    nulls = truths.values[: truths.nulls, 0]
    assert nulls.max() == 0.3 and nulls.min() < 0.02 and 0.05 in nulls
    assert truths.values[truths.alternative, 0] == 0.5
    assert truths.values[truths.reference, 0] == 0.3
    lower = build(ONE_ARM, hypothesis__benchmark=0.3, endpoint__better="lower")
    v = null_truths(lower, 30).values[:, 0]
    assert v.min() == 0.3 and v.max() > 0.97
    two = build(TWO_ARM, hypothesis__margin=0.1, hypothesis__kind="non-inferiority")
    t = null_truths(two, 20, alternative=(0.3, 0.3)).values
    assert np.allclose(t[:-1, 0] - t[:-1, 1], -0.1)


# -- sizing ------------------------------------------------------------------------------

def scipy_size_curve(sizes, p0, p1, threshold):
    """Single look, Beta(1, 1): (type I error, power) per N by scipy."""
    out = {}
    for n in sizes:
        b = scipy_posterior(n, p0, (1, 1), "higher")
        s = int(np.flatnonzero(b >= threshold - 1e-12)[0])
        out[n] = (stats.binom.sf(s - 1, n, p0), stats.binom.sf(s - 1, n, p1))
    return out


def test_saw_tooth_and_the_two_sizing_rules() -> None:
    """A constructed case (issue 5 check): single look, threshold 0.95 kept fixed, Beta(1, 1),
    benchmark 0.2, alternative 0.4. Type I error and power are saw-tooth functions of N
    (Chernick & Liu 2002); with alpha 0.075 and power 0.85 the smallest N that passes (31)
    and the smallest N from which all larger N in 20..59 pass (37) differ. (At N = 60 the
    type I error peaks above 0.075 again, so the second rule depends on the range.)
    Reference: scipy."""
    design = single_look(30, 0.2, looks__efficacy=0.95)
    result = calibrate(design, alpha=0.075, power=0.85, alternative=[0.4], vary="n",
                       n_range="20:59", null_points=10)
    curve = result.sizing.set_index("n")
    reference = scipy_size_curve(range(20, 60), 0.2, 0.4, 0.95)
    for n, (t1, pw) in reference.items():
        assert curve.loc[n, "type1_error"] == pytest.approx(t1, abs=1e-13)
        assert curve.loc[n, "power"] == pytest.approx(pw, abs=1e-13)
    t1 = curve["type1_error"].to_numpy()
    assert (np.diff(t1) > 0).any() and (np.diff(t1) < 0).any()  # non-monotone
    passing = [n for n, (a, p) in reference.items() if a <= 0.075 and p >= 0.85]
    stable = min(n for n in reference if all(m in passing for m in reference if m >= n))
    assert (passing[0], stable) == (31, 37)
    assert result.summary["sizing"]["smallest_passing"] == 31
    assert result.summary["sizing"]["stable_from"] == 37
    assert result.design.looks.n == (37,)
    first = calibrate(design, alpha=0.075, power=0.85, alternative=[0.4], vary="n",
                      n_range="20:60", choose="first", null_points=10)
    assert first.design.looks.n == (31,)
    with pytest.raises(InputError, match="N = 31 passes but not every larger N does"):
        calibrate(design, alpha=0.075, power=0.85, alternative=[0.4], vary="n",
                  n_range="20:60", null_points=10)


def test_sizing_with_calibrated_thresholds_keeps_alpha_at_every_n() -> None:
    design = build(ONE_ARM, looks__n=[10, 20, 30], looks__efficacy=["none", 0.995, 0.95],
                   looks__futility=0.05)
    result = calibrate(design, alpha=0.05, power=0.8, alternative=[0.45], vary="n,final",
                       n_range="15:45", null_points=10)
    curve = result.sizing[result.sizing["realised"]]
    assert (curve["type1_error"] <= 0.05).all()
    chosen = result.summary["sizing"]["chosen_n"]
    assert (curve[curve["n"] >= chosen]["passes"]).all()
    assert not curve[curve["n"] == chosen - 1]["passes"].all()
    # looks at the same fractions, rounded half up
    assert result.design.looks.n == tuple(looks_at(design.looks, chosen, "fractions", 1))


@pytest.mark.parametrize(("n", "rule", "expected"), [
    (45, "fractions", [15, 30, 45]),
    (40, "fractions", [13, 27, 40]),   # 13.33 -> 13, 26.67 -> 27
    (21, "fractions", [7, 14, 21]),
    (40, "counts", [15, 30, 40]),
    (30, "counts", None),              # the last interim look would not precede N
])
def test_looks_rounding_rule(n, rule, expected) -> None:
    design = build(ONE_ARM, looks__n=[15, 30, 45])
    assert looks_at(design.looks, n, rule, 1) == expected


def test_two_arm_sizes_keep_whole_per_arm_numbers() -> None:
    design = build(TWO_ARM, looks__n=[30, 60], arms__treatment__allocation=2)
    assert looks_at(design.looks, 90, "fractions", 3) == [45, 90]
    assert looks_at(design.looks, 91, "fractions", 3) is None


def test_shortest_between() -> None:
    assert shortest_between(0.9531, 0.9098) == 0.95
    assert shortest_between(0.9, 0.85) == 0.9
    assert shortest_between(0.123456789, 0.1234567) == 0.12345678  # 0.1234567 is excluded
    assert shortest_between(0.5, 0.4999999999999) == 0.5
    assert shortest_between(0.4, 0.5) == 0.4  # closest to the included end
    assert shortest_between(0.0, 0.3, closed_other=True) == 0.0


# -- bad input (issue 5 check) -------------------------------------------------------------

BAD = [
    (dict(alpha=1.5), "alpha", "strictly between 0 and 1"),
    (dict(alpha=0.0), "alpha", "strictly between 0 and 1"),
    (dict(alpha=0.05, power=1.0, alternative=[0.4]), "power", "strictly between 0 and 1"),
    (dict(alpha=0.05, power=0.8, alternative=[0.15]), "alternative", "outside the null"),
    (dict(alpha=0.05, power=0.8, alternative=[0.2]), "alternative", "outside the null"),
    (dict(alpha=0.05, power=0.8, alternative=[0.4, 0.3]), "alternative", "1 number"),
    (dict(alpha=0.05, vary="n"), "power", "target power"),
    (dict(alpha=0.05, vary="speed"), "vary", "names from"),
    (dict(alpha=0.05, power=0.8, alternative=[0.4], vary="n", n_range="50:10"), "n_range",
     "MIN:MAX"),
    (dict(alpha=0.05, vary="eta"), "vary", "function of the information fraction"),
    (dict(alpha=0.05, search="optimal", power=0.8, alternative=[0.4]), "n_range",
     "range of maximum sample sizes"),
]


@pytest.mark.parametrize(("settings", "key", "words"), BAD,
                         ids=[f"{b[1]}-{i}" for i, b in enumerate(BAD)])
def test_bad_settings_name_the_setting(settings, key, words) -> None:
    # the library names its settings (the keyword arguments); the command line maps them
    # to its options (tests/test_calibrate_cli.py)
    design = build(ONE_ARM)
    with pytest.raises(InputError) as caught:
        calibrate(design, "command line", **settings)
    message = str(caught.value)
    assert f"command line: {key}: expected" in message and words in message


def test_two_arm_alternative_inside_the_null() -> None:
    design = build(TWO_ARM, hypothesis__margin=0.1)
    with pytest.raises(InputError, match="alternative: expected a point outside the null"):
        calibrate(design, alpha=0.05, power=0.8, alternative=[0.35, 0.3])


def test_infeasible_range_says_so_with_the_best_found() -> None:
    design = single_look(20, 0.2)
    with pytest.raises(InputError) as caught:
        calibrate(design, alpha=0.05, power=0.9, alternative=[0.4], vary="n,final",
                  n_range="10:25")
    message = str(caught.value)
    assert "calibrate(): n_range: expected a range containing" in message
    assert "best found: N = " in message and "power" in message


def test_infeasible_alpha_with_interim_efficacy_says_so() -> None:
    """An interim efficacy stop that alone exceeds alpha cannot be fixed by the final
    threshold."""
    design = build(ONE_ARM, looks__n=[10, 30], looks__efficacy=[0.6, 0.95], looks__futility=None)
    with pytest.raises(InputError,
                       match=r"calibrate\(\): alpha: expected a type I error the design can"):
        calibrate(design, alpha=0.01)


def test_two_arm_refinement_between_grid_points() -> None:
    """A deliberately coarse null grid (5 points): refinement along the null line finds
    the maximum that a 999-point scan with the batched engine finds, and a calibration that
    the coarse grid alone would get wrong is repeated with the worse point added."""
    from octrial.engines.lattice_batch import IncrementTables, run_batch

    design = build(TWO_ARM, looks__n=[30, 80], looks__efficacy=[0.999, 0.97],
                   looks__futility=0.1)
    result = calibrate(design, alpha=0.025, null_points=5)
    controls = np.linspace(0.001, 0.999, 999)
    scan = run_batch(result.design, build_rule(result.design),
                     IncrementTables(result.design, np.column_stack([controls, controls])))
    best = scan.efficacy.sum(axis=1).max()
    assert result.summary["type1_error_refined"] >= best - 1e-12
    assert result.summary["type1_error_refined"] <= 0.025
    assert result.summary["type1_error_refined"] >= result.summary["type1_error"]
    assert any("added to the null grid" in note for note in result.summary["notes"])


COUNT_BORROWING: dict = {
    "schema": 1,
    "name": "count-borrowing-test",
    "endpoint": {"type": "count", "better": "lower"},
    "hypothesis": {"comparison": "ratio", "margin": 0.0, "kind": "superiority"},
    "arms": {
        "treatment": {"allocation": 1,
                      "prior": {"distribution": "gamma", "shape": 0.5, "rate": 0.5}},
        "control": {"allocation": 1, "prior": {
            "distribution": "gamma", "shape": 0.5, "rate": 0.5,
            "historical": {"events": 200, "exposure": 100},
            "borrowing": {"method": "robust-mixture", "vague_weight": 0.2}}},
    },
    "looks": {"n": [40, 80], "efficacy": [0.995, 0.975]},
    # the historical rate (2.0) lies above every scenario: the borrowed control prior pulls
    # the control posterior up, so the type I error rises to the top of the searched range
    "scenarios": {"control": {"from": 0.3, "to": 1.2, "step": 0.3}, "ratio": [0.6]},
}


@pytest.mark.parametrize("ratios", [[0.6], [1.0, 0.6]])
def test_count_refinement_with_the_worst_point_at_the_top_of_the_grid(ratios) -> None:
    """Issue 12: two-arm counts with a robust-mixture historical control whose type I error
    peaks at the highest control rate searched. The count rate has no upper end, so the
    refinement used to get an infinite bound (scipy: "Optimization bounds must be finite
    scalars"); it now stays inside the range searched (control up to the largest scenario
    value, 1.2) and finds what brute force over a 2,001-point grid of that range finds
    (the batched exact engine, itself checked against path enumeration)."""
    from octrial.engines.lattice_batch import IncrementTables, run_batch

    design = build(COUNT_BORROWING, scenarios__ratio=ratios)
    result = calibrate(design, alpha=0.05, null_points=20)
    controls = np.linspace(1e-6, 1.2, 2001)
    scan = run_batch(result.design, build_rule(result.design),
                     IncrementTables(result.design, np.column_stack([controls, controls])))
    success = scan.efficacy.sum(axis=1)
    assert int(np.argmax(success)) == len(controls) - 1  # the worst point is the grid's top
    # within the refinement's control tolerance (1e-7) of the edge
    assert result.summary["type1_error_refined"] == pytest.approx(success.max(), abs=1e-7)
    assert result.summary["worst_null_point_refined"]["control"] == pytest.approx(1.2, abs=1e-6)
    assert result.summary["type1_error_refined"] <= 0.05


@pytest.mark.parametrize("comparison, better, kind, margin", [
    ("ratio", "lower", "superiority", 0.2),
    ("ratio", "lower", "non-inferiority", 0.25),
    ("odds-ratio", "higher", "superiority", 0.25),
])
def test_two_arm_null_line_of_ratios_lies_on_the_ratio_boundary(comparison, better, kind,
                                                              margin) -> None:
    """A ratio margin is relative: the null boundary is treatment = control x threshold
    (odds: odds_T = odds_C x threshold), not treatment = control + offset, which put
    alternative points into the 'null' grid (found by a new user; definition of the
    ratio and odds ratio, checked by hand here)."""
    from tests.test_count_engine import TWO_ARM as COUNT_TWO_ARM

    if comparison == "ratio":
        design = build(COUNT_TWO_ARM, endpoint__better=better,
                       hypothesis={"comparison": comparison, "kind": kind, "margin": margin},
                       scenarios={"control": [0.3, 1.0], "ratio": [0.5, 1.0]})
    else:
        design = build(TWO_ARM, endpoint__better=better,
                       hypothesis={"comparison": comparison, "kind": kind, "margin": margin},
                       scenarios={"control": [0.3], "odds_ratio": [1.0, 2.0]})
    truths = null_truths(design, 20)
    values = truths.values[: truths.nulls]
    assert len(values) > 10
    threshold = design.hypothesis.threshold
    for t, c in values:
        assert design.family.is_null(design.hypothesis, (t, c))
    line = [(t, c) for t, c in values
            if not any(np.isclose([t, c], s).all() for s in design.scenarios.values)]
    for t, c in line:
        measure = t / c if comparison == "ratio" else (t / (1 - t)) / (c / (1 - c))
        assert measure == pytest.approx(threshold, rel=1e-9)
