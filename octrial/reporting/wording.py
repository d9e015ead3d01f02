"""The design in words: hypotheses, the posterior probability the rule uses, the rule at
each look, sample-size range, borrowing and the assumptions every number depends on.

The family's own words (its parameter, statistic, unit, data model and the note on
effective sample sizes) come from the family object (:class:`~octrial.endpoints.base.Family`).
"""

from __future__ import annotations

import tomllib
from typing import Any

import pandas as pd

from octrial.design.model import Design
from octrial.reporting.formats import probability, truth

BETTER = {"higher": ">", "lower": "<"}
WORSE = {"higher": "≤", "lower": "≥"}


def parameter(design: Design) -> str:
    """Plain name of the per-arm parameter (for example 'rate')."""
    return design.family.parameter


def statistic(design: Design) -> str:
    """Plain name of the counted statistic of a lattice endpoint ('responses', 'events')."""
    return design.family.statistic


def unit(design: Design) -> str:
    """The parameter's unit."""
    return design.family.unit


def _is_difference(design: Design) -> bool:
    return design.hypothesis.comparison in (None, "difference")


def _measure(design: Design) -> str:
    """The two-arm effect measure, written in the better direction for differences."""
    p = parameter(design)
    h = design.hypothesis
    if h.comparison == "ratio":
        return f"{p}_T / {p}_C"
    if h.comparison == "odds-ratio":
        return f"odds ratio of {p}_T to {p}_C"
    if not _is_difference(design):
        return f"{h.comparison} of {p}_T to {p}_C"
    return f"{p}_T − {p}_C" if h.better == "higher" else f"{p}_C − {p}_T"


def _claim_threshold(design: Design) -> float:
    """The value of the measure a success must pass (differences: in the better
    direction; ratios: 1 + sign x shift)."""
    h = design.hypothesis
    if _is_difference(design):
        return h.shift
    return float(getattr(h, "threshold", 1.0 + h.sign * h.shift))


def _claim_direction(design: Design) -> str:
    return "higher" if _is_difference(design) else design.hypothesis.better


def benefit_definition(design: Design) -> str:
    """B, the posterior probability of benefit the rule compares with its thresholds."""
    h = design.hypothesis
    if not design.two_arm:
        return f"Pr({parameter(design)} {BETTER[h.better]} {truth(h.benchmark)} | data)"
    op = BETTER[_claim_direction(design)]
    return f"Pr({_measure(design)} {op} {truth(_claim_threshold(design))} | data)"


def hypotheses(design: Design) -> tuple[str, str]:
    """The null and alternative hypotheses as text."""
    h = design.hypothesis
    if not design.two_arm:
        p = parameter(design)
        return (f"{p} {WORSE[h.better]} {truth(h.benchmark)}",
                f"{p} {BETTER[h.better]} {truth(h.benchmark)}")
    measure, side = _measure(design), _claim_direction(design)
    limit = truth(_claim_threshold(design))
    return f"{measure} {WORSE[side]} {limit}", f"{measure} {BETTER[side]} {limit}"


def claim(design: Design) -> str:
    """What a success claims, in words."""
    h = design.hypothesis
    if not design.two_arm:
        side = "above" if h.better == "higher" else "below"
        return f"the treatment's true {parameter(design)} is {side} {truth(h.benchmark)}"
    if h.kind == "non-inferiority":
        return (f"the treatment is not worse than control by the margin {truth(h.margin)} or "
                "more (non-inferiority)")
    extra = f" by more than {truth(h.margin)}" if h.margin else ""
    return f"the treatment is better than control{extra} (superiority)"


def _threshold(value: float | None) -> str:
    return "–" if value is None else truth(value)


def look_rules(design: Design) -> list[dict[str, Any]]:
    """The decision rule at each look, as table cells."""
    looks = design.looks
    rows = []
    last = looks.count - 1
    for k in range(looks.count):
        row: dict[str, Any] = {
            "look": k + 1,
            "n": looks.n[k],
            "per_arm": " / ".join(str(v) for v in looks.per_arm[k]),
            "information": looks.information[k],
        }
        if looks.efficacy_count is not None:  # a rule stated in counts (Looks.uses_counts)
            e = looks.efficacy_count[k]
            f = None if looks.futility_count is None else looks.futility_count[k]
            ge, le = ("≥", "≤") if design.hypothesis.better == "higher" else ("≤", "≥")
            counted = statistic(design)
            row["efficacy"] = "–" if e is None else f"{counted} {ge} {e}"
            row["futility"] = "–" if f is None else f"{counted} {le} {f}"
            row["futility_predictive"] = "–"
        else:
            row["efficacy"] = _threshold(looks.efficacy[k])
            row["futility"] = _threshold(looks.futility[k])
            row["futility_predictive"] = _threshold(looks.futility_predictive[k])
        row["kind"] = "final analysis" if k == last else "interim"
        rows.append(row)
    return rows


