"""Interim decisions for designs with several treatment arms (docs/multi-arm.md).

At look k the committee enters each arm's data so far (``low=12/40``, ``control=8/40``)
and names the arms that left the study at earlier looks (``stopped``; their data may be
left out). The conduct is the one the several-arm simulation applies
(:mod:`octrial.multiarm.kernel`), in its order:

1. **Each arm's own rule.** Treatment arm j is judged by its own design,
   :attr:`MultiArmDesign.pairs[j] <octrial.multiarm.model.MultiArmDesign.pairs>` (that
   arm against the shared control, or alone against the benchmark), through the very
   :func:`octrial.interim.decide` of one- and two-arm designs: posterior probability of
   benefit, predictive probability, posterior summaries and decision are those of
   ``decide(pair, k, ["treatment=...", "control=..."])``.
2. **Dropping by Pr(best).** At an interim look, among the arms that continue after
   their own rules, an arm whose posterior probability of being the best is below
   ``looks.drop_if_best_below`` is dropped.
3. **Selection.** Then, while more than ``selection.keep`` arms are left, the one least
   likely to be the best (by the same probabilities; ties: the later arm) is not
   carried forward.

The study ends when no treatment arm is left; it is a success when at least one arm
succeeds (at this look, or, for an arm named in ``stopped``, at an earlier one: the
committee knows which). For response-adaptive designs (``[allocation] kind`` other than
``'fixed'``) the allocation probabilities of the next block follow from the arms left
(:func:`octrial.allocation.interim.next_block`, or the allocation rule's
:func:`~octrial.allocation.next_allocation` when the treatment arms' priors differ).

Pr(best) is :func:`octrial.interim.best.probability_best_at`; two sets are reported: among
the arms in the study at this look (``pr_best``), and among those continuing after their
own rules (``pr_best_continuing``), which is what dropping and selection compare.
"""

from __future__ import annotations

import dataclasses
import re
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

import numpy as np

from octrial._version import __version__
from octrial.allocation import next_allocation
from octrial.allocation.interim import next_block
from octrial.caution import CAUTION
from octrial.design.model import CONTROL, TREATMENT, Design
from octrial.design.reader import Phrase, Problems, suggest
from octrial.endpoints import binary
from octrial.errors import SettingsError, bad_setting, single
from octrial.interim.base import PosteriorSummary
from octrial.interim.best import probability_best_at
from octrial.interim.decision import DEFAULT_LEVEL, Decision, decide, endpoint_support
from octrial.interim.observations import SETTING, split_entries
from octrial.interim.rule import CONTINUE, FAILURE, STOP_EFFICACY, STOP_FUTILITY, SUCCESS
from octrial.multiarm.model import MultiArmDesign

STOPPED = "stopped"
"""The setting naming the arms that left the study at earlier looks."""

DROPPED = "dropped"
NOT_SELECTED = "not selected"
LEFT_EARLIER = "left earlier"
"""Outcomes of an arm besides its own rule's decisions (continue, stop for efficacy, stop
for futility; at the last look success, failure)."""


