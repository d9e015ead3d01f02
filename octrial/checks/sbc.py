"""Simulation-based calibration of the posterior computations.

Talts, Betancourt, Simpson, Vehtari & Gelman (2018), "Validating Bayesian inference
algorithms with simulation-based calibration", arXiv:1804.06788. For i = 1..M: draw
theta_i from the analysis prior, simulate a study y_i from the data model, compute the
posterior with the engines' own code, and record

* the posterior CDF at the truth, u_i = F(theta_i | y_i) (every computation here has a
  CDF), which is exactly Uniform(0, 1) when the computation is right, also for discrete
  data (theta is continuous, so F(theta | y) is uniform given each y); and
* for computations represented by posterior draws, the rank of theta_i among L draws,
  uniform on 0..L.

The M values are binned in B bins; each bin count is Binomial(M, 1/B) under uniformity,
which gives the pointwise band drawn on the histograms. Two tests per quantity: Pearson's
chi-square on the bin counts (B - 1 degrees of freedom), and a test that uses every value
rather than the bins: for the CDF values the one-sample Kolmogorov-Smirnov test against
Uniform(0, 1) (exact p-value; valid because u is continuous), for ranks the
Kolmogorov-Smirnov distance to the discrete uniform on 0..L with its p-value from
simulated discrete-uniform samples (the continuous KS distribution does not apply to
ranks). The quantity's p-value is the Bonferroni combination min(1, 2 min(p_chi2, p_KS));
across quantities p-values are Holm-adjusted, and a quantity fails when its adjusted
p-value is below ``alpha`` (default 0.01), so a correct set of engines fails with
probability at most 1%.

Studies are simulated without stopping, so every look's posterior is judged on all M
studies (each look's posterior is a posterior given that look's data whatever the rule
would have done).
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from octrial.checks.model import ANALYSIS, CheckModel, Quantity
from octrial.checks.settings import CheckSettings, generator
from octrial.review.multiplicity import holm

NULL_SAMPLES = 2000
"""Simulated discrete-uniform samples behind a rank test's KS p-value."""


@dataclass(frozen=True, eq=False)
class SbcResult:
    """Every quantity's histogram, tests and verdict, and the values behind them.

    Attributes
    ----------
    record : dict
        The ``sbc`` entry of checks.json.
    values : DataFrame
        ``sbc.csv``: one row per quantity and simulated study.
    """

    record: dict[str, Any]
    values: pd.DataFrame


def band(simulations: int, probabilities: np.ndarray, level: float) -> tuple[np.ndarray, ...]:
    """Pointwise central ``level`` range of Binomial(M, p) bin counts."""
    tail = (1.0 - level) / 2.0
    return (stats.binom.ppf(tail, simulations, probabilities),
            stats.binom.ppf(1.0 - tail, simulations, probabilities))


def pit_uniformity(u: np.ndarray, bins: int) -> dict[str, Any]:
    """Bin counts, chi-square and exact Kolmogorov-Smirnov tests of CDF values u."""
    u = np.asarray(u, dtype=float)
    counts = np.histogram(u, bins=bins, range=(0.0, 1.0))[0]
    chi2 = stats.chisquare(counts)
    ks = stats.kstest(u, "uniform", method="exact" if u.size <= 10_000 else "auto")
    return {"counts": counts, "probabilities": np.full(bins, 1.0 / bins),
            "chi_square": float(chi2.statistic), "chi_square_p": float(chi2.pvalue),
            "ks": float(ks.statistic), "ks_p": float(ks.pvalue)}


def rank_uniformity(ranks: np.ndarray, draws: int, bins: int,
                    rng: np.random.Generator) -> dict[str, Any]:
    """Bin counts, chi-square and discrete Kolmogorov-Smirnov tests of ranks in 0..L.

    Rank r goes to bin floor(r B / (L + 1)); bins hold equally many ranks when L + 1 is
    a multiple of B, and the chi-square uses each bin's exact probability otherwise.
    """
    ranks = np.asarray(ranks, dtype=np.int64)
    m = ranks.size
    which = np.arange(draws + 1) * bins // (draws + 1)
    probabilities = np.bincount(which, minlength=bins) / (draws + 1)
    counts = np.bincount(which[ranks], minlength=bins)
    chi2 = stats.chisquare(counts, m * probabilities)
    observed = _discrete_ks(np.bincount(ranks, minlength=draws + 1)[None, :], m)[0]
    null = rng.integers(0, draws + 1, size=(NULL_SAMPLES, m))
    null_counts = np.stack([np.bincount(row, minlength=draws + 1) for row in null])
    exceed = int(np.sum(_discrete_ks(null_counts, m) >= observed - 1e-12))
    return {"counts": counts, "probabilities": probabilities,
            "chi_square": float(chi2.statistic), "chi_square_p": float(chi2.pvalue),
            "ks": float(observed), "ks_p": (1.0 + exceed) / (1.0 + NULL_SAMPLES)}


