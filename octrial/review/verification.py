"""Re-compute claimed operating characteristics and judge each claim.

The design is evaluated at exactly the claims' scenarios (the design's own grid is
replaced; scenarios that were not in it are reported), exactly where an exact engine
applies and otherwise by Monte Carlo with many more replicates than any claim (or to a
target standard error), through the execution layer: worker processes, checkpoints for a
resumed run and a progress bar, none of which changes a number. Each claim
is then judged by the rounding-aware two-sided z-test of :mod:`octrial.review.comparison`,
and the p-values of all claims are adjusted together by Holm's procedure
(:mod:`octrial.review.multiplicity`).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from octrial._version import __version__
from octrial.caution import CAUTION
from octrial.design.model import Design, Scenarios
from octrial.engines import MonteCarloSettings, choose
from octrial.errors import InputError, single
from octrial.evaluation import compute
from octrial.execution import Execution
from octrial.output import csv_text, json_text
from octrial.provenance import environment, now
from octrial.review.claims import Claims, spreadsheet_safe
from octrial.review.comparison import (
    EXPECTED_N,
    standard_errors,
    two_sided_p,
    z_scores,
)
from octrial.review.multiplicity import holm
from octrial.run_folder import write_folder

DEFAULT_ALPHA = 0.05
"""Family-wise error rate of the Holm-adjusted verdicts."""

DEFAULT_TOLERANCE = 1e-6
"""Differences below this (probability scale; times N for expected_n) are numerical noise
between two correct exact computations, never a discrepancy."""

MIN_REPLICATES = 100_000
"""Smallest Monte Carlo recomputation, per scenario."""

REPLICATE_FACTOR = 10
"""A Monte Carlo recomputation uses at least this many times the largest claim's
replicates, so that its own error is small beside the claim's."""

GRID_TOLERANCE = 1e-9
"""Scenario values closer than this are the same scenario."""

CONSISTENT, DISCREPANT = "consistent", "discrepant"


@dataclass(frozen=True, eq=False)
class Verification:
    """The verdict on every claim.

    Attributes
    ----------
    design : Design
        The design as written (its own scenario grid).
    claims : Claims
    table : DataFrame
        One row per claim (the ``verify.csv`` contract, docs/output-files.md).
    added : tuple of tuple of float
        Claimed scenarios that are not in the design's grid (evaluated all the same).
    info : dict
        Engine, replicates, seed, alpha, tolerances and counts (for verify.json).
    """

    design: Design
    claims: Claims
    table: pd.DataFrame
    added: tuple[tuple[float, ...], ...]
    info: dict[str, Any]

    @property
    def discrepant(self) -> int:
        """Number of claims judged discrepant."""
        return int((self.table["verdict"] == DISCREPANT).sum())


def recompute_method(design: Design) -> str:
    """'exact' when an exact engine applies, else 'monte-carlo' when that engine exists.

    Raises
    ------
    InputError
        When neither can evaluate the design.
    """
    reasons = []
    for method in ("exact", "monte-carlo"):
        try:
            choose(design, method)
        except InputError as exc:
            reasons.append(exc.problems[0].hint or method)
        else:
            return method
    raise single(design.source.path or design.name, "endpoint",
                 "a design that octrial can recompute exactly or by Monte Carlo",
                 design.family.name, "; ".join(reasons))


def _unique(truths: list[tuple[float, ...]]) -> list[tuple[float, ...]]:
    found: list[tuple[float, ...]] = []
    for truth in truths:
        if not any(_same(truth, seen) for seen in found):
            found.append(truth)
    return found


def _same(a: tuple[float, ...], b: tuple[float, ...]) -> bool:
    return all(abs(x - y) <= GRID_TOLERANCE for x, y in zip(a, b, strict=True))


