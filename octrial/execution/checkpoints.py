"""Finished tasks saved under the output folder, so an interrupted run can resume.

A run's tasks (scenarios, or batches of studies) are saved in
``ROOT/<key>/scenario-<index>.npz``, where the key is a SHA-256 over everything that
determines the numbers (for a scenario grid: the design's bytes and value, the engine, the
seed, replicates or target standard error, batch size, kernel and the octrial version): a
rerun with other arguments gets another folder and never reuses stale results. Each file
is written atomically, so a killed run leaves whole files or none. A seed drawn for a run
is saved beside its results (:func:`kept_seed`), so that the resumed run draws nothing.
"""

from __future__ import annotations

import hashlib
import io
import json
import secrets
from pathlib import Path
from typing import Any

import numpy as np

from octrial.output import json_text, write_atomic

PARTIAL = ".partial"
"""Name of the folder, inside the output folder, that holds unfinished runs."""

SEED_BITS = 63
"""Drawn seeds are whole numbers in [0, 2^63)."""


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

    def _path(self, index: int) -> Path:
        return self.folder / f"scenario-{index:06d}.npz"

    def _describe(self) -> None:
        if not (self.folder / "key.json").exists():
            write_atomic(self.folder / "key.json", json_text(self.ingredients))

    def finished(self) -> set[int]:
        """Indices of the scenarios already saved."""
        if not self.folder.is_dir():
            return set()
        return {int(p.stem.split("-")[1]) for p in self.folder.glob("scenario-*.npz")}

    def save(self, index: int, arrays: dict[str, np.ndarray]) -> None:
        """Save one scenario's arrays."""
        self._describe()
        buffer = io.BytesIO()
        np.savez(buffer, **arrays)
        write_atomic(self._path(index), buffer.getvalue())

    def load(self, index: int) -> dict[str, np.ndarray]:
        """One saved scenario's arrays."""
        with np.load(self._path(index)) as data:
            return {name: data[name] for name in data.files}

    def seed(self) -> int | None:
        """The seed drawn for this run, if one was saved."""
        path = self.folder / "seed.json"
        return int(json.loads(path.read_text())["seed"]) if path.exists() else None

    def save_seed(self, seed: int) -> None:
        """Remember a drawn seed, so that resuming uses the same one."""
        self._describe()
        write_atomic(self.folder / "seed.json", json_text({"seed": seed}))


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
