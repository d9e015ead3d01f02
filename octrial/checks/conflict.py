"""Prior-data conflict in borrowing designs, and what it does to the decision.

An arm whose prior borrows from historical data (power prior or robust mixture) can meet
current data that disagree with the historical ones. For every true value of that arm in
the design's scenarios (drift = true value - historical estimate) and every look:

* **How often the data disagree.** The measure is the prior predictive p-value of the
  arm's current data under the *informative* prior (the initial prior updated with the
  historical data, discounted by a0: the power prior, or the informative component of a
  robust mixture), ordering outcomes by their predictive probability (Box 1980, J. R.
  Stat. Soc. A 143:383-430; Evans & Moshonov 2006, Bayesian Analysis 1:893-914):

      p(y) = Pr_pred(m(Y) <= m(y)),  m = the prior predictive pmf or density.

  Conflict is declared when p(y) < :data:`LEVEL`. Its probability at a true value is
  exact: the sum (counts) or integral (sample mean, known sd) of the data's distribution
  over the outcomes in conflict.
* **How the robust mixture reacts.** For robust mixtures, the expected posterior weight of
  the vague component at each true value (the mixture update of the engines).
* **What it does to the decision.** The probability of success at every scenario with
  the design's borrowing and with no borrowing (the same design with the initial prior
  alone), from the design's own engine, and their difference: borrowing gains power when
  the historical data are right and can inflate the type I error when they drift.
"""

from __future__ import annotations

import copy
import math
import time
import tomllib
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from octrial.design.load import parse_design
from octrial.design.model import Design, Source
from octrial.design.write import dumps
from octrial.endpoints.base import LatticeFamily
from octrial.endpoints.normal import update as normal_update
from octrial.errors import InputError
from octrial.evaluation import compute

LEVEL = 0.05
"""Conflict is declared when the prior predictive p-value is below this (common practice)."""

NORMAL_GRID = 4001
"""Points of the sample-mean grid (normal endpoints) across +-12 predictive sd."""


def borrowing_arms(design: Design) -> list[int]:
    """Indices of the arms whose analysis prior borrows from historical data."""
    return [j for j, arm in enumerate(design.arms)
            if getattr(arm.prior, "borrowing", None) is not None]


def variant(design: Design, arm: int, borrowing: dict[str, Any] | None) -> Design:
    """``design`` read again with arm ``arm``'s borrowing replaced (``None``: none)."""
    data = tomllib.loads(design.source.text)
    table = data["arms"][design.arms[arm].name]["prior"]
    table = copy.deepcopy(table)
    if borrowing is None:
        table.pop("historical", None)
        table.pop("borrowing", None)
    else:
        table["borrowing"] = borrowing
    data["arms"][design.arms[arm].name]["prior"] = table
    what = "no borrowing" if borrowing is None else "informative component"
    return parse_design(data, Source(f"{design.source.path} ({what})", "", dumps(data)))


def run_conflict(design: Design) -> dict[str, Any]:
    """The prior-data conflict record for checks.json (module docstring)."""
    arms = borrowing_arms(design)
    if not arms:
        return {"not_applicable": "no arm borrows from historical data"}
    if not design.source.text:
        return {"not_applicable": "the design's text is needed to build the design without "
                                  "borrowing (load it with octrial.load_design)"}
    started = time.perf_counter()
    per_arm = []
    baseline = design  # becomes the design with no arm borrowing
    for j in arms:
        record = design.arms[j].prior.borrowing
        vague = variant(design, j, None)
        informative = variant(design, j, {"method": "power", "a0": record.a0})
        baseline = vague if baseline is design else variant(baseline, j, None)
        table = design.family.prior_data_conflict(design, j, informative, vague)
        if table is None:
            return {"not_applicable": "prior-data conflict is not available for this "
                                      f"prior ({design.arms[j].prior.describe()}) yet"}
        per_arm.append({
            "arm": design.arms[j].name, "method": record.method, "a0": record.a0,
            "vague_weight": record.vague_weight, "historical": record.data(),
            "historical_estimate": record.estimate,
            "informative_prior": informative.arms[j].prior.describe(),
            "no_borrowing_prior": vague.arms[j].prior.describe(),
            "by_true_value": table,
        })
    decision, note = _decision(design, baseline)
    return {
        "measure": ("prior predictive p-value of the arm's current data under the "
                    "informative prior (outcomes ordered by predictive probability; Box "
                    "1980, Evans & Moshonov 2006); conflict when p < "
                    f"{LEVEL:g}"),
        "level": LEVEL, "arms": per_arm, "decision": decision, "decision_note": note,
        "seconds": time.perf_counter() - started,
    }


def _p_values(pmf: np.ndarray) -> np.ndarray:
    """p(y) = sum of pmf(y') over y' with pmf(y') <= pmf(y), for every y."""
    order = np.argsort(pmf, kind="stable")
    sorted_pmf = pmf[order]
    cum = np.cumsum(sorted_pmf)
    # ties (and near-ties within rounding) share the largest cumulative value
    last = np.searchsorted(sorted_pmf, sorted_pmf * (1 + 1e-9), side="right") - 1
    out = np.empty_like(pmf)
    out[order] = cum[last]
    return np.minimum(out, 1.0)


