"""Run a grid of independent tasks with checkpoints and a progress bar.

:func:`run_grid` loads what an earlier, interrupted run already saved, runs only the
missing tasks on the chosen backend, saves each result the moment it arrives (so Ctrl-C
or a killed process loses at most the scenarios in flight), and returns the results in
task order.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from octrial.execution.backends import parallel_map
from octrial.execution.checkpoints import CheckpointStore
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
        Called with each task index after its result is saved (for tests and callers
        that report progress their own way).
    """

    jobs: int = 1
    backend: str = "joblib"
    scheduler: str | None = None
    checkpoints: Path | None = None
    progress: bool = False
    on_saved: Callable[[int], None] | None = None


def _indexed(item: tuple[Callable[[Any], dict[str, np.ndarray]], int, Any]) -> tuple[int, Any]:
    function, index, task = item
    return index, function(task)


def run_grid(
    function: Callable[[Any], dict[str, np.ndarray]], tasks: Sequence[Any],
    execution: Execution, store: CheckpointStore | None = None,
) -> tuple[list[dict[str, np.ndarray]], int]:
    """Results of ``function(task)`` for every task, in task order.

    ``function`` must be a picklable top-level function returning a dict of arrays (what
    a checkpoint holds). Returns the results and how many came from earlier runs.
    """
    results: dict[int, dict[str, np.ndarray]] = {}
    if store is not None:
        for index in store.finished():
            if index < len(tasks):
                results[index] = store.load(index)
    resumed = len(results)
    missing = [(function, i, task) for i, task in enumerate(tasks) if i not in results]
    bar = ProgressBar(len(tasks), resumed) if execution.progress else None
    try:
        for index, result in parallel_map(_indexed, missing, backend=execution.backend,
                                          jobs=execution.jobs, scheduler=execution.scheduler):
            results[index] = result
            if store is not None:
                store.save(index, result)
            if bar is not None:
                bar.advance()
            if execution.on_saved is not None:
                execution.on_saved(index)
    finally:
        if bar is not None:
            bar.close()
    return [results[i] for i in range(len(tasks))], resumed
