"""Running a grid of independent scenarios: where, in what order, and how to resume.

Nothing here changes a number: results depend only on each task's own inputs (its seeds
among them), so the backend, the number of workers and the order in which scenarios
finish cannot change the output. See :func:`run_grid`.
"""

from octrial.execution.grid import Execution, run_grid

__all__ = ["Execution", "run_grid"]
