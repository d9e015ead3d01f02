"""Boundary tables of time-to-event designs for a monitoring committee.

* Two arms with the normal approximation (``analysis = 'normal-log-hazard-ratio'``): per
  look, at its event count, the posterior-probability thresholds as bounds on the
  estimated hazard ratio (the known-variance rule of :mod:`octrial.rules.normal` on the
  log hazard ratio, exponentiated).
* One arm, one period (exponential), gamma prior: per look, at its event count, the
  thresholds as bounds on the total exposure (time at risk): the posterior probability
  that the hazard is below the benchmark increases with the exposure at fixed events, so
  each threshold is one exposure (found by root finding); so does the predictive
  probability of final success, so predictive futility is one more exposure and the
  futility bound is the more demanding of the two.
* Other designs (several periods, two arms with gamma priors, looks not at event
  counts) depend on more than one number per look: ``None`` (``octrial decide`` gives
  the decision on the data).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd
from scipy import optimize

ROOT_TOLERANCE = 1e-10
"""Relative tolerance of the exposure bounds."""


def boundary_table(design: Any) -> pd.DataFrame | None:
    """The committee's bounds per look (module docstring), or ``None``."""
    family = design.family
    if design.looks.trigger not in ("events", "complete"):
        return None  # looks at enrolment counts or calendar times: events vary per study
    if family.prior_on_effect(design.endpoint, design.two_arm):
        return _hazard_ratio_bounds(design)
    if not design.two_arm and design.endpoint.periods == 1:
        return _exposure_bounds(design)
    return None


def _hazard_ratio_bounds(design: Any) -> pd.DataFrame:
    from octrial.rules.normal import build_normal_rule

    normal = design.family.as_normal_design(design)
    table = build_normal_rule(normal).boundary_table(normal)
    lower = design.hypothesis.better == "lower"
    rows = []
    for (_, row), events in zip(table.iterrows(), design.family.event_targets(design),
                                strict=True):
        out: dict[str, Any] = {"look": int(row["look"]), "events": events,
                               "bound_on": "estimated hazard ratio (treatment / control)"}
        for kind, op in (("efficacy", "<=" if lower else ">="),
                         ("futility", ">" if lower else "<")):
            bound = row[f"{kind}_bound"]
            hr = math.exp(bound) if np.isfinite(bound) else math.nan
            out[f"{kind}_bound"] = hr
            out[f"{kind}_rule"] = (f"estimated hazard ratio {op} {hr:.6g}"
                                   if np.isfinite(bound) else "none")
        rows.append(out)
    return pd.DataFrame(rows)


def _exposure_bounds(design: Any) -> pd.DataFrame:
    family = design.family
    looks = design.looks
    lower = design.hypothesis.better == "lower"
    rows = []
    for k, events in enumerate(family.event_targets(design)):
        out: dict[str, Any] = {"look": k + 1, "events": events,
                               "bound_on": "total exposure (time at risk)"}
        last = k == looks.count - 1
        for kind, threshold in (("efficacy", looks.efficacy[k]),
                                ("futility", looks.futility[k])):
            bound = math.nan if threshold is None else exposure_at(design, events, threshold)
            predictive = looks.futility_predictive[k]
            if kind == "futility" and predictive is not None and not last:
                # futility if B or the predictive probability is below its threshold:
                # both rise with the exposure when lower hazards are better
                other = predictive_exposure_at(design, events, predictive)
                bounds = [v for v in (bound, other) if not math.isnan(v)]
                bound = (max(bounds) if lower else min(bounds)) if bounds else math.nan
            out[f"{kind}_bound"] = bound
            # B rises with exposure when lower hazards are better
            claim = (kind == "efficacy") == lower
            op = (">=" if claim else "<") if kind == "efficacy" else ("<" if lower else ">")
            out[f"{kind}_rule"] = ("none" if math.isnan(bound)
                                   else f"exposure {op} {bound:.6g}")
        rows.append(out)
    return pd.DataFrame(rows)


def exposure_at(design: Any, events: int, threshold: float) -> float:
    """The total exposure at which the posterior probability of benefit after
    ``events`` events equals ``threshold`` (NaN when no exposure reaches it)."""
    family = design.family

    def gap(log_e: float) -> float:
        b = family.benefit_from(design, (np.array([[float(events)]]),),
                                (np.array([[math.exp(log_e)]]),))[0]
        return float(b) - threshold

    lo, hi = -30.0, 30.0
    if gap(lo) * gap(hi) > 0:
        return math.nan
    return math.exp(optimize.brentq(gap, lo, hi, rtol=ROOT_TOLERANCE))


def predictive_exposure_at(design: Any, events: int, threshold: float) -> float:
    """The total exposure at which the predictive probability of final success after
    ``events`` events equals ``threshold`` (NaN when no exposure reaches it; the
    predictive probability of :mod:`octrial.endpoints.survival_predictive` is monotone
    in the exposure, as the posterior is)."""
    family = design.family

    def gap(log_e: float) -> float:
        pp = family.predictive_from(design, (np.array([[float(events)]]),),
                                    (np.array([[math.exp(log_e)]]),))[0]
        return float(pp) - threshold

    lo, hi = -30.0, 30.0
    if gap(lo) * gap(hi) > 0:
        return math.nan
    return math.exp(optimize.brentq(gap, lo, hi, rtol=ROOT_TOLERANCE))


def committee_text(design: Any, table: pd.DataFrame) -> str:
    """The bounds in words, one line per look, with the posterior probability they
    stand for."""
    unit = design.endpoint.time_unit
    statement = design.family.interim().statement(design)
    lines = [f"Decision rule of {design.name}, on the {table['bound_on'].iloc[0]}; "
             f"posterior = {statement} (time unit: {unit}).",
             "Efficacy is checked first. At the final analysis a study that does not reach "
             "the success bound fails.",
             "Bounds are shown to 6 significant digits (boundaries.csv holds them in full).",
             "At each look, once its number of events has been observed:"]
    last = len(table)
    for _, row in table.iterrows():
        if row["look"] == last:
            lines.append(f"Final analysis ({row['events']} events): success if "
                         f"{row['efficacy_rule']}; otherwise failure.")
        else:
            lines.append(f"Look {row['look']} ({row['events']} events): stop for efficacy "
                         f"if {row['efficacy_rule']}; stop for futility if "
                         f"{row['futility_rule']}.")
    return "\n".join(lines) + "\n"
