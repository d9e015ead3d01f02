"""Pipeline subjects at an interim look: enrolled, but without an outcome yet.

A design with an outcome lag (``[conduct] outcome_lag``) sees at a look only the subjects
whose outcome has arrived; the others are the pipeline. ``octrial decide --pipeline
ARM=N`` gives their number per arm, and this module adds, for binary and count designs
(the count lattice):

* the predictive probability of final success integrating over the pipeline's outcomes
  and then over the subjects still to be enrolled up to the final analysis
  (:func:`octrial.engines.pipeline.pipeline_predictive`, the exact engine's own function).
  Given the parameter the subjects are exchangeable, so it equals the one-stage
  predictive probability over every subject without an outcome that the rule's tables
  hold (docs/methods.md, "Delayed outcomes"); both are reported, and the tests check
  them against brute-force enumeration;
* with ``analyse_pipeline = true`` (after a stop the pipeline's outcomes are awaited and
  analysed), the probability that a stop for efficacy now would still be a success once
  the pipeline reads out: the predictive probability that the final success threshold
  is met by the analysis of every enrolled subject (the same function, on the look
  followed by a final analysis at the enrolled sizes, with nobody still to enrol).

The pipeline does not change the decision at the look, which uses the outcomes only.
"""

from __future__ import annotations

import dataclasses
import re
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

from octrial.design.model import Design
from octrial.design.reader import Problems
from octrial.engines.pipeline import pipeline_predictive, timing
from octrial.errors import Problem, SettingsError
from octrial.interim.observations import require_every_arm, split_entries
from octrial.interim.rule import observed_design

SETTING = "pipeline"
"""The setting (``decide``'s keyword argument) that holds each arm's pipeline."""


@dataclass(frozen=True)
class PipelineReading:
    """What the pipeline adds at a look.

    Attributes
    ----------
    pipeline, enrolled : dict
        Per arm, subjects without an outcome yet and subjects enrolled (with an outcome
        plus pipeline), in subjects.
    planned_pipeline : dict or None
        Per arm, the pipeline the design's deterministic timing expects at this look
        (``None`` when the timing is random: Poisson arrivals or dropout).
    predictive : float or None
        Predictive probability of final success through the pipeline and the subjects
        still to enrol (``None`` without an analysis prior).
    success_if_stopped : float or None
        With ``analyse_pipeline``: the predictive probability that the analysis of every
        enrolled subject meets the final success threshold, i.e. that a stop for efficacy
        now is still a success once the pipeline reads out; ``None`` otherwise.
    final_threshold : float or None
        The final success threshold that analysis uses.
    analyse_pipeline : bool
        Whether the design analyses the pipeline after a stop.
    """

    pipeline: dict[str, int]
    enrolled: dict[str, float]
    planned_pipeline: dict[str, int] | None
    predictive: float | None
    success_if_stopped: float | None
    final_threshold: float | None
    analyse_pipeline: bool

    def as_dict(self) -> dict[str, Any]:
        """The ``pipeline`` entry of decide's JSON record."""
        return dataclasses.asdict(self)


def parse_pipeline(design: Design, entries: Iterable[str], look: int) -> dict[str, int]:
    """Read ``ARM=N`` entries (subjects enrolled without an outcome) for every arm.

    Raises
    ------
    SettingsError
        A design without an outcome lag, a look that is the final analysis, an endpoint
        off the count lattice, a malformed, unknown, repeated or missing arm.
    """
    problems = Problems()
    conduct = design.conduct
    if conduct is None or conduct.lag <= 0:
        lag = "no [conduct] table" if conduct is None else "conduct.outcome_lag = 0"
        raise SettingsError(SETTING, [Problem(
            "", "a design with an outcome lag (conduct.outcome_lag > 0): without one "
            "every enrolled subject has an outcome at the look", lag)])
    if not design.family.lattice:
        raise SettingsError(SETTING, [Problem(
            "", "a binary or count endpoint (the pipeline's outcomes are summed on the "
            "count lattice)", f"a {design.family.name} endpoint")])
    if look == design.looks.count:
        raise SettingsError(SETTING, [Problem(
            "", f"an interim look (look {look} is the final analysis, which uses the "
            "subjects with an outcome)", f"look {look}")])
    arms = design.arm_names
    found: dict[str, int] = {}
    for name, value in split_entries(entries, arms, problems, "N", "12").items():
        if re.fullmatch(r"\s*\d+\s*", value) is None:
            problems.add(name, f"a whole number of subjects >= 0, like {name}=12", value)
        else:
            found[name] = int(value)
    require_every_arm(arms, found, problems,
                      lambda arm: f"the {arm} arm's pipeline as {arm}=N (0 when none)")
    if problems:
        raise SettingsError(SETTING, problems)
    return {arm: found[arm] for arm in arms}


