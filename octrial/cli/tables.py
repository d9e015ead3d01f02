"""Readable terminal tables of results (the CSV files keep full precision)."""

from __future__ import annotations

from typing import Any

import pandas as pd

HEADINGS = {
    "scenario": "scenario",
    "is_null": "null",
    "prob_success": "P(success)",
    "prob_success_se": "se",
    "prob_stop_efficacy": "P(early eff)",
    "prob_stop_futility": "P(early fut)",
    "expected_n": "E[N]",
    "sd_n": "sd(N)",
}


def oc_summary(oc: pd.DataFrame) -> str:
    """The operating characteristics as a compact fixed-width table."""
    truth = [c for c in oc.columns if c.startswith(("true_", "drift_"))]
    columns = ["scenario", *truth, "is_null", "prob_success"]
    if (oc["replicates"] > 0).any():
        columns.append("prob_success_se")
    columns += ["prob_stop_efficacy", "prob_stop_futility", "expected_n", "sd_n"]
    view = oc[columns].rename(columns={**HEADINGS, **{c: c.removeprefix("true_") for c in truth}})
    view["null"] = view["null"].map({True: "yes", False: ""})
    return view.to_string(index=False, float_format=lambda v: f"{v:.4f}")


def type1_line(summary: dict[str, Any] | None) -> str:
    """One sentence on the maximum type I error."""
    if summary is None:
        return "No null scenario in the grid: type I error not assessed."
    at = ", ".join(f"{k} = {v:g}" for k, v in summary["at"].items())
    se = f" (se {summary['se']:.4f})" if summary["se"] > 0 else ""
    if "upper_bound_95" in summary:
        se = f" (never observed; one-sided 95% upper bound {summary['upper_bound_95']:.2g})"
    return (f"Maximum type I error over {summary['null_scenarios']} null scenarios: "
            f"{summary['max_type1_error']:.4f}{se} at {at}.")


def assurance_line(info: dict[str, Any]) -> str:
    """One sentence on the prior probability of the claim and the assurance."""
    parts = []
    claim = info.get("prior_probability_of_claim")
    if claim is not None:
        parts.append(f"Prior probability of the claim (analysis prior): {claim:.4f}.")
    found = info.get("assurance")
    if found and "probability" in found:
        se = (f" (simulated, SE {found['probability_se']:.4f} from "
              f"{found['replicates']:,} studies)" if found.get("replicates") else "")
        if found.get("target_met") is False:
            se += f" (target SE {found['target_se']:g} not reached within the cap)"
        parts.append(f"Assurance (probability of success under the design prior): "
                     f"{found['probability']:.4f}{se}, expected N {found['expected_n']:.2f}; "
                     f"Pr(claim true) under the design prior "
                     f"{found['design_prior_probability_of_claim']:.4f}.")
    bayes = bayesian_line(info.get("bayesian_operating_characteristics"))
    return " ".join(parts) + (f"\n{bayes}" if bayes else "")


def bayesian_line(record: dict[str, Any] | None) -> str:
    """One sentence on the Bayesian operating characteristics under the design prior."""
    if not record or "prob_success" not in record:
        return ""

    def show(name: str) -> str:
        if record.get(name) is None:
            return "not defined"
        se = record.get(f"{name}_se")
        return f"{record[name]:.4f}" + (f" (se {se:.4f})" if se is not None else "")

    return (f"Under the design prior ({record['method']}): Pr(null) {show('prior_prob_null')}, "
            f"average type I error {show('average_type1_error')}, Bayesian power "
            f"{show('bayesian_power')}, Pr(null | success) "
            f"{show('prob_null_given_success')}, Pr(alternative | no success) "
            f"{show('prob_alternative_given_failure')}.")


def prior_size_lines(sizes: dict[str, Any] | None) -> list[str]:
    """One line per arm (or effect) on the analysis prior's effective sample size."""
    if not sizes:
        return []
    lines = []
    for name, summary in sizes.items():
        parts = []
        if "simple" in summary:
            parts.append(f"{summary['simple']:.3g} ({summary['simple_formula']})")
        if "fda" in summary:
            fda = summary["fda"]
            parts.append(f"{fda['ess']:.3g} (FDA n V1/V2 - n at n = {fda['n']:g})")
        line = f"Prior effective sample size, {name}: " + ", ".join(parts)
        if "borrowing" in summary:
            b = summary["borrowing"]
            line += f"; borrows by {b['method']} from historical {b['historical']}"
        lines.append(line)
    return lines
