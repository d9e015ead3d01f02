"""Where tasks run: in this process, in local worker processes (joblib), or on a Dask
cluster (through joblib's Dask backend).

Every backend yields ``function(task)`` for each task as it finishes, in any order; the
caller keys results by task, so the order never reaches the output.
"""

from __future__ import annotations

import contextlib
import logging
from collections.abc import Callable, Iterable, Iterator
from typing import Any

from octrial.errors import Problem, SettingsError

BACKENDS = ("joblib", "dask")


def dask_client(scheduler: str | None, workers: int) -> contextlib.AbstractContextManager:
    """A Dask client: connected to ``scheduler``, or to a new local cluster of
    ``workers`` single-threaded processes.

    Raises
    ------
    SettingsError
        When dask.distributed is not installed (the optional ``dask`` extra).
    """
    try:
        from dask.distributed import Client, LocalCluster
    except ImportError:
        raise SettingsError("execution", [Problem(
            "backend", "dask.distributed installed for 'dask' (the optional extra: "
            "pip install 'octrial[dask]')", "no module dask.distributed")]) from None
    if scheduler:
        return Client(scheduler)

    @contextlib.contextmanager
    def local() -> Iterator[Any]:
        with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                          dashboard_address=None, silence_logs=logging.ERROR) as cluster, \
                Client(cluster) as client:
            yield client

    return local()


def parallel_map(
    function: Callable[[Any], Any], tasks: Iterable[Any], *, backend: str = "joblib",
    jobs: int = 1, scheduler: str | None = None,
) -> Iterator[Any]:
    """``function(task)`` for every task, yielded as each finishes.

    Parameters
    ----------
    backend : {'joblib', 'dask'}
        'joblib': in this process when ``jobs`` is 1, else ``jobs`` worker processes.
        'dask': a Dask cluster (``scheduler`` address, or a local cluster of ``jobs``
        workers when none is given).
    """
    tasks = list(tasks)
    if backend == "joblib" and jobs == 1:
        for task in tasks:
            yield function(task)
        return
    import joblib

    if backend == "joblib":
        parallel = joblib.Parallel(n_jobs=jobs, backend="loky", return_as="generator_unordered")
        yield from parallel(joblib.delayed(function)(task) for task in tasks)
        return
    with dask_client(scheduler, max(jobs, 1)), joblib.parallel_config(backend="dask"):
        parallel = joblib.Parallel(return_as="generator_unordered")
        yield from parallel(joblib.delayed(function)(task) for task in tasks)
