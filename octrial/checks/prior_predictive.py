"""Prior predictive distributions of the study's outcome, with flags.

Under the analysis prior and under the design prior (when given), the distribution of
each arm's outcome at the final look (responses, events, sample mean) and of the observed
effect (observed rate on one arm; difference in observed rates, observed log odds or rate
ratio with 0.5 added to each count, or difference in sample means on two arms): exact
pmfs from the families' own predictive distributions (beta-binomial, negative binomial,
their mixtures, the grid engine's predictive) or closed-form densities (normal, Student t).

A prior is flagged, with the numbers, when its prior predictive distribution puts
visible mass on outcomes that are impossible or implausible (heuristics, common practice
without a published source; thresholds below):

* **all or none** (binary): more than :data:`ALL_OR_NONE` of the studies would see no
  response or every subject responding in an arm;
* **impossible** (normal, with ``--outcome-range LOW:HIGH``): more than
  :data:`IMPOSSIBLE` of the sample means fall outside the range one subject's outcome can
  take (differences: outside +-(HIGH - LOW));
* **implausible effect**: more than :data:`IMPLAUSIBLE` of the observed effects fall
  outside the plausible range (``--plausible LOW:HIGH``, else the family's default:
  differences in rates within +-0.5, ratios within a factor 10, normal effects within one
  subject-level sd, event rates within a factor 10 of the benchmark).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass
from typing import Any

from octrial.checks.model import ANALYSIS, DESIGN, CheckModel, benchmark
from octrial.checks.predictive import Predictive
from octrial.checks.settings import CheckSettings

ALL_OR_NONE = 0.10
IMPOSSIBLE = 0.01
IMPLAUSIBLE = 0.05


@dataclass(frozen=True, eq=False)
class PriorPredictiveResult:
    """The checks.json record and the distributions (for the plot), by prior."""

    record: dict[str, Any]
    distributions: dict[str, list[Predictive]]


def claim_side(model: CheckModel) -> tuple[float, bool]:
    """(value, above): the observed effect is on the claim's side when it is above (or
    below) this value, on the observed effect's own scale."""
    d = model.design
    h = d.hypothesis
    higher = h.better == "higher"
    if not d.two_arm:
        return benchmark(d), higher
    if h.comparison == "difference":
        return h.sign * h.shift, higher
    return math.log(h.threshold), higher


def run_prior_predictive(model: CheckModel, settings: CheckSettings) -> PriorPredictiveResult:
    """Prior predictive summaries and flags under both priors (module docstring)."""
    started = time.perf_counter()
    record: dict[str, Any] = {}
    shown: dict[str, list[Predictive]] = {}
    plausible = _plausible(model, settings)
    for source in (ANALYSIS, DESIGN):
        reason = model.cannot_draw(source)
        if reason is not None:
            record[source] = {"not_available": reason}
            continue
        distributions = model.predictive_from(source, settings)
        shown[source] = distributions
        value, above = claim_side(model)
        rows, flags = [], []
        for p in distributions:
            row = p.summary()
            if p.extremes is not None:
                share = float(p.weights[p.values == p.extremes[0]].sum()
                              + p.weights[p.values == p.extremes[1]].sum())
                row["all_or_none"] = share
                if share > ALL_OR_NONE:
                    flags.append(f"implausible: {share:.1%} of studies would see "
                                 f"{p.extremes[0]:g} or {p.extremes[1]:g} ({p.label})")
            if settings.outcome_range is not None and not p.discrete:
                lo, hi = settings.outcome_range
                if p.effect and model.design.two_arm:
                    lo, hi = -(hi - lo), hi - lo
                share = p.below(lo) + p.above(hi)
                row["outside_possible_range"] = share
                if share > IMPOSSIBLE:
                    flags.append(f"impossible: {share:.1%} of the prior predictive mass of "
                                 f"the {p.label} lies outside [{lo:g}, {hi:g}]")
            if p.effect:
                row["claim_side"] = p.above(value) if above else p.below(value)
                if plausible is not None:
                    lo, hi, why = plausible
                    share = p.below(lo) + p.above(hi)
                    row["outside_plausible_range"] = share
                    if share > IMPLAUSIBLE:
                        flags.append(f"implausible: in {share:.1%} of studies the {p.label} "
                                     f"falls outside [{lo:.4g}, {hi:.4g}] (plausible: {why})")
            rows.append(row)
        record[source] = {
            "prior": _describe(model, source), "outcomes": rows, "flags": flags,
            "verdict": "flag" if flags else "pass",
        }
    if plausible is not None:
        record["plausible_range"] = {"low": plausible[0], "high": plausible[1],
                                     "why": plausible[2]}
    sizes = model.design.family.effective_sample_size(model.design)
    if sizes:
        # the family's own summary (run.json has the same), beside the prior it describes
        record["effective_sample_size"] = sizes
        record["effective_sample_size_note"] = model.design.family.prior_size_note
    value, above = claim_side(model)
    record["claim_side"] = (f"observed effect {'>' if above else '<'} {value:.6g} (the "
                            "benchmark or margin on the observed effect's scale)")
    record["seconds"] = time.perf_counter() - started
    return PriorPredictiveResult(record, shown)


def _plausible(model: CheckModel, settings: CheckSettings) -> tuple[float, float, str] | None:
    if settings.plausible is not None:
        return (*settings.plausible, "as stated with --plausible")
    return model.plausible_effect()


def _describe(model: CheckModel, source: str) -> dict[str, str]:
    d = model.design
    key = "prior" if source == ANALYSIS else "design_prior"
    if d.two_arm and d.hypothesis.prior is not None:
        value = getattr(d.hypothesis, key)
        return {"difference": value.describe()}
    return {a.name: getattr(a, key).describe() for a in d.arms}