def _vague_components(design: Design, vague: Design, arm: int) -> int:
    """How many of the prior's components (the last ones) are the vague component's."""
    record = design.arms[arm].prior.borrowing
    if record.method != "robust-mixture" or record.vague_weight in (0.0, 1.0):
        return 0
    return len(vague.arms[arm].prior.weights)


def lattice_conflict(design: Design, arm: int, informative: Design,
                     vague: Design) -> list[dict[str, Any]]:
    family: LatticeFamily = design.family
    looks = design.looks.per_arm
    truths = sorted({row[arm] for row in design.scenarios.values})
    n_vague = _vague_components(design, vague, arm)
    rows = {t: {"true_value": t, "drift": t - design.arms[arm].prior.borrowing.estimate}
            for t in truths}
    for k, sizes in enumerate(looks):
        n = sizes[arm]
        size = family.lattice_size(design, arm, n)
        prior_post = family.posterior(informative, arm, 0, np.zeros(1))
        pmf = family.predictive_pmf(informative, prior_post, n, size)[0]
        conflict = _p_values(pmf) < LEVEL
        weight = None
        if n_vague:
            post = family.posterior(design, arm, n, np.arange(size))
            weight = post.weights[:, -n_vague:].sum(axis=1)
        for t in truths:
            data = family.increment_pmf(design, t, n, size)
            rows[t][f"look{k + 1}_conflict"] = float(data @ conflict)
            if weight is not None:
                rows[t][f"look{k + 1}_vague_weight"] = float(data @ weight)
    return list(rows.values())


def normal_conflict(design: Design, arm: int, informative: Design,
                    vague: Design) -> list[dict[str, Any]]:
    family = design.family
    sign = design.hypothesis.sign
    inf_prior = informative.arms[arm].prior
    truths = sorted({row[arm] for row in design.scenarios.values})
    n_vague = _vague_components(design, vague, arm)
    estimate = design.arms[arm].prior.borrowing.estimate
    rows = {t: {"true_value": t, "drift": t - estimate} for t in truths}
    w, m, s = (np.asarray(v, dtype=float) for v in (inf_prior.weights, inf_prior.mean,
                                                     inf_prior.sd))
    for k, sizes in enumerate(design.looks.per_arm):
        info = family.information(design, sizes)
        spread = np.sqrt(s**2 + 1.0 / info)
        lo = min(m - 12 * spread)
        hi = max(m + 12 * spread)
        lo, hi = min(lo, min(truths) - 12 / math.sqrt(info)), max(hi, max(truths)
                                                                  + 12 / math.sqrt(info))
        y = np.linspace(lo, hi, NORMAL_GRID)
        step = y[1] - y[0]
        density = (w[:, None] * stats.norm.pdf(y[None, :], m[:, None],
                                               spread[:, None])).sum(axis=0)
        conflict = _p_values(density * step) < LEVEL
        weight = None
        if n_vague:
            post = normal_update(design.arms[arm].prior, sign, info, sign * info * y)
            weight = post.weights[:, -n_vague:].sum(axis=1)
        for t in truths:
            data = stats.norm.pdf(y, t, 1.0 / math.sqrt(info)) * step
            rows[t][f"look{k + 1}_conflict"] = float(data @ conflict)
            if weight is not None:
                rows[t][f"look{k + 1}_vague_weight"] = float(data @ weight)
    return list(rows.values())


def _decision(design: Design, baseline: Design) -> tuple[list[dict[str, Any]], str]:
    """P(success) per scenario with and without borrowing, from the design's engine."""
    try:
        with_borrowing = compute(design).oc
        without = compute(baseline).oc
    except (InputError, ValueError) as exc:
        return [], f"not computed: {exc}"
    keep = [c for c in with_borrowing.columns
            if c.startswith(("true_", "drift_")) or c in ("scenario", "is_null")]
    table = with_borrowing[keep].copy()
    table["prob_success_borrowing"] = with_borrowing["prob_success"]
    table["prob_success_no_borrowing"] = without["prob_success"].to_numpy()
    table["difference"] = table["prob_success_borrowing"] - table["prob_success_no_borrowing"]
    null = table["is_null"].astype(bool)
    note = "exact" if (with_borrowing["replicates"] == 0).all() else "Monte Carlo"
    if null.any():
        note += (f"; maximum type I error {table.loc[null, 'prob_success_borrowing'].max():.4g}"
                 f" with borrowing, {table.loc[null, 'prob_success_no_borrowing'].max():.4g}"
                 " without")
    return _records(table), note


def _records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    out = []
    for row in frame.to_dict(orient="records"):
        out.append({k: (bool(v) if isinstance(v, np.bool_) else
                        float(v) if isinstance(v, np.floating) else
                        int(v) if isinstance(v, np.integer) else v) for k, v in row.items()})
    return out

