"""The operating-characteristics table (``oc.csv``) built from any engine's outcome.

Columns, in order (the contract in docs/output-files.md):
``scenario``, ``true_<arm>`` per arm, ``true_effect`` (two arms), ``is_null``,
``prob_success`` and its ``_se``, ``prob_stop_efficacy`` and ``prob_stop_futility`` (early
stops, interim looks only) with their ``_se``, ``expected_n`` with ``expected_n_se``,
``sd_n``, ``look<k>_stop_efficacy`` and ``look<k>_stop_futility`` for every look (at the
last look: success and failure at the final analysis, so each row's look columns sum to
1), ``method``, ``replicates``, then any engine-specific columns.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from octrial.design.model import Design
from octrial.engines.outcome import Outcome


def proportion_se(p: np.ndarray, replicates: np.ndarray) -> np.ndarray:
    """Monte Carlo standard error of estimated probabilities, sqrt(p (1 - p) / R).

    Zero where ``replicates`` is 0 (exact results). Common practice; the binomial variance.
    """
    p = np.asarray(p, dtype=float)
    r = np.asarray(replicates, dtype=float)
    r = r.reshape(r.shape + (1,) * (p.ndim - r.ndim))
    with np.errstate(divide="ignore", invalid="ignore"):
        se = np.sqrt(np.clip(p * (1.0 - p), 0.0, None) / r)
    return np.where(r > 0, se, 0.0)


def oc_table(design: Design, truths: np.ndarray, outcome: Outcome) -> pd.DataFrame:
    """Assemble the ``oc.csv`` table for ``truths`` (scenarios x arms) from ``outcome``."""
    family = design.family
    n = np.asarray(design.looks.n, dtype=float)
    eff, fut, reps = outcome.efficacy, outcome.futility, outcome.replicates
    stop = eff + fut
    expected_n = stop @ n
    sd_n = np.sqrt(np.clip(stop @ n**2 - expected_n**2, 0.0, None))

    columns: dict[str, Any] = {"scenario": np.arange(1, len(truths) + 1)}
    for j, arm in enumerate(design.arm_names):
        columns[f"true_{arm}"] = truths[:, j]
    if design.two_arm:
        columns["true_effect"] = np.round(truths[:, 0] - truths[:, 1], 12)
    columns["is_null"] = [family.is_null(design.hypothesis, tuple(t)) for t in truths]
    probabilities = {
        "prob_success": eff.sum(axis=1),
        "prob_stop_efficacy": eff[:, :-1].sum(axis=1),
        "prob_stop_futility": fut[:, :-1].sum(axis=1),
    }
    for name, values in probabilities.items():
        columns[name] = values
        columns[f"{name}_se"] = proportion_se(values, reps)
    columns["expected_n"] = expected_n
    with np.errstate(divide="ignore", invalid="ignore"):
        columns["expected_n_se"] = np.where(reps > 0, sd_n / np.sqrt(np.maximum(reps, 1)), 0.0)
    columns["sd_n"] = sd_n
    for k in range(eff.shape[1]):
        columns[f"look{k + 1}_stop_efficacy"] = eff[:, k]
        columns[f"look{k + 1}_stop_futility"] = fut[:, k]
    columns["method"] = outcome.method
    columns["replicates"] = reps.astype(int)
    columns.update(outcome.extra)
    return pd.DataFrame(columns)


def type1_summary(oc: pd.DataFrame) -> dict[str, Any] | None:
    """The largest probability of success over the null scenarios, and where it occurs.

    Returns ``None`` when no scenario is null.
    """
    null = oc[oc["is_null"]]
    if null.empty:
        return None
    worst = null.loc[null["prob_success"].idxmax()]
    truth = {c.removeprefix("true_"): float(worst[c]) for c in oc.columns
             if c.startswith("true_")}
    return {
        "max_type1_error": float(worst["prob_success"]),
        "se": float(worst["prob_success_se"]),
        "scenario": int(worst["scenario"]),
        "at": truth,
        "null_scenarios": len(null),
    }
