"""Typed access to a parsed TOML table that records every problem instead of raising.

A :class:`Table` wraps one TOML table and its key path. Each accessor returns the value,
or ``None`` after recording a :class:`~octrial.errors.Problem` when the value is missing or
of the wrong kind, so loading can continue and report everything wrong in one pass.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Callable, Iterable
from typing import Any

from octrial.errors import Problem, show

NONE_WORD = "none"
"""The word that marks 'no threshold at this look' inside a per-look list."""

LARGEST = 1e12
"""Largest magnitude of a number in a design file (the seed excepted): beyond it sums,
products and powers of the numbers overflow or lose every digit (docs/design-files.md,
'Limits')."""

SMALLEST = 1e-12
"""Smallest magnitude of a non-zero number in a design file: below it divisions by the
number overflow."""


PRIOR_SIZE = 1e6
"""Largest shape parameter or prior sample size (a prior, or historical data, worth at
most a million subjects): beyond it a prior's variance is lost to rounding and its
effective sample size divides by zero."""


def in_range(value: float) -> bool:
    """Whether ``value`` is 0 or of magnitude in [SMALLEST, LARGEST]."""
    return value == 0 or SMALLEST <= abs(value) <= LARGEST


def suggest(word: str, valid: Iterable[str]) -> str:
    """Return a 'did you mean' hint for ``word`` among ``valid`` keys, or ``''``."""
    close = difflib.get_close_matches(word, list(valid), n=1, cutoff=0.6)
    return f"did you mean '{close[0]}'?" if close else ""


def is_number(value: object) -> bool:
    """True for TOML integers and floats (booleans are not numbers here)."""
    return isinstance(value, int | float) and not isinstance(value, bool)


class Phrase(str):
    """A found value already put into words (not quoted when shown)."""


class Problems(list[Problem]):
    """The problems found so far in one file."""

    def add(self, key: str, expected: str, got: object, hint: str = "") -> None:
        """Record a problem; ``got`` is shown as a value unless it is a :class:`Phrase`."""
        self.append(Problem(key, expected, got if isinstance(got, Phrase) else show(got), hint))


class Table:
    """One TOML table, its dotted path and the shared problem list.

    Parameters
    ----------
    data : dict
        The parsed table.
    path : str
        Its dotted key path ('' for the top level).
    problems : Problems
        Where problems are recorded.
    """

    def __init__(self, data: dict[str, Any], path: str, problems: Problems) -> None:
        self.data = data
        self.path = path
        self.problems = problems

    def key(self, name: str) -> str:
        """The dotted path of ``name`` inside this table."""
        return f"{self.path}.{name}" if self.path else name

    def has(self, name: str) -> bool:
        """Whether ``name`` is present."""
        return name in self.data

    def allow(self, *names: str) -> None:
        """Record every key not in ``names`` as unknown, with the nearest valid key."""
        for name in self.data:
            if name not in names:
                self.problems.add(
                    self.key(name), "one of the keys " + ", ".join(names), Phrase("an unknown key"),
                    suggest(name, names),
                )

    def fail(self, name: str, expected: str, got: object, hint: str = "") -> None:
        """Record a problem at ``name``."""
        self.problems.add(self.key(name), expected, got, hint)

    def raw(self, name: str, expected: str, required: bool) -> Any:
        """The raw value at ``name``; records 'missing' when required and absent."""
        if name not in self.data:
            if required:
                self.problems.add(self.key(name), expected, Phrase("nothing (the key is missing)"))
            return None
        return self.data[name]

    def table(self, name: str, required: bool = True) -> Table | None:
        """The sub-table at ``name``."""
        value = self.raw(name, "a table", required)
        if value is None:
            return None
        if not isinstance(value, dict):
            self.fail(name, "a table", value)
            return None
        return Table(value, self.key(name), self.problems)

    def string(
        self, name: str, choices: tuple[str, ...] | None = None, *, required: bool = True,
        default: str | None = None,
    ) -> str | None:
        """A string, optionally one of ``choices``."""
        expected = "one of " + ", ".join(f"'{c}'" for c in choices) if choices else "a string"
        value = self.raw(name, expected, required)
        if value is None:
            return default
        if not isinstance(value, str) or (choices and value not in choices):
            hint = suggest(value, choices) if isinstance(value, str) and choices else ""
            self.fail(name, expected, value, hint)
            return None
        return value

    def number(
        self, name: str, *, required: bool = True, default: float | None = None,
        check: Callable[[float], bool] | None = None, expected: str = "a number",
        integer: bool = False, bounded: bool = True,
    ) -> float | None:
        """A number satisfying ``check`` (described by ``expected``); unless ``bounded``
        is false, also 0 or of magnitude in [SMALLEST, LARGEST]."""
        value = self.raw(name, expected, required)
        if value is None:
            return default
        return self._number(self.key(name), value, check, expected, integer, bounded)

    def _number(
        self, key: str, value: Any, check: Callable[[float], bool] | None, expected: str,
        integer: bool, bounded: bool = True,
    ) -> float | None:
        # TOML integers are unbounded: compare before any conversion to float overflows
        ok = is_number(value) and (isinstance(value, int) or math.isfinite(value))
        if ok and bounded and not in_range(value):
            self.problems.add(key, f"{expected}, 0 or of magnitude from {SMALLEST:g} to "
                              f"{LARGEST:g}", value)
            return None
        if ok and integer:
            ok = isinstance(value, int) or float(value).is_integer()
        if ok and check is not None:
            ok = check(value)
        if not ok:
            self.problems.add(key, expected, value)
            return None
        return int(value) if integer else float(value)

    def numbers(
        self, name: str, *, required: bool = True, check: Callable[[float], bool] | None = None,
        expected: str = "a number", integer: bool = False, allow_none: bool = False,
        length: int | None = None,
    ) -> list[float | None] | None:
        """A non-empty list of numbers (entries may be ``'none'`` when ``allow_none``)."""
        what = f"a list of {expected}" + (f" (or '{NONE_WORD}')" if allow_none else "")
        if length is not None:
            what = f"{what} with {length} entries"
        value = self.raw(name, what, required)
        if value is None:
            return None
        if not isinstance(value, list) or not value:
            self.fail(name, what, value)
            return None
        if length is not None and len(value) != length:
            self.fail(name, what, Phrase(f"{len(value)} entries"))
            return None
        out: list[float | None] = []
        for i, item in enumerate(value):
            key = f"{self.key(name)}[{i + 1}]"
            if allow_none and item == NONE_WORD:
                out.append(None)
            else:
                out.append(self._number(key, item, check, expected, integer))
        return out

    def sub_tables(self, name: str, required: bool = True) -> list[Table] | None:
        """A non-empty array of tables at ``name``."""
        value = self.raw(name, "a list of tables", required)
        if value is None:
            return None
        if not isinstance(value, list) or not value or not all(isinstance(v, dict) for v in value):
            self.fail(name, "a non-empty list of tables", value)
            return None
        return [Table(v, f"{self.key(name)}[{i + 1}]", self.problems) for i, v in enumerate(value)]
