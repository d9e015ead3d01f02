"""Planning a normal design: assurance with a design prior on the two-arm effect, the
boundaries a committee applies by hand (sample mean and z), and a calibrated design file
through ``octrial run``."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy import integrate, stats

from octrial.cli import main
from octrial.design.load import load_design
from octrial.design.write import dumps
from octrial.design_prior import assurance
from octrial.engines.exact_normal import NormalRecursionEngine
from octrial.rules.normal import build_normal_rule
from tests.helpers import DESIGNS, build
from tests.test_decide_endpoints import NORMAL_ONE_ARM
from tests.test_normal_engine import TWO_ARM

SCORE = DESIGNS / "two-arm-continuous-score.toml"
EFFECT_PRIOR = {"distribution": "normal-mixture", "components": [
    {"weight": 0.6, "mean": 3.0, "sd": 2.0}, {"weight": 0.4, "mean": 0.0, "sd": 1.0}]}


@pytest.fixture
def runner() -> CliRunner:
    return CliRunner()


def score_with_design_prior(prior: dict):
    import tomllib
    data = tomllib.loads(SCORE.read_text())
    data["hypothesis"]["design_prior"] = prior
    return build(data)


def test_effect_prior_single_look_against_closed_form() -> None:
    # Identity: one look, flat analysis prior, design prior N(m, s^2) on the difference:
    # the difference in sample means is N(m, s^2 + se^2) marginally, so assurance =
    # Phi((m / se - z_gamma) / sqrt(1 + s^2 / se^2)) with se = sd sqrt(2 / n) per arm.
    m, s = 3.0, 2.0
    design = build(TWO_ARM, hypothesis__design_prior={"distribution": "normal", "mean": m,
                                                      "sd": s})
    found = assurance(design)
    se = 12 * math.sqrt(2 / 100)
    z = stats.norm.ppf(0.975)
    assert found.method == "quadrature"
    assert found.probability == pytest.approx(
        stats.norm.cdf((m / se - z) / math.sqrt(1 + s**2 / se**2)), abs=1e-9)
    assert found.design_prior_probability_of_claim == pytest.approx(stats.norm.sf(0, m, s),
                                                                     rel=1e-12)


def test_effect_prior_multi_look_against_quad_and_averaging() -> None:
    # The demo's three looks with a mixture design prior on the difference, against
    # (1) scipy quad of Pr(success | difference) x the prior density, and (2) the mean
    # of Pr(success | difference) over 4,000 draws from the prior (5 standard errors).
    design = score_with_design_prior(EFFECT_PRIOR)
    found = assurance(design)
    rule = build_normal_rule(design)

    def success(effects: np.ndarray) -> np.ndarray:
        truths = np.column_stack([40 + effects, np.full(effects.size, 40.0)])
        return NormalRecursionEngine.run(design, truths, rule).efficacy.sum(axis=1)

    def density(d: float) -> float:
        return sum(c["weight"] * stats.norm.pdf(d, c["mean"], c["sd"])
                   for c in EFFECT_PRIOR["components"])

    quad = integrate.quad(lambda d: success(np.array([d]))[0] * density(d), -12, 15,
                          points=[0.0, 3.0], epsabs=1e-9, limit=200)[0]
    assert found.probability == pytest.approx(quad, abs=1e-9)
    rng = np.random.default_rng(20261206)
    first = rng.random(4000) < 0.6
    draws = np.where(first, rng.normal(3.0, 2.0, 4000), rng.normal(0.0, 1.0, 4000))
    values = success(draws)
    assert abs(found.probability - values.mean()) < 5 * values.std(ddof=1) / math.sqrt(4000)
    assert sum(found.stop_efficacy) + sum(found.stop_futility) == pytest.approx(1, abs=1e-7)


def test_run_reports_assurance_for_an_effect_prior(runner, tmp_path) -> None:
    import tomllib
    data = tomllib.loads(SCORE.read_text())
    data["hypothesis"]["design_prior"] = EFFECT_PRIOR
    path = tmp_path / "score.toml"
    path.write_text(dumps(data))
    result = runner.invoke(main, ["run", str(path), "--out", str(tmp_path / "out")])
    assert result.exit_code == 0, result.output
    assert "Assurance (probability of success under the design prior)" in result.output
    record = json.loads((tmp_path / "out" / "run.json").read_text())
    assert record["assurance"]["probability"] == pytest.approx(
        assurance(score_with_design_prior(EFFECT_PRIOR)).probability, abs=1e-12)


@pytest.mark.parametrize("case", ["continuous-score demo", "one arm, lower better"])
def test_committee_text_can_be_applied_by_hand(runner, tmp_path, case) -> None:
    if case == "continuous-score demo":
        path, design = SCORE, load_design(SCORE)
    else:
        path = tmp_path / "one.toml"
        path.write_text(dumps(NORMAL_ONE_ARM))
        design = load_design(path)
    result = runner.invoke(main, ["boundaries", str(path), "--out", str(tmp_path / "b")])
    assert result.exit_code == 0, result.output
    text = result.stdout
    table = pd.read_csv(tmp_path / "b" / "boundaries.csv")
    sd, h = design.endpoint.sd, design.hypothesis
    assert "Efficacy is checked first" in text and "standard error = " in text
    for row in table.to_dict("records"):
        if design.two_arm:
            se = sd * math.sqrt(1 / row["n_treatment"] + 1 / row["n_control"])
            estimate, null = "difference", h.shift
        else:
            se = sd / math.sqrt(row["n"])
            estimate, null = "mean", h.benchmark
        assert f"(standard error {se:.6g})" in text
        bound = row["efficacy_bound"]
        # z by hand, as the header defines it (positive favours the treatment)
        z = (bound - null) / se if h.better == "higher" else (null - bound) / se
        assert z == pytest.approx(row["efficacy_z"], rel=1e-12)
        op = ">=" if h.better == "higher" else "<="
        assert f"if {estimate} {op} {bound:.6g}  (z >= {z:.6g}; rule: posterior >= " in text
        threshold = design.looks.efficacy[row["look"] - 1]
        assert row["posterior_at_efficacy_bound"] == pytest.approx(threshold, abs=1e-10)
    # the demo's prior is N(0, 6^2) on the difference: the posterior at the final bound
    # by the conjugate closed form (scipy)
    if design.two_arm:
        last = table.iloc[-1]
        info = 1 / (sd**2 * (1 / last["n_treatment"] + 1 / last["n_control"]))
        precision = 1 / 36 + info
        post = stats.norm(info * last["efficacy_bound"] / precision, 1 / math.sqrt(precision))
        assert post.sf(0.0) == pytest.approx(0.975, abs=1e-10)
        assert f"failure if difference < {last['efficacy_bound']:.6g}" in text
        assert "rule: predictive < 0.05; posterior 0.4462, predictive 0.0500 there" in text


def test_calibrated_normal_design_runs_as_is(runner, tmp_path) -> None:
    out = tmp_path / "cal"
    result = runner.invoke(main, [
        "calibrate", str(SCORE), "--alpha", "0.025", "--power", "0.8", "--alternative",
        "44,40", "--vary", "n,final", "--n-range", "280:320:20", "--out", str(out)])
    assert result.exit_code == 0, result.output
    written = out / "two-arm-continuous-score.calibrated.toml"
    record = json.loads((out / "calibration.json").read_text())
    run = runner.invoke(main, ["run", str(written), "--out", str(tmp_path / "run")])
    assert run.exit_code == 0, run.output
    oc = pd.read_csv(tmp_path / "run" / "oc.csv")
    at = dict(zip(oc["true_treatment"], oc["prob_success"], strict=True))
    # the written threshold has 11 significant digits: the run matches to ~1e-11
    assert at[40.0] == pytest.approx(record["type1_error"], abs=1e-10)
    assert at[40.0] <= 0.025 + 1e-10
    assert at[44.0] == pytest.approx(record["power"], abs=1e-10) and at[44.0] >= 0.8
    loaded = load_design(written)
    assert tuple(loaded.looks.n) == tuple(record["looks_n"])
    assert loaded.looks.efficacy[:2] == (0.9995, 0.995)        # interim thresholds kept
