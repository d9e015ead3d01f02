"""How numbers are written in reports and exported tables (one place, so the HTML, the
CSV, the Markdown and the LaTeX tables show the same strings).

Probabilities get four decimals; values that would round to 0 or 1 without being 0 or 1
are written ``<0.0001`` and ``>0.9999``, so a reader never mistakes a small probability
for an impossible event. Sample sizes get one decimal, true values up to six significant
digits.
"""

from __future__ import annotations

import math
from typing import TypeGuard

PROBABILITY_DECIMALS = 4
SIZE_DECIMALS = 1
_SMALLEST = 0.5 * 10.0**-PROBABILITY_DECIMALS
MISSING = "–"


def _missing(value: object) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value))


def _present(value: float | None) -> TypeGuard[float]:
    """Whether ``value`` is a number to show (not None, not NaN)."""
    return not _missing(value)


def probability(value: float | None) -> str:
    """A probability with four decimals, ``<0.0001``/``>0.9999`` near the ends.

    Examples
    --------
    >>> probability(0.046692), probability(2e-8), probability(0.0), probability(1 - 1e-9)
    ('0.0467', '<0.0001', '0', '>0.9999')
    """
    if not _present(value):
        return MISSING
    v = float(value)
    if v == 0.0 or v == 1.0:
        return f"{v:.0f}"
    if v < _SMALLEST:
        return "<0.0001"
    if v > 1.0 - _SMALLEST:
        return ">0.9999"
    return f"{v:.{PROBABILITY_DECIMALS}f}"


def size(value: float | None) -> str:
    """A sample size (expected value or sd) with one decimal."""
    return f"{float(value):.{SIZE_DECIMALS}f}" if _present(value) else MISSING


def count(value: float | None) -> str:
    """A whole number."""
    return f"{int(value)}" if _present(value) else MISSING


def truth(value: float | None) -> str:
    """A true parameter value or threshold: up to six significant digits."""
    if not _present(value):
        return MISSING
    text = f"{float(value):.6g}"
    return "0" if text == "-0" else text


def fraction(value: float | None) -> str:
    """A fraction such as the information fraction: three significant digits."""
    return f"{float(value):.3g}" if _present(value) else MISSING


def number(value: object) -> str:
    """Any value of a table whose meaning the report does not know (calibration, checks)."""
    if _missing(value):
        return MISSING
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if value.is_integer() and abs(value) < 1e15:
            return str(int(value))
        return f"{value:.4g}" if abs(value) < 1e-3 or abs(value) >= 1e5 else f"{value:.4f}"
    return str(value)


def parse(text: str) -> float:
    """Read back a number written by this module (``<0.0001`` reads as 0.0001)."""
    return float(text.lstrip("<>"))


FORMATS = {"probability": probability, "size": size, "count": count, "truth": truth,
           "fraction": fraction, "number": number}
"""Formatter by column kind."""

TOLERANCE = {"probability": _SMALLEST, "size": 0.5 * 10.0**-SIZE_DECIMALS, "count": 0.0}
"""Largest difference between a written value and the number it stands for, by kind."""
