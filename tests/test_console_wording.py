"""Console text in plain English (issue 12): counts with the right plural, and no Python
reprs (tuples, lists, numpy scalars) in messages."""

from __future__ import annotations

import numpy as np
import pytest
from click.testing import CliRunner

from octrial.cli import main
from octrial.errors import show
from octrial.plurals import count, noun
from tests.helpers import DESIGNS

SINGLE = DESIGNS / "single-arm-response.toml"


@pytest.fixture
def runner() -> CliRunner:
    return CliRunner()


def test_counts_in_plain_english() -> None:
    assert [count(n, "scenario") for n in (0, 1, 2)] == ["0 scenarios", "1 scenario",
                                                         "2 scenarios"]
    assert count(1, "study") == "1 study" and count(3, "study") == "3 studies"
    assert noun(1.0, "subject") == "subject" and noun(0.5, "subject") == "subjects"
    assert count(2, "criterion", "criteria") == "2 criteria"


def test_found_values_are_shown_without_python_reprs() -> None:
    assert show(("sbc", "everything")) == "a list of 2: 'sbc', 'everything'"
    assert show([1, 2.5]) == "a list of 2: 1, 2.5"
    assert show([[1, 2], [3]]) == "a list of 2: [1, 2], [3]"
    assert show(np.float64(0.25)) == "0.25" and show(np.int64(3)) == "3"
    assert show(()) == "an empty list"


def test_one_claim_at_one_scenario(runner, tmp_path) -> None:
    claims = tmp_path / "one.csv"
    claims.write_text("true_treatment,metric,claimed,replicates\n0.20,prob_success,0.047,\n")
    result = runner.invoke(main, ["verify", str(SINGLE), str(claims), "--out",
                                  str(tmp_path / "v")])
    assert result.exit_code == 0, result.output
    assert "single-arm-response: 1 claim at 1 scenario, recomputed" in result.stdout
    assert "The claim is consistent" in result.stdout


def test_one_subject_to_come(runner) -> None:
    # 44 of 45 subjects at look 2: one subject is still to come
    result = runner.invoke(main, ["decide", str(SINGLE), "--look", "2", "--data",
                                  "treatment=9/44"])
    assert result.exit_code == 0, result.output
    assert "(1 subject to come)" in result.stdout
    assert "1 subjects" not in result.stdout + result.stderr


def test_scenarios_short_of_the_target_are_listed_plainly(runner, tmp_path) -> None:
    result = runner.invoke(main, ["run", str(SINGLE), "--method", "monte-carlo",
                                  "--target-se", "0.0001", "--max-replicates", "200",
                                  "--out", str(tmp_path)])
    assert result.exit_code == 0, result.output
    assert "warning: scenarios 1, 2, 3, " in result.stderr
    assert "[" not in result.stderr


def test_arms_without_a_design_prior_in_words() -> None:
    from octrial.checks.model import DESIGN, model_for
    from octrial.plurals import series
    from tests.helpers import ONE_ARM, TWO_ARM, build

    assert series(["a", "b", "c"]) == "a, b and c"
    assert model_for(build(TWO_ARM)).cannot_draw(DESIGN) == (
        "no design prior on the treatment and control arms")
    assert model_for(build(ONE_ARM)).cannot_draw(DESIGN) == (
        "no design prior on the treatment arm")
