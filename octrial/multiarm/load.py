"""Reading a design file with several treatment arms.

The file is an ordinary design file whose ``[arms]`` table names 2-8 treatment arms
(any names but 'treatment') and, optionally, a shared ``control``; without a control,
``[hypothesis]`` gives the benchmark every arm must beat. Each arm's own rule is read by
the ordinary loader (:func:`octrial.design.load.parse_design`) from a two-arm (one-arm)
design made of that arm and the control, so every key means what it means there and is
checked the same way. Keys that several arms add:

- ``looks.drop_if_best_below``: a number or a per-look list (``'none'`` where a look has
  none): drop an arm whose posterior probability of being the best is below it;
- ``[selection] keep``: at most this many treatment arms continue after an interim look;
- ``[allocation]``: ``kind`` (``'fixed'``, or response-adaptive ``'power'`` or
  ``'information'``), ``power``, ``control_share``, ``minimum``, ``burn_in``,
  ``assignment`` (see :class:`octrial.multiarm.model.Allocation`);
- ``[scenarios]``: one key per arm, each a list of true values of the same length (a
  single number stands for the same value in every row).
"""

from __future__ import annotations

import copy
import itertools
from pathlib import Path
from typing import Any

from octrial.design.load import parse_design, read_toml, split_sizes
from octrial.design.model import CONTROL, TREATMENT, Arm, Design, Scenarios, Source
from octrial.design.reader import NONE_WORD, Phrase, Problems, Table, is_number
from octrial.errors import DesignError, Problem
from octrial.multiarm.model import (
    ALLOCATION_KINDS,
    ASSIGNMENTS,
    MAX_TREATMENTS,
    MIN_TREATMENTS,
    Allocation,
    MultiArmDesign,
    MultiArmLooks,
    Selection,
)

TOP_KEYS = ("schema", "name", "title", "endpoint", "hypothesis", "arms", "looks",
            "selection", "allocation", "scenarios", "simulation")
MULTI_LOOK_KEYS = ("drop_if_best_below",)


def is_multiarm(data: dict[str, Any]) -> bool:
    """Whether a parsed design file names arms other than 'treatment' and 'control'."""
    arms = data.get("arms")
    return isinstance(arms, dict) and any(k not in (TREATMENT, CONTROL) for k in arms)


def load_multiarm(path: str | Path) -> MultiArmDesign:
    """Read and validate a design file with several treatment arms.

    Raises
    ------
    DesignError
        Listing every problem found, each with the file, key, expectation and finding.
    """
    return parse_multiarm(*read_toml(path))


def parse_multiarm(data: dict[str, Any], source: Source) -> MultiArmDesign:
    """Validate an already parsed multi-arm design table."""
    problems = Problems()
    top = Table(data, "", problems)
    top.allow(*TOP_KEYS)
    arms_table = top.table("arms")
    looks_table = top.table("looks")
    names = _arm_names(arms_table) if arms_table is not None else []
    control = CONTROL if arms_table is not None and arms_table.has(CONTROL) else None
    treatments = [n for n in names if n != CONTROL]
    all_names = ([control] if control else []) + treatments
    weights = _weights(arms_table, all_names) if arms_table is not None else None
    n_total = (looks_table.numbers("n", integer=True, check=lambda v: v >= 1,
                                   expected="a whole number >= 1")
               if looks_table is not None else None)
    per_arm = None
    if (weights is not None and looks_table is not None and n_total is not None
            and None not in n_total):
        per_arm = _split(looks_table, [int(v) for v in n_total if v is not None], weights)
    drop = _drop_rule(looks_table, len(n_total) if n_total else 0) if looks_table else None
    selection = _selection(top, len(treatments))
    allocation = _allocation(top, len(treatments), control is not None)
    scenarios = _scenarios(top, all_names)
    if problems:
        raise DesignError(source.path, problems)
    assert per_arm is not None and n_total is not None and arms_table is not None
    assert scenarios is not None and drop is not None

    pairs = []
    for j, name in enumerate(treatments):
        pair = _pair_data(data, name, control, per_arm, j + (1 if control else 0),
                          0 if control else None, scenarios)
        try:
            pairs.append(parse_design(pair, source))
        except DesignError as exc:
            problems.extend(_renamed(p, name) for p in exc.problems)
    if problems:
        # the control's own problems come back once per treatment arm: report them once
        unique = {(p.key, p.expected, p.got): p for p in reversed(problems)}
        raise DesignError(source.path, list(reversed(unique.values())))

    first = pairs[0]
    control_arm = first.arm(CONTROL) if control else None
    arms = tuple(Arm(name, p.arm(TREATMENT).prior, p.arm(TREATMENT).allocation,
                     p.arm(TREATMENT).design_prior) for name, p in zip(treatments, pairs,
                                                                       strict=True))
    looks = MultiArmLooks(tuple(int(v) for v in n_total if v is not None), per_arm,
                          drop)
    return MultiArmDesign(first.name, first.title, first.endpoint, first.hypothesis,
                          control_arm, arms, looks, selection, allocation, scenarios,
                          first.simulation, tuple(pairs), source)


