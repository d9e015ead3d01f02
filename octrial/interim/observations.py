"""The data entered at an interim look: ``ARM=...`` per arm, in each endpoint's syntax.

* binary: ``ARM=x/n`` — x responses among n subjects;
* count: ``ARM=events/exposure`` — total events and total exposure;
* normal: ``ARM=mean,sd,n`` — sample mean, sample standard deviation and size;
* time-to-event: ``ARM=events/exposure`` — events and total time at risk, one pair per
  hazard period separated by ``;`` when the endpoint has several periods.

Each syntax is one small parser that the endpoint's interim support names
(:attr:`~octrial.interim.base.EndpointInterim.syntax`), so a new endpoint adds its own.
Parsers raise :class:`ValueError` with the expected form; the caller turns that into an
:class:`~octrial.errors.SettingsError` naming the setting (``data``) and arm.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Iterable
from dataclasses import dataclass

from octrial.design.model import Design
from octrial.design.reader import LARGEST, SMALLEST, Phrase, Problems, in_range, suggest
from octrial.errors import SettingsError, bad_setting

SETTING = "data"
"""The setting (``decide``'s keyword argument) that holds the data of each arm."""

WHOLE = r"\s*(\d+)\s*"
DECIMAL = r"\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*"


@dataclass(frozen=True)
class BinaryData:
    """x responses among n subjects."""

    responses: int
    n: int

    def describe(self) -> str:
        """Plain text for reports."""
        return f"{self.responses}/{self.n} responses"


@dataclass(frozen=True)
class CountData:
    """Total events over total exposure (the subjects' sizes come from the design)."""

    events: int
    exposure: float

    def describe(self) -> str:
        """Plain text for reports."""
        return f"{self.events} events in exposure {self.exposure:g}"


@dataclass(frozen=True)
class EventData:
    """Events and time at risk (exposure) per hazard period."""

    events: tuple[int, ...]
    exposure: tuple[float, ...]

    def describe(self) -> str:
        """Plain text for reports."""
        pairs = [f"{d} events in time at risk {e:g}" for d, e in zip(
            self.events, self.exposure, strict=True)]
        return "; ".join(pairs) if len(pairs) > 1 else pairs[0]


@dataclass(frozen=True)
class NormalData:
    """Sample mean, sample standard deviation and number of subjects."""

    mean: float
    sd: float
    n: int

    def describe(self) -> str:
        """Plain text for reports."""
        return f"mean {self.mean:g}, sd {self.sd:g}, n = {self.n}"


@dataclass(frozen=True)
class Syntax:
    """How one endpoint's data are written on the command line."""

    form: str
    """The form shown in messages, for example ``x/n``."""
    example: str
    parse: Callable[[str], object]


def _in_range(*values: float) -> None:
    """Numbers as large or small as the design file allows (0, or magnitude in
    [SMALLEST, LARGEST]): beyond, the posterior's arithmetic overflows."""
    if not all(in_range(v) for v in values):  # False for nan and inf; exact for big ints
        raise ValueError(f"numbers that are 0 or of magnitude from {SMALLEST:g} to "
                         f"{LARGEST:g}")


def _binary(text: str) -> BinaryData:
    match = re.fullmatch(f"{WHOLE}/{WHOLE}", text)
    if match is None:
        raise ValueError("responses/subjects as two whole numbers")
    x, n = int(match.group(1)), int(match.group(2))
    _in_range(x, n)
    if n == 0:
        raise ValueError("at least one subject (n >= 1)")
    if x > n:
        raise ValueError(f"responses between 0 and the number of subjects ({n})")
    return BinaryData(x, n)


def _count(text: str) -> CountData:
    match = re.fullmatch(f"{WHOLE}/{DECIMAL}", text)
    if match is None:
        raise ValueError("events/exposure: a whole number of events and a positive exposure")
    exposure = float(match.group(2))
    if not math.isfinite(exposure) or exposure <= 0:
        raise ValueError("a positive, finite total exposure")
    events = int(match.group(1))
    _in_range(events, exposure)
    return CountData(events, exposure)


def _events(text: str) -> EventData:
    pairs = [_count(part) for part in text.split(";")]
    return EventData(tuple(p.events for p in pairs), tuple(p.exposure for p in pairs))


def _normal(text: str) -> NormalData:
    match = re.fullmatch(f"{DECIMAL},{DECIMAL},{WHOLE}", text)
    if match is None:
        raise ValueError("mean,sd,n: two numbers and a whole number of subjects")
    mean, sd, n = float(match.group(1)), float(match.group(2)), int(match.group(3))
    if not (math.isfinite(mean) and math.isfinite(sd)) or sd <= 0:
        raise ValueError("a finite mean and a standard deviation > 0")
    _in_range(mean, sd, n)
    if n < 2:
        raise ValueError("at least two subjects (n >= 2; a sample sd needs two)")
    return NormalData(mean, sd, n)


BINARY = Syntax("x/n", "12/30", _binary)
COUNT = Syntax("events/exposure", "14/52.5", _count)
NORMAL = Syntax("mean,sd,n", "1.8,2.4,40", _normal)
EVENTS = Syntax("events/exposure", "18/240.5", _events)
"""The built-in syntaxes; each family's interim support names its own
(:attr:`~octrial.interim.base.EndpointInterim.syntax`)."""


def syntax_of(design: Design) -> Syntax:
    """The data syntax of ``design``'s endpoint, or a clear error."""
    support = design.family.interim()
    if support is None:
        from octrial.endpoints import FAMILIES

        known = [name for name, family in FAMILIES.items() if family.interim() is not None]
        raise bad_setting(SETTING, "", "an endpoint with a data syntax (" + ", ".join(known) + ")",
                     design.endpoint.type)
    return support.syntax


def split_entries(entries: Iterable[str], arms: tuple[str, ...], problems: Problems,
                  form: str, example: str) -> dict[str, str]:
    """``ARM=value`` entries by arm, the values as typed; a malformed entry, an unknown
    arm (with the nearest name) and an arm given twice are added to ``problems``."""
    found: dict[str, str] = {}
    for entry in entries:
        name, sep, value = entry.partition("=")
        name = name.strip()
        if not sep:
            problems.add("", f"ARM={form}, for example {arms[0]}={example}", entry)
        elif name not in arms:
            problems.add("", "an arm of the design (" + ", ".join(arms) + ")", name,
                         suggest(name, arms))
        elif name in found:
            problems.add(name, "each arm once", Phrase("it twice"))
        else:
            found[name] = value
    return found


def parse_data(design: Design, entries: Iterable[str]) -> dict[str, object]:
    """Read ``ARM=...`` entries into one observation per arm of ``design``.

    Parameters
    ----------
    design : Design
    entries : iterable of str
        The ``--data`` values, for example ``["treatment=12/30"]``.

    Returns
    -------
    dict
        Arm name to its observation, in the design's arm order.

    Raises
    ------
    InputError
        Every malformed entry, unknown or repeated arm and missing arm.
    """
    syntax = syntax_of(design)
    problems = Problems()
    arms = design.arm_names
    found: dict[str, object] = {}
    for name, value in split_entries(entries, arms, problems, syntax.form,
                                     syntax.example).items():
        try:
            found[name] = syntax.parse(value)
        except ValueError as exc:
            problems.add(name, f"{exc}, like {name}={syntax.example}", value)
    require_every_arm(arms, found, problems, lambda arm: f"the {arm} arm's data as "
                      f"{arm}={syntax.form}")
    if problems:
        raise SettingsError(SETTING, problems)
    return {arm: found[arm] for arm in arms}


def require_every_arm(arms: tuple[str, ...], found: Iterable[str], problems: Problems,
                      expected: Callable[[str], str]) -> None:
    """Add a problem for each arm neither in ``found`` nor already named in ``problems``
    (``expected(arm)`` says what it needs)."""
    given = set(found)
    for arm in arms:
        if arm not in given and not any(p.key == arm for p in problems):
            problems.add(arm, expected(arm), Phrase("nothing"))