def rule_sentences(design: Design) -> list[str]:
    """The decision rule in sentences."""
    b = "B"
    looks = design.looks
    if looks.uses_counts:
        ge = "at least" if design.hypothesis.better == "higher" else "at most"
        text = [f"The rule is stated in counts: at each look the study stops for efficacy "
                f"when the {statistic(design)} reach the efficacy count ({ge} it) and for "
                "futility when they are on the other side of the futility count."]
        text.append("At the final look, reaching the efficacy count is success; anything "
                    "else is failure.")
        return text
    text = [f"At each look, with {b} the posterior probability above: stop and declare "
            f"success if {b} ≥ the look's efficacy threshold (checked first); otherwise "
            f"stop for futility if {b} < the futility threshold"]
    if any(v is not None for v in looks.futility_predictive):
        text[0] += (", or if the predictive probability of success at the final analysis "
                    "(given the data so far) is below the predictive futility threshold")
    text[0] += "."
    text.append(f"At the final look, success if {b} ≥ the final efficacy threshold "
                f"({_threshold(looks.efficacy[-1])}); otherwise failure. Futility stopping "
                "is taken as binding: every number assumes the study stops when a futility "
                "boundary is crossed.")
    for key, spec in looks.specs:
        if spec.form not in ("constant", "list"):
            name = key.replace("_", " ")
            text.append(f"The {name} threshold is the function {spec.form} of the "
                        f"information fraction t = n / N, with lambda = {truth(spec.lam)} and "
                        f"eta = {truth(spec.eta)} (the shape used by Zhou, Lee & Yuan 2017).")
    return text


def arm_rows(design: Design) -> list[dict[str, str]]:
    """Per arm: allocation, analysis prior, its effective sample size, design prior."""
    total = sum(a.allocation for a in design.arms)
    on_effect = getattr(design.hypothesis, "prior", None) is not None
    rows = []
    for arm in design.arms:
        prior = arm.prior
        ess = getattr(prior, "effective_sample_size", None)
        if prior is not None:
            described = _describe(prior)
        elif on_effect:
            described = "none: the prior is on the effect (below)"
        elif design.looks.uses_counts:
            described = "none (rule stated in counts)"
        else:
            described = "none"
        rows.append({
            "arm": arm.name,
            "allocation": f"{arm.allocation:g} ({arm.allocation / total:.0%})",
            "prior": described,
            "ess": f"{ess:.3g}" if isinstance(ess, (int, float)) else "–",
            "design_prior": _describe(arm.design_prior) if arm.design_prior is not None
            else "not stated",
        })
    return rows


def effect_prior(design: Design) -> str | None:
    """The analysis prior on the two-arm effect, for families that put it there."""
    prior = getattr(design.hypothesis, "prior", None)
    return None if prior is None else _describe(prior)


def _describe(prior: Any) -> str:
    describe = getattr(prior, "describe", None)
    return describe() if callable(describe) else str(prior)


def ess_note(design: Design) -> str:
    """How the effective sample sizes were computed."""
    return design.family.prior_size_note


def sample_size_range(design: Design, boundaries: pd.DataFrame | None) -> tuple[int, int]:
    """Smallest and largest total sample size at which a study can end.

    The smallest is the first look at which the boundary table can be reached (a count
    exists that stops the study); without a boundary table, the first look with a
    threshold.
    """
    looks = design.looks
    for k in range(looks.count - 1):
        if boundaries is not None and {"look", "efficacy_bound", "futility_bound"} <= set(
                boundaries.columns):
            at = boundaries[boundaries["look"] == k + 1]
            if at["efficacy_bound"].notna().any() or at["futility_bound"].notna().any():
                return looks.n[k], looks.n[-1]
            continue
        stops = (looks.efficacy[k], looks.futility[k], looks.futility_predictive[k])
        counts = tuple(bounds[k] for bounds in (looks.efficacy_count, looks.futility_count)
                       if bounds is not None)
        if any(v is not None for v in (*stops, *counts)):
            return looks.n[k], looks.n[-1]
    return looks.n[-1], looks.n[-1]