def _arm_names(arms: Table) -> list[str]:
    names = list(arms.data)
    if TREATMENT in names:
        arms.fail(TREATMENT, "treatment arms with names of their own (several arms)",
                  Phrase("an arm named 'treatment'"))
    count = len([n for n in names if n != CONTROL])
    if not MIN_TREATMENTS <= count <= MAX_TREATMENTS:
        arms.problems.add(arms.path, f"{MIN_TREATMENTS} to {MAX_TREATMENTS} treatment arms",
                          Phrase(f"{count}"))
    return names


def _weights(arms: Table, names: list[str]) -> list[float] | None:
    weights = []
    for name in names:
        arm = arms.table(name)
        if arm is None:
            return None
        w = arm.number("allocation", required=False, default=1.0,
                       check=lambda v: v > 0, expected="a number > 0")
        if w is None:
            return None
        weights.append(w)
    return weights


def _split(looks: Table, n: list[int], weights: list[float]) -> tuple[tuple[int, ...], ...] | None:
    """Per-arm planned cumulative sizes from totals and weights (as the ordinary loader
    splits two arms)."""
    if any(b < a for a, b in itertools.pairwise(n)):
        looks.fail("n", "increasing totals", n)
        return None
    return split_sizes(looks, n, weights)


def _drop_rule(looks: Table, count: int) -> tuple[float | None, ...] | None:
    key = "drop_if_best_below"
    expected = "a probability in [0, 1)"
    if not looks.has(key):
        return (None,) * count
    raw = looks.data[key]
    if is_number(raw):
        value = looks.number(key, check=lambda v: 0 <= v < 1, expected=expected)
        return None if value is None else (value,) * (count - 1) + (None,)
    values = looks.numbers(key, check=lambda v: 0 <= v < 1, expected=expected,
                           allow_none=True, length=count)
    if values is None:
        return None
    if values[-1] is not None:
        looks.fail(key, f"'{NONE_WORD}' at the last look (no arm is dropped at the end)",
                   values[-1])
        return None
    return tuple(values)


def _selection(top: Table, treatments: int) -> Selection:
    table = top.table("selection", required=False)
    if table is None:
        return Selection()
    table.allow("keep")
    keep = table.number("keep", required=False, integer=True,
                        check=lambda v: 1 <= v <= max(treatments, 1),
                        expected=f"a whole number from 1 to {treatments} (the treatment arms)")
    return Selection(None if keep is None else int(keep))


def _allocation(top: Table, treatments: int, control: bool) -> Allocation:
    table = top.table("allocation", required=False)
    if table is None:
        return Allocation()
    table.allow("kind", "power", "control_share", "minimum", "burn_in", "assignment")
    kind = table.string("kind", ALLOCATION_KINDS, required=False, default="fixed")
    power = table.number("power", required=False, default=1.0, check=lambda v: v >= 0,
                         expected="a number >= 0")
    share = table.number("control_share", required=False, check=lambda v: 0 < v < 1,
                         expected="a number in (0, 1)")
    minimum = table.number("minimum", required=False, default=0.0,
                           check=lambda v: 0 <= v < 1, expected="a number in [0, 1)")
    burn_in = table.number("burn_in", required=False, default=0, integer=True,
                           check=lambda v: v >= 0, expected="a whole number >= 0")
    assignment = table.string("assignment", ASSIGNMENTS, required=False,
                              default="randomised")
    if None in (kind, power, minimum, burn_in, assignment):
        return Allocation()
    assert kind is not None and power is not None and minimum is not None
    assert burn_in is not None and assignment is not None
    if kind == "fixed":
        for key in ("power", "control_share", "minimum", "burn_in"):
            if table.has(key):
                table.fail(key, "no value with kind = 'fixed' (the arms' allocation "
                           "weights set the shares)", table.data[key])
    allocation = Allocation(kind, power, share, minimum, int(burn_in), assignment)
    if treatments:
        for problem in allocation.rule().problems(treatments, control):
            table.fail(problem.key, problem.expected, Phrase(problem.got))
    return allocation


