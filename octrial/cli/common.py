"""What every command shares: error handling, exit codes, the design argument and the
options of commands that simulate.

Exit codes: 0 success; 1 a check failed (for example a discrepant claim) or an
unexpected error; 2 bad input (a design file, option or data file that cannot be used),
with every problem on its own line on stderr and nothing written; 130 interrupted
(Ctrl-C) while simulating, with what was finished kept for a resumed run.
"""

from __future__ import annotations

import contextlib
import functools
import re
import warnings
from collections.abc import Callable, Iterator
from dataclasses import dataclass, fields, replace
from pathlib import Path
from typing import Any

import click

from octrial.design.load import load_design
from octrial.design.model import Design
from octrial.engines import MonteCarloSettings
from octrial.errors import InputError, SettingsError
from octrial.execution import Execution
from octrial.execution.backends import BACKENDS
from octrial.execution.checkpoints import PARTIAL, CheckpointWarning

EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130


OPTION_OF_SETTING = {"checks": "only"}
"""Library settings whose command-line option has another name (``octrial check --only``
sets ``checks``); every other setting is the option of the same name."""

_SETTING_MENTION = re.compile(r"`([a-z_]+)`")


def reports_input_errors(command: Callable[..., Any]) -> Callable[..., Any]:
    """Turn :class:`~octrial.errors.InputError` into messages on stderr and exit code 2;
    a :class:`~octrial.errors.SettingsError` names the command's options, not the
    library's settings."""

    @functools.wraps(command)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return command(*args, **kwargs)
        except InputError as exc:
            if isinstance(exc, SettingsError):
                exc = in_option_names(exc, _options(click.get_current_context(silent=True)))
            for line in str(exc).splitlines():
                click.echo(f"error: {line}", err=True)
            raise SystemExit(EXIT_BAD_INPUT) from None

    return wrapper


def in_option_names(error: SettingsError, options: dict[str, str]) -> InputError:
    """``error`` with each setting (its source, a key, or a name in backquotes in the
    wording) replaced by its option in ``options`` (setting name to option, e.g.
    ``null_range`` to ``--null-range``); a setting without an option keeps its name."""

    def name(setting: str) -> str:
        return options.get(setting, setting)

    def words(text: str) -> str:
        return _SETTING_MENTION.sub(lambda found: name(found.group(1)), text)

    return InputError(name(error.source), [
        replace(p, key=name(p.key), expected=words(p.expected), got=words(p.got),
                hint=words(p.hint)) for p in error.problems])


def _options(context: click.Context | None) -> dict[str, str]:
    """Setting name to option (``--null-range``) for the command being run."""
    if context is None:
        return {}
    flags = {param.name: max(param.opts, key=len) for param in context.command.params
             if isinstance(param, click.Option) and param.name}
    named = {setting: flags[option] for setting, option in OPTION_OF_SETTING.items()
             if option in flags}
    return {**flags, **named}


def read_design(path: str) -> Design:
    """Load a design file named on the command line."""
    return load_design(Path(path))


def default_out(design: Design) -> Path:
    """The default output folder, ``reports/<design name>/``."""
    return Path("reports") / design.name


design_argument = click.argument("design", metavar="DESIGN", type=click.Path(dir_okay=False))


@dataclass(frozen=True)
class SimulationOptions:
    """The options of every command that may simulate (added by
    :func:`simulation_options`): how to run and how precisely; none changes a number
    except ``target_se`` and ``max_replicates``."""

    jobs: int
    backend: str
    scheduler: str | None
    target_se: float | None
    max_replicates: int | None
    quiet: bool

    def settings(self, **given: Any) -> MonteCarloSettings:
        """Simulation settings with the target standard error and cap (and ``given``)."""
        cap: dict[str, Any] = ({} if self.max_replicates is None
                               else {"max_replicates": self.max_replicates})
        return MonteCarloSettings(target_se=self.target_se, **cap, **given)

    def execution(self, folder: Path) -> Execution:
        """Workers, backend, checkpoints in ``folder/.partial`` and a progress bar on
        stderr unless quiet."""
        return Execution(jobs=self.jobs, backend=self.backend, scheduler=self.scheduler,
                         checkpoints=folder / PARTIAL, progress=not self.quiet)


_SIMULATION_OPTIONS = [
    click.option("--jobs", type=click.IntRange(min=1), default=1, show_default=True,
                 help="Simulations run at once (worker processes, or local Dask workers); "
                      "never changes a number."),
    click.option("--backend", type=click.Choice(BACKENDS), default="joblib",
                 show_default=True,
                 help="Where simulations run: local processes (joblib) or a Dask cluster."),
    click.option("--scheduler", metavar="ADDRESS", default=None,
                 help="Address of a running Dask scheduler (with --backend dask); without "
                      "it a local Dask cluster is started."),
    click.option("--target-se", type=click.FloatRange(0, 0.5, min_open=True), default=None,
                 help="Simulate until every estimated probability's standard error is at "
                      "most this (instead of a fixed number of replicates)."),
    click.option("--max-replicates", type=click.IntRange(min=1), default=None,
                 help="Cap on simulated studies per scenario with --target-se "
                      "[default: 10000000]."),
    click.option("--quiet", is_flag=True, help="Print nothing but errors (no progress bar)."),
]


def simulation_options(command: Callable[..., Any]) -> Callable[..., Any]:
    """Give a command the simulation options of ``octrial run`` (``--jobs``,
    ``--backend``, ``--scheduler``, ``--target-se``, ``--max-replicates``, ``--quiet``);
    it receives them as one ``simulation`` argument, a :class:`SimulationOptions`."""

    @functools.wraps(command)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        options = SimulationOptions(**{f.name: kwargs.pop(f.name)
                                       for f in fields(SimulationOptions)})
        if options.scheduler is not None and options.backend != "dask":
            raise click.UsageError("--scheduler needs --backend dask")
        if options.max_replicates is not None and options.target_se is None:
            raise click.UsageError("--max-replicates applies only with --target-se")
        return command(*args, simulation=options, **kwargs)

    for option in reversed(_SIMULATION_OPTIONS):
        wrapper = option(wrapper)
    return wrapper


@contextlib.contextmanager
def resumable(execution: Execution) -> Iterator[None]:
    """Run a command's computation: Ctrl-C becomes exit code 130 with a hint (what was
    finished is kept in the checkpoint folder and the same command resumes from it); bad
    input found on the way (a calibration that nothing meets) removes the checkpoints, so
    that nothing is left behind with exit code 2. A checkpoint found unusable (and
    computed again), or checkpoints that cannot be saved, are reported as plain
    ``warning:`` lines on stderr."""
    shown = warnings.showwarning
    said: set[str] = set()

    def show(message: Any, category: type[Warning], *args: Any, **kwargs: Any) -> None:
        if not issubclass(category, CheckpointWarning):
            shown(message, category, *args, **kwargs)
        elif str(message) not in said:  # once, for however many stores
            said.add(str(message))
            click.echo(f"warning: {message}", err=True)

    try:
        with warnings.catch_warnings():
            warnings.showwarning = show
            warnings.simplefilter("always", CheckpointWarning)
            yield
    except KeyboardInterrupt:
        click.echo(f"\ninterrupted: finished simulations are kept in {execution.checkpoints}; "
                   "run the same command again to resume", err=True)
        raise SystemExit(EXIT_INTERRUPTED) from None
    except InputError:
        execution.remove_checkpoints()
        raise
