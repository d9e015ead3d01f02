"""A one-line progress bar on stderr: scenarios done, elapsed time, estimated time left.

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


class ProgressBar:
    """Scenarios done out of ``total``, with an estimate of the time left.

    Parameters
    ----------
    total : int
        Scenarios in the grid.
    done : int
        Scenarios already finished (resumed from a previous run); they do not count
        towards the rate behind the estimate.
    stream : file, optional
        Where to draw (default stderr); nothing is drawn unless it is a terminal.
    """

    def __init__(self, total: int, done: int = 0, stream: TextIO | None = None) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.enabled = bool(getattr(self.stream, "isatty", lambda: False)())
        self.total, self.done, self.resumed = total, done, done
        self.start = time.monotonic()
        self.last = -1.0
        self.draw(force=True)

    def advance(self, count: int = 1) -> None:
        """Record ``count`` more finished scenarios."""
        self.done += count
        self.draw(force=self.done >= self.total)

    def line(self) -> str:
        """The bar's current text."""
        elapsed = time.monotonic() - self.start
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
        return (f"scenarios {self.done}/{self.total} [{bar}] {fraction:4.0%} "
                f"{clock(elapsed)} elapsed, {left}")

    def draw(self, force: bool = False) -> None:
        """Redraw the line (throttled unless ``force``)."""
        if not self.enabled:
            return
        now = time.monotonic()
        if not force and now - self.last < MIN_INTERVAL:
            return
        self.last = now
        self.stream.write("\r" + self.line())
        self.stream.flush()

    def close(self) -> None:
        """Finish the line."""
        if self.enabled:
            self.draw(force=True)
            self.stream.write("\n")
            self.stream.flush()
