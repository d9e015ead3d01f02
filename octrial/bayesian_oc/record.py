"""The ``bayesian_operating_characteristics`` record of run.json (see
:mod:`octrial.bayesian_oc`)."""

from __future__ import annotations

import math
from typing import Any

from octrial.bayesian_oc.metrics import METRICS
from octrial.bayesian_oc.quadrature import exact_engine_applies, quadrature
from octrial.bayesian_oc.simulation import simulated
from octrial.design.model import Design
from octrial.design_prior import has_design_prior
from octrial.execution import Execution

AGREEMENT = 1e-7
"""The quadrature's Pr(success) must agree with the exact predictive programme this
closely, else the record carries a warning."""


def null_definition(design: Design) -> str:
    """The null region in words (boundary included)."""
    h = design.hypothesis
    if not design.two_arm:
        side = "at or below" if h.sign > 0 else "at or above"
        return (f"{design.family.parameter} of {design.arm_names[0]} {side} the benchmark "
                f"{h.benchmark:g}")
    word = {"difference": "difference", "ratio": "ratio", "odds-ratio": "odds ratio"}.get(
        h.comparison or "difference", h.comparison)
    side = "at or below" if h.sign > 0 else "at or above"
    return f"{word} ({design.arm_names[0]} vs {design.arm_names[1]}) {side} {h.threshold:g}"


def _strict(record: dict[str, Any]) -> dict[str, Any]:
    """Non-finite numbers (a conditional probability given an impossible event) as
    ``None``: run.json is strict JSON."""
    return {k: None if isinstance(v, float) and not math.isfinite(v) else v
            for k, v in record.items()}


def bayesian_record(design: Design, assurance: dict[str, Any] | None = None,
                    relevant_effect: float | None = None,
                    execution: Execution | None = None) -> dict[str, Any] | None:
    """The ``bayesian_operating_characteristics`` record of run.json.

    ``None`` without design priors; ``{'unavailable': reason}`` when neither quadrature
    nor simulation applies. ``assurance`` is the run's assurance record (its exact
    probability of success is kept; a simulation reuses its seed and studies).
    """
    if not has_design_prior(design):
        return None
    if relevant_effect is None:
        relevant_effect = design.hypothesis.relevant_effect
    delta = 0.0 if relevant_effect is None else float(relevant_effect)
    common: dict[str, Any] = {
        "null_region": null_definition(design) + " (the boundary counts as null)",
        "relevant_effect": relevant_effect,
        "power_region": ("the alternative region (effect beyond the null boundary)"
                         if relevant_effect is None else
                         f"the clinically relevant region, effect >= {relevant_effect:g} "
                         "beyond the null boundary"),
    }
    try:
        if exact_engine_applies(design):
            found = quadrature(design, delta)
            values, errors = dict(found.values), dict(found.errors)
            record: dict[str, Any] = {"method": "quadrature", **common,
                                      "uncertainty": "numerical error (_error)",
                                      "nodes": found.nodes.description}
            exact = (assurance or {}).get("probability")
            if assurance is not None and assurance.get("method") == "exact" and exact is not None:
                gap = abs(exact - values["prob_success"])
                record["method"] = "exact and quadrature"
                record["quadrature_total_gap"] = gap
                if gap > AGREEMENT:
                    record["warning"] = (f"quadrature total differs from the exact "
                                         f"probability of success by {gap:.2g}")
                values["prob_success"] = float(exact)
                values["prob_null_given_success"] = values["prob_null_and_success"] / exact \
                    if exact > 0 else math.nan
                values["prob_alternative_given_failure"] = (
                    values["prob_alternative_and_failure"] / (1 - exact) if exact < 1
                    else math.nan)
                errors["prob_success"] = 0.0
            out = {**record}
            for name in METRICS:
                out[name] = values[name]
                out[f"{name}_error"] = errors[name]
            out["prob_alternative_and_success"] = values["prob_alternative_and_success"]
            out["prior_prob_alternative"] = found.nodes.prior_alt
            out["prior_prob_relevant"] = found.nodes.prior_relevant
            return _strict(out)
        if assurance is None or not assurance.get("replicates"):
            from octrial.simulation.prior_studies import prior_simulation_unsupported

            reason = prior_simulation_unsupported(design) or "no simulated assurance"
            return {"unavailable": reason, **common}
        sim = simulated(design, int(assurance["replicates"]), int(assurance["seed"]), delta,
                        execution)
        out = {"method": "simulation", **common, "uncertainty": "Monte Carlo standard error "
               "(_se; ratios by the delta method)", "replicates": assurance["replicates"],
               "seed": assurance["seed"], "counts": sim["counts"]}
        for name in METRICS:
            out[name] = sim["values"][name]
            out[f"{name}_se"] = sim["se"][name]
        out["prob_alternative_and_success"] = sim["values"]["prob_alternative_and_success"]
        return _strict(out)
    except ValueError as exc:
        return {"unavailable": str(exc), **common}
