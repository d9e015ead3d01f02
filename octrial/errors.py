"""The one error type for bad input, and its wording.

Every problem with a design file (or any other user input) is reported the same way:
which file, which key, what was expected and what was found, with a suggestion when a
key looks like a typo. Validation collects every problem it can find before raising, so a
user fixes a file in one pass.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Problem:
    """One thing wrong with the input.

    Parameters
    ----------
    key : str
        Dotted key path inside the file, for example ``looks.efficacy[2]``; empty for the
        file as a whole.
    expected : str
        What the key must hold, in plain words.
    got : str
        What was found.
    hint : str, optional
        A suggestion, for example the nearest valid key.
    """

    key: str
    expected: str
    got: str
    hint: str = ""

    def describe(self, source: str) -> str:
        """Return the one-line message for this problem in ``source``."""
        where = f"{source}: {self.key}" if self.key else source
        text = f"{where}: expected {self.expected}; got {self.got}"
        if self.hint:
            text += f" ({self.hint})"
        return text


class InputError(ValueError):
    """Bad input: a design file, a claims file or a command-line value.

    The command line turns it into exit code 2 with every problem on its own line.

    Parameters
    ----------
    source : str
        The file (or option) the problems were found in.
    problems : list of Problem
        Everything found wrong.
    """

    def __init__(self, source: str, problems: list[Problem]) -> None:
        self.source = source
        self.problems = tuple(problems)
        super().__init__("\n".join(p.describe(source) for p in self.problems))


class DesignError(InputError):
    """A design file that cannot be used as written."""


class SettingsError(InputError):
    """Bad settings of a library call (calibration, checks, execution).

    Each problem's key is the setting's own name, the keyword argument of the call (for
    example ``null_range``), and the wording names other settings in backquotes
    (```simulations` / 5``). The library knows nothing of the command line; the command
    line, which takes these settings as options, names its options instead
    (:func:`octrial.cli.common.reports_input_errors`).
    """


class NumericalWarning(UserWarning):
    """A computation ran but its numerical error is larger than it should be (for
    example a parameter grid too coarse for the prior); the message gives the measured
    error and the setting to change. Runs record these in run.json."""


def single(source: str, key: str, expected: str, got: object, hint: str = "") -> InputError:
    """Build an :class:`InputError` with one problem (for checks outside design files)."""
    return InputError(source, [Problem(key, expected, show(got), hint)])


def bad_setting(setting: str, key: str, expected: str, got: object,
                hint: str = "") -> SettingsError:
    """Build a :class:`SettingsError` with one problem in the setting ``setting`` (a
    keyword argument of a library call; the command line names its option instead)."""
    return SettingsError(setting, [Problem(key, expected, show(got), hint)])


def show(value: object) -> str:
    """Render a found value for a message: strings quoted, lists as their items (no
    Python brackets or reprs), long values shortened."""
    text = repr(value) if isinstance(value, str) else str(value)
    if isinstance(value, bool):
        text = str(value).lower()
    elif isinstance(value, dict):
        text = "a table with keys " + ", ".join(map(str, value)) if value else "an empty table"
    elif isinstance(value, list | tuple):
        text = "an empty list" if not value else f"a list of {len(value)}: {_items(value)}"
    elif hasattr(value, "item") and hasattr(value, "dtype") and getattr(value, "ndim", 1) == 0:
        text = show(value.item())  # a numpy scalar as the plain number
    return text if len(text) <= 80 else text[:77] + "..."


def _items(values: list | tuple) -> str:
    """The items of a list, comma-separated; inner lists in brackets as written in TOML."""
    return ", ".join(f"[{_items(v)}]" if isinstance(v, list | tuple) else show(v)
                     for v in values)
