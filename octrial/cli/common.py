"""What every command shares: error handling, exit codes and the design argument.

Exit codes: 0 success; 1 a check failed (for example a discrepant claim) or an
unexpected error; 2 bad input (a design file, option or data file that cannot be used),
with every problem on its own line on stderr and nothing written.
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from pathlib import Path
from typing import Any

import click

from octrial.design.load import load_design
from octrial.design.model import Design
from octrial.errors import InputError

EXIT_BAD_INPUT = 2


def reports_input_errors(command: Callable[..., Any]) -> Callable[..., Any]:
    """Turn :class:`~octrial.errors.InputError` into messages on stderr and exit code 2."""

    @functools.wraps(command)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return command(*args, **kwargs)
        except InputError as exc:
            for line in str(exc).splitlines():
                click.echo(f"error: {line}", err=True)
            raise SystemExit(EXIT_BAD_INPUT) from None

    return wrapper


def read_design(path: str) -> Design:
    """Load a design file named on the command line."""
    return load_design(Path(path))


def default_out(design: Design) -> Path:
    """The default output folder, ``reports/<design name>/``."""
    return Path("reports") / design.name


design_argument = click.argument("design", metavar="DESIGN", type=click.Path(dir_okay=False))
