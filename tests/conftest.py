"""Test-wide settings.

octrial writes every number of its CSV files with 17 significant digits so that it reads
back exactly, and the tests compare those numbers exactly. pandas before version 3 parses
floats with a fast routine that can be one unit in the last place off, so every
``pd.read_csv`` in the tests asks for the round-trip parser (as octrial's own reader,
:func:`octrial.reporting.data.read_table`, does).
"""

from __future__ import annotations

import functools
from typing import Any

import pandas as pd

_read_csv = pd.read_csv


@functools.wraps(_read_csv)
def _read_csv_exactly(*args: Any, **kwargs: Any) -> pd.DataFrame:
    kwargs.setdefault("float_precision", "round_trip")
    return _read_csv(*args, **kwargs)


pd.read_csv = _read_csv_exactly
