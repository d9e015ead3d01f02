"""Every family's prior keys, checked from its constraint table
(:class:`octrial.endpoints.schema.PriorSchema`): for each distribution and each numeric
key, a value that breaks the constraint is refused with a DesignError naming the key path
(common practice: the error names what to fix), and the table's valid example raises no
problem at that key. A new family's table is checked here without new test code; it only
needs a small design below (the prior sits at ``arms.treatment.prior``).
"""

from __future__ import annotations

import math
from typing import Any

import pytest

from octrial.design.reader import LARGEST, PRIOR_SIZE
from octrial.endpoints import FAMILIES
from octrial.endpoints.schema import Components, Number
from octrial.errors import DesignError
from tests.helpers import ONE_ARM, build

BASES: dict[str, dict[str, Any]] = {
    "binary": {},
    "count": {"endpoint": {"type": "count", "better": "lower"},
              "hypothesis": {"benchmark": 1.0}, "scenarios": {"treatment": [0.5, 1.0]}},
    "normal": {"endpoint": {"type": "normal", "better": "higher", "sd": 2.0},
               "hypothesis": {"benchmark": 0.0}, "scenarios": {"treatment": [0.0, 1.0]}},
    "time-to-event": {"endpoint": {"type": "time-to-event"},
                      "hypothesis": {"benchmark": 0.1},
                      "scenarios": {"treatment": [0.05, 0.1]}},
}
"""Per family: changes to tests.helpers.ONE_ARM giving a small design of it."""

CANDIDATES = (-1.0, 0.0, 2 * PRIOR_SIZE, "x", 10 * LARGEST)
"""Values tried against each constraint; those that break it are the bad inputs."""


def _cases() -> list[tuple[str, str, str, str | None]]:
    cases = []
    for name, family in FAMILIES.items():
        schema = getattr(family, "prior_schema", None)
        if schema is None:
            continue
        for kind, distribution in schema.distributions.items():
            for c in distribution.keys:
                if isinstance(c, Components):
                    cases += [(name, kind, c.first.key, c.key), (name, kind, c.second.key, c.key)]
                else:
                    cases.append((name, kind, c.key, None))
    return cases


def _constraint(name: str, kind: str, key: str, within: str | None) -> Number:
    distribution = FAMILIES[name].prior_schema.distributions[kind]
    for c in distribution.keys:
        if isinstance(c, Components) and within == c.key:
            return c.first if c.first.key == key else c.second
        if isinstance(c, Number) and c.key == key:
            return c
    raise KeyError(key)


def _breaks(number: Number, value: object) -> bool:
    if isinstance(value, str) or not math.isfinite(value) or abs(value) > LARGEST:
        return True
    return number.check is not None and not number.check(value)


def _problems(name: str, kind: str, table: dict[str, Any]) -> list[str]:
    prior = {"distribution": kind, **table}
    data = {**ONE_ARM, **BASES[name], "arms": {"treatment": {"prior": prior}}}
    try:
        build(data)
    except DesignError as error:
        return [p.key for p in error.problems]
    return []


@pytest.mark.parametrize(("name", "kind", "key", "within"), _cases())
def test_every_prior_key_refuses_what_breaks_its_constraint(name, kind, key, within) -> None:
    if name not in BASES:
        pytest.fail(f"family {name!r} needs a small design in BASES")
    number = _constraint(name, kind, key, within)
    example = FAMILIES[name].prior_schema.distributions[kind].example()
    path = (f"arms.treatment.prior.{within}[1].{key}" if within
            else f"arms.treatment.prior.{key}")
    assert path not in _problems(name, kind, example)
    bad = [v for v in CANDIDATES if _breaks(number, v)]
    assert bad, f"no candidate breaks {key}"
    for value in bad:
        table = dict(example)
        if within:
            table[within] = [{**example[within][0], key: value}]
        else:
            table[key] = value
        assert path in _problems(name, kind, table), (key, value)


@pytest.mark.parametrize("name", sorted(FAMILIES))
def test_an_unknown_distribution_is_refused_with_the_known_ones(name) -> None:
    data = {**ONE_ARM, **BASES[name],
            "arms": {"treatment": {"prior": {"distribution": "no-such"}}}}
    with pytest.raises(DesignError) as caught:
        build(data)
    text = str(caught.value)
    assert "arms.treatment.prior.distribution" in text
    assert all(f"'{kind}'" in text for kind in FAMILIES[name].prior_schema.distributions)
