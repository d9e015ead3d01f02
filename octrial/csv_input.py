"""Small CSV files given by users (claims, per-subject data): lines with their numbers.

Blank lines and lines starting with ``#`` are skipped, so files can carry a comment
header; every row keeps its line number for error messages. Problems with the file as a
whole raise :class:`~octrial.errors.InputError` at once.
"""

from __future__ import annotations

import csv
import hashlib
from dataclasses import dataclass
from pathlib import Path

from octrial.errors import InputError, Problem


@dataclass(frozen=True)
class CsvRows:
    """A CSV file's header and rows, with line numbers and the file's SHA-256."""

    path: str
    sha256: str
    header_line: int
    header: tuple[str, ...]
    rows: tuple[tuple[int, tuple[str, ...]], ...]


def read_rows(path: str | Path, what: str) -> CsvRows:
    """Read ``path`` (described as ``what`` in messages) into header and numbered rows.

    Raises
    ------
    InputError
        When the file is missing, not UTF-8, empty or has a header only.
    """
    path = Path(path)
    source = str(path)
    if not path.is_file():
        raise InputError(source, [Problem("", f"an existing {what} (CSV)", "no such file")])
    raw = path.read_bytes()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(source, [Problem("", "a UTF-8 text file", str(exc))]) from None
    lines = [(number, line) for number, line in enumerate(text.splitlines(), start=1)
             if line.strip() and not line.lstrip().startswith("#")]
    if not lines:
        raise InputError(source, [Problem("", "a header line and at least one row",
                                          "an empty file")])
    if len(lines) == 1:
        raise InputError(source, [Problem("", "at least one row below the header",
                                          "only the header")])
    (header_line, header_text), body = lines[0], lines[1:]
    header = tuple(name.strip() for name in _fields(header_text))
    rows = tuple((number, tuple(f.strip() for f in _fields(line))) for number, line in body)
    return CsvRows(source, hashlib.sha256(raw).hexdigest(), header_line, header, rows)


def _fields(line: str) -> list[str]:
    return next(csv.reader([line]))
