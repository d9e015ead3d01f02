"""The decision at an interim look on the data observed so far.

:func:`decide` checks the look and the data, applies the design's rule at the observed
sample sizes (:mod:`octrial.interim.rule`), and adds the posterior summaries and, when
per-subject data are given, the posterior predictive adequacy checks.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from octrial._version import __version__
from octrial.caution import CAUTION
from octrial.design.model import Design
from octrial.design.thresholds import FUNCTIONS
from octrial.endpoints import FAMILIES
from octrial.errors import Problem, SettingsError, bad_setting, single
from octrial.interim.base import EndpointInterim, Frame, PosteriorSummary
from octrial.interim.observations import SETTING, parse_data
from octrial.interim.pipeline import (
    PipelineReading,
    assess_pipeline,
    parse_pipeline,
    pipeline_warnings,
)
from octrial.interim.rule import (
    CONTINUE,
    FAILURE,
    STOP_EFFICACY,
    STOP_FUTILITY,
    SUCCESS,
    Assessment,
    count_decision,
    observed_look,
    probability_decision,
    thresholds_at,
)
from octrial.rules.boundaries import with_unit

DEFAULT_LEVEL = 0.95
DEFAULT_SEED = 20_261_201
"""Seed of the posterior predictive simulations when none is given."""


@dataclass(frozen=True)
class Decision:
    """Everything ``octrial decide`` reports.

    Attributes
    ----------
    design : str
        The design's name.
    look, looks : int
        This look (from 1) and the number of looks.
    observed : dict
        Arm to its observation.
    planned_n, remaining_n : dict
        Per arm: the look's planned size, and subjects still to come after the observed
        (count data: subject-equivalents, exposure / exposure per subject).
    statement : str
        The posterior probability of benefit in words.
    assessment : Assessment
        Posterior and predictive probabilities, thresholds applied, decision and reason.
    level : float
        Credible level of the intervals.
    posterior : tuple of PosteriorSummary
    warnings : tuple of str
    checks : tuple
        Posterior predictive adequacy checks (per-subject data only).
    extra : dict
        Endpoint-specific entries of the JSON record (count data: exposures).
    to_come : str
        What is still to come after the observed data, in words ('17 subjects').
    pipeline : PipelineReading or None
        What the subjects enrolled without an outcome add (``--pipeline``), or ``None``.
    """

    design: str
    look: int
    looks: int
    observed: dict[str, Any]
    planned_n: dict[str, int]
    remaining_n: dict[str, float]
    statement: str
    assessment: Assessment
    level: float
    posterior: tuple[PosteriorSummary, ...]
    warnings: tuple[str, ...] = ()
    checks: tuple[Any, ...] = ()
    extra: dict[str, Any] = dataclasses.field(default_factory=dict)
    to_come: str = ""
    pipeline: PipelineReading | None = None

    @property
    def decision(self) -> str:
        """continue, stop for efficacy, stop for futility; at the last look success or
        failure."""
        return self.assessment.decision

    def as_dict(self) -> dict[str, Any]:
        """The JSON record (docs/output-files.md)."""
        a = self.assessment
        record = {
            "octrial_version": __version__,
            "design": self.design,
            "look": self.look,
            "looks": self.looks,
            "final": self.look == self.looks,
            "data": {arm: dataclasses.asdict(obs) for arm, obs in self.observed.items()},
            "planned_n": self.planned_n,
            "remaining_n": self.remaining_n,
            **self.extra,
            "benefit": {"statement": self.statement, "probability": a.benefit},
            "predictive_probability_of_success": a.predictive,
        }
        if a.predictive_se is not None:
            record["predictive_probability_se"] = a.predictive_se
        if self.pipeline is not None:
            record["pipeline"] = self.pipeline.as_dict()
        record.update({
            "posterior": {"level": self.level,
                          "summaries": [dataclasses.asdict(s) for s in self.posterior]},
            "thresholds": {k: v for k, v in dataclasses.asdict(a.thresholds).items()
                           if v is not None},
            "boundaries_at_observed_n": a.boundaries,
            "decision": a.decision,
            "reason": a.reason,
            "warnings": list(self.warnings),
            "checks": [dataclasses.asdict(c) for c in self.checks],
            "caution": CAUTION,
        })
        return record


def endpoint_support(design: Design) -> EndpointInterim:
    """The interim support for ``design``'s endpoint, or a clear error."""
    support = design.family.interim()
    if support is None:
        known = [name for name, family in FAMILIES.items() if family.interim() is not None]
        raise single(design.source.path or design.name, "endpoint.type",
                     "an endpoint with interim decisions in this version ("
                     + ", ".join(known) + ")", design.endpoint.type)
    return support


