"""Reviewer re-computation: own numbers are consistent, shifted numbers are flagged, the
test is neither over-eager nor blind; Holm against closed testing; bad claims files."""

from __future__ import annotations

import itertools
import json
from dataclasses import replace
from typing import ClassVar

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy import stats

import octrial
from octrial.cli import main
from octrial.design.load import load_design
from octrial.design.model import Scenarios
from octrial.engines import ENGINES, MonteCarloSettings
from octrial.engines.exact_lattice import ExactLatticeEngine
from octrial.engines.outcome import Outcome
from octrial.errors import InputError
from octrial.review import read_claims, verify
from octrial.review.claims import half_unit, metrics
from octrial.review.comparison import binomial_se, two_sided_p, z_scores
from octrial.review.multiplicity import holm
from tests.helpers import DESIGNS, ONE_ARM, build

SINGLE = DESIGNS / "single-arm-response.toml"
TWO = DESIGNS / "two-arm-randomised.toml"
DEMO_CLAIMS = DESIGNS / "single-arm-response.claims.csv"


def claims_file(tmp_path, rows: list[dict], name: str = "claims.csv"):
    path = tmp_path / name
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


def own_claims(design, decimals: int | None, replicates: int = 0) -> list[dict]:
    """Every claimable number of the design, from octrial's own exact evaluation."""
    oc = octrial.evaluate(design)
    truth = [c for c in oc.columns if c.startswith("true_") and c != "true_effect"]
    rows = []
    for _, r in oc.iterrows():
        for metric in metrics(design):
            value = r[metric]
            text = repr(float(value)) if decimals is None else f"{value:.{decimals}f}"
            rows.append({**{c: r[c] for c in truth}, "metric": metric, "claimed": text,
                         "replicates": replicates})
    return rows


@pytest.mark.parametrize("path", [SINGLE, TWO], ids=lambda p: p.stem)
@pytest.mark.parametrize("decimals", [None, 4, 2])
def test_own_exact_numbers_are_all_consistent(tmp_path, path, decimals) -> None:
    design = load_design(path)
    claims = read_claims(claims_file(tmp_path, own_claims(design, decimals)), design)
    result = verify(design, claims)
    assert result.discrepant == 0
    assert (result.table["p"] == 1).all()          # exact claims within their rounding
    assert result.table["in_design_grid"].all() and result.added == ()


def test_exact_claim_must_respect_its_own_rounding(tmp_path) -> None:
    design = load_design(SINGLE)      # exact type I error at 0.20 is 0.04669...
    rows = [{"true_treatment": 0.2, "metric": "prob_success", "claimed": text}
            for text in ("0.05", "0.047", "0.0467", "0.0470", "0.046", "0.04669")]
    table = verify(design, read_claims(claims_file(tmp_path, rows), design)).table
    assert table["verdict"].tolist() == ["consistent", "consistent", "consistent",
                                         "discrepant", "discrepant", "consistent"]
    assert table["rounding"].tolist() == pytest.approx([0.005, 5e-4, 5e-5, 5e-5, 5e-4, 5e-6])


def monte_carlo_claims(design, replicates: int, seed: int) -> tuple[list[dict], pd.DataFrame]:
    """Claims as an honest simulation with ``replicates`` studies would state them."""
    oc = octrial.evaluate(design)
    rng = np.random.default_rng(seed)
    rows = []
    for _, r in oc.iterrows():
        for metric in ("prob_success", "prob_stop_futility", "look1_stop_futility"):
            estimate = rng.binomial(replicates, r[metric]) / replicates
            rows.append({"true_treatment": r["true_treatment"], "metric": metric,
                         "claimed": f"{estimate:.4f}", "replicates": replicates})
        estimate = r["expected_n"] + rng.normal() * r["sd_n"] / np.sqrt(replicates)
        rows.append({"true_treatment": r["true_treatment"], "metric": "expected_n",
                     "claimed": f"{estimate:.3f}", "replicates": replicates})
    return rows, oc


