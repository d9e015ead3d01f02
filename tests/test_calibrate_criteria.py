"""Calibration to Bayesian operating characteristics (``octrial calibrate --criterion``).

* Brute force: for a single-look binary design every threshold is a count bound s, and
  each Bayesian operating characteristic of "success iff x >= s" is computed here by
  scipy.integrate.quad of the binomial tail (scipy.stats.binom) against the beta design
  prior; the least stringent bound meeting every constraint, found by trying every s,
  must be the calibrated one.
* Closed form: a single-look known-sd normal design with a normal design prior; the
  average type I error of "xbar >= c" is a bivariate normal probability
  (scipy.stats.multivariate_normal) divided by Pr(null), solved for c with
  scipy.optimize.brentq and turned into the posterior threshold.
* The calibrated design file, re-evaluated by ``octrial run``, meets every constraint.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy import integrate, optimize, stats

from octrial.calibration import calibrate
from octrial.cli import main
from octrial.design.write import dumps
from octrial.errors import InputError
from tests.check_designs import NORMAL_ONE, UNKNOWN_ONE
from tests.helpers import ONE_ARM, build, changed

N, P0, A, B = 20, 0.2, 2.0, 6.0
SINGLE = changed(ONE_ARM, looks__n=[N], looks__efficacy=[0.9], looks__futility=None,
                 hypothesis__benchmark=P0,
                 arms__treatment__design_prior={"distribution": "beta", "a": A, "b": B})


def brute_force_metrics(s: int) -> dict[str, float]:
    dens = stats.beta(A, B)

    def part(lo: float, hi: float) -> float:
        return integrate.quad(lambda p: stats.binom.sf(s - 1, N, p) * dens.pdf(p), lo, hi,
                              epsabs=1e-13, limit=200)[0]

    ns, as_ = part(0, P0), part(P0, 1)
    q = dens.cdf(P0)
    success = ns + as_
    return {"average_type1_error": ns / q, "bayesian_power": as_ / (1 - q),
            "prob_null_given_success": ns / success if success > 0 else math.nan,
            "prob_alternative_given_failure": (1 - q - as_) / (1 - success),
            "prob_success": success}


def count_bound(threshold: float) -> int:
    # success iff Pr(p > P0 | x) >= threshold under the Beta(1, 1) analysis prior
    benefit = stats.beta.sf(P0, 1 + np.arange(N + 1), 1 + N - np.arange(N + 1))
    return int(np.flatnonzero(benefit >= threshold - 1e-12)[0])


@pytest.mark.parametrize("criteria", [
    ("prob_null_given_success<=0.05",),
    ("prob_null_given_success<=0.03", "average_type1_error<=0.02"),
    ("average_type1_error<=0.01", "bayesian_power>=0.2"),
])
def test_brute_force_over_thresholds_finds_the_same_optimum(criteria) -> None:
    design = build(SINGLE)
    found = calibrate(design, criterion=list(criteria))
    chosen = count_bound(found.design.looks.efficacy[-1])
    # every count bound, from the least stringent, until one meets every constraint
    limits = [([*c.split("<="), "<="]) if "<=" in c else ([*c.split(">="), ">="])
              for c in criteria]
    expected = None
    for s in range(N + 2):
        m = brute_force_metrics(s)
        if all(m[name] <= float(v) + 1e-12 if op == "<=" else m[name] >= float(v) - 1e-12
               for name, v, op in limits):
            expected = s
            break
    assert chosen == expected
    # and the bound just below fails (the choice is the least stringent)
    m = brute_force_metrics(expected - 1)
    assert not all(m[name] <= float(v) if op == "<=" else m[name] >= float(v)
                   for name, v, op in limits)
    table = found.candidates
    for name in ("prob_success", "average_type1_error", "bayesian_power",
                 "prob_null_and_success", "prob_alternative_and_failure",
                 "prob_null_given_success", "prob_alternative_given_failure",
                 "prior_prob_null"):
        assert table[name].notna().all()
    row = table[table["chosen"]].iloc[0]
    assert row["meets_criteria"]
    assert row["prob_null_given_success"] == pytest.approx(
        brute_force_metrics(chosen)["prob_null_given_success"], abs=1e-9)


def test_with_alpha_both_bind() -> None:
    design = build(SINGLE)
    alone = calibrate(design, alpha=0.05)
    both = calibrate(design, alpha=0.05, criterion=["prob_null_given_success<=0.01"])
    a, b = (count_bound(x.design.looks.efficacy[-1]) for x in (alone, both))
    assert b >= a
    assert both.summary["type1_error"] <= 0.05
    assert brute_force_metrics(b)["prob_null_given_success"] <= 0.01
    assert brute_force_metrics(b - 1)["prob_null_given_success"] > 0.01 or b - 1 < a


def test_normal_threshold_against_bivariate_normal_closed_form() -> None:
    sd, n, m_a, s_a, m_d, s_d, target = 2.0, 40, 0.2, 0.5, 0.4, 0.5, 0.02
    design = build(NORMAL_ONE, looks__n=[n], looks__efficacy=[0.975], endpoint__sd=sd,
                   arms__treatment__prior={"distribution": "normal", "mean": m_a, "sd": s_a},
                   arms__treatment__design_prior={"distribution": "normal", "mean": m_d,
                                                  "sd": s_d})
    found = calibrate(design, criterion=[f"average_type1_error<={target}"])
    cov = [[s_d**2, s_d**2], [s_d**2, s_d**2 + sd**2 / n]]
    joint = stats.multivariate_normal([m_d, m_d], cov)
    q = stats.norm.cdf(0, m_d, s_d)

    def average_type1(c: float) -> float:
        return (q - joint.cdf([0.0, c])) / q

    c = optimize.brentq(lambda c: average_type1(c) - target, -2, 3, xtol=1e-12)
    precision = 1 / s_a**2 + n / sd**2
    mean = (m_a / s_a**2 + n * c / sd**2) / precision
    gamma = stats.norm.cdf(mean * math.sqrt(precision))
    assert found.design.looks.efficacy[-1] == pytest.approx(gamma, abs=2e-6)


@pytest.mark.parametrize("options", [
    ["--criterion", "prob_null_given_success<=0.05", "--criterion", "average_type1_error<=0.02"],
    ["--alpha", "0.1", "--criterion", "prob_alternative_given_failure<=0.58"],
])
def test_calibrated_design_meets_its_constraints_through_octrial_run(tmp_path,
                                                                     options) -> None:
    data = changed(ONE_ARM, arms__treatment__design_prior={"distribution": "beta", "a": 3,
                                                           "b": 9},
                   looks__futility_predictive=0.05)
    path = tmp_path / "d.toml"
    path.write_text(dumps(data))
    runner = CliRunner()
    out = tmp_path / "cal"
    result = runner.invoke(main, ["calibrate", str(path), *options, "--out", str(out)])
    assert result.exit_code == 0, result.output
    table = pd.read_csv(out / "calibration.csv")
    assert {"prob_null_given_success", "meets_criteria"} <= set(table.columns)
    run = tmp_path / "run"
    result = runner.invoke(main, ["run", str(out / "one-arm-test.calibrated.toml"), "--out",
                                  str(run)])
    assert result.exit_code == 0, result.output
    rec = json.loads((run / "run.json").read_text())["bayesian_operating_characteristics"]
    for item in options[1::2]:
        if "<=" in item:
            name, value = item.split("<=")
            assert rec[name] <= float(value)
        else:
            assert json.loads((run / "run.json").read_text())["type1"]["max_type1_error"] \
                <= float(item)


@pytest.mark.parametrize("base, settings, key, words", [
    (ONE_ARM, {"criterion": ["average_type1_error<=0.02"]}, "criterion",
     "design prior"),
    (SINGLE, {"criterion": ["type1<=0.02"]}, "criterion", "prob_null_given_success"),
    (SINGLE, {"criterion": ["average_type1_error<=1.5"]}, "criterion", "[0, 1]"),
    (SINGLE, {"criterion": ["average_type1_error=0.1"]}, "criterion", "NAME<=VALUE"),
    (SINGLE, {"criterion": ["power"]}, "alpha", "required"),
    (SINGLE, {"criterion": ["average_type1_error<=0.1"], "relevant_effect": -1},
     "relevant_effect", ">= 0"),
    (changed(UNKNOWN_ONE, arms__treatment__design_prior=UNKNOWN_ONE["arms"]["treatment"][
        "prior"]), {"criterion": ["average_type1_error<=0.1"]}, "criterion",
     "exact engine"),
])
def test_bad_criteria_name_the_setting(base, settings, key, words) -> None:
    with pytest.raises(InputError) as caught:
        calibrate(build(base), "command line", **settings)
    text = str(caught.value)
    assert f"command line: {key}: expected" in text and words in text and "--" not in text


# -- a restricted null region (--null-range) -------------------------------------------------
def test_null_range_limits_the_null_grid_and_is_stated() -> None:
    from octrial.engines.exact_lattice import ExactLatticeEngine
    from tests.helpers import TWO_ARM

    design = build(TWO_ARM, looks__n=[30, 60], scenarios__control=[0.3])
    whole = calibrate(design, alpha=0.05)
    limited = calibrate(design, alpha=0.05, null_range="0.2:0.4")
    nulls = limited.truths.values[: limited.truths.nulls]
    assert nulls[:, 1].min() >= 0.2 - 1e-12 and nulls[:, 1].max() <= 0.4 + 1e-12
    assert "--null-range" in limited.summary["null_range"]["assumption"]
    # a smaller region can only allow a less (or equally) stringent threshold
    assert limited.design.looks.efficacy[-1] <= whole.design.looks.efficacy[-1]
    # brute force along the null line inside the range: every point meets alpha
    controls = np.linspace(0.2, 0.4, 81)
    success = ExactLatticeEngine.run(limited.design, np.column_stack([controls, controls]),
                                     estimate=False).efficacy.sum(axis=1)
    assert success.max() <= 0.05 + 1e-12


def test_one_arm_null_range_grid() -> None:
    found = calibrate(build(ONE_ARM), alpha=0.05, null_range="0.05:0.15")
    nulls = found.truths.values[: found.truths.nulls, 0]
    assert nulls.min() >= 0.05 - 1e-12 and nulls.max() <= 0.15 + 1e-12
    # the benchmark (0.2) is outside: the worst point in the range is its top
    assert found.summary["worst_null_point"]["treatment"] == pytest.approx(0.15)


@pytest.mark.parametrize("value, words", [
    ("0.4:0.2", "LOW < HIGH"), ("abc", "LOW:HIGH"), ("0.5:0.9", "meets the null region"),
])
def test_bad_null_range(value, words) -> None:
    with pytest.raises(InputError) as caught:
        calibrate(build(ONE_ARM), "command line", alpha=0.05, null_range=value)
    assert "command line: null_range: expected" in str(caught.value)
    assert words in str(caught.value)


def test_two_arm_sweep_rows_equal_a_fresh_evaluation_of_each_candidate() -> None:
    # the sweep keeps only the weighted sums of the design-prior nodes: every logged row
    # must equal octrial's full quadrature of that candidate (independent node set)
    from octrial.bayesian_oc import bayesian_record
    from octrial.design_prior import assurance_record
    from tests.helpers import TWO_ARM

    priors = dict(arms__treatment__design_prior={"distribution": "beta", "a": 5, "b": 8},
                  arms__control__design_prior={"distribution": "beta", "a": 3, "b": 7})
    design = build(TWO_ARM, **priors)
    found = calibrate(design, alpha=0.1, criterion=["prob_null_given_success<=0.02"])
    table = found.candidates
    rows = table[table["step"] == "threshold"].dropna(subset=["prob_success"])
    picks = rows.iloc[np.linspace(0, len(rows) - 1, 4).astype(int)]
    for _, row in picks.iterrows():
        final = float(row["efficacy"].split()[-1])
        candidate = build(TWO_ARM, **priors, looks__efficacy=[0.99, final])
        rec = bayesian_record(candidate, assurance_record(candidate))
        for name in ("prob_success", "average_type1_error", "prob_null_given_success",
                     "prob_alternative_given_failure"):
            assert row[name] == pytest.approx(rec[name], abs=1e-9), name
    chosen = table[table["chosen"]].iloc[0]
    assert chosen["prob_null_given_success"] <= 0.02 and chosen["type1_error"] <= 0.1


def test_sizing_with_a_bayesian_constraint() -> None:
    # every N in the sizing curve carries the metrics; the chosen N is the smallest from
    # which every larger N meets the constraint, checked against brute force per N
    design = build(SINGLE)
    found = calibrate(design, vary="n,final", n_range="10:30:5", power=0.5,
                      alternative=[0.45], criterion=["prob_null_given_success<=0.03"])
    curve = found.sizing
    assert curve["prob_null_given_success"].notna().all()
    chosen = int(curve.loc[curve["chosen"], "n"].iloc[0])
    for _, row in curve.iterrows():
        if row["n"] >= chosen:
            assert row["prob_null_given_success"] <= 0.03 and row["passes"]
    assert found.design.looks.n[-1] == chosen


def test_null_range_assumption_reaches_the_report(tmp_path) -> None:
    runner = CliRunner()
    path = tmp_path / "d.toml"
    path.write_text(dumps(changed(ONE_ARM)))
    out = tmp_path / "run"
    assert runner.invoke(main, ["run", str(path), "--out", str(out)]).exit_code == 0
    result = runner.invoke(main, ["calibrate", str(path), "--alpha", "0.05", "--null-range",
                                  "0.1:0.2", "--out", str(out)])
    assert result.exit_code == 0, result.output
    assert "assumption" in result.output
    assert runner.invoke(main, ["report", str(out)]).exit_code == 0
    html = (out / "report.html").read_text()
    assert "(--null-range); outside that range it may be larger" in html
