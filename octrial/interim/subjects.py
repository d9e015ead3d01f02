"""Per-subject data for the adequacy checks: one CSV row per subject.

Columns: ``arm`` (the design's arm name; may be left out for a one-arm design), the
outcome column (``events`` for counts, ``value`` for normal data) and, for counts, an
optional ``exposure`` per subject (default: the design's exposure per subject). Lines
starting with ``#`` are comments.
"""

from __future__ import annotations

import math

import numpy as np

from octrial.csv_input import read_rows
from octrial.design.reader import Phrase, Problems, suggest
from octrial.errors import InputError

MIN_SUBJECTS = 3
"""Fewest subjects per arm for a spread or skewness statistic to mean anything."""


def read_subjects(
    path: str, arms: tuple[str, ...], outcome: str, *, whole: bool,
    exposure: float | None = None,
) -> dict[str, dict[str, np.ndarray]]:
    """Read per-subject data.

    Parameters
    ----------
    path : str
        The CSV file.
    arms : tuple of str
        The design's arm names.
    outcome : str
        Name of the outcome column ('events' or 'value').
    whole : bool
        Whether outcomes are whole numbers >= 0 (counts).
    exposure : float, optional
        Counts: the default exposure per subject; the ``exposure`` column is then allowed.

    Returns
    -------
    dict
        Per arm: ``{outcome: array}`` and, for counts, ``{'exposure': array}``.

    Raises
    ------
    InputError
        Naming every bad line and column.
    """
    table = read_rows(path, "per-subject data file")
    problems = Problems()
    allowed = ("arm", outcome) + (("exposure",) if exposure is not None else ())
    where_header = f"line {table.header_line} (header)"
    for name in table.header:
        if name not in allowed:
            problems.add(where_header, "columns among " + ", ".join(allowed),
                         Phrase(f"an unknown column '{name}'"), suggest(name, allowed))
    if outcome not in table.header:
        problems.add(where_header, f"a column {outcome}", Phrase("no such column"))
    if len(arms) > 1 and "arm" not in table.header:
        problems.add(where_header, "a column arm (the design has two arms)",
                     Phrase("no such column"))
    if problems:
        raise InputError(table.path, problems)
    column = {name: i for i, name in enumerate(table.header)}
    data: dict[str, dict[str, list[float]]] = {a: {outcome: [], "exposure": []} for a in arms}
    for line, fields in table.rows:
        if len(fields) != len(table.header):
            problems.add(f"line {line}", f"{len(table.header)} fields (as in the header)",
                         Phrase(f"{len(fields)} fields"))
            continue
        arm = fields[column["arm"]] if "arm" in column else arms[0]
        if arm not in arms:
            problems.add(f"line {line}, column arm", "an arm of the design (" + ", ".join(arms)
                         + ")", arm, suggest(arm, arms))
            continue
        value = _number(fields[column[outcome]], f"line {line}, column {outcome}", problems,
                        whole)
        time = exposure
        if "exposure" in column:
            time = _positive(fields[column["exposure"]], f"line {line}, column exposure",
                             problems)
        if value is not None and (time is not None or exposure is None):
            data[arm][outcome].append(value)
            data[arm]["exposure"].append(time)
    for arm in arms:
        if len(data[arm][outcome]) < MIN_SUBJECTS and not problems:
            problems.add(arm, f"at least {MIN_SUBJECTS} subjects in the {arm} arm",
                         len(data[arm][outcome]))
    if problems:
        raise InputError(table.path, problems)
    out = {}
    for arm in arms:
        out[arm] = {outcome: np.array(data[arm][outcome])}
        if exposure is not None:
            out[arm]["exposure"] = np.array(data[arm]["exposure"])
    return out


def _number(text: str, where: str, problems: Problems, whole: bool) -> float | None:
    expected = "a whole number >= 0" if whole else "a finite number"
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    ok = math.isfinite(value) and (not whole or (value >= 0 and value.is_integer()))
    if not ok:
        problems.add(where, expected, text or Phrase("an empty field"))
        return None
    return value


def _positive(text: str, where: str, problems: Problems) -> float | None:
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not (math.isfinite(value) and value > 0):
        problems.add(where, "a positive exposure", text or Phrase("an empty field"))
        return None
    return value