def test_shifted_claims_are_flagged_and_only_those(tmp_path) -> None:
    design = load_design(SINGLE)
    rows, oc = monte_carlo_claims(design, 10_000, seed=11)
    targets = [(0.3, "prob_success", 10.0), (0.25, "prob_stop_futility", -12.0),
               (0.35, "expected_n", 15.0)]          # shifts in standard errors
    shifted = {}
    for truth, metric, k in targets:
        i = next(i for i, r in enumerate(rows)
                 if r["metric"] == metric and abs(r["true_treatment"] - truth) < 1e-9)
        shifted[i] = k
    for i, k in shifted.items():
        row = rows[i]
        truth = oc[oc["true_treatment"] == row["true_treatment"]].iloc[0]
        if row["metric"] == "expected_n":
            se = truth["sd_n"] / np.sqrt(10_000)
            row["claimed"] = f"{float(row['claimed']) + k * se:.3f}"
        else:
            p = truth[row["metric"]]
            row["claimed"] = f"{float(row['claimed']) + k * np.sqrt(p * (1 - p) / 1e4):.4f}"
    table = verify(design, read_claims(claims_file(tmp_path, rows), design)).table
    flagged = set(np.flatnonzero(table["verdict"] == "discrepant"))
    assert flagged == set(shifted)
    # the honest claims' z-scores look standard normal (a loose check of the scaling)
    honest = table.drop(index=list(shifted))
    honest = honest[honest["recomputed"].between(0.01, 0.99) | (honest["metric"] ==
                                                                "expected_n")]
    assert 0.5 < honest["z"].std() < 1.5


@pytest.mark.parametrize("truth", [0.2, 0.4])
def test_one_se_off_from_1000_replicates_is_consistent(tmp_path, truth) -> None:
    design = load_design(SINGLE)
    exact = octrial.evaluate(design).set_index("true_treatment").loc[truth]
    rows = []
    for k in (1.0, -1.0, 5.0):
        for metric in ("prob_success", "prob_stop_futility"):
            p = exact[metric]
            rows.append({"true_treatment": truth, "metric": metric, "replicates": 1000,
                         "claimed": f"{p + k * np.sqrt(p * (1 - p) / 1000):.4f}"})
        n_claim = exact["expected_n"] + k * exact["sd_n"] / np.sqrt(1000)
        rows.append({"true_treatment": truth, "metric": "expected_n", "replicates": 1000,
                     "claimed": f"{n_claim:.3f}"})
    table = verify(design, read_claims(claims_file(tmp_path, rows), design)).table
    one_se, five_se = table.iloc[:6], table.iloc[6:]
    assert (one_se["verdict"] == "consistent").all()
    assert one_se["z"].abs().between(0.85, 1.0).all()        # rounding allowance only
    assert (five_se["verdict"] == "discrepant").all()         # and not blind
    # exact recomputation: the claim's standard error is the binomial one at the truth
    p = exact["prob_success"]
    assert table.loc[0, "claimed_se"] == pytest.approx(np.sqrt(p * (1 - p) / 1000))
    assert table.loc[0, "recomputed_se"] == 0


def test_claim_se_column_replaces_the_binomial_one(tmp_path) -> None:
    design = load_design(SINGLE)
    rows = [{"true_treatment": 0.3, "metric": "prob_success", "claimed": "0.47",
             "replicates": 1000, "se": ""},
            {"true_treatment": 0.3, "metric": "prob_success", "claimed": "0.47",
             "replicates": 1000, "se": "0.002"}]
    table = verify(design, read_claims(claims_file(tmp_path, rows), design)).table
    assert table["verdict"].tolist() == ["consistent", "discrepant"]
    assert table.loc[1, "claimed_se"] == 0.002