def _verify_scenarios(
    design: Design, claims: Claims, *, alpha: float = DEFAULT_ALPHA,
    tolerance: float = DEFAULT_TOLERANCE, replicates: int | None = None,
    seed: int | None = None, target_se: float | None = None,
    max_replicates: int | None = None, execution: Execution | None = None,
) -> Verification:
    """Recompute every claimed number of ``claims`` and judge it.

    Parameters
    ----------
    design : Design
        The design the claims are about.
    claims : Claims
        From :func:`octrial.review.claims.read_claims`.
    alpha : float
        Family-wise error rate: a claim is discrepant when its Holm-adjusted p-value is
        below ``alpha``.
    tolerance : float
        Numerical tolerance of exact computation on the probability scale (times the
        maximum sample size for ``expected_n``), added to each claim's rounding allowance.
    replicates : int, optional
        Monte Carlo recomputations only: replicates per scenario (default: the larger of
        100,000 and ten times the largest claim's).
    seed : int, optional
        Monte Carlo recomputations only: overrides ``simulation.seed`` (a fresh seed is
        drawn and reported when neither is given; a resumed run keeps it).
    target_se, max_replicates : optional
        Monte Carlo recomputations only: simulate each scenario until every estimated
        probability's standard error is at most ``target_se`` (instead of
        ``replicates``), with at most ``max_replicates`` studies.
    execution : Execution, optional
        Workers, backend, checkpoints and progress bar (never changes a number).

    Returns
    -------
    Verification
    """
    rows = claims.claims
    truths = _unique([c.truth for c in rows])
    method = recompute_method(design)
    settings = None
    if method == "monte-carlo":
        largest = max((c.replicates for c in rows), default=0)
        count = replicates or max(MIN_REPLICATES, REPLICATE_FACTOR * largest)
        cap: dict[str, Any] = {} if max_replicates is None else {"max_replicates": max_replicates}
        settings = MonteCarloSettings(replicates=count, seed=seed, target_se=target_se, **cap)
    evaluated = dataclasses.replace(
        design, scenarios=Scenarios(design.scenarios.arms, tuple(truths)),
        simulation=dataclasses.replace(design.simulation, method=method))
    evaluation = compute(evaluated, method, settings, execution, assurance=False)
    oc = evaluation.oc
    added = tuple(t for t in truths if not any(_same(t, g) for g in design.scenarios.values))

    index = np.array([next(i for i, t in enumerate(truths) if _same(c.truth, t)) for c in rows])
    metric = np.array([c.metric for c in rows])
    claimed = np.array([c.claimed for c in rows])
    claim_reps = np.array([c.replicates for c in rows])
    claim_se = np.array([np.nan if c.se is None else c.se for c in rows])
    recomputed = np.array([oc[m].iloc[i] for m, i in zip(metric, index, strict=True)], float)
    recomputed_reps = oc["replicates"].to_numpy()[index]
    sd_n = oc["sd_n"].to_numpy()[index]

    neglected = float(evaluation.info.get("max_neglected_mass", 0.0))
    numerical = tolerance + neglected
    scale = np.where(metric == EXPECTED_N, design.looks.n[-1], 1.0)
    rounding = np.array([c.rounding for c in rows])
    allowance = rounding + numerical * scale
    se_c, se_r = standard_errors(metric, claimed, claim_reps, claim_se, recomputed,
                                 recomputed_reps, sd_n)
    z = z_scores(claimed, recomputed, allowance, se_c, se_r)
    p = two_sided_p(z)
    p_holm = holm(p)
    verdict = np.where(p_holm < alpha, DISCREPANT, CONSISTENT)

    columns: dict[str, Any] = {"line": [c.line for c in rows]}
    for j, arm in enumerate(design.arm_names):
        columns[f"true_{arm}"] = [c.truth[j] for c in rows]
    columns.update({
        "in_design_grid": [not any(_same(c.truth, t) for t in added) for c in rows],
        "is_null": oc["is_null"].to_numpy()[index],
        "metric": metric,
        "claimed": [c.text for c in rows],
        "claimed_replicates": claim_reps,
        "claimed_se": se_c,
        "rounding": rounding,
        "recomputed": recomputed,
        "recomputed_se": se_r,
        "recomputed_method": oc["method"].to_numpy()[index],
        "recomputed_replicates": recomputed_reps,
        "difference": claimed - recomputed,
        "allowance": allowance,
        "z": z,
        "p": p,
        "p_holm": p_holm,
        "verdict": verdict,
        # the user's own words, made safe to open in a spreadsheet
        "note": [spreadsheet_safe(c.note) for c in rows],
    })
    table = pd.DataFrame(columns)
    simulated = method == "monte-carlo"
    info = {
        "engine": evaluation.info["engine"],
        # a fixed number per scenario; None when simulated to a target standard error
        "replicates": (0 if settings is None else
                       settings.replicates if target_se is None else None),
        "seed": evaluation.info["seed"] if simulated else None,
        "seed_drawn": evaluation.info["seed_drawn"] if simulated else None,
        **({"target_se": target_se, "max_replicates": evaluation.info["max_replicates"],
            "scenarios_short_of_target": evaluation.info["scenarios_short_of_target"]}
           if simulated and target_se is not None else {}),
        "scenarios_resumed": evaluation.info["scenarios_resumed"] if simulated else 0,
        "alpha": alpha,
        "adjustment": "Holm (1979)",
        "tolerance": tolerance,
        "numerical_error": {k: evaluation.info[k] for k in
                            ("quadrature_error_bound", "max_neglected_mass")
                            if k in evaluation.info},
        "claims_total": len(rows),
        "consistent": int((verdict == CONSISTENT).sum()),
        "discrepant": int((verdict == DISCREPANT).sum()),
        "scenarios": len(truths),
        "scenarios_added": [dict(zip(design.arm_names, t, strict=True)) for t in added],
    }
    return Verification(design, claims, table, added, info)


