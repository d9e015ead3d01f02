"""``octrial verify`` on designs with several treatment arms.

The recomputation is the exact several-arm engine (checked in tests/test_arms_exact.py);
here the claims are the engine's own numbers rounded (consistent: the rounding allowance
of the comparison test) or moved well beyond their Monte Carlo error (discrepant), and
bad input must give exit code 2 with the line and column named.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from octrial.cli import main
from octrial.engines.arms_exact import evaluate_design
from octrial.engines.arms_joint import joint_exact
from tests.test_arms_exact import THREE_DOSES, multiarm

HEADER = "true_control,true_low,true_high,metric,claimed,replicates,note\n"


@pytest.fixture()
def files(tmp_path):
    design = tmp_path / "three.toml"
    design.write_text(THREE_DOSES)
    table, _ = evaluate_design(multiarm(THREE_DOSES), np.array([[0.3, 0.3, 0.55]]))
    row = table.iloc[0]
    return design, tmp_path, row


def run(args):
    return CliRunner().invoke(main, [str(a) for a in args])


def test_consistent_and_discrepant_claims(files):
    design, folder, row = files
    claims = folder / "claims.csv"
    fwer = f"{row['fwer']:.3f}"
    wrong = f"{row['prob_success'] + 0.05:.3f}"  # 0.05 is 10 SE at 10,000 replicates
    claims.write_text(HEADER
                      + f"0.3,0.3,0.55,fwer,{fwer},,exact\n"
                      + f"0.3,0.3,0.55,low_expected_n,{row['low_expected_n']:.1f},5000,\n"
                      + f"0.3,0.3,0.55,prob_success,{wrong},10000,too high\n")
    result = run(["verify", design, claims, "--out", folder / "out"])
    assert result.exit_code == 1, result.output
    assert "1 of 3 claims discrepant" in result.output
    record = json.loads((folder / "out" / "verify.json").read_text())
    assert record["discrepant"] == 1 and "caution" in record
    claims.write_text(HEADER + f"0.3,0.3,0.55,fwer,{fwer},,exact\n")
    assert run(["verify", design, claims, "--out", folder / "out"]).exit_code == 0


def test_bad_claims_exit_2(files):
    design, folder, _ = files
    claims = folder / "claims.csv"
    claims.write_text(HEADER + "0.3,0.3,0.55,low_prob_sucess,0.5,,\n")
    result = run(["verify", design, claims, "--out", folder / "out"])
    assert result.exit_code == 2
    assert "line 2, column metric" in result.output and "low_prob_success" in result.output
    claims.write_text("true_control,true_low,metric,claimed\n0.3,0.3,prob_success,0.1\n")
    result = run(["verify", design, claims, "--out", folder / "out"])
    assert result.exit_code == 2 and "true_high" in result.output
    assert not (folder / "out").exists()  # nothing half-written


def test_coupled_arms_through_the_joint_engine(files):
    # dropping on Pr(best): recomputed on the joint lattice (engines/arms_joint.py)
    design, folder, _ = files
    text = THREE_DOSES.replace("futility = 0.1", "futility = 0.1\ndrop_if_best_below = 0.1")
    design.write_text(text)
    value = joint_exact(multiarm(text), (0.3, 0.3, 0.55))["high_prob_success"]
    claims = folder / "claims.csv"
    claims.write_text(HEADER + f"0.3,0.3,0.55,high_prob_success,{value:.4f},,\n")
    result = run(["verify", design, claims, "--out", folder / "out"])
    assert result.exit_code == 0, result.output
    record = json.loads((folder / "out" / "verify.json").read_text())
    assert record["engine"] == "exact (several arms, joint lattice)"


def test_design_without_exact_engine_exit_2(files):
    # dropping on Pr(best) in a study too large for the joint lattice
    design, folder, _ = files
    design.write_text(THREE_DOSES.replace("futility = 0.1",
                                          "futility = 0.1\ndrop_if_best_below = 0.1")
                      .replace("n = [24, 48, 72]", "n = [240, 480, 720]"))
    claims = folder / "claims.csv"
    claims.write_text(HEADER + "0.3,0.3,0.55,prob_success,0.5,,\n")
    result = run(["verify", design, claims, "--out", folder / "out"])
    assert result.exit_code == 2 and "Pr(best)" in result.output