def test_scenario_outside_the_grid_is_added_and_said(tmp_path) -> None:
    design = load_design(SINGLE)
    rows = [{"true_treatment": 0.32, "metric": "prob_success", "claimed": "0.57"},
            {"true_treatment": 0.3, "metric": "prob_success", "claimed": "0.46"}]
    result = verify(design, read_claims(claims_file(tmp_path, rows), design))
    assert result.added == ((0.32,),)
    assert result.table["in_design_grid"].tolist() == [False, True]
    alone = octrial.evaluate(replace(design, scenarios=Scenarios(("treatment",), ((0.32,),))))
    assert result.table.loc[0, "recomputed"] == alone.loc[0, "prob_success"]
    assert result.info["scenarios_added"] == [{"treatment": 0.32}]


def test_two_arm_claims_by_effect(tmp_path) -> None:
    design = load_design(TWO)
    oc = octrial.evaluate(design)
    r = oc.iloc[3]
    rows = [{"true_control": r["true_control"], "true_effect": r["true_effect"],
             "metric": "prob_success", "claimed": f"{r['prob_success']:.3f}"}]
    table = verify(design, read_claims(claims_file(tmp_path, rows), design)).table
    assert table.loc[0, "true_treatment"] == pytest.approx(r["true_treatment"])
    assert table.loc[0, "verdict"] == "consistent"


# -- the statistics --------------------------------------------------------------------

def test_holm_equals_closed_testing_with_bonferroni() -> None:
    # Holm (1979) is the closure (Marcus, Peritz & Gabriel 1976) of Bonferroni tests: the
    # adjusted p of H_i is the largest over index sets S containing i of min(1, |S| min p_S).
    rng = np.random.default_rng(3)
    for m in (1, 2, 5, 7):
        for _ in range(20):
            p = rng.choice([rng.uniform(), rng.uniform(0, 0.02), 0.0, 1.0], size=m)
            closed = [max(min(1.0, len(s) * min(p[list(s)]))
                          for r in range(1, m + 1) for s in itertools.combinations(range(m), r)
                          if i in s) for i in range(m)]
            np.testing.assert_allclose(holm(p), closed, rtol=1e-12, atol=0)


def test_z_and_p_against_scipy() -> None:
    claimed, recomputed = np.array([0.06, 0.04, 0.05, 0.5]), np.array([0.05, 0.05, 0.05, 0.4])
    allowance = np.array([0.0005, 0.0005, 0.0005, 0.0])
    se_c, se_r = np.array([0.004, 0.003, 0.0, 0.0]), np.array([0.003, 0.0, 0.0, 0.0])
    z = z_scores(claimed, recomputed, allowance, se_c, se_r)
    assert z[0] == pytest.approx(0.0095 / 0.005) and z[1] == pytest.approx(-0.0095 / 0.003)
    assert z[2] == 0 and z[3] == np.inf
    p = two_sided_p(z)
    assert p[0] == pytest.approx(2 * stats.norm.sf(1.9)) and p[3] == 0 and p[2] == 1
    assert binomial_se(np.array([0.2]), np.array([100]))[0] == pytest.approx(0.04)
    assert binomial_se(np.array([0.2]), np.array([0]))[0] == 0


def test_half_units() -> None:
    assert half_unit("0.025") == 0.0005 and half_unit("30") == 0.5
    assert half_unit("0.80") == pytest.approx(0.005) and half_unit("2.5E-2") == 0.0005
    assert half_unit(".5") == 0.05 and half_unit("12.") == 0.5


# -- Monte Carlo recomputation (plumbing, with a stand-in engine) -----------------------

class StandInMonteCarlo:
    """The exact engine dressed as Monte Carlo: tests verify's plumbing only."""

    name = "monte-carlo"
    seen: ClassVar[list] = []

    @staticmethod
    def unsupported(design):
        return None

    @classmethod
    def run(cls, design, truths, rule=None, settings=None, execution=None):
        settings = settings or MonteCarloSettings(replicates=design.simulation.replicates)
        cls.seen.append(settings)
        exact = ExactLatticeEngine.run(design, truths, rule)
        reps = np.full(len(truths), settings.replicates)
        info = {"seed": settings.seed, "seed_drawn": False, "scenarios_resumed": 0}
        return Outcome(exact.efficacy, exact.futility, reps, "monte-carlo", info=info)