def assess(design: Design, look: int, sizes: tuple[int, ...],
           stats: tuple[int, ...]) -> Assessment:
    """The rule of a lattice design at look ``look`` (from 1) for counts ``stats`` of
    ``sizes``.

    Uses the tables of :func:`octrial.interim.rule.observed_look` (cached per look and
    sizes), so assessing every point of a lattice is cheap.
    """
    support = endpoint_support(design)
    k = look - 1
    last = look == design.looks.count
    tables = observed_look(design, k, tuple(sizes))
    table = tables.rule.looks[0]
    benefit = None if table.benefit is None else float(table.benefit[stats])
    predictive = None if tables.predictive is None else float(tables.predictive[stats])
    th = tables.thresholds
    if th.in_counts:
        decision, reason = count_decision(th, stats[0], design.hypothesis.better == "higher",
                                          last, design.family.statistic)
    else:
        assert benefit is not None  # a probability rule has a benefit table
        decision, reason = probability_decision(th, benefit, predictive, last,
                                                support.statement(design))
    expected = (SUCCESS if last else STOP_EFFICACY) if table.efficacy[stats] else (
        (FAILURE if last else STOP_FUTILITY) if table.futility[stats] else CONTINUE)
    if decision != expected:  # the two readings of one rule must agree
        raise ArithmeticError(f"decision {decision!r} differs from the rule table's "
                              f"{expected!r} at {stats}")
    return Assessment(benefit, predictive, th, decision, reason,
                      _bounds(design, tables.boundaries, stats, last))


def _bounds(
    design: Design, rows: tuple[dict, ...], stats: tuple[int, ...], last: bool,
) -> dict[str, str]:
    """The look's boundaries at the observed sizes, in words (final look: success and
    failure)."""
    statistic = design.family.statistic
    if design.two_arm:
        row = rows[stats[1]]
        given = f" treatment {statistic}, given {stats[1]} control {statistic}"
    else:
        row = rows[0]
        given = f" {statistic}"
    out = {}
    for kind, name in zip(("efficacy", "futility"), ("success", "failure") if last else (
            "efficacy", "futility"), strict=True):
        rule = row[f"{kind}_rule"]
        out[name] = with_unit(rule, given)
    return out


def _check_sizes(support: EndpointInterim, frame: Frame, look: int) -> None:
    design, sizes = frame.design, frame.sizes
    looks = design.looks
    problems = []
    maximum = looks.per_arm[-1]
    for arm, n, top in zip(design.arm_names, sizes, maximum, strict=True):
        if n > top:
            problems.append(Problem(arm, f"at most the design's maximum of "
                                    f"{support.amount(design, top)} in the {arm} arm",
                                    support.amount(design, n)))
    if look < looks.count and sum(sizes) >= looks.n[look]:
        problems.append(Problem("", f"a total {support.size_word} below the one look "
                                f"{look + 1} plans ({support.quantity(design, looks.n[look])})"
                                f" for an analysis at look {look}",
                                f"{support.quantity(design, sum(sizes))} in total",
                                f"use `look` {look + 1} or later"))
    if problems:
        raise SettingsError(SETTING, problems)


def rule_at(design: Design, look: int, observed: dict[str, Any],
            seed: int = DEFAULT_SEED) -> tuple[Frame, Assessment]:
    """The rule's verdict at ``look`` (from 1) on parsed observations: the frame they are
    read on (sizes checked against the design) and the :class:`Assessment`.

    The decision part of :func:`decide`, without summaries, checks or warnings.
    """
    support = endpoint_support(design)
    frame = support.frame(design, observed, look)
    _check_sizes(support, frame, look)
    on = frame.design
    if on.family.lattice:
        return frame, assess(on, look, frame.sizes, support.statistics(on, observed))
    return frame, support.assess_point(on, look, frame.sizes, observed, seed)


