"""Finished tasks saved under the output folder, so an interrupted run can resume.

A run's tasks (scenarios, or batches of studies) are saved in
``ROOT/<key>/scenario-<index>.npz``, where the key is a SHA-256 over everything that
determines the numbers (for a scenario grid: the design's bytes and value, the engine, the
seed, replicates or target standard error, batch size, kernel and the octrial version): a
rerun with other arguments gets another folder and never reuses stale results. Each file
is written atomically, so a killed run leaves whole files or none. A seed drawn for a run
is saved beside its results (:func:`kept_seed`), so that the resumed run draws nothing.

Every file also carries its identity (:data:`IDENTITY`): the run key, the task index and
what the task says of itself (:class:`Checkpointed`: design SHA-256, seed, scenario,
batch, kernel) and the octrial version. On loading, a file that cannot be read (truncated,
corrupt), whose identity is not the task's (copied in from another run) or whose counts are
out of range (:meth:`Checkpointed.problems`) is deleted with a :class:`CheckpointWarning`
and its task computed again: it is never merged, so a resumed run stays bit-identical to
an uninterrupted one.
"""

from __future__ import annotations

import hashlib
import io
import json
import re
import secrets
import warnings
import zipfile
from pathlib import Path
from typing import Any, Protocol

import numpy as np

from octrial._version import __version__
from octrial.output import json_text, write_atomic

PARTIAL = ".partial"
"""Name of the folder, inside the output folder, that holds unfinished runs."""

SEED_BITS = 63
"""Drawn seeds are whole numbers in [0, 2^63)."""

IDENTITY = "__identity__"
"""The array of a checkpoint file that holds its identity (JSON text)."""

_FILE = re.compile(r"scenario-(\d{6,})\.npz")


class CheckpointWarning(UserWarning):
    """A saved checkpoint was not used (unreadable, another run's, counts out of range):
    it was deleted and its task is computed again."""


class Checkpointed(Protocol):
    """What a task saved in a checkpoint says of itself."""

    def identity(self) -> dict[str, Any]:
        """What the task's saved result must record: design SHA-256, seed, scenario,
        batch and kernel (JSON-serialisable)."""
        ...

    def problems(self, arrays: dict[str, np.ndarray]) -> list[str]:
        """What is wrong with ``arrays`` as this task's result (shapes, counts out of
        range); empty when they can be used."""
        ...


def run_key(ingredients: dict[str, Any]) -> str:
    """A short hexadecimal key for ``ingredients`` (JSON-serialisable)."""
    text = json.dumps(ingredients, sort_keys=True, default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:24]


