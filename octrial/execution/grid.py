"""Run a grid of independent tasks with checkpoints and a progress bar.

:func:`run_grid` loads what an earlier, interrupted run already saved, runs only the
missing tasks on the chosen backend, saves each result the moment it arrives (so Ctrl-C
or a killed process loses at most the scenarios in flight), and returns the results in
task order.
"""

from __future__ import annotations

import dataclasses
import shutil
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from octrial.execution.backends import parallel_map
from octrial.execution.checkpoints import CheckpointStore, run_key
from octrial.execution.progress import ProgressBar


@dataclass(frozen=True)
class Execution:
    """How to run a grid; nothing here changes a number.

    Attributes
    ----------
    jobs : int
        Worker processes (joblib) or local Dask workers; 1 runs in this process.
    backend : {'joblib', 'dask'}
    scheduler : str or None
        Address of an existing Dask scheduler (``backend='dask'`` only).
    checkpoints : Path or None
        Folder for finished scenarios (``DIR/.partial``); ``None`` saves nothing.
    progress : bool
        Draw a progress bar on stderr (only when stderr is a terminal).
    on_saved : callable or None
        Called with each task index after its result is computed and saved (for tests and
        callers that report progress their own way; not called for resumed tasks).
    used : list of Path
        Checkpoint folders handed out by :meth:`store` and :meth:`within`, shared by
        every copy made with ``dataclasses.replace``, so that the command that made this
        execution removes exactly its own folders (:meth:`remove_checkpoints`) and never
        another command's unfinished run in the same ``.partial``.
    """

    jobs: int = 1
    backend: str = "joblib"
    scheduler: str | None = None
    checkpoints: Path | None = None
    progress: bool = False
    on_saved: Callable[[int], None] | None = None
    used: list[Path] = field(default_factory=list, compare=False, repr=False)

    def store(self, ingredients: dict[str, Any]) -> CheckpointStore | None:
        """The checkpoint store of a run determined by ``ingredients`` (JSON-serialisable:
        everything its numbers depend on), or ``None`` without a checkpoint folder."""
        if self.checkpoints is None:
            return None
        folder = self.checkpoints / run_key(ingredients)
        self.used.append(folder)
        return CheckpointStore(folder, ingredients)

    def within(self, ingredients: dict[str, Any]) -> tuple[Execution, CheckpointStore | None]:
        """For a command that runs many grids (a calibration's candidates): this execution
        with its checkpoints inside the folder of ``ingredients``, and that folder's own
        store (for what the grids share, such as a drawn seed)."""
        store = self.store(ingredients)
        if store is None:
            return self, None
        return dataclasses.replace(self, checkpoints=store.folder), store

    def remove_checkpoints(self) -> None:
        """After a complete run: delete the checkpoint folders this execution (and its
        copies) handed out, then the checkpoint folder itself if nothing else is left."""
        for folder in self.used:
            shutil.rmtree(folder, ignore_errors=True)
        self.used.clear()
        if self.checkpoints is not None:
            try:
                self.checkpoints.rmdir()
            except OSError:  # absent, or another run's checkpoints are still there
                pass


def _indexed(item: tuple[Callable[[Any], dict[str, np.ndarray]], int, Any]) -> tuple[int, Any]:
    function, index, task = item
    return index, function(task)


def run_grid(
    function: Callable[[Any], dict[str, np.ndarray]], tasks: Sequence[Any],
    execution: Execution, store: CheckpointStore | None = None, unit: str = "scenarios",
) -> tuple[list[dict[str, np.ndarray]], int]:
    """Results of ``function(task)`` for every task, in task order.

    ``function`` must be a picklable top-level function returning a dict of arrays (what
    a checkpoint holds); with a ``store``, tasks say what their saved results must record
    and hold (:class:`~octrial.execution.checkpoints.Checkpointed`), and a saved result
    that does not is computed again. ``unit`` names the tasks on the progress bar.
    Returns the results and how many came from earlier runs.
    """
    results: dict[int, dict[str, np.ndarray]] = {}
    if store is not None:
        for index in sorted(store.finished()):
            if index < len(tasks) and (saved := store.load(index, tasks[index])) is not None:
                results[index] = saved
    resumed = len(results)
    missing = [(function, i, task) for i, task in enumerate(tasks) if i not in results]
    bar = ProgressBar(len(tasks), resumed, unit=unit) if execution.progress else None
    try:
        for index, result in parallel_map(_indexed, missing, backend=execution.backend,
                                          jobs=execution.jobs, scheduler=execution.scheduler):
            results[index] = result
            if store is not None:
                store.save(index, result, tasks[index])
            if bar is not None:
                bar.advance()
            if execution.on_saved is not None:
                execution.on_saved(index)
    finally:
        if bar is not None:
            bar.close()
    return [results[i] for i in range(len(tasks))], resumed
