"""Counts in plain English: ``1 scenario``, ``2 scenarios``, ``1 study``, ``3 studies``.

One place for the plural of every noun the console and messages count, so no message
says ``1 scenarios``.
"""

from __future__ import annotations

IRREGULAR = {"study": "studies", "analysis": "analyses", "batch": "batches",
             "replicate": "replicates", "is": "are", "was": "were", "has": "have"}
"""Plurals that are not the noun plus ``s``."""


def noun(number: float, word: str, plural: str | None = None) -> str:
    """``word`` in the number ``number`` calls for (singular only for exactly 1).

    Parameters
    ----------
    number : float
    word : str
        The singular.
    plural : str, optional
        The plural when it is not regular (default: :data:`IRREGULAR`, else ``word + 's'``).

    Examples
    --------
    >>> noun(1, "look"), noun(3, "look"), noun(2, "study")
    ('look', 'looks', 'studies')
    """
    if number == 1:
        return word
    if plural is not None:
        return plural
    return IRREGULAR.get(word, word + "s")


def count(number: float, word: str, plural: str | None = None) -> str:
    """``number`` followed by ``word`` in the right number.

    Examples
    --------
    >>> count(1, "scenario"), count(4, "scenario"), count(0, "study")
    ('1 scenario', '4 scenarios', '0 studies')
    """
    shown = str(number) if isinstance(number, int) else f"{number:g}"
    return f"{shown} {noun(number, word, plural)}"


def series(items: list[str] | tuple[str, ...]) -> str:
    """Items joined as English lists them: ``a``, ``a and b``, ``a, b and c``.

    Examples
    --------
    >>> series(["treatment"]), series(["treatment", "control"])
    ('treatment', 'treatment and control')
    """
    items = list(items)
    return items[0] if len(items) == 1 else ", ".join(items[:-1]) + " and " + items[-1]
