"""Read a claims file: one claimed operating characteristic per row.

A claims file is CSV. Columns (header names exact; lines starting with ``#`` and blank
lines are skipped):

``true_<arm>``
    The scenario's true value for every arm of the design (two arms: ``true_control`` with
    ``true_treatment`` or ``true_effect``, as in the design's scenario grid).
``metric``
    Which number is claimed: any probability column of ``oc.csv`` (``prob_success``,
    ``prob_stop_efficacy``, ``prob_stop_futility``, ``look<k>_stop_efficacy``,
    ``look<k>_stop_futility``) or ``expected_n``; or, for a design with design priors,
    a Bayesian operating characteristic of run.json (``prob_null_given_success``, ...;
    :data:`octrial.bayesian_oc.METRICS`; ``prob_success`` with empty true values is the
    assurance): one number per design, so its true-value fields stay empty.
``claimed``
    The claimed value as the sponsor wrote it. Its last stated decimal tells how it was
    rounded (``0.025`` is 0.025 +- 0.0005).
``replicates`` (optional)
    Simulated studies behind the claim; empty or 0 means the claim says it is exact.
``se`` (optional)
    The claim's own standard error, used instead of the one implied by ``replicates``.
``note`` (optional)
    Free text, copied to ``verify.csv``.

Every problem in the file is collected and raised together as one
:class:`~octrial.errors.InputError` naming the line and column.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from octrial.csv_input import read_rows
from octrial.design.model import CONTROL, TREATMENT, Design
from octrial.design.reader import Phrase, Problems, suggest
from octrial.design.scenarios import DECIMALS
from octrial.errors import InputError

NUMBER = re.compile(r"[+-]?(?:(\d+)(?:\.(\d*))?|\.(\d+))(?:[eE]([+-]?\d+))?")
"""A plain decimal number, optionally with an exponent (no percent signs, no separators)."""

FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
"""First characters that make a spreadsheet read a cell as a formula (OWASP, "CSV
Injection")."""

OPTIONAL = ("replicates", "se", "note")

ALIASES = {
    "power": "prob_success",
    "type1_error": "prob_success",
    "type_1_error": "prob_success",
    "type_i_error": "prob_success",
    "alpha": "prob_success",
    "probability_of_success": "prob_success",
    "ess": "expected_n",
    "expected_sample_size": "expected_n",
    "mean_n": "expected_n",
}
"""Common names for oc.csv columns, used only to suggest the right one."""


@dataclass(frozen=True)
class Claim:
    """One claimed number.

    Attributes
    ----------
    line : int
        Line of the claims file (the header is line 1 unless comments precede it).
    truth : tuple of float
        True value per arm, in the design's arm order; empty for a design-level claim
        (a Bayesian operating characteristic under the design prior).
    metric : str
        The ``oc.csv`` column claimed.
    claimed : float
        The claimed value.
    text : str
        The claimed value exactly as written.
    replicates : int
        Simulated studies behind the claim (0: stated as exact).
    se : float or None
        The claim's own standard error, when the file gives one.
    note : str
        Free text from the file.
    """

    line: int
    truth: tuple[float, ...]
    metric: str
    claimed: float
    text: str
    replicates: int = 0
    se: float | None = None
    note: str = ""

    @property
    def rounding(self) -> float:
        """Half a unit in the last decimal the claim states (its rounding allowance)."""
        return half_unit(self.text)


@dataclass(frozen=True)
class Claims:
    """A validated claims file."""

    path: str
    sha256: str
    claims: tuple[Claim, ...]

    def __len__(self) -> int:
        return len(self.claims)


def spreadsheet_safe(text: str) -> str:
    """``text`` for a CSV cell that a spreadsheet will not run as a formula.

    Text copied from a user's file (a claim's note) that starts with ``=``, ``+``, ``-``,
    ``@``, a tab or a carriage return gets a leading single quote, the neutralisation the
    OWASP "CSV Injection" guidance recommends; plain numbers (``-0.5``, ``+1e-3``) stay
    numbers, and nothing else is changed.

    Examples
    --------
    >>> spreadsheet_safe("=1+2"), spreadsheet_safe("@SUM(A1)")
    ("'=1+2", "'@SUM(A1)")
    >>> spreadsheet_safe("-0.5"), spreadsheet_safe("type I error")
    ('-0.5', 'type I error')
    """
    if text.startswith(FORMULA_STARTS) and NUMBER.fullmatch(text) is None:
        return "'" + text
    return text


def half_unit(text: str) -> float:
    """Half a unit in the last stated decimal of a number written as ``text``.

    Examples
    --------
    >>> half_unit("0.025"), half_unit("0.8"), half_unit("30"), half_unit("2.50e-2")
    (0.0005, 0.05, 0.5, 5e-05)
    """
    match = NUMBER.fullmatch(text.strip())
    if match is None:
        raise ValueError(f"not a plain decimal number: {text!r}")
    fraction = match.group(2) if match.group(1) is not None else match.group(3)
    exponent = int(match.group(4) or 0)
    decimals = len(fraction or "") - exponent
    return 0.5 * 10.0 ** (-decimals)


def metrics(design: Design) -> tuple[str, ...]:
    """The ``oc.csv`` columns a claim may name for ``design``."""
    looks = [f"look{k}_stop_{why}" for k in range(1, design.looks.count + 1)
             for why in ("efficacy", "futility")]
    return ("prob_success", "prob_stop_efficacy", "prob_stop_futility", *looks, "expected_n")


def design_metrics(design: Design) -> tuple[str, ...]:
    """Design-level metrics a claim may name (Bayesian operating characteristics under
    the design prior; none without design priors)."""
    from octrial.bayesian_oc import METRICS
    from octrial.design_prior import has_design_prior

    return METRICS if has_design_prior(design) else ()


def _design_level(design: Design, cell: dict[str, str], columns: dict[str, int], metric: str,
                  problems: Problems, where: Callable[[str], str]) -> bool:
    """Whether a row claims a design-level metric (a Bayesian operating characteristic,
    with every true-value field empty)."""
    from octrial.bayesian_oc import METRICS

    if metric not in METRICS:
        return False
    empty = not any(cell.get(c) for c in truth_columns(design) if c in columns)
    if metric == "prob_success" and (not empty or not design_metrics(design)):
        return False  # a scenario's probability of success
    if not design_metrics(design):
        problems.add(where("metric"), "a Bayesian operating characteristic only for a "
                     "design with a design prior for every arm (or the effect)", metric)
        return True
    if not empty:
        problems.add(where("true_*"), f"empty true values for {metric} (one number per "
                     "design, averaged over the design prior)", Phrase("a scenario"))
    return True


def truth_columns(design: Design) -> tuple[str, ...]:
    """The scenario columns a claims file may have for ``design``."""
    arms = tuple(f"true_{arm}" for arm in design.arm_names)
    return (*arms, "true_effect") if design.two_arm else arms


def read_claims(path: str | Path, design: Design) -> Claims:
    """Read and validate a claims file against ``design``.

    Parameters
    ----------
    path : str or Path
        The claims CSV file (see the module docstring for its columns).
    design : Design
        The design the claims are about (its arms, looks and parameter range).

    Returns
    -------
    Claims

    Raises
    ------
    InputError
        Listing every problem, each with its line and column.
    """
    table = read_rows(path, "claims file")
    problems = Problems()
    header = list(table.header)
    columns = _check_header(design, header, table.header_line, problems)
    if problems:
        raise InputError(table.path, problems)
    claims = []
    for number, fields in table.rows:
        claim = _read_row(design, header, columns, number, list(fields), problems)
        if claim is not None:
            claims.append(claim)
    if problems:
        raise InputError(table.path, problems)
    return Claims(table.path, table.sha256, tuple(claims))


def _check_header(
    design: Design, header: list[str], line: int, problems: Problems,
) -> dict[str, int]:
    where = f"line {line} (header)"
    truths = truth_columns(design)
    allowed = (*truths, "metric", "claimed", *OPTIONAL)
    columns: dict[str, int] = {}
    for i, name in enumerate(header):
        if name in columns:
            problems.add(where, "each column once", Phrase(f"'{name}' twice"))
        elif name not in allowed:
            problems.add(where, "columns among " + ", ".join(allowed),
                         Phrase(f"an unknown column '{name}'"), suggest(name, allowed))
        columns[name] = i
    required = ["metric", "claimed"]
    if design.two_arm:
        required.append(f"true_{CONTROL}")
        if f"true_{TREATMENT}" not in columns and "true_effect" not in columns:
            problems.add(where, f"a column true_{TREATMENT} or true_effect (the scenario's "
                         "true values)", Phrase("neither"))
    else:
        required.append(f"true_{TREATMENT}")
    for name in required:
        if name not in columns:
            what = ("the scenario's true value for each arm" if name.startswith("true_")
                    else "the claim itself")
            problems.add(where, f"a column {name} ({what})", Phrase("no such column"))
    return columns


def _read_row(
    design: Design, header: list[str], columns: dict[str, int], line: int, fields: list[str],
    problems: Problems,
) -> Claim | None:
    before = len(problems)
    if len(fields) != len(header):
        problems.add(f"line {line}", f"{len(header)} comma-separated fields (as in the header)",
                     Phrase(f"{len(fields)} fields"))
        return None
    cell = {name: fields[i] for name, i in columns.items()}

    def where(column: str) -> str:
        return f"line {line}, column {column}"

    metric = cell["metric"]
    valid = metrics(design)
    truth: tuple[float, ...] | None = None
    if _design_level(design, cell, columns, metric, problems, where):
        valid = design_metrics(design)
        truth = ()
    elif metric not in valid:
        hint = suggest(metric, valid)
        if not hint and metric.lower() in ALIASES:
            hint = f"did you mean '{ALIASES[metric.lower()]}'?"
        problems.add(where("metric"), "a probability or expected-sample-size column of oc.csv "
                     f"for this {design.looks.count}-look design: " + ", ".join(valid), metric,
                     hint)
    if truth != ():
        truth = _read_truth(design, cell, where, problems)

    claimed = _number(cell["claimed"], where("claimed"), problems)
    if claimed is not None and metric in valid:
        low, high, what = _range(design, metric)
        if not low <= claimed <= high:
            problems.add(where("claimed"), what, cell["claimed"])

    replicates = 0
    if cell.get("replicates"):
        value = _number(cell["replicates"], where("replicates"), problems,
                        "a whole number >= 0 (0 or empty: the claim is exact)")
        if value is not None:
            if value < 0 or not float(value).is_integer():
                problems.add(where("replicates"), "a whole number >= 0 (0 or empty: the claim "
                             "is exact)", cell["replicates"])
            else:
                replicates = int(value)
    se = None
    if cell.get("se"):
        se = _number(cell["se"], where("se"), problems, "a standard error > 0")
        if se is not None and se <= 0:
            problems.add(where("se"), "a standard error > 0 (leave empty for none)", cell["se"])
            se = None
    if len(problems) > before or truth is None or claimed is None:
        return None
    return Claim(line, truth, metric, claimed, cell["claimed"], replicates, se,
                 cell.get("note", ""))


def _read_truth(
    design: Design, cell: dict[str, str], where: Callable[[str], str], problems: Problems,
) -> tuple[float, ...] | None:
    family = design.family
    values: dict[str, float] = {}
    for column in truth_columns(design):
        if cell.get(column):
            value = _number(cell[column], where(column), problems)
            if value is None:
                return None
            values[column] = value
    treatment, control = f"true_{TREATMENT}", f"true_{CONTROL}"
    if design.two_arm:
        if control not in values:
            problems.add(where(control), f"the control arm's true {family.parameter}",
                         Phrase("an empty field"))
            return None
        if "true_effect" in values:
            derived = round(values[control] + values["true_effect"], DECIMALS)
            if treatment in values and abs(values[treatment] - derived) > 1e-9:
                problems.add(where("true_effect"), f"true_treatment - true_control "
                             f"({values[treatment] - values[control]:.6g})",
                             cell["true_effect"])
                return None
            values.setdefault(treatment, derived)
        if treatment not in values:
            problems.add(where(treatment), f"the treatment arm's true {family.parameter} (or "
                         "true_effect)", Phrase("an empty field"))
            return None
    elif treatment not in values:
        problems.add(where(treatment), f"the treatment arm's true {family.parameter}",
                     Phrase("an empty field"))
        return None
    truth = tuple(values[f"true_{arm}"] for arm in design.arm_names)
    ok = True
    for arm, value in zip(design.arm_names, truth, strict=True):
        problem = family.true_value_problem(value)
        if problem:
            column = f"true_{arm}" if cell.get(f"true_{arm}") else "true_effect"
            problems.add(where(column), problem, value)
            ok = False
    return truth if ok else None


def _number(
    text: str, where: str, problems: Problems, expected: str = "a number",
) -> float | None:
    if NUMBER.fullmatch(text) is None or not math.isfinite(value := float(text)):
        hint = ("write probabilities as fractions (0.025 for 2.5%)" if text.endswith("%")
                else "")
        problems.add(where, f"{expected}, written as a plain decimal", text or Phrase(
            "an empty field"), hint)
        return None
    return value


def _range(design: Design, metric: str) -> tuple[float, float, str]:
    if metric == "expected_n":
        low, high = design.looks.n[0], design.looks.n[-1]
        return low, high, (f"an expected sample size between the first look's n ({low}) and "
                           f"the maximum ({high})")
    return 0.0, 1.0, "a probability in [0, 1]"