def test_designs_without_exact_engine_use_monte_carlo_with_more_replicates(
        tmp_path, monkeypatch) -> None:
    monkeypatch.setattr(ExactLatticeEngine, "unsupported", staticmethod(lambda d: "no lattice"))
    monkeypatch.setitem(ENGINES, "monte-carlo", (StandInMonteCarlo,))
    design = load_design(SINGLE)
    rows = [{"true_treatment": 0.2, "metric": "prob_success", "claimed": "0.047",
             "replicates": 20_000},
            {"true_treatment": 0.2, "metric": "expected_n", "claimed": "27.3", "replicates": ""}]
    result = verify(design, read_claims(claims_file(tmp_path, rows), design), seed=5)
    assert StandInMonteCarlo.seen[-1].replicates == 200_000    # 10 x the largest claim
    assert StandInMonteCarlo.seen[-1].seed == 5
    assert result.info["replicates"] == 200_000 and result.info["seed"] == 5
    table = result.table
    p = 0.047    # pooled estimate of two Monte Carlo values (claim 0.047, recomputed ~0.0467)
    pooled = (0.047 * 20_000 + table.loc[0, "recomputed"] * 200_000) / 220_000
    assert table.loc[0, "claimed_se"] == pytest.approx(np.sqrt(pooled * (1 - pooled) / 2e4))
    assert table.loc[0, "recomputed_se"] == pytest.approx(np.sqrt(pooled * (1 - pooled) / 2e5))
    assert p > 0 and (table["recomputed_method"] == "monte-carlo").all()
    sd_n = octrial.evaluate(design).set_index("true_treatment").loc[0.2, "sd_n"]
    assert table.loc[1, "recomputed_se"] == pytest.approx(sd_n / np.sqrt(200_000))
    assert table.loc[1, "claimed_se"] == 0


def test_no_engine_is_a_clear_error(tmp_path, monkeypatch) -> None:
    monkeypatch.setattr(ExactLatticeEngine, "unsupported", staticmethod(lambda d: "no lattice"))
    monkeypatch.delitem(ENGINES, "monte-carlo", raising=False)
    design = load_design(SINGLE)
    rows = [{"true_treatment": 0.2, "metric": "prob_success", "claimed": "0.047"}]
    with pytest.raises(InputError, match="recompute exactly or by Monte Carlo") as info:
        verify(design, read_claims(claims_file(tmp_path, rows), design))
    assert "not available in this version" in str(info.value)


# -- command line ----------------------------------------------------------------------

@pytest.fixture
def runner() -> CliRunner:
    return CliRunner()


def test_cli_exit_codes_and_files(runner, tmp_path) -> None:
    design = load_design(SINGLE)
    good = claims_file(tmp_path, own_claims(design, 3)[:12], "good.csv")
    out = tmp_path / "out"
    result = runner.invoke(main, ["verify", str(SINGLE), str(good), "--out", str(out)])
    assert result.exit_code == 0, result.output
    assert "All 12 claims consistent" in result.stdout
    table = pd.read_csv(out / "verify.csv")
    for column in ("line", "true_treatment", "metric", "claimed", "claimed_replicates",
                   "claimed_se", "recomputed", "recomputed_se", "z", "p", "p_holm", "verdict"):
        assert column in table.columns
    record = json.loads((out / "verify.json").read_text())
    assert record["claims"]["sha256"] and record["engine"] == "exact"
    assert record["adjustment"] == "Holm (1979)" and "regulat" in record["caution"]


