"""The ``[scenarios]`` table: true parameter values to evaluate the design at.

Each arm's values are a list of numbers or a range ``{ from, to, step }`` (both ends
included). One arm: ``treatment``. Two arms: ``control`` with either ``treatment`` (the
full control x treatment grid) or a shift of the control value on the scale of one of the
family's comparisons: ``effect`` (treatment = control + effect), ``ratio`` (treatment =
control x ratio) or ``odds_ratio``; grid points outside the parameter's range are left
out and counted. A shift that no control value can make valid (a ratio or odds ratio
<= 0) is an error, not a row left out.
"""

from __future__ import annotations

import math

from octrial.design.model import CONTROL, TREATMENT, Scenarios
from octrial.design.reader import Phrase, Table
from octrial.endpoints.base import SCENARIO_AXES, Family

DECIMALS = 12
"""Generated values are rounded to this many decimals, so 0.1 + 2 x 0.1 prints as 0.3."""

MAX_SCENARIOS = 100_000
"""Most scenarios a design may have (values of a range, and rows of the grid of two
arms' values); docs/design-files.md, 'Limits'."""

POSITIVE_SHIFTS = ("ratio", "odds_ratio")
"""Shifts that are ratios: only values > 0 mean anything."""


def read_values(table: Table, key: str) -> list[float] | None:
    """A list of numbers or a ``{ from, to, step }`` range at ``key``."""
    raw = table.raw(key, "a list of numbers or a table { from, to, step }", required=True)
    if raw is None:
        return None
    if isinstance(raw, dict):
        rng = Table(raw, table.key(key), table.problems)
        rng.allow("from", "to", "step")
        start = rng.number("from")
        stop = rng.number("to")
        step = rng.number("step", check=lambda v: v > 0, expected="a number > 0")
        if start is None or stop is None or step is None:
            return None
        if stop < start:
            rng.fail("to", f"a number >= from ({start:g})", stop)
            return None
        span = (stop - start) / step
        # (to - from) / step overflows to inf for extreme ends: count that as too many
        if not span < MAX_SCENARIOS:
            rng.fail("step", f"a step giving at most {MAX_SCENARIOS} values", step)
            return None
        count = math.floor(span + 1e-9) + 1
        return [round(start + i * step, DECIMALS) for i in range(count)]
    if isinstance(raw, list):
        if not raw:
            table.fail(key, "a non-empty list of numbers", Phrase("an empty list"))
            return None
        if len(raw) > MAX_SCENARIOS:
            table.fail(key, f"at most {MAX_SCENARIOS} values", Phrase(f"{len(raw)} values"))
            return None
        values = table.numbers(key)
        if values is None:
            return None
        found = [v for v in values if v is not None]
        return found if len(found) == len(values) else None
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


def _grid_fits(table: Table, key: str, controls: int, others: int) -> bool:
    """Whether the control x ``key`` grid has at most MAX_SCENARIOS rows (recorded if not)."""
    if controls * others <= MAX_SCENARIOS:
        return True
    table.fail(key, f"at most {MAX_SCENARIOS} scenarios in all (reduce the control or "
               f"{key} values)", Phrase(f"{controls} x {others} = {controls * others}"))
    return False


def read_scenarios(table: Table, family: Family, two_arm: bool) -> Scenarios | None:
    """Read ``[scenarios]`` for a one- or two-arm design."""
    if not two_arm:
        table.allow(TREATMENT)
        values = read_values(table, TREATMENT)
        if values is None or not _check(table, TREATMENT, values, family):
            return None
        return Scenarios((TREATMENT,), tuple((v,) for v in values))

    axes = {SCENARIO_AXES[c][0]: SCENARIO_AXES[c][1] for c in family.comparisons}
    table.allow(CONTROL, TREATMENT, *axes)
    given = [key for key in (TREATMENT, *axes) if table.has(key)]
    if len(given) != 1:
        table.fail(TREATMENT, "exactly one of " + ", ".join(f"'{k}'" for k in (TREATMENT, *axes))
                   + " beside 'control'", Phrase(" and ".join(given) if given else "none"))
        return None
    control = read_values(table, CONTROL)
    if control is None or not _check(table, CONTROL, control, family):
        return None
    if table.has(TREATMENT):
        treatment = read_values(table, TREATMENT)
        if treatment is None or not _check(table, TREATMENT, treatment, family):
            return None
        if not _grid_fits(table, TREATMENT, len(control), len(treatment)):
            return None
        rows = [(t, c) for c in control for t in treatment]
        return Scenarios((TREATMENT, CONTROL), tuple(rows))
    (axis,) = given
    shifts = read_values(table, axis)
    if shifts is None or not _grid_fits(table, axis, len(control), len(shifts)):
        return None
    if axis in POSITIVE_SHIFTS:
        bad = [(i, v) for i, v in enumerate(shifts) if not v > 0]
        for i, v in bad:
            table.problems.add(f"{table.key(axis)}[{i + 1}]", "a ratio > 0", v)
        if bad:
            return None
    rows, dropped = [], 0
    for c in control:
        for e in shifts:
            try:
                t = round(axes[axis](c, e), DECIMALS)
            except (ArithmeticError, ValueError):
                t = math.nan
            if math.isfinite(t) and family.true_value_problem(t) is None:
                rows.append((t, c))
            else:
                dropped += 1
    if not rows:
        table.fail(axis, f"values that keep the treatment {family.parameter} valid",
                   Phrase("no valid combination"))
        return None
    return Scenarios((TREATMENT, CONTROL), tuple(rows), dropped)
