"""The committed demo reports are what the code computes now.

reports/<name>/ holds the results of every demo design in designs/ (oc.csv,
boundaries.csv, run.json). Each is compared with a fresh evaluation of the design file:
every column of oc.csv and boundaries.csv as written text (17 significant digits, so
equal text is equal to the last bit), the design file's SHA-256 and the numbers run.json
adds (maximum type I error, assurance, prior probability of the claim). Simulated demos
are seeded in their files, so they must match exactly too (the unknown-sd demo, 9
scenarios of 20,000 studies and its simulated assurance, takes about 2 s). When this
fails after an intended change of numbers, run `bash reports/regenerate.sh` and commit.
"""

from __future__ import annotations

import io
import json
from pathlib import Path

import pandas as pd
import pytest

import octrial
from octrial.evaluation import compute
from octrial.output import csv_text
from octrial.review.arms_verification import several_arms
from tests.helpers import DESIGNS, ROOT

REGENERATE = "stale committed report: run `bash reports/regenerate.sh` and commit"
NUMBERS = ("type1", "assurance", "prior_probability_of_claim", "bayesian_operating_characteristics")


def as_text(csv: str) -> pd.DataFrame:
    return pd.read_csv(io.StringIO(csv), dtype=str, keep_default_na=False)


@pytest.mark.parametrize("path", sorted(DESIGNS.glob("*.toml")), ids=lambda p: p.stem)
def test_committed_report_equals_a_fresh_evaluation(path: Path) -> None:
    if several_arms(path):
        check_several_arms(path)
        return
    design = octrial.load_design(path)
    folder = ROOT / "reports" / design.name
    record = json.loads((folder / "run.json").read_text())
    assert record["design"]["sha256"] == design.source.sha256, REGENERATE
    evaluation = compute(design)
    fresh = {"oc.csv": evaluation.oc, "boundaries.csv": evaluation.boundaries}
    for name, table in fresh.items():
        if table is None:
            assert not (folder / name).exists(), REGENERATE
            continue
        committed = as_text((folder / name).read_text())
        try:
            pd.testing.assert_frame_equal(as_text(csv_text(table)), committed, obj=name)
        except AssertionError as exc:
            raise AssertionError(f"{REGENERATE}\n{exc}") from None
    now = json.loads(json.dumps({key: evaluation.info[key] for key in NUMBERS}))
    assert now == {key: record[key] for key in NUMBERS}, REGENERATE
    assert len(evaluation.oc) > 0 and "prob_success" in evaluation.oc


def check_several_arms(path: Path) -> None:
    """A several-arm demo (designs/dose-ranging.toml): its committed run folder against
    a fresh evaluation by the same engine."""
    from octrial.arms_evaluation import compute_arms
    from octrial.multiarm.load import load_multiarm

    design = load_multiarm(path)
    folder = ROOT / "reports" / design.name
    record = json.loads((folder / "run.json").read_text())
    assert record["design"]["sha256"] == design.source.sha256, REGENERATE
    evaluation = compute_arms(design)
    for name, table in {"oc.csv": evaluation.oc, "boundaries.csv": evaluation.boundaries}.items():
        committed = as_text((folder / name).read_text())
        assert table is not None
        try:
            pd.testing.assert_frame_equal(as_text(csv_text(table)), committed, obj=name)
        except AssertionError as exc:
            raise AssertionError(f"{REGENERATE}\n{exc}") from None
    now = json.loads(json.dumps({k: evaluation.info[k] for k in ("type1", "type1_per_arm")}))
    assert now == {k: record[k] for k in ("type1", "type1_per_arm")}, REGENERATE
