"""What a calibration is asked to do, checked once.

:func:`make_request` validates every setting against the design and reports every
problem at once, each as ``SOURCE: KEY: expected ...; got ...`` (a
:class:`~octrial.errors.SettingsError`: the keys are the settings' names, and the command
line names its options instead); the search code trusts the resulting :class:`Request`.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any

from octrial.design.model import Design
from octrial.design.reader import Phrase, Problems
from octrial.errors import SettingsError, show

VARY = ("final", "efficacy", "futility", "futility-predictive", "eta", "n")
"""What ``vary`` may name. ``final`` and ``efficacy`` are calibrated to alpha (at most
one of them); ``futility``, ``futility-predictive`` and ``eta`` are searched over a grid;
``n`` is the maximum sample size."""

CALIBRATED = ("final", "efficacy")
GRID = ("futility", "futility-predictive", "eta")
LOOK_RULES = ("fractions", "counts")
SIZING_RULES = ("first", "stable")
CRITERIA = ("power", "optimal")
SEARCHES = ("optimal", "minimax")
RULES = ("counts", "posterior")
MAX_NULL_POINTS = 2000
CONSTRAINT = re.compile(r"^\s*([A-Za-z_0-9]+)\s*(<=|>=)\s*([^\s]+)\s*$")
"""A Bayesian constraint as written on the command line: ``NAME<=VALUE`` or ``NAME>=VALUE``."""


@dataclass(frozen=True)
class Constraint:
    """A constraint on one Bayesian operating characteristic (:mod:`octrial.bayesian_oc`).

    Attributes
    ----------
    name : str
        One of :data:`octrial.bayesian_oc.METRICS`.
    op : {'<=', '>='}
    value : float
    """

    name: str
    op: str
    value: float

    def met(self, found: float) -> bool:
        """Whether ``found`` satisfies the constraint (a missing value never does)."""
        if not math.isfinite(found):
            return False
        return found <= self.value if self.op == "<=" else found >= self.value

    def __str__(self) -> str:
        return f"{self.name} {self.op} {self.value:g}"


@dataclass(frozen=True)
class Request:
    """A validated calibration request.

    Attributes
    ----------
    alpha : float or None
        Largest acceptable type I error over the null region (``None``: only the
        Bayesian constraints bind).
    power : float or None
        Target power at ``alternative``.
    alternative : tuple of float or None
        True values (one per arm, in the design's arm order) at which power is computed.
    vary : tuple of str
        What is varied (see :data:`VARY`); empty in a stage search.
    n_range : tuple of int or None
        (smallest, largest, step) maximum sample size for sizing and stage searches.
    looks : {'fractions', 'counts'}
        When N varies: interim looks at the same information fractions, or at the same
        counts.
    choose : {'first', 'stable'}
        Sizing rule: the smallest N that passes, or the smallest N from which every larger
        N in the range passes.
    criterion : {'power', 'optimal'}
        How grid searches pick among values meeting the constraints: the largest power, or
        the smallest expected sample size under the null.
    search : {'optimal', 'minimax'} or None
        A stage search by Simon's (1989) criteria.
    rule : {'counts', 'posterior'} or None
        The kind of rule a stage search builds.
    stages : int or None
        Number of looks in a stage search.
    null_points : int
        Points of the grid over the null region (each axis).
    method : str or None
        Engine method override.
    constraints : tuple of Constraint
        Bounds on Bayesian operating characteristics under the design prior
        (``criterion='NAME<=VALUE'``), met together with ``alpha`` when both are given.
    relevant_effect : float or None
        Bayesian power over effect >= this value beyond the null boundary.
    null_range : tuple of float or None
        (low, high): the composite null region searched for the maximum type I error is
        limited to these values of the treatment arm (one arm) or of the control arm on
        the null boundary (two arms); an assumption the summary states. ``None``: the
        whole null region.
    """

    alpha: float | None
    power: float | None = None
    alternative: tuple[float, ...] | None = None
    vary: tuple[str, ...] = ("final",)
    n_range: tuple[int, int, int] | None = None
    looks: str = "fractions"
    choose: str = "stable"
    criterion: str = "power"
    search: str | None = None
    rule: str | None = None
    stages: int | None = None
    null_points: int = 50
    method: str | None = None
    constraints: tuple[Constraint, ...] = ()
    relevant_effect: float | None = None
    null_range: tuple[float, float] | None = None

    @property
    def calibrated(self) -> str | None:
        """The threshold calibrated to alpha ('final' or 'efficacy'), if any."""
        return next((v for v in self.vary if v in CALIBRATED), None)

    @property
    def grid(self) -> tuple[str, ...]:
        """The values searched over a grid."""
        return tuple(v for v in self.vary if v in GRID)

    @property
    def sizing_range(self) -> tuple[int, int, int]:
        """``n_range``, which :func:`make_request` requires for sizing and stage searches."""
        if self.n_range is None:
            raise ValueError("no n_range: sizing and stage searches need one")
        return self.n_range

    @property
    def sizes(self) -> bool:
        """Whether the maximum sample size varies."""
        return "n" in self.vary


def _probability(problems: Problems, key: str, value: Any, what: str) -> float | None:
    if value is None:
        return None
    ok = isinstance(value, int | float) and not isinstance(value, bool) and 0 < value < 1
    if not ok or not math.isfinite(value):
        problems.add(key, f"{what} strictly between 0 and 1", value)
        return None
    return float(value)


def _parse_range(problems: Problems, value: Any) -> tuple[int, int, int] | None:
    """``'10:150'``, ``'10:150:2'`` or a (min, max[, step]) tuple."""
    expected = "MIN:MAX or MIN:MAX:STEP with whole numbers 1 <= MIN <= MAX and STEP >= 1"
    parts: Any = value
    if isinstance(value, str):
        parts = value.split(":")
    try:
        numbers = [int(str(p).strip()) for p in parts]
    except (TypeError, ValueError):
        problems.add("n_range", expected, value)
        return None
    if len(numbers) == 2:
        numbers.append(1)
    if len(numbers) != 3 or not 1 <= numbers[0] <= numbers[1] or numbers[2] < 1:
        problems.add("n_range", expected, value)
        return None
    return numbers[0], numbers[1], numbers[2]


def make_request(design: Design, source: str = "command line", **settings: Any) -> Request:
    """Check calibration settings against ``design`` and return a :class:`Request`.

    Parameters
    ----------
    design : Design
    source : str
        Where the settings came from, for messages.
    **settings
        ``alpha``, ``power``, ``alternative`` (sequence of numbers, or comma-separated
        text), ``vary`` (sequence or comma-separated text), ``n_range`` (``'MIN:MAX[:STEP]'``),
        ``looks``, ``choose``, ``criterion``, ``search``, ``rule``, ``stages``,
        ``null_points``, ``method``; ``criterion`` may also hold (a sequence of) Bayesian
        constraints ``'NAME<=VALUE'`` (see :func:`parse_criteria`), with
        ``relevant_effect``; ``alpha`` is then optional.

    Raises
    ------
    SettingsError
        Listing every problem, keyed by the settings' names.
    """
    problems = Problems()
    known = {"alpha", "power", "alternative", "vary", "n_range", "looks", "choose", "criterion",
             "search", "rule", "stages", "null_points", "method", "relevant_effect",
             "null_range"}
    for key in settings:
        if key not in known:
            problems.add(key, "one of " + ", ".join(sorted(known)), Phrase("an unknown setting"))
    pick, constraints = parse_criteria(problems, settings.get("criterion"))
    settings = {**settings, "criterion": pick}
    alpha = _probability(problems, "alpha", settings.get("alpha"), "a type I error")
    if settings.get("alpha") is None and not constraints:
        problems.add("alpha", "a type I error strictly between 0 and 1 (or Bayesian "
                     "constraints with `criterion` NAME<=VALUE)",
                     Phrase("nothing (the option is required)"))
    relevant = settings.get("relevant_effect")
    if relevant is not None and (not isinstance(relevant, int | float) or isinstance(
            relevant, bool) or not math.isfinite(relevant) or relevant < 0):
        problems.add("relevant_effect", "a number >= 0 (effect beyond the null boundary)",
                     relevant)
        relevant = None
    if constraints:
        _constraints_fit(problems, design, settings)
    null_range = _null_range(problems, design, settings.get("null_range"))
    power = _probability(problems, "power", settings.get("power"), "a target power")
    alternative = _alternative(problems, design, settings.get("alternative"))

    search = settings.get("search")
    vary = _vary(problems, settings.get("vary"), search)
    choices = {"looks": LOOK_RULES, "choose": SIZING_RULES, "criterion": CRITERIA,
               "search": SEARCHES, "rule": RULES}
    for key, allowed in choices.items():
        value = settings.get(key)
        if value is not None and value not in allowed:
            problems.add(key, "one of " + ", ".join(allowed), value)

    n_range = None
    if settings.get("n_range") is not None:
        n_range = _parse_range(problems, settings["n_range"])
    null_points = settings.get("null_points")
    null_points = 50 if null_points is None else null_points
    if not isinstance(null_points, int) or not 1 <= null_points <= MAX_NULL_POINTS:
        problems.add("null_points", f"a whole number from 1 to {MAX_NULL_POINTS}", null_points)
    stages = settings.get("stages")
    if stages is not None and (not isinstance(stages, int) or not 2 <= stages <= 10):
        problems.add("stages", "a whole number of looks from 2 to 10", stages)

    needs_power = search is not None or "n" in vary
    if needs_power and power is None and settings.get("power") is None:
        what = "a stage search" if search else "sizing (`vary` n)"
        problems.add("power", f"a target power for {what}", Phrase("nothing"))
    if (power is not None or search or vary_needs_alternative(vary)) and alternative is None \
            and settings.get("alternative") is None:
        problems.add("alternative", "the true value(s) at which power is computed "
                     f"({', '.join(design.arm_names)})", Phrase("nothing"))
    if (search or "n" in vary) and n_range is None and settings.get("n_range") is None:
        problems.add("n_range", "a range of maximum sample sizes MIN:MAX[:STEP]",
                     Phrase("nothing"))
    _design_fits(problems, design, vary, search, settings.get("rule"))
    if problems:
        raise SettingsError(source, problems)
    return Request(
        alpha=alpha, power=power, alternative=alternative, vary=vary, n_range=n_range,
        looks=settings.get("looks") or "fractions", choose=settings.get("choose") or "stable",
        criterion=settings.get("criterion") or ("optimal" if power is not None else "power"),
        search=search, rule=settings.get("rule") or (
            ("counts" if design.looks.uses_counts else "posterior") if search else None),
        stages=stages if stages is not None else (design.looks.count if search else None),
        null_points=null_points, method=settings.get("method"), constraints=constraints,
        relevant_effect=(design.hypothesis.relevant_effect if relevant is None
                         else float(relevant)),
        null_range=null_range)


def _null_range(problems: Problems, design: Design, raw: Any) -> tuple[float, float] | None:
    """``'LOW:HIGH'`` or a (low, high) pair, meeting the null region of ``design``."""
    if raw is None:
        return None
    arm = design.arm_names[1] if design.two_arm else design.arm_names[0]
    expected = (f"LOW:HIGH, two numbers LOW < HIGH: the {arm} arm's true values the null "
                "region is limited to")
    parts = raw.split(":") if isinstance(raw, str) else raw
    try:
        low, high = (float(str(v).strip()) for v in parts)
    except (TypeError, ValueError):
        problems.add("null_range", expected, raw)
        return None
    if not (math.isfinite(low) and math.isfinite(high) and low < high):
        problems.add("null_range", expected, raw)
        return None
    lo, hi = design.family.parameter_range
    h = design.hypothesis
    if not design.two_arm:
        # the null side of the benchmark (boundary included)
        lo, hi = (lo, h.benchmark) if h.sign > 0 else (h.benchmark, hi)
        where = f"the null region ({design.family.parameter} {h.better} than "
        where = where.replace(h.better, "no " + h.better) + f"{h.benchmark:g})"
    else:
        where = f"the range of the control {design.family.parameter} ({lo:g}, {hi:g})"
    if high < lo or low > hi:
        problems.add("null_range", f"a range that meets {where}", raw)
        return None
    return low, high


def parse_criteria(problems: Problems, raw: Any) -> tuple[str | None, tuple[Constraint, ...]]:
    """Split ``criterion`` values into the grid searches' pick rule ('power' or
    'optimal', at most one) and Bayesian constraints ``NAME<=VALUE`` / ``NAME>=VALUE``
    with NAME a Bayesian operating characteristic and VALUE in [0, 1]."""
    from octrial.bayesian_oc import METRICS

    if raw is None:
        return None, ()
    items = [raw] if isinstance(raw, str) else list(raw)
    pick: str | None = None
    found: list[Constraint] = []
    expected = ("'power' or 'optimal' (how grid searches pick), or NAME<=VALUE / "
                "NAME>=VALUE with NAME one of " + ", ".join(METRICS) + " and VALUE in [0, 1]")
    for item in items:
        text = str(item)
        if text in CRITERIA:
            if pick is not None and pick != text:
                problems.add("criterion", "at most one of 'power' and 'optimal'", text)
            pick = text
            continue
        match = CONSTRAINT.match(text)
        if match is None:
            problems.add("criterion", expected, text)
            continue
        name, op, value = match.groups()
        if name not in METRICS:
            problems.add("criterion", "a Bayesian operating characteristic: one of "
                         + ", ".join(METRICS), name)
            continue
        try:
            number = float(value)
        except ValueError:
            number = math.nan
        if not 0 <= number <= 1:
            problems.add("criterion", f"a probability in [0, 1] after {op}", text)
            continue
        found.append(Constraint(name, op, number))
    return pick, tuple(dict.fromkeys(found))


def _constraints_fit(problems: Problems, design: Design, settings: dict[str, Any]) -> None:
    """Bayesian constraints need design priors and an exact engine to integrate."""
    from octrial.bayesian_oc import exact_engine_applies
    from octrial.design_prior import has_design_prior, on_effect

    if not has_design_prior(design):
        where = ("hypothesis.design_prior" if on_effect(design) else
                 ", ".join(f"arms.{a}.design_prior" for a in design.arm_names))
        problems.add("criterion", f"a design with a design prior ({where}) for "
                     "Bayesian constraints", Phrase("a design without one"))
    elif settings.get("method") == "monte-carlo" or not exact_engine_applies(design):
        problems.add("criterion", "a design an exact engine evaluates (Bayesian "
                     "constraints integrate its exact OC curve over the design prior)",
                     Phrase(f"{design.family.name} endpoint evaluated by simulation"))
    if settings.get("search") is not None:
        problems.add("criterion", "`vary` (thresholds or n) for Bayesian constraints, not "
                     "a stage search", Phrase(f"`search` {settings['search']}"))


def vary_needs_alternative(vary: tuple[str, ...]) -> bool:
    """Grid searches pick by power or expected size at the alternative."""
    return any(v in GRID for v in vary)


def _vary(problems: Problems, raw: Any, search: str | None) -> tuple[str, ...]:
    if search is not None:
        if raw:
            problems.add("vary", "no `vary` with `search` (a stage search chooses the looks "
                         "and thresholds itself)", raw)
        return ()
    if raw is None or raw == "" or raw == ():
        return ("final",)
    items = raw.split(",") if isinstance(raw, str) else [
        part for item in raw for part in str(item).split(",")]
    items = [i.strip() for i in items if i.strip()]
    bad = [i for i in items if i not in VARY]
    if bad:
        problems.add("vary", "names from " + ", ".join(VARY), ",".join(bad))
        return ("final",)
    if {"final", "efficacy"} <= set(items):
        problems.add("vary", "at most one of 'final' and 'efficacy' (efficacy includes the "
                     "final threshold)", ",".join(items))
    if "eta" in items and "efficacy" not in items:
        items.append("efficacy")
    if any(i in GRID for i in items) and not any(i in CALIBRATED for i in items):
        items.append("final")
    return tuple(dict.fromkeys(items))


def _alternative(problems: Problems, design: Design, raw: Any) -> tuple[float, ...] | None:
    if raw is None:
        return None
    expected = (f"{len(design.arms)} number(s), comma-separated, for "
                f"{', '.join(design.arm_names)}")
    try:
        values = [float(v) for v in (raw.split(",") if isinstance(raw, str) else raw)]
    except (TypeError, ValueError):
        problems.add("alternative", expected, raw)
        return None
    if len(values) != len(design.arms):
        problems.add("alternative", expected, raw)
        return None
    family = design.family
    for arm, value in zip(design.arm_names, values, strict=True):
        problem = family.true_value_problem(value)
        if problem:
            problems.add("alternative", f"{problem} for {arm}", value)
            return None
    if family.is_null(design.hypothesis, tuple(values)):
        h = design.hypothesis
        if design.two_arm:
            where = f"a true effect beyond {h.shift:g} in the {h.better} direction"
        else:
            where = f"a {family.parameter} {h.better} than the benchmark {h.benchmark:g}"
        problems.add("alternative", f"a point outside the null region ({where})",
                     Phrase(f"{show(raw)} (inside the null)"))
        return None
    return tuple(values)


def _design_fits(
    problems: Problems, design: Design, vary: tuple[str, ...], search: str | None,
    rule: str | None,
) -> None:
    looks = design.looks
    if looks.uses_counts and any(v in ("efficacy", "futility", "futility-predictive", "eta")
                                 for v in vary):
        problems.add("vary", "'final' or 'n' for a rule stated in counts (probability "
                     "thresholds need a prior)", ",".join(vary))
    if looks.uses_counts and "n" in vary:
        problems.add("vary", "no 'n' for a rule stated in counts (count bounds do not "
                     "carry over to another N; use `search`)", ",".join(vary))
    if "eta" in vary:
        spec = dict(looks.specs).get("efficacy")
        if spec is None or spec.form in ("constant", "list"):
            problems.add("vary", "'eta' only when looks.efficacy is a function of the "
                         "information fraction", "eta")
    if search is not None:
        if design.two_arm:
            problems.add("search", "a one-arm design (stage searches compare one arm's "
                         "responses with a benchmark)", Phrase("a two-arm design"))
        if rule == "posterior" and any(a.prior is None for a in design.arms):
            problems.add("rule", "'counts' for a design without an analysis prior", rule)
