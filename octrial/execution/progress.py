"""Progress on stderr: a one-line bar (tasks done, elapsed time, estimated time left), or a
status line for work whose total is not known in advance (a calibration's candidates).

Drawn only when the stream is a terminal (a log file or a pipe gets nothing), and
redrawn at most a few times a second.
"""

from __future__ import annotations

import sys
import time
from typing import TextIO

WIDTH = 30
MIN_INTERVAL = 0.2


def clock(seconds: float) -> str:
    """``h:mm:ss`` or ``m:ss``."""
    seconds = round(seconds)
    hours, rest = divmod(seconds, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours}:{minutes:02d}:{secs:02d}" if hours else f"{minutes}:{secs:02d}"


class StatusLine:
    """One line of text on a terminal, redrawn in place.

    Parameters
    ----------
    stream : file, optional
        Where to draw (default stderr); nothing is drawn unless it is a terminal.
    """

    def __init__(self, stream: TextIO | None = None) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.enabled = bool(getattr(self.stream, "isatty", lambda: False)())
        self.start = time.monotonic()
        self.last = -1.0
        self.width = 0

    def elapsed(self) -> float:
        """Seconds since the line was created."""
        return time.monotonic() - self.start

    def show(self, text: str, force: bool = False) -> None:
        """Replace the line by ``text`` (throttled unless ``force``)."""
        if not self.enabled:
            return
        now = time.monotonic()
        if not force and now - self.last < MIN_INTERVAL:
            return
        self.last = now
        self.stream.write("\r" + text.ljust(self.width))
        self.width = len(text)
        self.stream.flush()

    def close(self) -> None:
        """End the line (when something was drawn)."""
        if self.enabled and self.width:
            self.stream.write("\n")
            self.stream.flush()


class ProgressBar:
    """Tasks done out of ``total``, with an estimate of the time left.

    Parameters
    ----------
    total : int
        Tasks in the grid.
    done : int
        Tasks already finished (resumed from a previous run); they do not count towards
        the rate behind the estimate.
    stream : file, optional
        Where to draw (default stderr); nothing is drawn unless it is a terminal.
    unit : str
        What the tasks are, as the line names them ('scenarios').
    """

    def __init__(self, total: int, done: int = 0, stream: TextIO | None = None,
                 unit: str = "scenarios") -> None:
        self.status = StatusLine(stream)
        self.total, self.done, self.resumed = total, done, done
        self.unit = unit
        self.draw(force=True)

    @property
    def enabled(self) -> bool:
        """Whether anything is drawn (the stream is a terminal)."""
        return self.status.enabled

    def advance(self, count: int = 1) -> None:
        """Record ``count`` more finished tasks."""
        self.done += count
        self.draw(force=self.done >= self.total)

    def line(self) -> str:
        """The bar's current text."""
        elapsed = self.status.elapsed()
        fraction = self.done / self.total if self.total else 1.0
        filled = int(WIDTH * fraction)
        bar = "#" * filled + "-" * (WIDTH - filled)
        fresh = self.done - self.resumed
        if self.done >= self.total:
            left = "done"
        elif fresh > 0:
            left = f"~{clock(elapsed / fresh * (self.total - self.done))} left"
        else:
            left = "estimating time left"
        return (f"{self.unit} {self.done}/{self.total} [{bar}] {fraction:4.0%} "
                f"{clock(elapsed)} elapsed, {left}")

    def draw(self, force: bool = False) -> None:
        """Redraw the line (throttled unless ``force``)."""
        if self.enabled:
            self.status.show(self.line(), force)

    def close(self) -> None:
        """Finish the line."""
        self.draw(force=True)
        self.status.close()