@dataclass(frozen=True)
class ArmResult:
    """One treatment arm at this look.

    Attributes
    ----------
    arm : str
    in_study : bool
        False for an arm named in ``stopped``.
    observed : object or None
        The arm's data (``None`` when a stopped arm's data were left out).
    own : Decision or None
        The decision of the arm's own design (``decide`` on ``pairs[j]``), with quantities
        renamed from 'treatment' to the arm; ``None`` for a stopped arm.
    pr_best : float or None
        Posterior probability of being the best among the arms in the study at this look.
    pr_best_continuing : float or None
        The same among the arms that continue after their own rules (what dropping and
        selection compare); ``None`` where no such comparison is made.
    outcome : str
        ``continue``, ``stop for efficacy``, ``stop for futility``, ``success``,
        ``failure``, ``dropped``, ``not selected`` or ``left earlier``.
    why : str
        The outcome's reason in words.
    allocation : float or None
        Allocation probability of the next block (response-adaptive designs).
    """

    arm: str
    in_study: bool
    observed: Any
    own: Decision | None
    pr_best: float | None
    pr_best_continuing: float | None
    outcome: str
    why: str
    allocation: float | None = None

    def as_dict(self) -> dict[str, Any]:
        """The arm's entry of the JSON record."""
        record: dict[str, Any] = {
            "arm": self.arm, "in_study": self.in_study,
            "data": None if self.observed is None else dataclasses.asdict(self.observed)}
        own = self.own
        if own is not None:
            a = own.assessment
            record.update({
                "planned_n": own.planned_n[TREATMENT], "remaining_n": own.remaining_n[TREATMENT],
                "benefit": {"statement": own.statement, "probability": a.benefit},
                "predictive_probability_of_success": a.predictive,
                "posterior": [dataclasses.asdict(s) for s in own.posterior],
                "thresholds": {k: v for k, v in dataclasses.asdict(a.thresholds).items()
                               if v is not None},
                "boundaries_at_observed_n": a.boundaries,
                "own_decision": a.decision, "own_reason": a.reason})
        record.update({"pr_best": self.pr_best, "pr_best_continuing": self.pr_best_continuing,
                       "outcome": self.outcome, "why": self.why,
                       "next_block_allocation": self.allocation})
        return record


@dataclass(frozen=True)
class ArmsDecision:
    """Everything ``octrial decide`` reports for a several-arm design.

    Attributes
    ----------
    design : str
    look, looks : int
    control : str or None
        The shared control's name (``None`` against a benchmark).
    control_observed : object or None
    control_summary : PosteriorSummary or None
        The control's posterior mean and interval.
    control_allocation : float or None
        The control's share of the next block (response-adaptive designs).
    arms : tuple of ArmResult
        The treatment arms in file order.
    study, study_reason : str
        ``continue``, ``stop for efficacy`` (no arm left, one succeeded at this look),
        ``stop for futility`` (no arm left, none succeeded at this look); at the last look
        ``success`` or ``failure``; and why.
    allocation : dict or None
        The rule of a response-adaptive design (``kind``, ``power``, ...) with the next
        block's probabilities per arm, or ``None``.
    level : float
    drop_below : float or None
        This look's ``drop_if_best_below``.
    keep : int or None
        ``selection.keep``.
    warnings : tuple of str
    """

    design: str
    look: int
    looks: int
    control: str | None
    control_observed: Any
    control_summary: PosteriorSummary | None
    control_allocation: float | None
    arms: tuple[ArmResult, ...]
    study: str
    study_reason: str
    allocation: dict[str, Any] | None
    level: float
    drop_below: float | None
    keep: int | None
    warnings: tuple[str, ...] = ()

    @property
    def decision(self) -> str:
        """The study-level decision."""
        return self.study

    def as_dict(self) -> dict[str, Any]:
        """The JSON record (docs/output-files.md)."""
        control = None
        if self.control is not None:
            control = {"arm": self.control, "data": dataclasses.asdict(self.control_observed),
                       "posterior": None if self.control_summary is None
                       else dataclasses.asdict(self.control_summary),
                       "next_block_allocation": self.control_allocation}
        return {
            "octrial_version": __version__, "design": self.design, "look": self.look,
            "looks": self.looks, "final": self.look == self.looks, "several_arms": True,
            "level": self.level, "control": control,
            "arms": [a.as_dict() for a in self.arms],
            "drop_if_best_below": self.drop_below, "selection_keep": self.keep,
            "study": {"decision": self.study, "reason": self.study_reason},
            "allocation": self.allocation, "warnings": list(self.warnings),
            "caution": CAUTION,
        }


def _renamed(text: str, arm: str) -> str:
    """A text of an arm's own design in the several-arm design's words."""
    # 'rate_treatment' too: an underscore is no word boundary here
    return re.sub(rf"(?<![A-Za-z0-9]){TREATMENT}(?![A-Za-z0-9])", arm, text)


