"""The ``[conduct]`` table for binary, count and normal endpoints, and looks triggered by
enrolled subjects or calendar time: what each look plans to see, and bad input (exit
code 2 through ``octrial run``, the message naming the file and the key).

Planned counts are checked against closed forms worked by hand (common practice): under
even accrual at rate r from time 0 subject i is enrolled at i / r and observed lag later,
so by time t, floor(r (t - lag)) subjects have an outcome.
"""

from __future__ import annotations

from typing import Any

import pytest
from click.testing import CliRunner

from octrial.cli import main
from octrial.design.write import dumps
from tests.helpers import TWO_ARM, build, changed

CONDUCT = {"arrivals": "even", "enrolment_rate": 2.0, "max_enrolment": 40,
           "outcome_lag": 3.0}


def _design(conduct: dict[str, Any] | None = None, **looks: Any) -> dict[str, Any]:
    data = changed(TWO_ARM, conduct={**CONDUCT, **(conduct or {})})
    if looks:
        kept = {k: v for k, v in data["looks"].items() if k != "n"}
        data["looks"] = {**kept, **looks}
    return data


def test_looks_by_calendar_time_plan_the_outcomes_seen():
    design = build(_design(time=[13.0, 23.0]))
    # by 13: 2 x (13 - 3) = 20 outcomes; by 23: all 40
    assert design.looks.trigger == "time" and design.looks.at == (13.0, 23.0)
    assert design.looks.n == (20, 40) and design.looks.per_arm == ((10, 10), (20, 20))


def test_looks_by_enrolment_plan_the_outcomes_seen():
    design = build(_design(enrolled=[30, 40]))
    # 30 enrolled at 15: outcomes of those enrolled by 12, 24
    assert design.looks.n == (24, 34) and design.looks.per_arm == ((12, 12), (17, 17))
    assert design.conduct is not None and design.conduct.lag == 3.0


def test_random_conduct_plans_the_expected_schedule():
    design = build(_design({"arrivals": "poisson", "dropout_proportion": 0.1,
                            "dropout_by": 3.0}, time=[13.0, 23.0]))
    # expected outcomes by 13: 0.9 x 20 = 18; by 23: 0.9 x 40 = 36
    assert design.looks.n == (18, 36)
    assert design.conduct.dropout_hazard == pytest.approx(-__import__("math").log(0.9) / 3)


def test_looks_by_n_keep_their_meaning():
    design = build(_design())
    assert design.looks.trigger == "complete" and design.looks.n == (20, 40)


BAD = [
    (_design({"enrolment_rate": 0}), "conduct.enrolment_rate"),
    (_design({"enrolment_rate": -2}), "conduct.enrolment_rate"),
    (_design({"enrolment_rate": [1, 2], "period_starts": [0, 0]}), "conduct.period_starts"),
    (_design({"enrolment_rate": [1, 2], "period_starts": [2, 4]}), "conduct.period_starts"),
    (_design(time=[2.0, 23.0]), "conduct.outcome_lag"),          # no outcome by 2
    (_design(time=[13.0, 24.0]), "looks.time[2]"),               # last outcome at 23
    (_design(enrolled=[30, 50]), "looks.enrolled[2]"),           # above max_enrolment
    (_design({"dropout_hazard": 0.1}), "looks.n[2]"),            # 40 of 40 with dropout
    (_design(n=[20, 50]), "looks.n[2]"),
    (_design({"arrivals": None, "enrolment_rate": None, "enrolment_times": [0, 1, 2]}),
     "conduct.enrolment_times"),                                  # fewer than 40 times
    (_design({"arrivals": None, "enrolment_rate": None,
              "enrolment_times": [float(40 - i) for i in range(40)]}),
     "conduct.enrolment_times"),                                  # decreasing
    (_design(time=[13.0, 13.1]), "looks.time[2]"),               # no new outcome
    (_design(time=[13.0, 12.0]), "looks.time"),
    (_design(events=[10, 20]), "looks.events"),
    (_design(n=[20, 40], enrolled=[30, 40]), "looks.enrolled"),
    (_design({"analyse_pipeline": "yes"}), "conduct.analyse_pipeline"),
    (_design({"dropout_proportion": 1.0, "dropout_by": 6}), "conduct.dropout_proportion"),
    (_design({"outcome_lag": -1}), "conduct.outcome_lag"),
    (_design({"max_enrolment": 0}), "conduct.max_enrolment"),
    ({**changed(TWO_ARM), "looks": {**{k: v for k, v in TWO_ARM["looks"].items()
                                       if k != "n"}, "time": [5.0, 10.0]}}, "looks.time"),
]


@pytest.mark.parametrize(("data", "key"), BAD, ids=[f"{i}-{k}" for i, (_, k) in
                                                     enumerate(BAD)])
def test_bad_input_exits_2_naming_file_and_key(data: dict[str, Any], key: str,
                                               tmp_path: Any) -> None:
    data = {k: v for k, v in data.items()}
    if "conduct" in data:
        data["conduct"] = {k: v for k, v in data["conduct"].items() if v is not None}
    path = tmp_path / "design.toml"
    path.write_text(dumps(data))
    out = tmp_path / "out"
    result = CliRunner().invoke(main, ["run", str(path), "--out", str(out), "--quiet"])
    assert result.exit_code == 2, result.output
    assert f"design.toml: {key}" in result.output, result.output
    assert "expected" in result.output
    assert not out.exists()