class CheckpointStore:
    """Saved scenario results of one run (one key).

    Parameters
    ----------
    folder : Path
        ``ROOT/<key>``; created on the first save.
    ingredients : dict
        What the key was computed from; written beside the results for people.
    """

    def __init__(self, folder: Path, ingredients: dict[str, Any] | None = None) -> None:
        self.folder = Path(folder)
        self.ingredients = ingredients or {}
        self.failed = False

    def _path(self, index: int) -> Path:
        return self.folder / f"scenario-{index:06d}.npz"

    def _describe(self) -> None:
        if not (self.folder / "key.json").exists():
            write_atomic(self.folder / "key.json", json_text(self.ingredients))

    def finished(self) -> set[int]:
        """Indices of the scenarios already saved."""
        if not self.folder.is_dir():
            return set()
        return {int(m.group(1)) for p in self.folder.iterdir()
                if (m := _FILE.fullmatch(p.name))}

    def identity(self, index: int, task: Checkpointed) -> dict[str, Any]:
        """What task ``index``'s file records: the run key, the index, the task's own
        identity and the octrial version."""
        return {"key": self.folder.name, "task": index, **task.identity(),
                "octrial": __version__}

    def save(self, index: int, arrays: dict[str, np.ndarray], task: Checkpointed) -> None:
        """Save one task's arrays with its identity (see :meth:`_write`)."""
        buffer = io.BytesIO()
        label = json.dumps(self.identity(index, task), sort_keys=True, default=str)
        # numpy's stub lets **kwds reach the flag allow_pickle; every key here names an array
        np.savez(buffer, **arrays, **{IDENTITY: np.array(label)})  # type: ignore[arg-type]
        self._write(self._path(index), buffer.getvalue())

    def _write(self, path: Path, data: str | bytes) -> None:
        """Write a checkpoint file; when that fails (a full disk, a read-only folder)
        warn once and save nothing more: the run goes on, only resuming is lost."""
        if self.failed:
            return
        try:
            self._describe()
            write_atomic(path, data)
        except OSError as exc:
            self.failed = True
            warnings.warn(CheckpointWarning(
                f"cannot save checkpoints ({exc.strerror or exc}); the run goes on "
                "without them (an interrupted run cannot resume)"), stacklevel=3)

    def load(self, index: int, task: Checkpointed) -> dict[str, np.ndarray] | None:
        """Task ``index``'s saved arrays; ``None`` (with a :class:`CheckpointWarning`, the
        file deleted) when the file is unreadable, another task's or out of range."""
        path = self._path(index)
        try:
            with np.load(path, allow_pickle=False) as data:
                arrays = {name: data[name] for name in data.files}
        except (OSError, ValueError, EOFError, KeyError, zipfile.BadZipFile) as exc:
            return self._discard(path, f"unreadable ({type(exc).__name__}: {exc})")
        label = arrays.pop(IDENTITY, None)
        try:
            found = json.loads(str(label)) if label is not None else None
        except json.JSONDecodeError:
            found = None
        expected = json.loads(json.dumps(self.identity(index, task), sort_keys=True,
                                         default=str))
        if found != expected:
            differ = "no identity" if not isinstance(found, dict) else ", ".join(
                f"{k} {found.get(k)!r} (expected {v!r})" for k, v in expected.items()
                if found.get(k) != v)
            return self._discard(path, f"another run's ({differ})")
        wrong = task.problems(arrays)
        if wrong:
            return self._discard(path, "counts out of range: " + "; ".join(wrong))
        return arrays

    @staticmethod
    def _discard(path: Path, why: str, then: str = "computed again") -> None:
        warnings.warn(CheckpointWarning(
            f"checkpoint {path} not used, {why}; deleted, and {then}"), stacklevel=3)
        path.unlink(missing_ok=True)
        return None

    def seed(self) -> int | None:
        """The seed drawn for this run, if one was saved (and can be read, and is this
        run's: ``seed.json`` records the run key too)."""
        path = self.folder / "seed.json"
        if not path.exists():
            return None
        try:
            saved = json.loads(path.read_text(encoding="utf-8"))
            seed = saved["seed"]
            if saved.get("key") != self.folder.name:
                why = f"another run's (key {saved.get('key')!r}, expected {self.folder.name!r})"
            elif isinstance(seed, int) and not isinstance(seed, bool) and (
                    0 <= seed < 2**SEED_BITS):
                return seed
            else:
                why = f"not a seed in [0, 2^{SEED_BITS}): {seed!r}"
        except (OSError, ValueError, KeyError, TypeError) as exc:
            why = f"unreadable ({type(exc).__name__})"
        self._discard(path, why, then="a new seed drawn")
        return None

    def save_seed(self, seed: int) -> None:
        """Remember a drawn seed, so that resuming uses the same one."""
        self._write(self.folder / "seed.json", json_text({"seed": seed, "key": self.folder.name}))


def kept_seed(store: CheckpointStore | None, seed: int | None) -> tuple[int, bool]:
    """``seed`` when given; otherwise the seed drawn for this run: the one ``store`` saved
    earlier (a resumed run), or a new one, saved there.

    Returns
    -------
    seed : int
    drawn : bool
        Whether the seed was drawn rather than given.
    """
    if seed is not None:
        return seed, False
    saved = store.seed() if store is not None else None
    if saved is None:
        saved = secrets.randbits(SEED_BITS)
        if store is not None:
            store.save_seed(saved)
    return saved, True
