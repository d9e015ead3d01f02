"""The operating-characteristics table (``oc.csv``) built from any engine's outcome.

Columns, in order (the contract in docs/output-files.md):
``scenario``, ``true_<arm>`` per arm, ``true_effect`` (two arms: treatment - control),
``true_ratio`` or ``true_odds_ratio`` (two arms compared on that scale), ``drift_<arm>``
(arms borrowing historical data: true value - historical estimate), ``is_null``,
``prob_success`` and its ``_se``, ``prob_stop_efficacy`` and ``prob_stop_futility`` (early
stops, interim looks only) with their ``_se``, ``expected_n`` with ``expected_n_se``,
``sd_n``, ``look<k>_stop_efficacy`` and ``look<k>_stop_futility`` for every look (at the
last look: success and failure at the final analysis, so each row's look columns sum to
1) and their ``_se``; when the design has analysis priors ``bias``, ``rmse`` and
``coverage`` with their ``_se``; ``method``, ``replicates``, ``zero_estimate_bound``,
then any engine-specific columns.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from octrial.design.model import Design
from octrial.engines.outcome import Estimation, Outcome


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


def zero_estimate_bound(replicates: np.ndarray, confidence: float = 0.95) -> np.ndarray:
    """One-sided upper confidence bound for a probability never observed in R studies.

    1 - (1 - confidence)^(1/R), about 3/R at 95% (the "rule of three"; Hanley &
    Lippman-Hand 1983); one minus it is the lower bound for a probability estimated as 1.
    Zero where ``replicates`` is 0 (exact results).
    """
    r = np.asarray(replicates, dtype=float)
    with np.errstate(divide="ignore"):
        bound = -np.expm1(np.log1p(-confidence) / r)
    return np.where(r > 0, bound, 0.0)


def estimation_columns(estimation: Estimation, replicates: np.ndarray) -> dict[str, np.ndarray]:
    """Bias and RMSE of the posterior mean and coverage of the credible interval, with
    Monte Carlo standard errors (0 when exact).

    bias = E[e]; its SE sqrt(Var(e) / R). rmse = sqrt(E[e^2]); its SE by the delta method,
    sqrt(Var(e^2) / R) / (2 rmse). Coverage SE as for any probability.
    """
    m1, m2, m4 = estimation.error_moments.T
    r = np.asarray(replicates, dtype=float)
    simulated = r > 0
    safe_r = np.where(simulated, r, 1.0)
    rmse = np.sqrt(np.clip(m2, 0.0, None))
    bias_se = np.sqrt(np.clip(m2 - m1**2, 0.0, None) / safe_r)
    with np.errstate(divide="ignore", invalid="ignore"):
        rmse_se = np.sqrt(np.clip(m4 - m2**2, 0.0, None) / safe_r) / (2.0 * rmse)
    rmse_se = np.where(rmse > 0, rmse_se, 0.0)
    return {
        "bias": m1, "bias_se": np.where(simulated, bias_se, 0.0),
        "rmse": rmse, "rmse_se": np.where(simulated, rmse_se, 0.0),
        "coverage": estimation.coverage,
        "coverage_se": proportion_se(estimation.coverage, replicates),
    }


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
    hypothesis = design.hypothesis
    if design.two_arm:
        columns["true_effect"] = np.round(truths[:, 0] - truths[:, 1], 12)
        comparison = hypothesis.comparison
        if comparison is not None and comparison != "difference":
            columns["true_" + comparison.replace("-", "_")] = np.round(
                [family.measure(comparison, t, c) for t, c in truths], 12)
    for j, spec in enumerate(design.arms):
        borrowing = getattr(spec.prior, "borrowing", None)
        if borrowing is not None:
            columns[f"drift_{spec.name}"] = np.round(truths[:, j] - borrowing.estimate, 12)
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
    for k in range(eff.shape[1]):
        columns[f"look{k + 1}_stop_efficacy_se"] = proportion_se(eff[:, k], reps)
        columns[f"look{k + 1}_stop_futility_se"] = proportion_se(fut[:, k], reps)
    if outcome.estimation is not None:
        columns.update(estimation_columns(outcome.estimation, reps))
    columns["method"] = outcome.method
    columns["replicates"] = reps.astype(int)
    columns["zero_estimate_bound"] = zero_estimate_bound(reps)
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
    summary = {
        "max_type1_error": float(worst["prob_success"]),
        "se": float(worst["prob_success_se"]),
        "scenario": int(worst["scenario"]),
        "at": truth,
        "null_scenarios": len(null),
    }
    if summary["max_type1_error"] == 0.0 and worst["replicates"] > 0:
        # Never observed in any null scenario: report the one-sided 95% upper bound.
        summary["upper_bound_95"] = float(worst["zero_estimate_bound"])
    return summary