def _discrete_ks(counts: np.ndarray, m: int) -> np.ndarray:
    """max_r |ECDF(r) - (r + 1) / (L + 1)| per row of rank counts."""
    levels = counts.shape[1]
    ecdf = np.cumsum(counts, axis=1) / m
    return np.max(np.abs(ecdf - np.arange(1, levels + 1) / levels), axis=1)


def run_sbc(model: CheckModel, settings: CheckSettings,
            truth_model: CheckModel | None = None) -> SbcResult:
    """Simulation-based calibration of every posterior quantity of ``model``.

    Parameters
    ----------
    model : CheckModel
        Computes the posteriors (the design being checked).
    settings : CheckSettings
        M, B, L, alpha, band level and the seed (must be settled).
    truth_model : CheckModel, optional
        Draws the truths from its analysis prior instead of ``model``'s (tests use this
        to show that a posterior computed with another prior fails).

    Returns
    -------
    SbcResult
    """
    truth_model = model if truth_model is None else truth_model
    reason = model.cannot_draw(ANALYSIS) or truth_model.cannot_draw(ANALYSIS)
    if reason is not None:
        return SbcResult({"not_applicable": reason}, pd.DataFrame())
    m, bins, draws = settings.simulations, settings.bins, settings.draws
    rng = generator(settings.seed, "sbc")
    started = time.perf_counter()
    truths = truth_model.draw_truths(rng, m, ANALYSIS)
    data = model.simulate(rng, truths)
    simulated = time.perf_counter() - started
    looks = model.design.looks
    entries: list[dict[str, Any]] = []
    frames = []
    last = looks.count - 1
    null_rng = generator(settings.seed, "sbc-null")
    for k in range(looks.count):
        post = model.posterior(data, k)
        for q in model.quantities():
            if not (q.target or k == last):
                continue
            truth = model.true_value(q, truths)
            tic = time.perf_counter()
            u = post.cdf(q, truth)
            entries.append(_entry(q, k, looks, "cdf", u, pit_uniformity(u, bins),
                                  time.perf_counter() - tic))
            frames.append(_frame(q, k, truth, u, "cdf"))
            if q.target and k == last:
                tic = time.perf_counter()
                ranks = np.sum(post.draw(q, rng, draws) < truth[:, None], axis=1)
                test = rank_uniformity(ranks, draws, bins, null_rng)
                entries.append(_entry(q, k, looks, "rank", ranks, test,
                                      time.perf_counter() - tic, draws))
                frames.append(_frame(q, k, truth, ranks, "rank"))
    adjusted = holm(np.array([e["p_value"] for e in entries]))
    for entry, p in zip(entries, adjusted, strict=True):
        entry["p_adjusted"] = float(p)
        entry["verdict"] = "fail" if p < settings.alpha else "pass"
        low, high = band(m, np.asarray(entry["probabilities"]), settings.band)
        counts = np.asarray(entry["counts"])
        entry["band_lower"] = low.tolist()
        entry["band_upper"] = high.tolist()
        entry["bins_outside_band"] = int(np.sum((counts < low) | (counts > high)))
        entry["counts"] = counts.tolist()
        entry["probabilities"] = np.asarray(entry["probabilities"]).tolist()
    failed = [e["id"] for e in entries if e["verdict"] == "fail"]
    record = {
        "simulations": m, "bins": bins, "draws": draws, "alpha": settings.alpha,
        "band_level": settings.band, "truths_from": "analysis prior",
        "verdict": "fail" if failed else "pass", "failed": failed,
        "seconds_simulating": simulated, "quantities": entries,
    }
    return SbcResult(record, pd.concat(frames, ignore_index=True))


def _entry(q: Quantity, look: int, looks: Any, kind: str, values: np.ndarray,
           test: dict[str, Any], seconds: float, draws: int | None = None) -> dict[str, Any]:
    statistic = ("posterior CDF at the truth" if kind == "cdf"
                 else f"rank of the truth among {draws} posterior draws")
    p = min(1.0, 2.0 * min(test["chi_square_p"], test["ks_p"]))
    return {"id": f"{q.name}@look{look + 1}" + ("" if kind == "cdf" else ":rank"),
            "quantity": q.name, "label": q.label, "look": look + 1,
            "n": list(looks.per_arm[look]), "statistic": statistic, "kind": kind,
            "computation": ("posterior draws (the checks' sampler, also behind the "
                            "tail-accuracy check)" if kind == "rank" else q.computation),
            "closed_form": q.closed_form if kind == "cdf" else False,
            **test, "p_value": p, "seconds": seconds}


def _frame(q: Quantity, look: int, truth: np.ndarray, values: np.ndarray,
           kind: str) -> pd.DataFrame:
    return pd.DataFrame({"quantity": q.name, "look": look + 1, "statistic": kind,
                         "simulation": np.arange(1, truth.size + 1), "truth": truth,
                         "value": values})