def _scenarios(top: Table, names: list[str]) -> Scenarios | None:
    table = top.table("scenarios")
    if table is None or not names:
        return None
    table.allow(*names)
    columns: dict[str, list[float] | float] = {}
    for name in names:
        raw = table.raw(name, "a list of true values or one number", required=True)
        if raw is None:
            continue
        if is_number(raw):
            value = table.number(name)
            if value is not None:
                columns[name] = value
        else:
            values = table.numbers(name)
            if values is not None and None not in values:
                columns[name] = [float(v) for v in values if v is not None]
    lengths = {len(v) for v in columns.values() if isinstance(v, list)}
    if len(lengths) > 1:
        table.problems.add(table.path, "lists of the same length (one row per scenario)",
                           Phrase("lengths " + ", ".join(str(n) for n in sorted(lengths))))
        return None
    if len(columns) != len(names):
        return None
    rows = lengths.pop() if lengths else 1
    cols = [v if isinstance(v, list) else [v] * rows for v in columns.values()]
    return Scenarios(tuple(names), tuple(tuple(c[i] for c in cols) for i in range(rows)))


def _pair_data(data: dict[str, Any], name: str, control: str | None,
               per_arm: tuple[tuple[int, ...], ...], j: int, c: int | None,
               scenarios: Scenarios) -> dict[str, Any]:
    """The two-arm (one-arm) design file of arm ``name`` against the control (the
    benchmark): same endpoint, hypothesis, thresholds and simulation settings."""
    pair = {k: copy.deepcopy(v) for k, v in data.items()
            if k not in ("arms", "looks", "selection", "allocation", "scenarios")}
    arms = {TREATMENT: copy.deepcopy(data["arms"][name])}
    looks = {k: copy.deepcopy(v) for k, v in data["looks"].items()
             if k not in MULTI_LOOK_KEYS}
    looks["n"] = [row[j] + (row[c] if c is not None else 0) for row in per_arm]
    col = scenarios.arms.index(name)
    if c is not None:
        arms[CONTROL] = copy.deepcopy(data["arms"][CONTROL])
        ctrl = scenarios.arms.index(CONTROL)
        pair["scenarios"] = {
            CONTROL: sorted({row[ctrl] for row in scenarios.values}),
            TREATMENT: sorted({row[col] for row in scenarios.values})}
    else:
        pair["scenarios"] = {TREATMENT: sorted({row[col] for row in scenarios.values})}
    pair["arms"] = arms
    pair["looks"] = looks
    return pair


def _renamed(problem: Problem, name: str) -> Problem:
    """A problem of an arm's own design, with its keys in the multi-arm file's words."""
    key = problem.key.replace(f"arms.{TREATMENT}", f"arms.{name}")
    if key.startswith(f"arms.{CONTROL}"):
        return problem
    if key.startswith("scenarios."):
        key = f"scenarios (arm {name})"
    hint = problem.hint or f"in arm '{name}''s rule against the control or benchmark"
    return Problem(key, problem.expected, problem.got, hint)


def pair_scenario(design: MultiArmDesign, j: int, row: tuple[float, ...]) -> tuple[float, ...]:
    """The true values of treatment arm ``j``'s own design (treatment, then control)
    in scenario ``row``."""
    names = design.arm_names
    value = row[names.index(design.treatments[j].name)]
    return (value, row[0]) if design.shared_control else (value,)


def pair_of(design: MultiArmDesign, j: int) -> Design:
    """Treatment arm ``j``'s own design."""
    return design.pairs[j]