def decide(
    design: Design, look: int, data: Iterable[str], *, level: float = DEFAULT_LEVEL,
    subjects: str | Path | None = None, seed: int = DEFAULT_SEED,
    pipeline: Iterable[str] = (),
) -> Decision:
    """The decision of ``design``'s rule at ``look`` on the observed ``data``.

    Parameters
    ----------
    design : Design
    look : int
        The interim look, from 1 (the last look is the final analysis).
    data : iterable of str
        ``ARM=...`` per arm in the endpoint's syntax (binary ``treatment=12/30``; count
        ``treatment=14/52.5``, events/exposure; normal ``treatment=1.8,2.4,40``,
        mean,sd,n). May be empty when ``subjects`` is given: the data are then the
        per-subject file's.
    level : float
        Credible level of the equal-tailed intervals.
    subjects : path, optional
        Per-subject data (:mod:`octrial.interim.subjects`): each arm's data are derived
        from it, and for count and normal endpoints the posterior predictive adequacy
        checks run on it. With ``data`` as well, the two must agree (up to the rounding
        of typed numbers).
    seed : int
        Seed of the simulations (posterior predictive checks; the predictive probability
        of two-arm unknown-sd designs).
    pipeline : iterable of str
        ``ARM=N`` per arm: subjects enrolled whose outcome has not arrived yet, for
        designs with an outcome lag (:mod:`octrial.interim.pipeline`). Adds the
        predictive probability through the pipeline and, with ``analyse_pipeline``, the
        probability that a stop for efficacy now is still a success once the pipeline
        reads out; the decision itself uses the outcomes only.

    Returns
    -------
    Decision

    Raises
    ------
    InputError
        A look out of range, malformed or impossible data, ``data`` that disagree with
        the per-subject file, an unsupported endpoint, or a pipeline for a design
        without an outcome lag or beyond an arm's planned maximum.
    """
    looks = design.looks
    if not 1 <= look <= looks.count:
        raise bad_setting("look", "", f"a look between 1 and {looks.count}", look)
    if not 0 < level < 1:
        raise bad_setting("level", "", "a credible level between 0 and 1 (exclusive)", level)
    support = endpoint_support(design)
    data = tuple(data)
    pipeline = tuple(pipeline)
    waiting = parse_pipeline(design, pipeline, look) if pipeline else None
    path = None if subjects is None else Path(subjects)
    if not data and path is None:
        form = support.syntax.form
        raise SettingsError(SETTING, [Problem(
            "", f"the data so far: `data` ARM={form} for each arm "
            f"({', '.join(design.arm_names)}), or a per-subject file (`subjects`)",
            "neither")])
    observed = parse_data(design, data) if data else None
    per_subject = None
    if path is not None:
        per_subject = support.read_subject_file(design, path)
        from_file = support.observed_from_subjects(design, path, per_subject)
        if observed is None:
            observed = from_file
        else:
            problems = support.disagreements(design, path, from_file, observed)
            if problems:
                raise SettingsError(SETTING, problems)
    assert observed is not None  # from the data or the per-subject file (checked above)
    frame, assessment = rule_at(design, look, observed, seed)
    on = frame.design
    planned = on.looks.per_arm[look - 1]
    warnings = list(support.warnings(design, observed))
    reading = None
    if waiting is not None:
        reading = assess_pipeline(design, look, on, frame.sizes,
                                  support.statistics(on, observed), waiting)
        warnings.extend(pipeline_warnings(design, reading))
    near = _near_threshold(assessment)
    if near:
        warnings.append(near)
    if tuple(frame.sizes) != tuple(planned):
        warnings.append(_size_warning(support, on, look, frame.sizes, assessment))
    has_prior = support.has_prior(design)
    posterior = support.summaries(design, observed, level) if has_prior else ()
    if not has_prior:
        warnings.append("The design states its rule in counts and has no analysis prior: "
                        "no posterior or predictive probability is computed.")
    checks: tuple[Any, ...] = ()
    if path is not None and per_subject is not None:
        checks, notes = support.check_subjects(design, path, per_subject, seed)
        warnings.extend(notes)
        flagged = [f"{c.statistic}" + (f" ({c.arm})" if design.two_arm else "")
                   for c in checks if c.flagged]
        if flagged:
            warnings.append("The posterior predictive checks flag the data model ("
                            + ", ".join(flagged) + "): the probabilities above rest on that "
                            "model; review the data and the model before acting on the "
                            "decision.")
    arms = design.arm_names
    scale = looks.per_arm[-1][0] / on.looks.per_arm[-1][0]  # design units per frame unit
    to_come = ", ".join((f"{a} " if design.two_arm else "") + support.amount(on, top - n)
                        for a, top, n in zip(arms, on.looks.per_arm[-1], frame.sizes,
                                             strict=True))
    return Decision(
        design=design.name, look=look, looks=looks.count, observed=observed,
        planned_n=dict(zip(arms, looks.per_arm[look - 1], strict=True)),
        remaining_n={a: _whole((top - n) * scale) for a, top, n in zip(
            arms, on.looks.per_arm[-1], frame.sizes, strict=True)},
        statement=support.statement(design), assessment=assessment, level=level,
        posterior=posterior, warnings=tuple(warnings), checks=tuple(checks),
        extra=support.extra_record(design, frame, look), to_come=to_come,
        pipeline=reading)


