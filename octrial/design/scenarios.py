"""The ``[scenarios]`` table: true parameter values to evaluate the design at.

Each arm's values are a list of numbers or a range ``{ from, to, step }`` (both ends
included). One arm: ``treatment``. Two arms: ``control`` with either ``treatment`` (the
full control x treatment grid) or ``effect`` (control x effect, treatment = control +
effect); grid points outside the parameter's range are left out and counted.
"""

from __future__ import annotations

import math

from octrial.design.model import CONTROL, TREATMENT, Scenarios
from octrial.design.reader import Phrase, Table
from octrial.endpoints.base import Family

DECIMALS = 12
"""Generated values are rounded to this many decimals, so 0.1 + 2 x 0.1 prints as 0.3."""


def read_values(table: Table, key: str) -> list[float] | None:
    """A list of numbers or a ``{ from, to, step }`` range at ``key``."""
    raw = table.raw(key, "a list of numbers or a table { from, to, step }", required=True)
    if raw is None:
        return None
    if isinstance(raw, dict):
        rng = table.table(key)
        rng.allow("from", "to", "step")
        start = rng.number("from")
        stop = rng.number("to")
        step = rng.number("step", check=lambda v: v > 0, expected="a number > 0")
        if start is None or stop is None or step is None:
            return None
        if stop < start:
            rng.fail("to", f"a number >= from ({start:g})", stop)
            return None
        count = math.floor((stop - start) / step + 1e-9) + 1
        if count > 100_000:
            rng.fail("step", "a step giving at most 100000 values", step)
            return None
        return [round(start + i * step, DECIMALS) for i in range(count)]
    if isinstance(raw, list):
        if not raw:
            table.fail(key, "a non-empty list of numbers", Phrase("an empty list"))
            return None
        values = table.numbers(key)
        return None if values is None or any(v is None for v in values) else list(values)
    table.fail(key, "a list of numbers or a table { from, to, step }", raw)
    return None


def _check(table: Table, key: str, values: list[float], family: Family) -> bool:
    ok = True
    for i, v in enumerate(values):
        problem = family.true_value_problem(v)
        if problem:
            table.problems.add(f"{table.key(key)}[{i + 1}]", problem, v)
            ok = False
    return ok


def read_scenarios(table: Table, family: Family, two_arm: bool) -> Scenarios | None:
    """Read ``[scenarios]`` for a one- or two-arm design."""
    if not two_arm:
        table.allow(TREATMENT)
        values = read_values(table, TREATMENT)
        if values is None or not _check(table, TREATMENT, values, family):
            return None
        return Scenarios((TREATMENT,), tuple((v,) for v in values))

    table.allow(CONTROL, TREATMENT, "effect")
    if table.has(TREATMENT) == table.has("effect"):
        table.fail(TREATMENT, "exactly one of 'treatment' or 'effect' beside 'control'",
                   Phrase("both" if table.has(TREATMENT) else "neither"))
        return None
    control = read_values(table, CONTROL)
    if control is None or not _check(table, CONTROL, control, family):
        return None
    if table.has(TREATMENT):
        treatment = read_values(table, TREATMENT)
        if treatment is None or not _check(table, TREATMENT, treatment, family):
            return None
        rows = [(t, c) for c in control for t in treatment]
        return Scenarios((TREATMENT, CONTROL), tuple(rows))
    effects = read_values(table, "effect")
    if effects is None:
        return None
    rows, dropped = [], 0
    for c in control:
        for e in effects:
            t = round(c + e, DECIMALS)
            if family.true_value_problem(t) is None:
                rows.append((t, c))
            else:
                dropped += 1
    if not rows:
        table.fail("effect", "effects that keep control + effect a valid "
                   f"{family.parameter}", Phrase("no valid combination"))
        return None
    return Scenarios((TREATMENT, CONTROL), tuple(rows), dropped)

