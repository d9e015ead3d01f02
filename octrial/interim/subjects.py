"""Per-subject data: one CSV row per subject.

``octrial decide --subjects`` derives each arm's summary (x/n, events/exposure or
mean,sd,n) from these rows and runs the posterior predictive adequacy checks on them.
Columns: ``arm`` (the design's arm name; may be left out for a one-arm design), the
outcome column (``response`` 0 or 1 for binary data, ``events`` for counts, ``value`` for
normal data), for counts an optional ``exposure`` per subject (default: the design's
exposure per subject) and an optional subject identifier (``id`` or ``subject``; not used
by the maths, but each subject may appear only once). Lines starting with ``#`` are
comments.
"""

from __future__ import annotations

import math

import numpy as np

from octrial.csv_input import read_rows
from octrial.design.reader import Phrase, Problems, suggest
from octrial.errors import InputError
from octrial.plurals import count

MIN_SUBJECTS = 3
"""Fewest subjects per arm for a spread or skewness statistic to mean anything."""

ID_COLUMNS = ("id", "subject")
"""Names a subject identifier column may have (at most one of them per file)."""


def read_subjects(
    path: str, arms: tuple[str, ...], outcome: str, *, whole: bool,
    exposure: float | None = None, largest: int | None = None, minimum: int = MIN_SUBJECTS,
    exposure_column: str = "exposure",
) -> dict[str, dict[str, np.ndarray]]:
    """Read per-subject data.

    Parameters
    ----------
    path : str
        The CSV file.
    arms : tuple of str
        The design's arm names.
    outcome : str
        Name of the outcome column ('response', 'events' or 'value').
    whole : bool
        Whether outcomes are whole numbers >= 0 (responses, counts).
    exposure : float, optional
        Counts: the default exposure per subject; the ``exposure`` column is then allowed.
    largest : int, optional
        The largest whole outcome allowed (1 for responses).
    minimum : int
        Fewest subjects per arm.
    exposure_column : str
        Name of the exposure column (``'time'`` for times to an event or censoring).

    Returns
    -------
    dict
        Per arm: ``{outcome: array}`` and, for counts, ``{'exposure': array}``.

    Raises
    ------
    InputError
        Naming every bad line and column (a repeated subject identifier among them).
    """
    table = read_rows(path, "per-subject data file")
    problems = Problems()
    allowed = ("arm", outcome) + ((exposure_column,) if exposure is not None else ()) + ID_COLUMNS
    where_header = f"line {table.header_line} (header)"
    for name in table.header:
        if name not in allowed:
            problems.add(where_header, "columns among " + ", ".join(allowed),
                         Phrase(f"an unknown column '{name}'"), suggest(name, allowed))
    ids = [name for name in ID_COLUMNS if name in table.header]
    if len(ids) > 1:
        problems.add(where_header, "at most one subject identifier column (id or subject)",
                     Phrase("both"))
    if len(set(table.header)) < len(table.header):
        problems.add(where_header, "each column once",
                     Phrase("a repeated column " + ", ".join(sorted(
                         {n for n in table.header if table.header.count(n) > 1}))))
    if outcome not in table.header:
        problems.add(where_header, f"a column {outcome}", Phrase("no such column"))
    if len(arms) > 1 and "arm" not in table.header:
        problems.add(where_header, "a column arm (the design has two arms)",
                     Phrase("no such column"))
    if problems:
        raise InputError(table.path, problems)
    column = {name: i for i, name in enumerate(table.header)}
    # exposure is None per row when the design's exposure applies (no column)
    data: dict[str, dict[str, list[float | None]]] = {a: {outcome: [], "exposure": []}
                                                      for a in arms}
    seen: dict[str, int] = {}
    for line, fields in table.rows:
        if len(fields) != len(table.header):
            problems.add(f"line {line}", f"{len(table.header)} fields (as in the header)",
                         Phrase(f"{len(fields)} fields"))
            continue
        if ids:
            subject = fields[column[ids[0]]]
            if not subject:
                problems.add(f"line {line}, column {ids[0]}", "a subject identifier",
                             Phrase("an empty field"))
            elif subject in seen:
                problems.add(f"line {line}, column {ids[0]}", "each subject once",
                             subject, f"also on line {seen[subject]}")
            else:
                seen[subject] = line
        arm = fields[column["arm"]] if "arm" in column else arms[0]
        if arm not in arms:
            problems.add(f"line {line}, column arm", "an arm of the design (" + ", ".join(arms)
                         + ")", arm, suggest(arm, arms))
            continue
        value = _number(fields[column[outcome]], f"line {line}, column {outcome}", problems,
                        whole, largest)
        time = exposure
        if exposure_column in column:
            time = _positive(fields[column[exposure_column]],
                             f"line {line}, column {exposure_column}", problems)
        if value is not None and (time is not None or exposure is None):
            data[arm][outcome].append(value)
            data[arm]["exposure"].append(time)
    for arm in arms:
        if len(data[arm][outcome]) < minimum and not problems:
            problems.add(arm, f"at least {count(minimum, 'subject')} in the {arm} arm",
                         len(data[arm][outcome]))
    if problems:
        raise InputError(table.path, problems)
    out = {}
    for arm in arms:
        out[arm] = {outcome: np.array(data[arm][outcome])}
        if exposure is not None:
            out[arm]["exposure"] = np.array(data[arm]["exposure"])
    return out


def _number(text: str, where: str, problems: Problems, whole: bool,
            largest: int | None = None) -> float | None:
    expected = "a finite number"
    if whole:
        expected = "a whole number >= 0" if largest is None else (
            f"a whole number from 0 to {largest}")
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    ok = math.isfinite(value) and (not whole or (value >= 0 and value.is_integer())) and (
        largest is None or value <= largest)
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
