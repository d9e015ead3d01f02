"""Small designs built from Python dictionaries, shared by the tests."""

from __future__ import annotations

import copy
from pathlib import Path
from typing import Any

from octrial.design.load import parse_design
from octrial.design.model import Design, Source
from octrial.design.write import dumps

ROOT = Path(__file__).resolve().parents[1]
DESIGNS = ROOT / "designs"


def single_design_demos() -> list[Path]:
    """The demo design files of ``designs/`` that ``load_design`` reads: all but those
    with several treatment arms (tested by test_run_arms.py, test_report_arms.py and
    test_demo_reports.py)."""
    from octrial.review.arms_verification import several_arms

    return [p for p in sorted(DESIGNS.glob("*.toml")) if not several_arms(p)]

ONE_ARM: dict[str, Any] = {
    "schema": 1,
    "name": "one-arm-test",
    "endpoint": {"type": "binary", "better": "higher"},
    "hypothesis": {"benchmark": 0.2},
    "arms": {"treatment": {"prior": {"distribution": "beta", "a": 1, "b": 1}}},
    "looks": {"n": [10, 20, 30], "efficacy": [0.999, 0.99, 0.95], "futility": 0.05},
    "scenarios": {"treatment": [0.2, 0.3, 0.4]},
}

TWO_ARM: dict[str, Any] = {
    "schema": 1,
    "name": "two-arm-test",
    "endpoint": {"type": "binary", "better": "higher"},
    "hypothesis": {"comparison": "difference", "margin": 0.0, "kind": "superiority"},
    "arms": {
        "treatment": {"allocation": 1, "prior": {"distribution": "beta", "a": 1, "b": 1}},
        "control": {"allocation": 1, "prior": {"distribution": "beta", "a": 1, "b": 1}},
    },
    "looks": {"n": [20, 40], "efficacy": [0.99, 0.975], "futility": 0.1},
    "scenarios": {"control": [0.3], "effect": [0.0, 0.2]},
}


def build(base: dict[str, Any], **changes: Any) -> Design:
    """A design from ``base`` with dotted-key changes (value ``None`` deletes the key).

    The design's source text is the data written as TOML, as if read from a file.
    """
    data = changed(base, **changes)
    return parse_design(data, Source("test.toml", "", dumps(data)))


def changed(base: dict[str, Any], **changes: Any) -> dict[str, Any]:
    """A deep copy of ``base`` with ``a__b__c=value`` meaning key path a.b.c."""
    data = copy.deepcopy(base)
    for dotted, value in changes.items():
        *parents, last = dotted.split("__")
        node = data
        for key in parents:
            node = node.setdefault(key, {})
        if value is None:
            node.pop(last, None)
        else:
            node[last] = value
    return data
