"""Writing result files atomically: each file appears whole or not at all.

Every file is written to a temporary name in the destination folder and renamed into
place (``os.replace`` is atomic on POSIX and Windows within one file system), so an
interrupted run never leaves a half-written table behind. Commands that write a run
folder write it all at once instead (:mod:`octrial.run_folder`).
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path
from typing import Any

import pandas as pd


def write_atomic(path: Path, data: str | bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file and a rename."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        if isinstance(data, bytes):
            with os.fdopen(fd, "wb") as binary:
                binary.write(data)
        else:
            with os.fdopen(fd, "w", encoding="utf-8", newline="") as text:
                text.write(data)
        os.chmod(tmp, _default_mode())  # mkstemp makes 0600; results are ordinary files
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def _default_mode() -> int:
    """0666 less the process umask: the mode ``open()`` would have given a new file."""
    umask = os.umask(0)
    os.umask(umask)
    return 0o666 & ~umask


def csv_text(frame: pd.DataFrame) -> str:
    """A table as CSV text with full float precision (round-trips exactly)."""
    return frame.to_csv(index=False, float_format="%.17g", lineterminator="\n")


def json_text(record: dict[str, Any]) -> str:
    """A record as indented JSON text."""
    return json.dumps(record, indent=2, sort_keys=False, default=str) + "\n"
