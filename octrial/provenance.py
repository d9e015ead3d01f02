"""The provenance record (``run.json``): what produced a set of results, and how.

Everything needed to reproduce the numbers: octrial and library versions, the design
file's SHA-256 (and path), the command line, seed, engine and its numerical tolerances,
timestamps and platform. ``octrial run`` adds the SHA-256 of each file it wrote
(``file_sha256``, :func:`octrial.run_folder.run_files`), so that a report can tell the
files are this run's.
"""

from __future__ import annotations

import platform
import sys
from datetime import UTC, datetime
from importlib import metadata
from typing import Any

from octrial._version import __version__
from octrial.caution import CAUTION

LIBRARIES = ("numpy", "scipy", "pandas", "numba", "joblib", "matplotlib", "click", "jinja2",
             "dask", "distributed")


def now() -> str:
    """The current UTC time in ISO 8601."""
    return datetime.now(UTC).isoformat(timespec="seconds")


def library_versions() -> dict[str, str]:
    """Installed versions of the libraries octrial computes with."""
    versions = {}
    for name in LIBRARIES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = "not installed"
    return versions


def environment() -> dict[str, Any]:
    """octrial, Python and library versions and the platform."""
    return {
        "octrial": __version__,
        "python": sys.version.split()[0],
        "platform": platform.platform(),
        "machine": platform.machine(),
        "libraries": library_versions(),
    }


def display_command(argv: list[str]) -> list[str]:
    """The command line as the user would type it again.

    ``python -m octrial`` reports ``.../octrial/__main__.py`` as ``argv[0]`` and the
    installed script its absolute path; both become the short form, so records do not
    depend on where octrial is installed.
    """
    if not argv:
        return list(argv)
    head = argv[0].replace("\\", "/")
    if head.endswith("octrial/__main__.py"):
        return ["python", "-m", "octrial", *argv[1:]]
    if head.rsplit("/", 1)[-1] == "octrial":
        return ["octrial", *argv[1:]]
    return list(argv)


def run_record(
    evaluation: Any, *, started: str, finished: str, command: list[str] | None = None,
) -> dict[str, Any]:
    """The ``run.json`` record for an evaluation."""
    design = evaluation.design
    return {
        "octrial_version": __version__,
        "design": {
            "name": design.name,
            "title": design.title,
            "path": design.source.path,
            "sha256": design.source.sha256,
            "text": design.source.text,
        },
        "command": display_command(command if command is not None else sys.argv),
        "started": started,
        "finished": finished,
        "seed": design.simulation.seed,
        "scenarios": len(evaluation.oc),
        **evaluation.info,
        "environment": environment(),
        "caution": CAUTION,
    }
