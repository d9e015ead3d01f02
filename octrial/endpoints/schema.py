"""A family's design-file keys as a table of constraints.

Each prior distribution a family accepts is one :class:`Distribution`: its keys, each a
:class:`Number` (what it must be, in words and as a check, and a valid example) or
:class:`Components` (a mixture), and how the values become the prior. One reader,
:func:`read_distribution`, applies any such table through :class:`~octrial.design.reader.Table`,
so every problem has the one form ``KEY: expected X; got Y``; the same table gives the
tests their bad inputs (``tests/test_family_schemas.py``), so a new family's keys are
checked without new test code.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

from octrial.design.reader import PRIOR_SIZE, Table
from octrial.endpoints.mixtures import read_components


@dataclass(frozen=True)
class Number:
    """One numeric key.

    Parameters
    ----------
    key : str
    expected : str
        What the key must hold, in words (the message's 'expected').
    check : callable, optional
        ``check(value)`` is true for a valid value (beyond being a finite number).
    example : float
        A valid value (tests build valid tables from it).
    """

    key: str
    expected: str = "a number"
    check: Callable[[float], bool] | None = None
    example: float = 1.0

    def read(self, table: Table, key: str | None = None) -> float | None:
        """The value at this key of ``table`` (``key`` overrides the name), recording any
        problem."""
        return table.number(key or self.key, check=self.check, expected=self.expected)


def positive(key: str, expected: str = "a number > 0", example: float = 1.0) -> Number:
    """A number > 0."""
    return Number(key, expected, lambda v: v > 0, example)


def prior_size(key: str, expected: str = f"a number > 0 and at most {PRIOR_SIZE:g}",
               example: float = 2.0) -> Number:
    """A number in (0, PRIOR_SIZE]: a prior worth at most that many subjects."""
    return Number(key, expected, lambda v: 0 < v <= PRIOR_SIZE, example)


@dataclass(frozen=True)
class Components:
    """A mixture: ``components = [{weight, first, second}, ...]`` with weights summing to
    1 (:func:`~octrial.endpoints.mixtures.read_components`)."""

    first: Number
    second: Number
    key: str = "components"


Constraint = Number | Components


@dataclass(frozen=True)
class Distribution:
    """One ``distribution = '...'`` of a prior table: its keys and how their values make
    the prior (``build`` gets the values by key; a mixture's as (weights, firsts,
    seconds) under ``'components'``)."""

    keys: tuple[Constraint, ...]
    build: Callable[[dict[str, Any]], Any]

    def example(self) -> dict[str, Any]:
        """A valid table of this distribution's keys (without ``distribution``)."""
        out: dict[str, Any] = {}
        for c in self.keys:
            if isinstance(c, Components):
                out[c.key] = [{"weight": 1.0, c.first.key: c.first.example,
                               c.second.key: c.second.example}]
            else:
                out[c.key] = c.example
        return out


def with_mixture(name: str, first: Number, second: Number,
                 build: Callable[..., Any]) -> dict[str, Distribution]:
    """``'<name>'`` and ``'<name>-mixture'``: a two-parameter prior and mixtures of it,
    both made by ``build(weights, firsts, seconds)`` (one component for the plain one)."""
    return {
        name: Distribution((first, second), lambda v: build(
            (1.0,), (float(v[first.key]),), (float(v[second.key]),))),
        f"{name}-mixture": Distribution((Components(first, second),),
                                        lambda v: build(*v["components"])),
    }


@dataclass(frozen=True)
class PriorSchema:
    """Every distribution a family's prior tables accept, and the keys any of them may add
    (``extra``: borrowing, read by the family)."""

    distributions: Mapping[str, Distribution]
    extra: tuple[str, ...] = field(default=("historical", "borrowing"))


def read_distribution(table: Table, schema: PriorSchema) -> tuple[str | None, Any]:
    """Read a prior table by its ``distribution`` key: (the name, the prior), with
    ``None`` for what had problems (recorded in ``table``)."""
    kind = table.string("distribution", tuple(schema.distributions))
    if kind is None:
        return None, None
    distribution = schema.distributions[kind]
    table.allow("distribution", *(c.key for c in distribution.keys), *schema.extra)
    values: dict[str, Any] = {}
    for c in distribution.keys:
        if isinstance(c, Components):
            values[c.key] = read_components(table, (c.first.key, c.second.key),
                                            (c.first.read, c.second.read))
        else:
            values[c.key] = c.read(table)
    if any(v is None for v in values.values()):
        return kind, None
    return kind, distribution.build(values)