def _own_decision(pair: Design, arm: str, look: int, value: str, control: str | None,
                  level: float) -> Decision:
    """``decide`` on the arm's own design, with its words and errors in the arm's name."""
    entries = [f"{TREATMENT}={value}"] + ([] if control is None else [f"{CONTROL}={control}"])
    try:
        own = decide(pair, look, entries, level=level)
    except SettingsError as exc:
        raise SettingsError(exc.source, [dataclasses.replace(
            p, key=_renamed(p.key, arm), expected=_renamed(p.expected, arm),
            got=_renamed(p.got, arm), hint=_renamed(p.hint, arm)) for p in exc.problems]
        ) from None
    summaries = tuple(dataclasses.replace(s, quantity=_renamed(s.quantity, arm))
                      for s in own.posterior)
    return dataclasses.replace(
        own, statement=_renamed(own.statement, arm), posterior=summaries,
        assessment=dataclasses.replace(
            own.assessment, reason=_renamed(own.assessment.reason, arm),
            boundaries={k: _renamed(v, arm) for k, v in own.assessment.boundaries.items()}),
        warnings=tuple(f"{arm}: {_renamed(w, arm)}" for w in own.warnings))


def decide_arms(design: MultiArmDesign, look: int, data: Iterable[str], *,
                stopped: Iterable[str] = (), level: float = DEFAULT_LEVEL) -> ArmsDecision:
    """The decisions of a several-arm design at ``look`` on the data so far.

    Parameters
    ----------
    design : MultiArmDesign
    look : int
        The look, from 1 (the last is the final analysis).
    data : iterable of str
        ``ARM=...`` for the control and every treatment arm still in the study, in the
        endpoint's syntax (binary ``low=12/40``; count ``low=14/52.5``). Arms named in
        ``stopped`` may be given too (response-adaptive designs need them: their
        subjects count towards the burn-in and the information form's n).
    stopped : iterable of str
        Treatment arms that left the study at earlier looks (stopped by their rule,
        dropped or not selected): they take no part in this look.
    level : float
        Credible level of the equal-tailed intervals.

    Raises
    ------
    SettingsError
        A look out of range, an unknown or repeated arm, a missing arm's data, a stopped
        control, no arm left in the study, or data the arm's own design refuses.
    """
    looks = design.looks
    if not 1 <= look <= looks.count:
        raise bad_setting("look", "", f"a look between 1 and {looks.count}", look)
    if not 0 < level < 1:
        raise bad_setting("level", "", "a credible level between 0 and 1 (exclusive)", level)
    names = design.arm_names
    treatments = design.treatment_names
    support = endpoint_support(design.pairs[0])
    syntax = support.syntax
    left_problems = Problems()
    gone: list[str] = []
    for name in (s.strip() for s in stopped):
        if name not in treatments:
            left_problems.add("", "a treatment arm of the design (" + ", ".join(treatments)
                              + ")", name, suggest(name, treatments))
        elif name in gone:
            left_problems.add(name, "each arm once", Phrase("it twice"))
        else:
            gone.append(name)
    if len(gone) == len(treatments) and not left_problems:
        left_problems.add("", "at least one treatment arm still in the study",
                          Phrase("every treatment arm named"))
    if left_problems:
        raise SettingsError(STOPPED, left_problems)
    problems = Problems()
    values = split_entries(data, names, problems, syntax.form, syntax.example)
    observed: dict[str, Any] = {}
    for arm, value in values.items():
        try:
            observed[arm] = syntax.parse(value)
        except ValueError as exc:
            problems.add(arm, f"{exc}, like {arm}={syntax.example}", value)
    adaptive = design.allocation.adaptive and look < looks.count
    control = design.control.name if design.control is not None else None
    for arm in names:
        if arm in values or any(p.key == arm for p in problems):
            continue
        if arm not in gone:
            hint = "" if arm == control else f"or name it in `{STOPPED}` if it has left the study"
            problems.add(arm, f"the {arm} arm's data as {arm}={syntax.form}", Phrase("nothing"),
                         hint)
        elif adaptive:
            problems.add(arm, f"the {arm} arm's data as {arm}={syntax.form} (with "
                         "response-adaptive allocation every arm's subjects count towards "
                         "the burn-in and the information form's n)", Phrase("nothing"))
    if problems:
        raise SettingsError(SETTING, problems)

    control_value = values.get(control) if control else None
    own: dict[str, Decision] = {}
    for j, arm in enumerate(treatments):
        if arm not in gone:
            own[arm] = _own_decision(design.pairs[j], arm, look, values[arm], control_value,
                                     level)
    in_study = [a for a in treatments if a not in gone]
    last = look == looks.count
    higher = design.hypothesis.better == "higher"
    warnings: list[str] = []
    for decision in own.values():
        warnings.extend(w for w in decision.warnings if w not in warnings)

    best_now = _best(design, in_study, observed, higher)
    going = [a for a in in_study if own[a].decision == CONTINUE]
    drop = None if last else looks.drop_if_best_below[look - 1]
    keep = design.selection.keep
    best_going: dict[str, float] | None = None
    outcome: dict[str, tuple[str, str]] = {}
    if going and not last and (drop is not None or keep is not None):
        best_going = _best(design, going, observed, higher)
        if best_going is None:
            key = "looks.drop_if_best_below" if drop is not None else "selection.keep"
            raise single(design.source.path or design.name, key, "arms with beta or gamma "
                         "(mixture) priors, whose probability of being the best decide "
                         "computes", f"{design.family.name} arms with other priors")
        if drop is not None:
            for arm in going:
                if best_going[arm] < drop:
                    outcome[arm] = (DROPPED, f"Pr(best) = {best_going[arm]:.4f} among the "
                                    f"arms continuing is below {drop:g}")
        left = [a for a in going if a not in outcome]
        while keep is not None and len(left) > keep:
            worst = left[0]
            for arm in left:  # ties: the later arm goes, as the simulation does
                if best_going[arm] <= best_going[worst]:
                    worst = arm
            outcome[worst] = (NOT_SELECTED, f"Pr(best) = {best_going[worst]:.4f} is the "
                              f"lowest of the {len(left)} arms left; at most {keep} go on")
            left.remove(worst)
    for arm in in_study:
        if arm not in outcome:
            a = own[arm].assessment
            outcome[arm] = (a.decision, "own rule: " + a.reason)

    remaining = [a for a in in_study if outcome[a][0] == CONTINUE]
    successes = [a for a in in_study if outcome[a][0] in (STOP_EFFICACY, SUCCESS)]
    study, reason = _study(remaining, successes, gone, last)

    shares = None
    allocation = None
    if design.allocation.adaptive and remaining:
        shares = _next_block(design, observed, remaining, higher)
        allocation = {"kind": design.allocation.kind, "power": design.allocation.power,
                      "control_share": design.allocation.control_share,
                      "minimum": design.allocation.minimum,
                      "burn_in": design.allocation.burn_in,
                      "next_block": shares}
    elif design.allocation.adaptive and last:
        warnings.append("This is the final analysis: no block follows.")
    if best_now is None:
        warnings.append(f"Pr(best) needs beta or gamma(-mixture) priors; not computed for "
                        f"this {design.family.name} design.")
    control_summary = None
    if control is not None and own:
        first = next(iter(own.values()))
        control_summary = next((s for s in first.posterior
                                if s.quantity == f"rate ({CONTROL})"), None)
    arms = tuple(ArmResult(
        arm=a, in_study=a not in gone, observed=observed.get(a), own=own.get(a),
        pr_best=None if best_now is None or a in gone else best_now[a],
        pr_best_continuing=None if best_going is None or a not in best_going
        else best_going[a],
        outcome=LEFT_EARLIER if a in gone else outcome[a][0],
        why="left the study at an earlier look" if a in gone else outcome[a][1],
        allocation=None if shares is None else shares[a]) for a in treatments)
    return ArmsDecision(
        design=design.name, look=look, looks=looks.count, control=control,
        control_observed=observed.get(control) if control else None,
        control_summary=control_summary,
        control_allocation=None if shares is None or control is None else shares[control],
        arms=arms, study=study, study_reason=reason, allocation=allocation, level=level,
        drop_below=drop, keep=keep, warnings=tuple(warnings))


