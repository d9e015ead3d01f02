"""Writing design files: a small TOML serialiser, and edits that keep the original's text.

A calibrated design is the original file with a few values changed. :func:`edited_text`
rewrites only the changed keys (of the top level and of one table), so the comments and
layout of the rest of the file survive; when the file is laid out in a way the editor
does not follow (dotted keys, inline tables), it falls back to :func:`dumps` of the whole
design. Either way the result is parsed back and compared with the intended data before
it is returned, so a wrong edit can never be written.
"""

from __future__ import annotations

import json
import math
import re
import tomllib
from typing import Any

BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")
HEADER = re.compile(r"^\s*\[\[?\s*([^\]]+?)\s*\]\]?\s*(#.*)?$")
STATEMENT = re.compile(r"^(\s*)([A-Za-z0-9_-]+)\s*=")


def key_text(key: str) -> str:
    """A TOML key, quoted when it is not a bare key."""
    return key if BARE_KEY.fullmatch(key) else json.dumps(key)


def value_text(value: Any) -> str:
    """One TOML value on one line (tables become inline tables).

    Examples
    --------
    >>> value_text(["none", 0.995, 0.95])
    '["none", 0.995, 0.95]'
    >>> value_text({"distribution": "beta", "a": 1, "b": 1})
    '{ distribution = "beta", a = 1, b = 1 }'
    """
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, list | tuple):
        return "[" + ", ".join(value_text(v) for v in value) + "]"
    if isinstance(value, dict):
        if not value:
            return "{}"
        return "{ " + ", ".join(f"{key_text(k)} = {value_text(v)}" for k, v in value.items()) + " }"
    raise TypeError(f"cannot write {type(value).__name__} to TOML")


def dumps(data: dict[str, Any]) -> str:
    """A whole design as TOML: scalars first, then one ``[table]`` per table.

    Tables whose values are all tables (``[arms]``) become ``[arms.<name>]`` sections;
    any other nested table is written inline.
    """
    lines = [f"{key_text(k)} = {value_text(v)}" for k, v in data.items()
             if not isinstance(v, dict)]
    for key, value in data.items():
        if isinstance(value, dict):
            lines += _table_lines([key], value)
    return "\n".join(lines) + "\n"


def _table_lines(path: list[str], table: dict[str, Any]) -> list[str]:
    nested = bool(table) and all(isinstance(v, dict) for v in table.values())
    if nested:
        out = []
        for key, value in table.items():
            out += _table_lines([*path, key], value)
        return out
    header = ".".join(key_text(p) for p in path)
    return ["", f"[{header}]", *(f"{key_text(k)} = {value_text(v)}" for k, v in table.items())]


def edited_text(
    original: str, data: dict[str, Any], section: str, header: list[str] | None = None,
) -> str:
    """The original file's text with its values changed to ``data``.

    Parameters
    ----------
    original : str
        The original TOML text.
    data : dict
        The complete intended data; it may differ from the original only in top-level
        scalar keys and in the keys of the table ``section``.
    section : str
        The one table whose keys may change (for example ``'looks'``).
    header : list of str, optional
        Comment lines (without ``#``) to put at the top.

    Returns
    -------
    str
        Text that parses to exactly ``data``: the edited original when the edit succeeds,
        otherwise the whole design written afresh by :func:`dumps` (comments lost).
    """
    lead = "".join(f"# {line}\n" for line in header or [])
    try:
        text = _edit(original, data, section)
    except _CannotEdit:
        text = None
    if text is None or _parses_to(text, data) is False:
        note = "# (written afresh: the original layout could not be edited in place)\n"
        text = note + dumps(data)
        if not _parses_to(text, data):
            raise AssertionError("TOML writer produced text that does not read back")
    return lead + text


class _CannotEdit(Exception):
    pass


def _parses_to(text: str, data: dict[str, Any]) -> bool:
    try:
        return tomllib.loads(text) == data
    except tomllib.TOMLDecodeError:
        return False


def _statements(lines: list[str], start: int, stop: int) -> dict[str, tuple[int, int]]:
    """Key statements in lines[start:stop]: key -> (first line, last line) of its value."""
    found: dict[str, tuple[int, int]] = {}
    i = start
    while i < stop:
        match = STATEMENT.match(lines[i])
        if not match:
            i += 1
            continue
        for j in range(i, stop):
            try:
                tomllib.loads("\n".join(lines[i : j + 1]))
            except tomllib.TOMLDecodeError:
                continue
            found[match.group(2)] = (i, j)
            i = j + 1
            break
        else:
            raise _CannotEdit
    return found


def _trailing_comment(line: str) -> str:
    """The comment at the end of a one-line statement ('' when none)."""
    for pos in (m.start() for m in re.finditer("#", line)):
        try:
            if tomllib.loads(line[:pos]) == tomllib.loads(line):
                return line[pos:]
        except tomllib.TOMLDecodeError:
            continue
    return ""


def _edit(original: str, data: dict[str, Any], section: str) -> str:
    old = tomllib.loads(original)
    lines = original.splitlines()
    headers = [i for i, line in enumerate(lines) if HEADER.match(line)]
    names = [m.group(1).replace(" ", "") for i in headers if (m := HEADER.match(lines[i]))]
    if section not in names or not isinstance(old.get(section), dict):
        raise _CannotEdit
    if set(old) != set(data) or any(old[k] != data[k] for k in old
                                     if k != section and isinstance(old[k], dict)):
        raise _CannotEdit
    first_header = headers[0] if headers else len(lines)
    at = headers[names.index(section)]
    end = next((i for i in headers if i > at), len(lines))

    edits: list[tuple[int, int, list[str]]] = []  # (first, last, replacement)
    top_changes = {k: v for k, v in data.items() if not isinstance(v, dict) and old.get(k) != v}
    _plan(lines, 0, first_header, old, top_changes, edits, anchor="schema")
    section_changes = {k: data[section].get(k) for k in set(old[section]) | set(data[section])
                       if old[section].get(k) != data[section].get(k)}
    _plan(lines, at + 1, end, old[section], section_changes, edits, anchor=None, header=at)
    for first, last, replacement in sorted(edits, key=lambda e: (e[0], e[1]), reverse=True):
        lines[first : last + 1] = replacement
    return "\n".join(lines) + "\n"


def _plan(
    lines: list[str], start: int, stop: int, old: dict[str, Any], changes: dict[str, Any],
    edits: list[tuple[int, int, list[str]]], anchor: str | None, header: int | None = None,
) -> None:
    found = _statements(lines, start, stop)
    if set(found) != {k for k, v in old.items() if not isinstance(v, dict) or header is not None}:
        raise _CannotEdit  # keys written in a way we do not follow (dotted, inline, ...)
    inserted: list[str] = []
    for key, new in changes.items():
        if key in found:
            first, last = found[key]
            if new is None:
                edits.append((first, last, []))
                continue
            statement = STATEMENT.match(lines[first])
            if statement is None:
                raise _CannotEdit
            indent = statement.group(1)
            note = f"  # calibrated; was {value_text(old[key])}"
            edits.append((first, last, [f"{indent}{key_text(key)} = {value_text(new)}{note}"]))
        elif new is not None:
            inserted.append(f"{key_text(key)} = {value_text(new)}  # added by calibration")
    if inserted:
        if anchor is not None and anchor in found:
            after = found[anchor][1]
        elif found:
            after = max(last for _, last in found.values())
        else:
            after = header if header is not None else start - 1
        edits.append((after + 1, after, inserted))