def test_demo_claims_flag_the_deliberately_wrong_line(runner, tmp_path) -> None:
    result = runner.invoke(main, ["verify", str(SINGLE), str(DEMO_CLAIMS), "--out",
                                  str(tmp_path)])
    assert result.exit_code == 1, result.output
    table = pd.read_csv(tmp_path / "verify.csv")
    wrong = table[table["verdict"] == "discrepant"]
    assert wrong["note"].tolist() == ["deliberately wrong"]
    assert "Not in the design's scenario grid (evaluated all the same): treatment = 0.32" in (
        result.stdout)


def test_notes_that_start_like_formulas_are_neutralised(runner, tmp_path) -> None:
    """Issue 12: verify.csv copies each claim's note; a note a spreadsheet would run as a
    formula (starting with =, +, -, @; OWASP "CSV Injection") gets a leading single
    quote, while plain text, plain numbers and the numeric columns are left alone."""
    import csv

    notes = ['=HYPERLINK("http://example.invalid","x")', "+SUM(1,2)", "-2+3", "@SUM(A1)",
             "-0.5", "type I error", "a = b"]
    claims = tmp_path / "claims.csv"
    with claims.open("w", newline="") as handle:
        writer = csv.writer(handle)
        writer.writerow(["true_treatment", "metric", "claimed", "note"])
        for note in notes:
            writer.writerow(["0.2", "prob_success", "0.04669", note])
    out = tmp_path / "out"
    result = runner.invoke(main, ["verify", str(SINGLE), str(claims), "--out", str(out)])
    assert result.exit_code == 0, result.output
    with (out / "verify.csv").open(newline="") as handle:
        rows = list(csv.DictReader(handle))
    assert [r["note"] for r in rows] == [
        '\'=HYPERLINK("http://example.invalid","x")', "'+SUM(1,2)", "'-2+3", "'@SUM(A1)",
        "-0.5", "type I error", "a = b"]
    # numeric cells stay numbers (a negative difference is not text)
    assert all(float(r["difference"]) == pytest.approx(0.04669 - float(r["recomputed"]))
               for r in rows)
    assert any(r["difference"].startswith("-") for r in rows)
    assert all(r["claimed"] == "0.04669" for r in rows)


# (file text, words the message must contain)
BAD = [
    ("true_treatment,metric,claimed\n0.2,power,0.05\n",
     "line 2, column metric: expected a probability or expected-sample-size column"),
    ("true_treatment,metric,claimed\n0.2,power,0.05\n", "did you mean 'prob_success'?"),
    ("true_treatment,metric,claimed\n0.2,prob_sucess,0.05\n", "did you mean 'prob_success'?"),
    ("true_treatment,metric,claimed\n0.2,look4_stop_efficacy,0.05\n", "3-look design"),
    ("metric,claimed\nprob_success,0.05\n", "expected a column true_treatment"),
    ("true_treatment,metric,claimed,replicate\n0.2,prob_success,0.05,100\n",
     "did you mean 'replicates'?"),
    ("true_treatment,metric,claimed\n0.2,prob_success,1.05\n",
     "line 2, column claimed: expected a probability in [0, 1]; got '1.05'"),
    ("true_treatment,metric,claimed\n0.2,expected_n,50\n",
     "expected an expected sample size between the first look's n (15) and the maximum (45)"),
    ("true_treatment,metric,claimed\n0.2,prob_success,0.0x5\n",
     "column claimed: expected a number, written as a plain decimal; got '0.0x5'"),
    ("true_treatment,metric,claimed\n0.2,prob_success,2.5%\n", "0.025 for 2.5%"),
    ("true_treatment,metric,claimed\n1.2,prob_success,0.05\n",
     "line 2, column true_treatment: expected a rate in (0, 1); got 1.2"),
    ("true_treatment,metric,claimed\n,prob_success,0.05\n", "got an empty field"),
    ("true_treatment,metric,claimed,replicates\n0.2,prob_success,0.05,12.5\n",
     "column replicates: expected a whole number >= 0"),
    ("true_treatment,metric,claimed,se\n0.2,prob_success,0.05,-1\n", "standard error > 0"),
    ("true_treatment,metric,claimed\n0.2,prob_success\n", "line 2: expected 3 comma-separated"),
    ("# only a comment\n", "expected a header line and at least one row"),
    ("true_treatment,metric,claimed\n", "at least one row below the header"),
]