def _near_threshold(a: Assessment) -> str:
    """A warning when a simulated predictive probability is within 3 standard errors of
    its futility threshold (the decision could change with the seed)."""
    g = a.thresholds.futility_predictive
    if a.predictive_se is None or g is None or a.predictive is None:
        return ""
    if abs(a.predictive - g) >= 3 * a.predictive_se:
        return ""
    return (f"The predictive probability ({a.predictive:.4f}, Monte Carlo standard error "
            f"{a.predictive_se:.4f}) is within 3 standard errors of the futility threshold "
            f"{g:g}: the comparison is not settled by the simulation; rerun with other "
            "seeds (--seed) before acting on it.")


def _whole(value: float) -> float | int:
    """An integer when ``value`` is one (sizes in subjects), else the value."""
    return round(value) if abs(value - round(value)) < 1e-9 else float(value)


def _size_warning(support: EndpointInterim, design: Design, look: int,
                  sizes: tuple[int, ...], assessment: Assessment) -> str:
    looks = design.looks
    k = look - 1
    planned = looks.per_arm[k]
    arms = design.arm_names
    if design.two_arm:
        seen = ", ".join(f"{a} {support.quantity(design, n)}" for a, n in zip(
            arms, sizes, strict=True))
        plan = ", ".join(f"{a} {support.quantity(design, n)}" for a, n in zip(
            arms, planned, strict=True))
    else:
        seen, plan = support.quantity(design, sizes[0]), support.quantity(design, planned[0])
    size = support.size_word
    text = [f"The observed {size} ({seen}) differs from the one planned at look {look} "
            f"({plan})."]
    moved = "; ".join(f"{kind} {rule}" for kind, rule in assessment.boundaries.items())
    if assessment.thresholds.in_counts:
        text.append(f"The rule is stated in counts for the planned size and is applied as "
                    f"written ({moved}); at another size it is a different rule from the one "
                    "whose error rates were computed.")
    else:
        text.append(f"The probability thresholds are applied at the observed {size}, so "
                    f"the boundaries move: at the observed {size} {moved}")
        at_plan = _planned_bounds(support, design, look)
        if at_plan is not None:
            names = list(assessment.boundaries)
            text[-1] += (f" (at the planned {size}: {names[0]} {at_plan[0]}; "
                         f"{names[1]} {at_plan[1]})")
        text[-1] += "."
        changed = _function_thresholds(design, k, sum(sizes), support.quantity)
        if changed:
            text.append(changed)
    if look < looks.count:
        left = ", ".join((f"{a} " if design.two_arm else "")
                         + support.amount(design, top - n)
                         for a, top, n in zip(arms, looks.per_arm[-1], sizes, strict=True))
        text.append(f"The predictive probability uses the {left} still to come "
                    "(maximum minus observed).")
    text.append("The design's operating characteristics were computed for the planned sizes "
                "and hold only approximately.")
    return " ".join(text)


def _planned_bounds(support: EndpointInterim, design: Design,
                    look: int) -> tuple[str, str] | None:
    """The look's (efficacy, futility) bounds at the planned sizes in words, one arm."""
    if design.two_arm:
        return None
    planned = tuple(design.looks.per_arm[look - 1])
    if design.family.lattice:
        row = observed_look(design, look - 1, planned).boundaries[0]
        unit = f" {design.family.statistic}"
        return with_unit(row["efficacy_rule"], unit), with_unit(row["futility_rule"], unit)
    return support.bound_rules(design, look, planned)


def _function_thresholds(design: Design, k: int, total: int,
                         quantity: Callable[[Design, float], str]) -> str:
    looks = design.looks
    if k == looks.count - 1:
        return ""
    forms = [kind for kind, spec in looks.specs if spec.form in FUNCTIONS]
    if not forms:
        return ""
    now = thresholds_at(design, k, total)
    t_obs, t_plan = total / looks.n[-1], looks.information[k]
    parts = [f"{kind} {getattr(now, kind):.4g} (planned {getattr(looks, kind)[k]:.4g})"
             for kind in forms if getattr(now, kind) is not None]
    return (f"Thresholds given as a function of the information fraction are evaluated at "
            f"the observed t = {quantity(design, total)}/{quantity(design, looks.n[-1])} = "
            f"{t_obs:.3f} (planned {t_plan:.3f}): " + ", ".join(parts) + ".")