BORROWING_KEYS = ("historical", "power_prior", "borrow")


def borrowing(design: Design) -> str:
    """Whether the design borrows information from outside the study."""
    try:
        data = tomllib.loads(design.source.text) if design.source.text else {}
    except tomllib.TOMLDecodeError:
        data = {}
    found = sorted(_keys_like(data, BORROWING_KEYS))
    if not found:
        return "none: the analysis priors use no historical data"
    return ("historical information enters through " + ", ".join(found)
            + " (see the priors above and the design file in the reproducibility section)")


def _keys_like(node: Any, words: tuple[str, ...], path: str = "") -> set[str]:
    found: set[str] = set()
    if isinstance(node, dict):
        for key, value in node.items():
            where = f"{path}.{key}" if path else str(key)
            if any(w in str(key).lower() for w in words):
                found.add(where)
            found |= _keys_like(value, words, where)
    elif isinstance(node, list):
        for item in node:
            found |= _keys_like(item, words, path)
    return found


def null_boundary_covered(design: Design, oc: pd.DataFrame) -> bool | None:
    """Whether the grid holds a scenario on the null boundary (None: no null scenario).

    The maximum type I error of a monotone rule is reached on the boundary; when the
    grid misses it, the reported maximum understates the true one.
    """
    null = oc[oc["is_null"]]
    if null.empty:
        return None
    truths = null[[f"true_{arm}" for arm in design.arm_names]].to_numpy(float)
    effects = [design.family.effect(design.hypothesis, tuple(t)) for t in truths]
    return bool(min(abs(e) for e in effects) <= 1e-9)


def type1_sentence(data: Any) -> str:
    """The maximum type I error, where it is reached, and against alpha when given."""
    t1 = data.type1
    if t1 is None:
        return ("No scenario in the grid lies in the null region, so the type I error is "
                "not assessed by this report.")
    at = ", ".join(f"{parameter(data.design)}_{arm[0].upper()} = {truth(v)}"
                   if arm in data.design.arm_names else f"{arm} = {truth(v)}"
                   for arm, v in t1["at"].items())
    return (f"Maximum type I error over the {t1['null_scenarios']} null scenarios of the "
            f"grid: {probability(t1['max_type1_error'])}{standard_error(t1)}, at scenario "
            f"{t1['scenario']} ({at}).{alpha_verdict(t1, data.alpha)}")


def largest_error(t1: dict[str, Any]) -> str:
    """The largest type I (or family-wise) error with its standard error, as the cover
    shows it; ``t1`` is run.json's ``type1`` record."""
    se = f" (se {probability(t1['se'])})" if t1.get("se") else ""
    return probability(t1["max_type1_error"]) + se


def standard_error(t1: dict[str, Any]) -> str:
    """The Monte Carlo standard error of run.json's ``type1`` record in parentheses, or
    nothing when the numbers are exact."""
    return f" (Monte Carlo standard error {probability(t1['se'])})" if t1.get("se") else ""


def alpha_verdict(t1: dict[str, Any], alpha: float | None) -> str:
    """The sentence that sets the largest error against the stated level ``alpha``, or
    nothing when no level is stated (one verdict for one-arm, two-arm and several-arm
    reports)."""
    if alpha is None:
        return ""
    verdict = "at or below" if t1["max_type1_error"] <= alpha else "above"
    return f" This is {verdict} the stated level alpha = {truth(alpha)}."


def conduct_assumptions(design: Any) -> list[str]:
    """The assumptions of calendar-time conduct (``[conduct]``), in place of the
    outcome-at-enrolment and looks-at-sample-size ones."""
    c = design.conduct
    unit = c.time_unit
    accrual = c.accrual
    if accrual.arrivals == "fixed":
        entry = "at the stated fixed enrolment times"
    else:
        rates = ", ".join(f"{r:g} per {unit} from {unit} {s:g}" for r, s in
                          zip(accrual.rates, accrual.starts, strict=True))
        entry = ("as a Poisson process" if accrual.arrivals == "poisson" else
                 "evenly") + f" at {rates}"
    loss = (f"an exponential time to loss to follow-up with hazard {c.dropout_hazard:g} per "
            f"{unit}, independent of the outcome (non-informative censoring)"
            if c.dropout_hazard > 0 else "no loss to follow-up")
    blocks = ":".join(f"{a.allocation:g}" for a in design.arms)
    if not design.family.event_driven:
        return _delayed_outcome_assumptions(design, entry, blocks)
    return [
        f"Subjects enter {entry}, up to {c.max_enrolment} in total, allocated in fixed "
        f"blocks ({blocks}); each has {loss}, and follow-up is censored at each analysis.",
        f"Looks happen when the study has seen exactly the planned numbers of "
        f"{design.family.look_unit} ({', '.join(str(n) for n in design.looks.n)}); if "
        f"fewer can ever be seen, the analysis happens when every subject's follow-up has "
        "ended and is the final one. A stop ends enrolment.",
    ]


