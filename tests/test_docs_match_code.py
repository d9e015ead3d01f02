"""Statements of docs/ checked against what the code does (issue 12, item 4): two-arm
unknown-sd designs take predictive futility, and interim decisions exist for every
endpoint."""

from __future__ import annotations

import re

from octrial.interim import decide
from tests.helpers import ROOT, build
from tests.test_decide_endpoints import COUNT_TWO_ARM, NORMAL_ONE_ARM, UNKNOWN_TWO_ARM

DOCS = [*sorted((ROOT / "docs").glob("*.md")), ROOT / "README.md"]


def words(path) -> str:
    return " ".join(path.read_text().split())


def test_two_arm_unknown_sd_predictive_futility_is_documented_as_it_works() -> None:
    design = build(UNKNOWN_TWO_ARM)
    assert design.looks.futility_predictive[0] is not None  # the design is accepted
    result = decide(design, 1, ["treatment=45,12,30", "control=40,12,30"])
    assert result.assessment.predictive is not None
    assert result.assessment.predictive_se > 0  # by Monte Carlo, with its error
    for path in DOCS:
        text = words(path)
        assert not re.search(r"unknown sd cannot use predictive futility", text), path
        assert not re.search(r"[Tt]wo arms with an unknown sd cannot", text), path


def test_decisions_for_count_and_normal_endpoints_are_documented_as_given() -> None:
    for spec, data in ((COUNT_TWO_ARM, ["treatment=10/7.5", "control=15/7.5"]),
                       (NORMAL_ONE_ARM, ["treatment=9.0,3.0,20"])):
        assert decide(build(spec), 1, data).assessment.decision
    for path in DOCS:
        assert "arrive with the endpoints" not in words(path), path
