"""Read a TOML design file into a validated :class:`~octrial.design.model.Design`.

All checks live here. Problems are collected over the whole file and raised together as
one :class:`~octrial.errors.DesignError`; nothing downstream re-validates.
"""

from __future__ import annotations

import dataclasses
import hashlib
import itertools
import re
import tomllib
from pathlib import Path
from typing import Any

import octrial.design.limits as limits
from octrial.conduct.model import Conduct
from octrial.conduct.reader import check_complete_targets, planned_counts, read_conduct
from octrial.design.model import (
    CONTROL,
    EVENT_DRIVEN_ENGINES,
    METHODS,
    TREATMENT,
    Arm,
    Design,
    Hypothesis,
    Looks,
    Simulation,
    Source,
)
from octrial.design.reader import NONE_WORD, Phrase, Problems, Table
from octrial.design.scenarios import read_scenarios
from octrial.design.thresholds import read_threshold
from octrial.endpoints import FAMILIES, Family
from octrial.errors import DesignError, Problem

SCHEMA = 1
TOP_KEYS = ("schema", "name", "title", "endpoint", "hypothesis", "arms", "looks", "scenarios",
            "simulation", "conduct")
NAME_PATTERN = re.compile(r"[A-Za-z0-9][A-Za-z0-9._-]*")
NAME_LENGTH = 100
"""Longest design name: it names the output folder, and file systems limit a folder name
to 255 bytes."""
MAX_REPLICATES = 10_000_000
"""Most simulated studies per scenario a design file may ask for (as ``octrial run
--max-replicates`` allows by default)."""
INTERIM_ONLY = ("futility", "futility_predictive")
GRID_POINTS = Simulation.grid_points
TRIGGERS = {"n": "complete", "enrolled": "enrolled", "time": "time", "events": "events"}
"""The ``[looks]`` key that sets when each look happens, and its :attr:`Looks.trigger`."""


def load_design(path: str | Path) -> Design:
    """Read and validate a design file.

    Parameters
    ----------
    path : str or Path
        A TOML design file (``schema = 1``); see docs/design-files.md.

    Returns
    -------
    Design

    Raises
    ------
    DesignError
        Listing every problem found, each with the file, key, expectation and finding.
    """
    return parse_design(*read_toml(path))


