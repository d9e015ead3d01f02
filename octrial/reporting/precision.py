"""How precise the numbers are: the Monte Carlo precision statement, or the exact method
and its numerical tolerances.

Monte Carlo standard errors follow the binomial variance, SE = sqrt(p (1 - p) / R)
(common practice); an estimate of 0 or 1 has no useful standard error, so its one-sided
95% bound 1 - 0.05^(1/R) (about 3/R, the "rule of three") is stated instead.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from octrial.reporting.formats import probability
from octrial.rules.stop import DECISION_TOLERANCE

TARGET_SE = 0.0005
"""Standard error at which a type I error near 0.025 is stated to about +-0.001 (used
only to say how many replicates that would need)."""


def replicates_for(p: float, se: float) -> int:
    """Replicates giving standard error ``se`` for a probability ``p``: p (1 - p) / se^2."""
    return math.ceil(p * (1.0 - p) / se**2)


def zero_bound(replicates: int) -> float:
    """One-sided 95% upper bound of a probability estimated as 0 from ``replicates``."""
    return 1.0 - 0.05 ** (1.0 / replicates)


def statement(data: Any) -> list[str]:
    """Paragraphs on the precision of every number in the report."""
    oc = data.oc
    record = data.record
    text: list[str] = []
    exact = oc["method"] == "exact"
    if exact.any():
        text += _exact(record, int(exact.sum()), len(oc))
    if (~exact).any():
        text += _monte_carlo(data, oc[~exact])
    warnings = record.get("warnings")
    if warnings:
        text.append("Numerical warnings of the run: " + " ".join(str(w) for w in warnings))
    return text


def _exact(record: dict[str, Any], rows: int, total: int) -> list[str]:
    share = "All" if rows == total else f"{rows} of the {total}"
    quad = record.get("quadrature_error_bound")
    neglected = record.get("max_neglected_mass")
    recursion = record.get("quadrature")
    how = ("recursive numerical integration over the distribution of the sufficient "
           "statistic (Armitage, McPherson & Rowe 1969)" if recursion is not None else
           "dynamic programming over the distribution of the sufficient statistic")
    text = [f"{share} scenarios were computed exactly by {how} (engine "
            f"'{record.get('engine', 'exact')}'): these numbers carry no Monte Carlo error and "
            "their standard errors are 0."]
    facts = []
    if recursion is not None:
        facts.append(f"with {recursion['points_per_sd']} grid points per standard deviation, "
                     "the largest difference of any stopping probability from the computation "
                     f"with half as many is {record['quadrature_error_estimate']:.2g}")
        summaries = record.get("estimation_error_estimate")
        if summaries:
            facts.append("the same differences for bias, RMSE and coverage are at most "
                         f"{summaries['bias']:.2g}, {summaries['rmse']:.2g} and "
                         f"{summaries['coverage']:.2g}")
    if quad is not None:
        facts.append("the largest estimated absolute error of any posterior probability "
                      f"behind the rule is {quad:.2g}" + (" (closed form)" if quad == 0 else
                                                           " (numerical quadrature)"))
    if neglected is not None:
        facts.append("the probability mass neglected by truncating an unbounded outcome is "
                     f"at most {neglected:.2g}")
    tolerance = record.get("decision_tolerance", DECISION_TOLERANCE)
    facts.append(f"a posterior probability within {tolerance:g} of a threshold counts as "
                 "reaching it")
    text.append("Numerical tolerances: " + "; ".join(facts) + ".")
    return text


def _monte_carlo(data: Any, sim: Any) -> list[str]:
    reps = sim["replicates"].to_numpy(int)
    lo, hi = int(reps.min()), int(reps.max())
    per = f"{lo:,}" if lo == hi else f"between {lo:,} and {hi:,}"
    se = sim["prob_success_se"].to_numpy(float)
    p = sim["prob_success"].to_numpy(float)
    largest = float(np.max(se))
    text = [f"{len(sim)} scenarios were simulated with {per} replicate studies each "
            f"(seed {data.record.get('seed')}). Every probability carries its Monte Carlo "
            "standard error sqrt(p (1 - p) / R); the largest standard error of a probability "
            f"of success is {probability(largest)}, and no standard error exceeds "
            f"0.5 / sqrt(R) = {probability(0.5 / math.sqrt(lo))}."]
    ends = int(np.sum((p == 0) | (p == 1)))
    if ends:
        text.append(f"{ends} probabilities of success were estimated as exactly 0 or 1; their "
                    "standard error is not informative, and the one-sided 95% bound "
                    f"1 - 0.05^(1/R) = {probability(zero_bound(lo))} (about 3/R) applies.")
    t1 = data.type1
    if t1 is not None and t1.get("se"):
        est, s = t1["max_type1_error"], t1["se"]
        low, high = max(est - 1.96 * s, 0.0), min(est + 1.96 * s, 1.0)
        text.append(f"The maximum type I error {probability(est)} has a 95% Monte Carlo "
                    f"interval {probability(low)} to {probability(high)}. A standard error of "
                    f"{TARGET_SE} at this value would need about "
                    f"{replicates_for(max(est, 1.0 / lo), TARGET_SE):,} replicates.")
        if data.alpha is not None and low <= data.alpha < high:
            text.append(f"The stated level alpha = {data.alpha:g} lies inside that interval: "
                        "more replicates are needed to say on which side of it the design is.")
    return text
