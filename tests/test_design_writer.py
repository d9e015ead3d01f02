"""Writing design files: the serialiser reads back exactly, and edits keep the original's
comments (the reference is Python's own TOML reader, tomllib)."""

from __future__ import annotations

import tomllib

import pytest

from octrial.design.write import dumps, edited_text, value_text
from tests.helpers import DESIGNS, ONE_ARM, TWO_ARM


@pytest.mark.parametrize("data", [ONE_ARM, TWO_ARM, *(
    tomllib.loads(p.read_text()) for p in sorted(DESIGNS.glob("*.toml")))])
def test_dumps_reads_back(data) -> None:
    assert tomllib.loads(dumps(data)) == data


@pytest.mark.parametrize("value", [0.1, 1e-5, 1 - 1e-15, 0.9512345678901234, 3, "a \"q\" b",
                                   ["none", 0.5], {"function": "1 - lambda * t^eta",
                                                   "lambda": 0.05, "eta": 1.0}, True])
def test_values_read_back(value) -> None:
    assert tomllib.loads(f"x = {value_text(value)}")["x"] == value


def test_edit_keeps_comments_and_marks_changes() -> None:
    text = (DESIGNS / "single-arm-response.toml").read_text()
    data = tomllib.loads(text)
    data["looks"]["efficacy"] = ["none", 0.995, 0.96]
    del data["looks"]["futility_predictive"]
    data["looks"]["futility_count"] = 2  # any new key
    data["name"] = "renamed"
    out = edited_text(text, data, "looks", ["first line", "second line"])
    assert tomllib.loads(out) == data
    assert out.startswith("# first line\n# second line\n")
    assert "# weak prior centred on the benchmark" in out
    assert 'efficacy = ["none", 0.995, 0.96]  # calibrated; was ["none", 0.995, 0.95]' in out
    assert "futility_predictive" not in out
    assert "futility_count = 2  # added by calibration" in out


def test_edit_falls_back_to_a_fresh_file_for_layouts_it_does_not_follow() -> None:
    text = 'schema = 1\nlooks.n = [10, 20]\nlooks.efficacy = 0.9\n\n[endpoint]\ntype = "binary"\n'
    data = tomllib.loads(text)
    data["looks"]["efficacy"] = 0.95
    out = edited_text(text, data, "looks")
    assert tomllib.loads(out) == data
    assert "written afresh" in out