def read_toml(path: str | Path) -> tuple[dict[str, Any], Source]:
    """The parsed TOML of a design file and its :class:`Source` (path, SHA-256, text).

    Raises
    ------
    DesignError
        When the file is missing or is not UTF-8 TOML.
    """
    path = Path(path)
    if not path.is_file():
        raise DesignError(str(path), [Problem("", "an existing design file",
                                              "no such file")])
    raw = path.read_bytes()
    try:
        # utf-8-sig: editors on some systems start UTF-8 files with a byte-order mark
        text = raw.decode("utf-8-sig")
        data = tomllib.loads(text)
    except (UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise DesignError(str(path), [Problem("", "a valid UTF-8 TOML file", str(exc))]) from None
    return data, Source(str(path), hashlib.sha256(raw).hexdigest(), text)


def parse_design(data: dict[str, Any], source: Source) -> Design:
    """Validate an already parsed design table (``source`` names it in messages)."""
    problems = Problems()
    top = Table(data, "", problems)
    top.allow(*TOP_KEYS)
    top.number("schema", integer=True, check=lambda v: v == SCHEMA,
               expected=f"{SCHEMA} (the only schema so far)")
    name = _read_name(top, source)
    title = top.string("title", required=False, default="") or ""

    family, endpoint, better = _read_endpoint(top)
    arms_table = top.table("arms")
    two_arm = arms_table is not None and arms_table.has(CONTROL)
    on_effect = family is not None and endpoint is not None and family.prior_on_effect(
        endpoint, two_arm)
    hypothesis = _read_hypothesis(top, family, better, two_arm, on_effect, endpoint)
    arms = _read_arms(arms_table, family, on_effect)
    conduct = read_conduct(top)
    looks = _read_looks(top, arms, two_arm, family, conduct)
    if looks is not None and not looks.uses_counts and arms and arms_table is not None:
        _require_priors(top, arms_table, arms, on_effect)
    scenarios_table = top.table("scenarios")
    scenarios = None
    if scenarios_table is not None and family is not None:
        scenarios = read_scenarios(scenarios_table, family, two_arm)
    simulation = _read_simulation(top)
    if family is not None:
        family.check_design({"endpoint": endpoint, "hypothesis": hypothesis, "arms": arms,
                             "looks": looks, "simulation": simulation, "two_arm": two_arm,
                             "conduct": conduct, "scenarios": scenarios}, problems)

    if problems:
        raise DesignError(source.path, problems)
    # every required table was read: a missing one is a problem above
    assert hypothesis is not None and looks is not None and scenarios is not None
    design = Design(name, title, endpoint, hypothesis, tuple(arms), looks, scenarios,
                    simulation, source, conduct)
    # only a design valid in every other respect can be sized
    too_big = limits.problems(design)
    if too_big:
        raise DesignError(source.path, too_big)
    return design


def _read_name(top: Table, source: Source) -> str:
    default = Path(source.path).stem if source.path else "design"
    name = top.string("name", required=False, default=default) or default
    if not NAME_PATTERN.fullmatch(name) or len(name) > NAME_LENGTH:
        top.fail("name", f"at most {NAME_LENGTH} letters, digits, '.', '_' or '-', starting "
                 "with a letter or digit (it names the output folder)", name)
    return name


def _read_endpoint(top: Table) -> tuple[Family | None, Any, str | None]:
    table = top.table("endpoint")
    if table is None:
        return None, None, None
    kind = table.string("type", tuple(FAMILIES))
    if kind is None:
        return None, None, None
    family = FAMILIES[kind]
    better = table.string("better", ("higher", "lower"), required=family.default_better is None,
                          default=family.default_better)
    return family, family.read_endpoint(table), better


def _read_hypothesis(
    top: Table, family: Family | None, better: str | None, two_arm: bool, on_effect: bool,
    endpoint: Any = None,
) -> Hypothesis | None:
    table = top.table("hypothesis")
    if table is None or family is None or better is None:
        return None
    relevant = table.number("relevant_effect", required=False, check=lambda v: v >= 0,
                            expected="a number >= 0 (the clinically relevant effect beyond "
                                     "the null boundary, for Bayesian power)")
    if not two_arm:
        table.allow("benchmark", "relevant_effect")
        benchmark = table.number("benchmark")
        if benchmark is not None and endpoint is not None:
            written = benchmark
            benchmark, problem = family.convert_benchmark(endpoint, written)
            if problem:
                table.fail("benchmark", problem, written)
        return Hypothesis(better, benchmark=benchmark, relevant_effect=relevant)
    table.allow("comparison", "margin", "kind", "relevant_effect",
                *(("prior", "design_prior") if on_effect else ()))
    comparison = table.string("comparison", family.comparisons, required=False,
                              default=family.comparisons[0])
    kind = table.string("kind", ("superiority", "non-inferiority"), required=False,
                        default="superiority")
    margin = table.number("margin", required=False, default=0.0)
    if kind == "non-inferiority" and margin == 0.0:
        table.fail("margin", "a margin > 0 for a non-inferiority claim", margin)
    prior, design_prior = (_read_prior(table, key, family) if on_effect else None
                           for key in ("prior", "design_prior"))
    hypothesis = Hypothesis(better, comparison=comparison, margin=margin or 0.0,
                            kind=kind or "superiority", prior=prior, design_prior=design_prior,
                            relevant_effect=relevant)
    if comparison is not None and margin is not None and (
            problem := family.margin_problem(hypothesis)):
        table.fail("margin", problem, margin)
    return hypothesis


def _read_arms(table: Table | None, family: Family | None, on_effect: bool) -> list[Arm]:
    if table is None:
        return []
    table.allow(TREATMENT, CONTROL)
    arms = []
    for name in (TREATMENT, CONTROL):
        arm = table.table(name, required=name == TREATMENT)
        if arm is None:
            continue
        if on_effect:
            arm.allow("allocation")
            for key in ("prior", "design_prior"):
                if arm.has(key):
                    arm.fail(key, f"no per-arm prior (the prior is on the treatment effect: "
                             f"write it as hypothesis.{key})", arm.data[key])
        else:
            arm.allow("prior", "allocation", "design_prior")
        allocation = arm.number("allocation", required=False, default=1.0,
                                check=lambda v: v > 0, expected="a positive weight")
        prior, design_prior = (None, None) if on_effect else (
            _read_prior(arm, key, family) for key in ("prior", "design_prior"))
        arms.append(Arm(name, prior, allocation or 1.0, design_prior))
    return arms


def _require_priors(top: Table, arms_table: Table, arms: list[Arm], on_effect: bool) -> None:
    """Probability rules need analysis priors: per arm, or on the effect."""
    missing = Phrase("nothing (the key is missing)")
    if on_effect:
        hypothesis = top.data.get("hypothesis")
        if isinstance(hypothesis, dict) and "prior" not in hypothesis:
            top.problems.add("hypothesis.prior", "an analysis prior on the treatment effect "
                             "(required unless the rule is stated in counts)", missing)
        return
    for arm in arms:
        if "prior" not in arms_table.data[arm.name]:
            top.problems.add(f"arms.{arm.name}.prior", "an analysis prior (required unless "
                             "the rule is stated in counts)", missing)


def _read_prior(parent: Table, key: str, family: Family | None) -> Any:
    table = parent.table(key, required=False)
    if table is None or family is None:
        return None
    return family.read_prior(table)


def split_sizes(table: Table, n: list[int],
                weights: list[float]) -> tuple[tuple[int, ...], ...] | None:
    """Per-arm cumulative sample sizes from totals and allocation weights (problems
    recorded at ``looks.n[k]``)."""
    total = sum(weights)
    # shares first: n x weight may overflow when a weight is large
    shares = [w / total for w in weights]
    ratio = ":".join(f"{w:g}" for w in weights)
    per_arm = []
    for k, n_k in enumerate(n):
        sizes = [n_k * share for share in shares]
        if any(abs(s - round(s)) > 1e-9 for s in sizes):
            table.problems.add(f"looks.n[{k + 1}]", f"a total that allocation {ratio} splits "
                               "into whole per-arm sample sizes", n_k)
            return None
        if any(round(s) < 1 for s in sizes):
            table.problems.add(f"looks.n[{k + 1}]", f"a total that allocation {ratio} splits "
                               "into at least one subject per arm", n_k)
            return None
        per_arm.append(tuple(round(s) for s in sizes))
    return tuple(per_arm)


def _read_looks(
    top: Table, arms: list[Arm], two_arm: bool, family: Family | None,
    conduct: Conduct | None = None,
) -> Looks | None:
    table = top.table("looks")
    if table is None:
        return None
    table.allow(*TRIGGERS, "efficacy", "futility", "futility_predictive", "efficacy_count",
                "futility_count")
    event_driven = family is not None and family.event_driven
    given = [key for key in TRIGGERS if table.has(key)]
    in_time = top.has("conduct")
    if event_driven and (others := [key for key in given
                                    if key not in (("events", "time") if in_time else ("n",))]):
        table.fail(others[0], "events or time (looks of a time-to-event study in calendar time "
                   "happen at event counts or calendar times)" if in_time else
                   "n (without a [conduct] table every analysed subject's event is observed, "
                   "so looks count subjects; looks at event counts need a [conduct] table)",
                   table.data[others[0]])
        return None
    if len(given) > 1:
        table.fail(given[1], "one of n, enrolled, time or events (when each look happens)",
                   Phrase(f"{given[0]} and {given[1]}"))
        return None
    key = given[0] if given else ("events" if event_driven and in_time else "n")
    trigger = TRIGGERS[key]
    at: tuple[float, ...] = ()
    per_arm: tuple[tuple[int, ...], ...] | None
    if trigger in ("enrolled", "time") or (trigger == "events" and not event_driven):
        timing = _read_trigger(table, key, arms, family, conduct, top.has("conduct"))
        if timing is None:
            return None
        n, per_arm, at = timing
    else:
        size = key
        read = table.numbers(size, integer=True, check=lambda v: v > 0,
                             expected="a whole number > 0")
        if read is None or any(v is None for v in read):
            return None
        n = [int(v) for v in read if v is not None]
        if any(b <= a for a, b in itertools.pairwise(n)):
            table.fail(size, "strictly increasing cumulative "
                       + ("event counts" if size == "events" else "sample sizes"), n)
            return None
        if size == "events":
            # events are counted over all arms; per arm, the share allocation gives when
            # hazards are equal (for the information fraction and reports only)
            weights = [a.allocation for a in arms]
            per_arm = tuple(tuple(round(n_k * w / sum(weights)) for w in weights)
                            for n_k in n) if arms else None
            at = tuple(float(v) for v in n)
            if table.has("efficacy_count") or table.has("futility_count"):
                table.fail("efficacy_count" if table.has("efficacy_count") else
                           "futility_count", "posterior probability thresholds (efficacy, "
                           "futility) for looks at event counts",
                           Phrase("a rule stated in counts"))
                return None
        else:
            if conduct is not None:
                check_complete_targets(table, conduct, n)
            per_arm = split_sizes(table, n, [a.allocation for a in arms]) if arms else None
    information = tuple(v / n[-1] for v in n)

    if table.has("efficacy_count") or table.has("futility_count"):
        looks = _read_count_rule(table, n, per_arm, two_arm, family)
        return None if looks is None else dataclasses.replace(looks, trigger=trigger, at=at)

    specs, values = [], {}
    for key in ("efficacy", *INTERIM_ONLY):
        spec, values[key] = read_threshold(table, key, information, key in INTERIM_ONLY)
        if spec is not None:
            specs.append((key, spec))
    efficacy, futility = values["efficacy"], values["futility"]
    if not table.has("efficacy"):
        table.fail("efficacy", "a final success threshold (the last look's efficacy value)",
                   Phrase("nothing (the key is missing)"))
    elif efficacy[-1] is None and any(key == "efficacy" for key, _ in specs):
        table.fail("efficacy", "a threshold at the last look (the final success threshold)",
                   Phrase(f"'{NONE_WORD}'"))
    for k, (e, f) in enumerate(zip(efficacy, futility, strict=True)):
        if e is not None and f is not None and f >= e:
            table.fail("futility", f"a futility threshold below the efficacy threshold "
                       f"({e:.6g}) at look {k + 1}", Phrase(f"{f:.6g}"))
    if per_arm is None:
        return None
    return Looks(tuple(n), per_arm, tuple(efficacy), tuple(futility),
                 tuple(values["futility_predictive"]), specs=tuple(specs), trigger=trigger,
                 at=at)


def _read_trigger(
    table: Table, key: str, arms: list[Arm], family: Family | None, conduct: Conduct | None,
    written: bool,
) -> tuple[list[int], tuple[tuple[int, ...], ...], tuple[float, ...]] | None:
    """Looks by enrolled subjects, calendar time or events: the targets and each look's
    planned subjects with an outcome (per arm)."""
    if key == "events" and family is not None and not family.event_driven:
        table.fail("events", "n, enrolled or time (looks by events need a time-to-event "
                   "endpoint)", Phrase(f"a {family.name} endpoint"))
        return None
    if conduct is None:
        if not written:  # a [conduct] table with problems has them recorded already
            table.fail(key, "a [conduct] table with the accrual (looks by enrolled "
                       "subjects, events or calendar time happen in calendar time)",
                       Phrase("no [conduct] table"))
        return None
    whole = key != "time"
    read = table.numbers(key, integer=whole, check=lambda v: v > 0,
                         expected="a whole number > 0" if whole else "a time > 0")
    if read is None or any(v is None for v in read):
        return None
    at = tuple(float(v) for v in read if v is not None)
    if any(b <= a for a, b in itertools.pairwise(at)):
        table.fail(key, "strictly increasing targets", list(at))
        return None
    if not arms:
        return None
    weights = [a.allocation for a in arms]
    complete = planned_counts(table, conduct, TRIGGERS[key], at, weights)
    if complete is None:
        return None
    return [sum(c) for c in complete], complete, at


def _read_count_rule(
    table: Table, n: list[int], per_arm: tuple[tuple[int, ...], ...] | None, two_arm: bool,
    family: Family | None,
) -> Looks | None:
    for key in ("efficacy", *INTERIM_ONLY):
        if table.has(key):
            table.fail(key, "no probability threshold when the rule is stated in counts",
                       table.data[key])
    if two_arm:
        table.fail("efficacy_count", "a one-arm design (count rules compare one arm's "
                   "responses with fixed numbers)", Phrase("a two-arm design"))
        return None
    if family is not None and not family.lattice:
        table.fail("efficacy_count", "an endpoint whose data are counts (binary or count) "
                   "for a rule stated in counts", Phrase(f"a {family.name} endpoint"))
        return None
    # Responses cannot exceed the subjects; event counts can.
    bounded = family is None or not family.truncates
    k = len(n)
    counts: dict[str, list[int | None]] = {}
    for key in ("efficacy_count", "futility_count"):
        if not table.has(key):
            counts[key] = [None] * k
            continue
        entries = table.numbers(key, integer=True, check=lambda v: v >= 0,
                                expected="a whole number >= 0", allow_none=True, length=k)
        if entries is None:
            return None
        for i, (c, n_i) in enumerate(zip(entries, n, strict=True)):
            if bounded and c is not None and c > n_i:
                table.problems.add(f"looks.{key}[{i + 1}]",
                                   f"a count between 0 and the look's n ({n_i})", c)
        counts[key] = [None if c is None else int(c) for c in entries]
    efficacy, futility = counts["efficacy_count"], counts["futility_count"]
    if efficacy[-1] is None:
        table.fail("efficacy_count", "a count at the last look (the final success rule)",
                   Phrase(f"'{NONE_WORD}' or nothing"))
    if futility[-1] is not None:
        table.fail("futility_count", f"'{NONE_WORD}' at the last look (failing to reach "
                   "efficacy there is failure)", futility[-1])
    if per_arm is None:
        return None
    none = (None,) * k
    return Looks(tuple(n), per_arm, none, none, none, tuple(efficacy), tuple(futility))


def _read_simulation(top: Table) -> Simulation:
    table = top.table("simulation", required=False)
    if table is None:
        return Simulation()
    table.allow("method", "replicates", "seed", "interval_level", "grid_points",
                "event_driven_engine")
    method = table.string("method", METHODS, required=False, default="auto")
    replicates = table.number("replicates", required=False, default=10_000, integer=True,
                              check=lambda v: 1 <= v <= MAX_REPLICATES,
                              expected=f"a whole number from 1 to {MAX_REPLICATES}")
    seed = table.number("seed", required=False, integer=True, bounded=False,
                        check=lambda v: 0 <= v < 2**63, expected="a whole number >= 0")
    level = table.number("interval_level", required=False, default=0.95,
                         check=lambda v: 0 < v < 1, expected="a level in (0, 1)")
    grid = table.number("grid_points", required=False, default=GRID_POINTS, integer=True,
                        check=lambda v: 101 <= v <= 200_001,
                        expected="a whole number from 101 to 200001")
    engine = table.string("event_driven_engine", EVENT_DRIVEN_ENGINES, required=False,
                          default="subjects")
    return Simulation(method or "auto", int(replicates or 10_000),
                      None if seed is None else int(seed), level or 0.95,
                      grid_points=int(grid or GRID_POINTS),
                      event_driven_engine=engine or "subjects")