def assess_pipeline(design: Design, look: int, frame_design: Design,
                    complete: tuple[int, ...], stats: tuple[int, ...],
                    pipeline: dict[str, int]) -> PipelineReading:
    """The predictive probabilities through the pipeline at ``look`` (from 1).

    Parameters
    ----------
    design : Design
        The user's design.
    look : int
    frame_design : Design
        The design the observations are read on (count data may be in smaller units of
        exposure; :class:`~octrial.interim.base.Frame`).
    complete, stats : tuple of int
        Per arm, the subjects with an outcome and their statistic, in ``frame_design``'s
        units.
    pipeline : dict
        Per arm, subjects without an outcome (from :func:`parse_pipeline`).

    Raises
    ------
    SettingsError
        When subjects with an outcome plus the pipeline exceed an arm's planned maximum.
    """
    arms = design.arm_names
    final = design.looks.per_arm[-1]
    on_final = frame_design.looks.per_arm[-1]
    scale = on_final[0] // final[0]  # frame units per subject (count data: q)
    problems = [Problem(arm, f"at most the design's maximum of {top} subjects in the "
                        f"{arm} arm less the {n / scale:g} with an outcome "
                        f"({top - n / scale:g})", str(p))
                for arm, p, n, top in zip(arms, pipeline.values(), complete, final,
                                          strict=True)
                if n + p * scale > top * scale]
    if problems:
        raise SettingsError(SETTING, problems)
    enrolled = tuple(n + pipeline[arm] * scale for arm, n in zip(arms, complete, strict=True))
    conduct = design.conduct
    assert conduct is not None  # parse_pipeline checked it
    has_prior = all(arm.prior is not None for arm in design.arms)
    predictive = success = threshold = None
    if has_prior:
        predictive = pipeline_predictive(frame_design, stats, complete, enrolled)
        reduced = observed_design(frame_design, look - 1, complete)
        threshold = reduced.looks.efficacy[-1]
        if conduct.analyse_pipeline:
            at_stop = dataclasses.replace(reduced, looks=dataclasses.replace(
                reduced.looks, n=(sum(complete), sum(enrolled)),
                per_arm=(complete, enrolled)))
            success = pipeline_predictive(at_stop, stats, complete, enrolled)
    planned = None
    if conduct.deterministic and design.looks.trigger != "events":
        plan = timing(design).pipeline[look - 1]
        planned = dict(zip(arms, plan, strict=True))
    return PipelineReading(
        pipeline=dict(pipeline),
        enrolled={arm: _whole(e / scale) for arm, e in zip(arms, enrolled, strict=True)},
        planned_pipeline=planned, predictive=predictive, success_if_stopped=success,
        final_threshold=threshold, analyse_pipeline=conduct.analyse_pipeline)


def pipeline_warnings(design: Design, reading: PipelineReading) -> list[str]:
    """Warnings about a pipeline: another than the plan's, or subjects who may be lost."""
    out = []
    planned = reading.planned_pipeline
    if planned is not None and planned != reading.pipeline:
        given = ", ".join(f"{a} {n}" for a, n in reading.pipeline.items())
        plan = ", ".join(f"{a} {n}" for a, n in planned.items())
        out.append(f"The pipeline given ({given}) differs from the one the design's "
                   f"timing expects at this look ({plan}); the probabilities use the "
                   "pipeline given.")
    conduct = design.conduct
    if conduct is not None and conduct.dropout_hazard > 0:
        out.append(f"The design expects {conduct.lost_before_outcome:.1%} of subjects to be "
                   "lost before their outcome; the pipeline probabilities assume every "
                   "pipeline subject reaches it.")
    return out


def _whole(value: float) -> float:
    """An integer when ``value`` is one (subjects), else the value (count data in
    fractions of a subject's exposure)."""
    return round(value) if abs(value - round(value)) < 1e-9 else float(value)
