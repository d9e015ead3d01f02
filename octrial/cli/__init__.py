"""The ``octrial`` command line: a thin layer over the library.

Each command lives in its own module and is registered on :func:`main` here.
"""

from __future__ import annotations

import click

from octrial._version import __version__
from octrial.caution import CAUTION
from octrial.cli.boundaries import boundaries_command
from octrial.cli.calibrate import calibrate_command
from octrial.cli.check import check_command
from octrial.cli.decide import decide_command
from octrial.cli.report import report_command
from octrial.cli.run import run_command
from octrial.cli.verify import verify_command


@click.group(epilog=f"Caution: {CAUTION}")
@click.version_option(__version__, prog_name="octrial")
def main() -> None:
    """Operating characteristics of Bayesian clinical-study designs.

    Exit codes: 0 success; 1 a check failed or an unexpected error; 2 bad input.
    """


main.add_command(run_command)
main.add_command(verify_command)
main.add_command(decide_command)
main.add_command(report_command)
main.add_command(calibrate_command)
main.add_command(boundaries_command)
main.add_command(check_command)

__all__ = ["main"]