def verify(
    design: Design, claims: Claims, *, alpha: float = DEFAULT_ALPHA,
    tolerance: float = DEFAULT_TOLERANCE, replicates: int | None = None,
    seed: int | None = None, target_se: float | None = None,
    max_replicates: int | None = None, execution: Execution | None = None,
) -> Verification:
    """Recompute every claimed number of ``claims`` and judge it (parameters as for the
    scenario claims, :func:`_verify_scenarios`); claims about the whole design (Bayesian
    operating characteristics under the design prior) through
    :mod:`octrial.review.design_claims`, Holm-adjusted together with the others."""
    import octrial.review.design_claims as design_claims

    scenario, design_level = design_claims.split(claims)
    options: dict[str, Any] = dict(
        alpha=alpha, tolerance=tolerance, replicates=replicates, seed=seed,
        target_se=target_se, max_replicates=max_replicates, execution=execution)
    if not design_level:
        return _verify_scenarios(design, claims, **options)
    found = _verify_scenarios(design, scenario, **options) if scenario.claims else None
    try:
        record = design_claims.recompute(design, design_level, replicates, seed, execution)
    except ValueError as exc:
        raise single(claims.path, f"line {design_level[0].line}, column metric",
                     "a metric octrial can recompute for this design", design_level[0].metric,
                     str(exc)) from exc
    extra = design_claims.design_rows(design, design_level, record, tolerance)
    table = design_claims.combined(None if found is None else found.table, extra, alpha,
                                   CONSISTENT, DISCREPANT)
    info = dict(found.info) if found is not None else {
        "engine": record["method"], "replicates": None, "seed": None, "seed_drawn": None,
        "scenarios_resumed": 0, "alpha": alpha, "adjustment": "Holm (1979)",
        "tolerance": tolerance, "numerical_error": {}, "scenarios": 0,
        "scenarios_added": []}
    info.update({
        "claims_total": len(table),
        "consistent": int((table["verdict"] == CONSISTENT).sum()),
        "discrepant": int((table["verdict"] == DISCREPANT).sum()),
        "design_level_claims": len(design_level),
        "bayesian_operating_characteristics": record,
    })
    return Verification(design, claims, table, () if found is None else found.added, info)


def verification_record(result: Verification, *, started: str, finished: str,
                        command: list[str]) -> dict[str, Any]:
    """verify.json: the design and claims files (with their SHA-256), the command, the
    figures of :attr:`Verification.info`, the environment and the caution."""
    design = result.design
    return {
        "octrial_version": __version__,
        "design": {"name": design.name, "path": design.source.path,
                   "sha256": design.source.sha256},
        "claims": {"path": result.claims.path, "sha256": result.claims.sha256},
        "command": command,
        "started": started,
        "finished": finished,
        **result.info,
        "environment": environment(),
        "caution": CAUTION,
    }


def write_verification(folder: str | Path, result: Verification, *, started: str,
                       command: list[str]) -> list[Path]:
    """Write verify.csv and verify.json into ``folder`` all at once (keeping everything
    else there); returns the paths written."""
    record = verification_record(result, started=started, finished=now(), command=command)
    return write_folder(folder, {"verify.csv": csv_text(result.table),
                                 "verify.json": json_text(record)}).written