def _delayed_outcome_assumptions(design: Any, entry: str, blocks: str) -> list[str]:
    """Binary, count and normal endpoints in calendar time: lag, loss and look timing."""
    c, looks = design.conduct, design.looks
    unit = c.time_unit
    loss = (f"an exponential time to loss with hazard {c.dropout_hazard:g} per {unit} "
            f"(so {c.lost_before_outcome:.3g} of subjects are lost before their outcome, "
            "which is then missing at random)" if c.dropout_hazard > 0 else
            "no loss to follow-up")
    when = {"complete": "the planned numbers of subjects with an outcome ("
                        + ", ".join(str(n) for n in looks.n) + ")",
            "enrolled": "the planned numbers of subjects enrolled ("
                        + ", ".join(f"{a:g}" for a in looks.at) + ")",
            "time": f"the planned calendar times ({', '.join(f'{a:g}' for a in looks.at)} "
                    f"{unit}s)"}[looks.trigger]
    pipeline = ("after a stop the outcomes of the subjects already enrolled are awaited "
                "and analysed (the final analysis of a stop for efficacy uses the final "
                "success threshold)" if c.analyse_pipeline else
                "the subjects still waiting for their outcome at a stop are not analysed")
    return [
        f"Subjects enter {entry}, up to {c.max_enrolment} in total, allocated in fixed "
        f"blocks ({blocks}); each outcome is observed {c.lag:g} {unit}s after enrolment; "
        f"each subject has {loss}.",
        f"Looks happen at {when} and use only the outcomes observed by then. A stop ends "
        f"enrolment; {pipeline}.",
    ]


def assumptions(data: Any) -> list[str]:
    """Every assumption the report's numbers depend on."""
    design = data.design
    items = list(design.family.assumptions(design)) or [
        "The data model of the endpoint stated in the design file."]
    per_arm = ", ".join(" / ".join(str(v) for v in n) for n in design.looks.per_arm)
    timing = conduct_assumptions(design) if design.conduct is not None else [
        "Every subject's outcome is known at the look that counts the subject: no delayed "
        "outcomes, no drop-out, no missing data.",
        f"Looks happen at exactly the planned cumulative sample sizes ({per_arm} per arm, "
        "treatment first); the allocation is met exactly at every look."]
    items += [
        "The true parameter values are those of each scenario and do not change during the "
        "study (no drift over time, no difference between centres or subgroups).",
        *timing,
        "The decision rule is applied exactly as stated, efficacy before futility, and "
        "futility stopping is binding.",
        "The analysis priors are as stated in the design summary; results for other priors "
        "may differ.",
        "The type I error is evaluated at the null scenarios of the grid only; the composite "
        "null region between grid points is not searched here.",
    ]
    covered = null_boundary_covered(design, data.oc)
    if covered is False:
        items.append("The grid has no scenario on the null boundary; for a monotone rule the "
                     "largest type I error is reached there, so the maximum reported here "
                     "may understate it.")
    engines = set(data.oc["method"])
    if "monte-carlo" in engines:
        seed = data.record.get("seed")
        items.append("Monte Carlo results depend on the pseudo-random streams derived from "
                     f"the seed ({seed}); other seeds give results within the stated "
                     "standard errors.")
    if "exact" in engines:
        items.append("Exact results are exact up to the numerical tolerances stated in the "
                     "precision section.")
    # calibration assumptions (--null-range) and the design prior behind Bayesian OCs
    items += list((data.calibration_record or {}).get("assumptions") or [])
    if "prob_success" in (data.record.get("bayesian_operating_characteristics") or {}):
        items.append("The operating characteristics under the design prior hold only as far "
                     "as the design prior describes the plausible true values.")
    return items