@pytest.mark.parametrize(("text", "words"), BAD, ids=[w[:40] for _, w in BAD])
def test_bad_claims_exit_2_and_write_nothing(runner, tmp_path, text, words) -> None:
    path = tmp_path / "bad.csv"
    path.write_text(text)
    out = tmp_path / "out"
    result = runner.invoke(main, ["verify", str(SINGLE), str(path), "--out", str(out)])
    assert result.exit_code == 2, result.output
    assert f"error: {path}" in result.stderr and words in result.stderr
    assert not out.exists()


def test_two_arm_claims_need_both_truths(tmp_path) -> None:
    design = load_design(TWO)
    path = claims_file(tmp_path, [{"true_treatment": 0.3, "metric": "prob_success",
                                   "claimed": "0.1"}])
    with pytest.raises(InputError, match="expected a column true_control"):
        read_claims(path, design)
    bad = claims_file(tmp_path, [{"true_treatment": 0.3, "true_control": 0.2,
                                  "true_effect": 0.2, "metric": "prob_success",
                                  "claimed": "0.1"}], "effect.csv")
    with pytest.raises(InputError, match="true_effect: expected true_treatment - true_control"):
        read_claims(bad, design)


def test_count_rule_design_claims(tmp_path) -> None:
    design = build(ONE_ARM, arms__treatment__prior=None,
                   looks={"n": [13, 43], "futility_count": [3, "none"],
                          "efficacy_count": ["none", 12]})
    oc = octrial.evaluate(design)
    rows = [{"true_treatment": t, "metric": "prob_success", "claimed": f"{p:.3f}"}
            for t, p in zip(oc["true_treatment"], oc["prob_success"], strict=True)]
    assert verify(design, read_claims(claims_file(tmp_path, rows), design)).discrepant == 0


def test_unknown_sd_design_is_verified_by_simulation(runner, tmp_path) -> None:
    # No exact engine exists for an unknown sd, so `octrial verify` recomputes by Monte
    # Carlo (the general normal kernel). Claims: an honest simulation with another seed
    # (consistent), and one claimed type I error half the true one (discrepant).
    from octrial.engines import MonteCarloSettings

    path = DESIGNS / "single-arm-mean-change.toml"
    design = load_design(path)
    at = replace(design, scenarios=Scenarios(design.scenarios.arms, ((2.0,), (5.0,))))
    oc = octrial.evaluate(at, settings=MonteCarloSettings(replicates=20_000, seed=1))
    rows = [{"true_treatment": t, "metric": metric, "claimed": f"{oc.loc[i, metric]:.4f}",
             "replicates": 20_000}
            for i, t in enumerate((2.0, 5.0))
            for metric in ("prob_success", "prob_stop_futility", "expected_n")]
    rows.append({"true_treatment": 2.0, "metric": "prob_success",
                 "claimed": f"{oc.loc[0, 'prob_success'] / 2:.4f}", "replicates": 20_000,
                 "note": "halved"})
    claims = claims_file(tmp_path, rows)
    out = tmp_path / "out"
    result = runner.invoke(main, ["verify", str(path), str(claims), "--out", str(out),
                                  "--replicates", "40000", "--seed", "99"])
    assert result.exit_code == 1, result.output
    table = pd.read_csv(out / "verify.csv")
    assert (table["recomputed_method"] == "monte-carlo").all()
    assert (table["recomputed_replicates"] == 40_000).all()
    assert table.loc[table["verdict"] == "discrepant", "note"].tolist() == ["halved"]
    record = json.loads((out / "verify.json").read_text())
    assert record["engine"] == "monte-carlo" and record["seed"] == 99
    assert record["replicates"] == 40_000
