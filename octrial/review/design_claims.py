"""Claims about the whole design: Bayesian operating characteristics under the design prior.

A claim whose metric is one of :data:`octrial.bayesian_oc.METRICS` and whose true-value
fields are empty is about one number per design (Pr(null | success), the average type I
error, ...). It is recomputed as ``octrial run`` computes it (quadrature of the exact OC
curve with its numerical error, or simulation with its standard error) and judged by
the same rounding-aware z-test as scenario claims (:mod:`octrial.review.comparison`):
the numerical error of a quadrature is added to the claim's allowance, a simulation's
standard error enters the denominator. A claim's own standard error is its ``se``
column, or sqrt(p (1 - p) / R) from its ``replicates``; for a conditional probability
(Pr(null | success), the average type I error, Bayesian power, Pr(alternative | no
success)) that binomial figure with R the whole number of studies is too small, so state
``se`` for those. The p-values of scenario and design-level claims are adjusted together
by Holm's procedure.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np
import pandas as pd

from octrial.bayesian_oc import bayesian_record, uncertainty
from octrial.design.model import Design
from octrial.design_prior import assurance_record
from octrial.engines import MonteCarloSettings
from octrial.execution import Execution
from octrial.review.claims import Claim, Claims
from octrial.review.comparison import two_sided_p, z_scores
from octrial.review.multiplicity import holm


def split(claims: Claims) -> tuple[Claims, tuple[Claim, ...]]:
    """The scenario claims (as a :class:`Claims`) and the design-level ones."""
    scenario = tuple(c for c in claims.claims if c.truth)
    design_level = tuple(c for c in claims.claims if not c.truth)
    return dataclasses.replace(claims, claims=scenario), design_level


def recompute(design: Design, claims: tuple[Claim, ...], replicates: int | None,
              seed: int | None, execution: Execution | None) -> dict[str, Any]:
    """The design's ``bayesian_operating_characteristics`` record (simulated, where it
    must be, with ``replicates`` studies or ten times the largest claim's, at least
    100,000)."""
    from octrial.review.verification import MIN_REPLICATES, REPLICATE_FACTOR

    largest = max((c.replicates for c in claims), default=0)
    settings = MonteCarloSettings(replicates=replicates or max(
        MIN_REPLICATES, REPLICATE_FACTOR * largest), seed=seed)
    found = assurance_record(design, settings=settings, execution=execution)
    record = bayesian_record(design, found, None, execution)
    if record is None or "prob_success" not in record:
        reason = (record or {}).get("unavailable", "no design prior")
        raise ValueError(f"the Bayesian operating characteristics cannot be recomputed: "
                         f"{reason}")
    return record


def design_rows(design: Design, claims: tuple[Claim, ...], record: dict[str, Any],
                tolerance: float) -> pd.DataFrame:
    """verify.csv rows of design-level claims, before the Holm adjustment."""
    simulated = record["method"] == "simulation"
    claimed = np.array([c.claimed for c in claims])
    recomputed = np.array([np.nan if record[c.metric] is None else float(record[c.metric])
                           for c in claims])
    error = np.array([0.0 if simulated else uncertainty(record, c.metric) for c in claims])
    se_r = np.array([uncertainty(record, c.metric) if simulated else 0.0 for c in claims])
    reps = np.array([c.replicates for c in claims], dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        binomial = np.where(reps > 0, np.sqrt(claimed * (1 - claimed) / reps), 0.0)
    se_c = np.array([c.se if c.se is not None else b for c, b in zip(claims, binomial,
                                                                        strict=True)])
    rounding = np.array([c.rounding for c in claims])
    allowance = rounding + tolerance + np.nan_to_num(error)
    z = z_scores(claimed, recomputed, allowance, se_c, se_r)
    columns: dict[str, Any] = {"line": [c.line for c in claims]}
    for arm in design.arm_names:
        columns[f"true_{arm}"] = [np.nan] * len(claims)
    columns.update({
        "in_design_grid": [True] * len(claims),
        "is_null": [pd.NA] * len(claims),
        "metric": [c.metric for c in claims],
        "claimed": [c.text for c in claims],
        "claimed_replicates": reps.astype(int),
        "claimed_se": se_c,
        "rounding": rounding,
        "recomputed": recomputed,
        "recomputed_se": se_r,
        "recomputed_method": [record["method"]] * len(claims),
        "recomputed_replicates": [int(record.get("replicates") or 0)] * len(claims),
        "difference": claimed - recomputed,
        "allowance": allowance,
        "z": z,
        "p": two_sided_p(z),
        "note": [c.note for c in claims],
    })
    return pd.DataFrame(columns)


def combined(table: pd.DataFrame | None, extra: pd.DataFrame, alpha: float,
             consistent: str, discrepant: str) -> pd.DataFrame:
    """Scenario and design-level rows in file order, Holm-adjusted together."""
    frames = [extra] if table is None or table.empty else [table, extra]
    out = pd.concat([f.astype({"is_null": object}) for f in frames], ignore_index=True)
    out = out.sort_values("line", kind="stable").reset_index(drop=True)
    out["p_holm"] = holm(out["p"].to_numpy(dtype=float))
    out["verdict"] = np.where(out["p_holm"] < alpha, discrepant, consistent)
    order = [c for c in (table.columns if table is not None and not table.empty else
                         [*extra.columns, "p_holm", "verdict"]) if c in out]
    return out[order + [c for c in out if c not in order]]