def _study(remaining: list[str], successes: list[str], gone: list[str],
           last: bool) -> tuple[str, str]:
    """The study-level decision and its reason."""
    won = ", ".join(successes)
    earlier = (" (an arm named in `stopped` that succeeded at an earlier look also makes "
               "the study a success)" if gone else "")
    if remaining and not last:
        text = "arms going on: " + ", ".join(remaining)
        if successes:
            text += f"; {won} succeeded at this look"
        return CONTINUE, text
    if successes:
        return (SUCCESS if last else STOP_EFFICACY), f"no arm goes on; {won} succeeded"
    return (FAILURE if last else STOP_FUTILITY), ("no arm goes on and none succeeded at "
                                                 "this look" + earlier)


def _sizes_and_statistics(design: MultiArmDesign, observed: dict[str, Any],
                          arms: list[str]) -> tuple[list[float], list[int]]:
    """Per arm the size (subjects, or exposure for counts) and the statistic."""
    sizes: list[float] = []
    stats: list[int] = []
    for arm in arms:
        obs = observed[arm]
        if hasattr(obs, "responses"):
            sizes.append(obs.n)
            stats.append(obs.responses)
        elif hasattr(obs, "events") and isinstance(obs.events, int):
            sizes.append(obs.exposure)
            stats.append(obs.events)
        else:
            raise TypeError(f"no Pr(best) for {type(obs).__name__}")
    return sizes, stats


