"""Mixture priors written as ``components = [{ weight, ... }, ...]``, shared by families.

Every family's mixture prior (beta, gamma, normal) is read and described the same way;
only the two parameters of a component differ.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

from octrial.design.reader import Phrase, Table

WEIGHT_TOLERANCE = 1e-9
"""Component weights must sum to 1 within this."""


def read_components(
    table: Table, keys: tuple[str, str], readers: tuple[Callable[[Table, str], Any], ...],
) -> tuple[tuple[float, ...], tuple[float, ...], tuple[float, ...]] | None:
    """Read ``components`` into (weights, first parameters, second parameters).

    Parameters
    ----------
    table : Table
        The prior table holding ``components``.
    keys : (str, str)
        The component's two parameter keys, for example ('a', 'b').
    readers : (callable, callable)
        Each reads one parameter from a component table, recording problems.

    Returns
    -------
    tuple or None
        ``None`` when a problem was recorded.
    """
    parts = table.sub_tables("components")
    if parts is None:
        return None
    read = []
    for part in parts:
        part.allow("weight", *keys)
        w = part.number("weight", check=lambda v: 0 < v <= 1, expected="a weight in (0, 1]")
        read.append((w, *(reader(part, key) for reader, key in zip(readers, keys,
                                                                    strict=True))))
    if any(v is None for r in read for v in r):
        return None
    total = sum(r[0] for r in read)
    if abs(total - 1.0) > WEIGHT_TOLERANCE:
        table.fail("components", "weights summing to 1", Phrase(f"a sum of {total:g}"))
        return None
    weights, first, second = zip(*read, strict=True)
    return tuple(weights), tuple(first), tuple(second)


def describe(weights: Sequence[float], parts: Sequence[str], borrowing: Any = None) -> str:
    """'Beta(2, 8)' or '0.8 x Beta(...) + 0.2 x Beta(...)', with any borrowing appended."""
    text = parts[0] if len(parts) == 1 else " + ".join(
        f"{w:.6g} x {p}" for w, p in zip(weights, parts, strict=True))
    return text if borrowing is None else f"{text} ({borrowing.describe()})"
