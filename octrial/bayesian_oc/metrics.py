"""The Bayesian operating characteristics from the region integrals, with their errors."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from octrial.bayesian_oc.nodes import PriorNodes

METRICS = ("prob_success", "average_type1_error", "bayesian_power", "prob_null_and_success",
           "prob_alternative_and_failure", "prob_null_given_success",
           "prob_alternative_given_failure", "prior_prob_null")
"""The Bayesian operating characteristics, as named in run.json and accepted by
``octrial calibrate --criterion`` and ``octrial verify``."""


def metrics(null_success: Any, alt_success: Any, relevant_success: Any, prior_null: float,
            prior_alt: float, prior_relevant: float,
            prob_success: Any = None) -> dict[str, Any]:
    """The Bayesian operating characteristics from the region integrals (arrays
    broadcast: one value per candidate design in calibration)."""
    ns, as_, rs = (np.asarray(x, dtype=float) for x in (null_success, alt_success,
                                                        relevant_success))
    s = ns + as_ if prob_success is None else np.asarray(prob_success, dtype=float)
    af = prior_alt - as_
    with np.errstate(all="ignore"):
        out = {
            "prob_success": s,
            "average_type1_error": ns / prior_null if prior_null > 0 else ns * np.nan,
            "bayesian_power": rs / prior_relevant if prior_relevant > 0 else rs * np.nan,
            "prob_null_and_success": ns,
            "prob_alternative_and_failure": af,
            "prob_null_given_success": np.where(s > 0, ns / s, np.nan),
            "prob_alternative_given_failure": np.where(s < 1, af / (1 - s), np.nan),
            "prior_prob_null": np.full(np.shape(ns), prior_null),
            "prob_alternative_and_success": as_,
        }
    return out


def metrics_at(nodes: PriorNodes, p: np.ndarray, prob_success: Any = None) -> dict[str, Any]:
    """Metrics from Pr(success) at the nodes (``p``: nodes, or candidates x nodes)."""
    return metrics(p @ nodes.w_null, p @ nodes.w_alt, p @ nodes.w_relevant,
                   nodes.prior_null, nodes.prior_alt, nodes.prior_relevant, prob_success)


def propagated_errors(values: dict[str, float], e_ns: float, e_as: float, e_rs: float,
                      nodes: PriorNodes, e_s: float | None = None) -> dict[str, float]:
    """First-order numerical errors of each metric from those of the region integrals."""
    e_s = e_ns + e_as if e_s is None else e_s
    s = values["prob_success"]
    q, r = nodes.prior_null, nodes.prior_relevant

    def ratio(num: float, den: float, e_num: float, e_den: float) -> float:
        if not den > 0 or not math.isfinite(num / den):
            return math.nan
        return (e_num + abs(num / den) * e_den) / den

    return {
        "prob_success": e_s,
        "average_type1_error": e_ns / q if q > 0 else math.nan,
        "bayesian_power": e_rs / r if r > 0 else math.nan,
        "prob_null_and_success": e_ns,
        "prob_alternative_and_failure": e_as,
        "prob_null_given_success": ratio(values["prob_null_and_success"], s, e_ns, e_s),
        "prob_alternative_given_failure": ratio(values["prob_alternative_and_failure"],
                                                1 - s, e_as, e_s),
        "prior_prob_null": 0.0,
    }


def uncertainty(record: dict[str, Any], name: str) -> float:
    """The metric's standard error or numerical error from a record."""
    for suffix in ("_se", "_error"):
        if record.get(f"{name}{suffix}") is not None:
            return float(record[f"{name}{suffix}"])
    return math.nan