def _best(design: MultiArmDesign, arms: list[str], observed: dict[str, Any],
          higher: bool) -> dict[str, float] | None:
    """Pr(best) of each of ``arms`` among themselves, or None without a closed form."""
    if not arms:
        return {}
    priors = [design.treatments[design.treatment_names.index(a)].prior for a in arms]
    try:
        sizes, stats = _sizes_and_statistics(design, observed, arms)
    except TypeError:
        return None
    values = probability_best_at(priors, sizes, stats, higher)
    return None if values is None else dict(zip(arms, (float(v) for v in values), strict=True))


def _next_block(design: MultiArmDesign, observed: dict[str, Any], remaining: list[str],
                higher: bool) -> dict[str, float]:
    """Allocation probabilities of the next block over every arm (0 for arms gone)."""
    names = design.arm_names
    control = design.shared_control
    # the simulation's rule, so that the burn-in ratio is the one simulated
    rule = design.allocation_rule()
    sizes, stats = _sizes_and_statistics(design, observed, list(names))
    active = [name in remaining or (control and name == names[0]) for name in names]
    priors = [a.prior for a in design.treatments]
    maximum = design.looks.n[-1]
    shared = all(isinstance(p, binary.BetaMixture) for p in priors) and len(
        {(p.weights, p.a, p.b) for p in priors}) == 1
    if shared:
        p = priors[0]
        table = next_block(rule, [int(x) for x in stats], [int(n) for n in sizes],
                           (p.weights, p.a, p.b), control, higher, maximum, active)
        shares = table["allocation"].to_numpy()
    else:
        best = _best(design, remaining, observed, higher)
        if best is None:
            raise single(design.source.path or design.name, "allocation.kind",
                         "arms with beta or gamma (mixture) priors for response-adaptive "
                         "allocation", f"{design.family.name} arms with other priors")
        pr = np.array([best.get(name, 0.0) for name in names])
        # count data: exposure, in subjects of the design's exposure each
        per_subject = float(getattr(design.endpoint, "exposure", 1.0))
        shares = next_allocation(rule, pr, np.array(active), control,
                                 round(sum(sizes) / per_subject), maximum)
    return dict(zip(names, (float(s) for s in shares), strict=True))
