"""Printing the HTML report to PDF with headless Chromium.

Chromium is found on the ``PATH`` (``chromium``, ``chromium-browser``, ``google-chrome``)
or named by the ``OCTRIAL_CHROMIUM`` environment variable. It runs with a throw-away
profile, no sandbox (it usually runs as root in containers and CI), and everything that
would reach the network switched off; the page itself needs no network.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import tempfile
from pathlib import Path

from octrial.errors import Problem, SettingsError
from octrial.output import _default_mode

CANDIDATES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")
TIMEOUT = 180.0
"""Seconds before a print is abandoned."""

QUIET_FLAGS = (
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
    "--disable-component-update", "--disable-sync", "--no-first-run",
    "--disable-default-apps", "--disable-extensions", "--mute-audio", "--disable-dev-shm-usage",
    # Nothing may leave the machine: every host name fails to resolve.
    "--host-resolver-rules=MAP * ~NOTFOUND",
)


class PrintError(RuntimeError):
    """Chromium ran but produced no PDF."""


def find_chromium() -> str | None:
    """The Chromium executable to use, or ``None`` when none is installed."""
    named = os.environ.get("OCTRIAL_CHROMIUM")
    if named:
        return named if Path(named).is_file() else shutil.which(named)
    return next((path for path in map(shutil.which, CANDIDATES) if path), None)


def require_chromium() -> str:
    """The Chromium executable, or a :class:`~octrial.errors.SettingsError` (on the
    setting ``pdf``) saying how to install one."""
    path = find_chromium()
    if path is None:
        raise SettingsError("report", [Problem(
            "pdf", "headless Chromium to print the PDF", "no Chromium found",
            "install it (Debian/Ubuntu: apt-get install chromium) or set OCTRIAL_CHROMIUM "
            "to its path; or leave out `pdf`")])
    return path


def print_pdf(html: Path, pdf: Path, chromium: str | None = None) -> Path:
    """Print the page ``html`` to ``pdf`` (written whole or not at all).

    Page size and margins come from the page's CSS (``@page``); Chromium's own header and
    footer (date, file name) are switched off.

    Raises
    ------
    PrintError
        When Chromium fails or writes nothing.
    """
    chromium = chromium or require_chromium()
    pdf = Path(pdf)
    pdf.parent.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(prefix="octrial-chromium-") as profile:
        fd, tmp = tempfile.mkstemp(prefix=f".{pdf.name}.", suffix=".tmp", dir=pdf.parent)
        os.close(fd)
        command = [chromium, *QUIET_FLAGS, f"--user-data-dir={profile}",
                   "--no-pdf-header-footer", "--print-to-pdf-no-header",
                   f"--print-to-pdf={tmp}", Path(html).resolve().as_uri()]
        try:
            done = subprocess.run(command, capture_output=True, text=True, timeout=TIMEOUT,
                                  check=False)
            if Path(tmp).stat().st_size == 0:
                raise PrintError(f"Chromium wrote no PDF (exit code {done.returncode}): "
                                 + _last_lines(done.stderr))
            # mkstemp makes 0600 (and Chromium writes into the file it is given): a
            # report is an ordinary file, with the mode open() would give it
            os.chmod(tmp, _default_mode())
            os.replace(tmp, pdf)
        except subprocess.TimeoutExpired:
            raise PrintError(f"Chromium did not finish printing within {TIMEOUT:g} s") from None
        finally:
            Path(tmp).unlink(missing_ok=True)
    return pdf


def _last_lines(text: str, count: int = 3) -> str:
    lines = [line for line in text.strip().splitlines() if line.strip()]
    return " | ".join(lines[-count:]) or "no message"
