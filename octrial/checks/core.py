"""``check()``: every workflow check of a design, with timings and one verdict list.

The checks run in the order of :data:`~octrial.checks.settings.CHECKS`; each draws its
random numbers from its own stream of the one seed, so running a subset changes no
number. The result carries the checks.json record and the tables behind the figures.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from octrial._version import __version__
from octrial.caution import CAUTION
from octrial.checks.conflict import run_conflict
from octrial.checks.design_prior_sensitivity import (
    run_design_prior_sensitivity,
    sensitivity_verdict,
)
from octrial.checks.model import model_for
from octrial.checks.predictive import Predictive
from octrial.checks.prior_predictive import run_prior_predictive
from octrial.checks.sbc import run_sbc
from octrial.checks.sensitivity import run_sensitivity
from octrial.checks.settings import CheckSettings
from octrial.checks.tail_accuracy import run_tail_accuracy
from octrial.design.load import load_design
from octrial.design.model import Design

SCHEMA = "octrial-checks/1"
"""The ``kind`` of checks.json written by this version (docs/output-files.md)."""


@dataclass(frozen=True, eq=False)
class CheckOutcome:
    """Everything ``octrial check`` writes.

    Attributes
    ----------
    design : Design
    record : dict
        checks.json.
    sbc : DataFrame
        sbc.csv (empty when simulation-based calibration did not run).
    sensitivity : DataFrame
        sensitivity.csv (every simulated study's shrinkage and z-score, per look).
    predictive : dict
        Prior predictive distributions by prior ('analysis', 'design'), for the plot.
    """

    design: Design
    record: dict[str, Any]
    sbc: pd.DataFrame
    sensitivity: pd.DataFrame
    predictive: dict[str, list[Predictive]]

    @property
    def failed(self) -> bool:
        """Whether any posterior computation failed simulation-based calibration."""
        return any(v["verdict"] == "fail" for v in self.record["verdicts"])


def check(design: Design | str | Path, settings: CheckSettings | None = None) -> CheckOutcome:
    """Run the workflow checks of ``design``.

    Parameters
    ----------
    design : Design or path
    settings : CheckSettings, optional
        Simulations, bins, draws, seed (default: ``simulation.seed``, else drawn and
        recorded) and which checks to run.

    Returns
    -------
    CheckOutcome

    Examples
    --------
    >>> from octrial.checks import check, CheckSettings
    >>> out = check("designs/single-arm-response.toml",
    ...             CheckSettings(simulations=200, bins=10))  # doctest: +SKIP
    >>> [v["verdict"] for v in out.record["verdicts"]]  # doctest: +SKIP
    """
    design = design if isinstance(design, Design) else load_design(design)
    settings = (settings or CheckSettings()).with_seed(design.simulation.seed)
    model = model_for(design)
    record: dict[str, Any] = {
        "kind": SCHEMA, "octrial_version": __version__,
        "design": {"name": design.name, "path": design.source.path,
                   "sha256": design.source.sha256},
        "seed": settings.seed,
        "settings": {"simulations": settings.simulations, "bins": settings.bins,
                     "draws": settings.draws, "alpha": settings.alpha,
                     "band_level": settings.band, "repeats": settings.repeats,
                     "outcome_range": settings.outcome_range,
                     "plausible": settings.plausible, "checks": list(settings.checks)},
    }
    timings: dict[str, float] = {}
    sbc_values = sensitivity_points = pd.DataFrame()
    predictive: dict[str, list[Predictive]] = {}
    for name in settings.checks:
        tic = time.perf_counter()
        if name == "prior-predictive":
            prior_predictive = run_prior_predictive(model, settings)
            record["prior_predictive"] = prior_predictive.record
            predictive = prior_predictive.distributions
        elif name == "sbc":
            sbc = run_sbc(model, settings)
            record["sbc"], sbc_values = sbc.record, sbc.values
        elif name == "sensitivity":
            sensitivity = run_sensitivity(model, settings)
            record["sensitivity"], sensitivity_points = sensitivity.record, sensitivity.points
        elif name == "tail-accuracy":
            record["tail_accuracy"] = run_tail_accuracy(model, settings)
        elif name == "conflict":
            record["conflict"] = run_conflict(design)
        elif name == "design-prior":
            record["design_prior_sensitivity"] = run_design_prior_sensitivity(
                design, settings.seed)
        timings[name] = time.perf_counter() - tic
    record["timings_seconds"] = timings
    record["verdicts"] = verdicts(record)
    record["caution"] = CAUTION
    return CheckOutcome(design, record, sbc_values, sensitivity_points, predictive)


def verdicts(record: dict[str, Any]) -> list[dict[str, Any]]:
    """One line per verdict: check, item, verdict ('pass', 'fail', 'flag' or 'not
    applicable') and the numbers behind it."""
    out: list[dict[str, Any]] = []

    def line(check_: str, item: str, verdict: str, detail: str) -> None:
        out.append({"check": check_, "item": item, "verdict": verdict, "detail": detail})

    prior = record.get("prior_predictive")
    if prior is not None:
        for source in ("analysis", "design"):
            entry = prior.get(source, {})
            if "not_available" in entry:
                line("prior predictive", f"{source} prior", "not applicable",
                     entry["not_available"])
                continue
            flags = entry.get("flags", [])
            line("prior predictive", f"{source} prior", "flag" if flags else "pass",
                 "; ".join(flags) or "no visible mass on impossible or implausible outcomes")
    sbc = record.get("sbc")
    if sbc is not None:
        if "not_applicable" in sbc:
            line("simulation-based calibration", "all", "not applicable", sbc["not_applicable"])
        for q in sbc.get("quantities", []):
            line("simulation-based calibration", q["id"], q["verdict"],
                 f"p = {q['p_value']:.3g} (Holm-adjusted {q['p_adjusted']:.3g}); chi-square "
                 f"p = {q['chi_square_p']:.3g}, KS p = {q['ks_p']:.3g}; "
                 f"{q['bins_outside_band']} of {len(q['counts'])} bins outside the "
                 f"{sbc['band_level']:.0%} band; {q['computation']}")
    sensitivity = record.get("sensitivity")
    if sensitivity is not None:
        if "not_applicable" in sensitivity:
            line("sensitivity", "target", "not applicable", sensitivity["not_applicable"])
        else:
            last = sensitivity["looks"][-1]
            line("sensitivity", sensitivity["quantity"], sensitivity["verdict"],
                 "; ".join(sensitivity["flags"]) or
                 f"final look: {last['share_abs_z_above_2']:.1%} with |z| > 2, "
                 f"{last['share_shrinkage_below_0.1']:.1%} with shrinkage < 0.1 "
                 f"(truths from the {sensitivity['truths_from']})")
    tail = record.get("tail_accuracy")
    if tail is not None:
        if "not_applicable" in tail:
            line("tail accuracy", "target", "not applicable", tail["not_applicable"])
        else:
            need = {row["quantile"]: row for row in tail["draws_needed"]}
            line("tail accuracy", tail["quantity"], tail["verdict"],
                 f"draws for a Monte Carlo SE of 1% of the posterior sd: median "
                 f"{need[0.5]['draws_for_se_1pct_of_sd']:,}, 2.5% quantile "
                 f"{need[0.025]['draws_for_se_1pct_of_sd']:,} "
                 f"({need[0.025]['relative_to_median']:.1f} times as many); formula "
                 f"{'agrees' if tail['formula_agrees'] else 'disagrees'} with repeated draws")
    conflict = record.get("conflict")
    if conflict is not None:
        if "not_applicable" in conflict:
            line("prior-data conflict", "borrowing", "not applicable",
                 conflict["not_applicable"])
        else:
            for arm in conflict["arms"]:
                rows = arm["by_true_value"]
                final = [k for k in rows[0] if k.endswith("_conflict")][-1]
                worst = max(rows, key=lambda r: r[final])
                line("prior-data conflict", arm["arm"], "report",
                     f"conflict at the final look in {worst[final]:.1%} of studies at drift "
                     f"{worst['drift']:+.4g} (the most), "
                     f"{min(r[final] for r in rows):.1%} at the least; "
                     f"{conflict['decision_note']}")
    entry = record.get("design_prior_sensitivity")
    if entry is not None:
        if "not_applicable" in entry:
            line("design-prior sensitivity", "design prior", "not applicable",
                 entry["not_applicable"])
        else:
            line("design-prior sensitivity", entry["varied"], "report",
                 sensitivity_verdict(entry))
    return out
