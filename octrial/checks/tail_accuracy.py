"""Monte Carlo accuracy of posterior quantiles estimated from draws.

A posterior summarised by L independent draws gives each quantile with a Monte Carlo
error. For the q-quantile x_q of a density f the sample quantile is asymptotically normal
with standard error

    SE(q) = sqrt(q (1 - q) / L) / f(x_q)

(the asymptotic distribution of a sample quantile; for example van der Vaart 1998,
Asymptotic Statistics, corollary 21.5). In the tails f(x_q) is small, so the 2.5% and
97.5% quantiles need several times more draws than the median for the same accuracy.

The check takes one representative study (the target's posterior at the final look for
data at the analysis prior's mean), computes the exact quantiles (root finding on the
posterior CDF the engines use) and the density there (central difference of the CDF),
then draws L = 100 .. 100,000 posterior values ``repeats`` times and compares the spread
of the estimated quantiles with the formula. It reports, per quantile, the draws needed
for a Monte Carlo SE of 1% of the posterior sd, and its ratio to the median's.
"""

from __future__ import annotations

import math
import time
from typing import Any

import numpy as np
from scipy import optimize, stats

from octrial.checks.model import CheckModel
from octrial.checks.settings import CheckSettings, generator

LEVELS = (0.025, 0.05, 0.5, 0.95, 0.975)
DRAWS = (100, 1_000, 10_000, 100_000)
MAX_DRAWS = 2_000_000
"""Draws per size L at most (fewer repeats for large L; the agreement range allows for
it)."""
TARGET = 0.01
"""Draws needed are reported for a Monte Carlo SE of this fraction of the posterior sd."""
AGREEMENT_LEVEL = 0.999
"""The formula agrees with the repeated draws when, at every L >= 1000, the observed sd
of the estimates over R repeats lies within the central range of this probability of the
sd of R normal values with the formula's sd (sqrt(chi-square(R - 1) / (R - 1))), widened
by :data:`ASYMPTOTIC_SLACK` for the formula being asymptotic."""
ASYMPTOTIC_SLACK = 0.10


def run_tail_accuracy(model: CheckModel, settings: CheckSettings) -> dict[str, Any]:
    """The tail-accuracy record for checks.json (module docstring)."""
    reason = model.cannot_compute()
    if reason is not None:
        return {"not_applicable": reason}
    started = time.perf_counter()
    q = model.target()
    post = model.posterior(model.typical_data(), model.design.looks.count - 1)
    mean = float(post.mean(q)[0])
    sd = float(math.sqrt(post.variance(q)[0]))

    def cdf(x: float) -> float:
        return float(post.cdf(q, np.array([x]))[0])

    exact = [_quantile(cdf, level, mean, sd) for level in LEVELS]
    step = 1e-3 * sd
    density = [(cdf(x + step) - cdf(x - step)) / (2 * step) for x in exact]
    rng = generator(settings.seed, "tail-accuracy")
    rows = []
    agree = True
    for draws in DRAWS:
        repeats = min(settings.repeats, max(20, MAX_DRAWS // draws))
        estimates = np.quantile(post.draw(q, rng, draws * repeats).reshape(repeats, draws),
                                LEVELS, axis=1)
        for i, level in enumerate(LEVELS):
            asymptotic = math.sqrt(level * (1 - level) / draws) / density[i]
            observed = float(np.std(estimates[i], ddof=1))
            ratio = observed / asymptotic
            low, high = _agreement(repeats)
            if draws >= 1_000 and not low <= ratio <= high:
                agree = False
            rows.append({"quantile": level, "draws": draws, "repeats": repeats,
                         "exact": exact[i], "mean_estimate": float(np.mean(estimates[i])),
                         "mc_se_observed": observed, "mc_se_formula": asymptotic,
                         "ratio": ratio, "ratio_low": low, "ratio_high": high,
                         "mc_se_over_posterior_sd": observed / sd})
    needs = [level * (1 - level) / (density[i] * TARGET * sd) ** 2
             for i, level in enumerate(LEVELS)]
    median_need = needs[LEVELS.index(0.5)]
    needed: list[dict[str, Any]] = [
        {"quantile": level, "exact": exact[i], "density": density[i],
         "draws_for_se_1pct_of_sd": math.ceil(needs[i])} for i, level in enumerate(LEVELS)]
    for row in needed:
        row["relative_to_median"] = row["draws_for_se_1pct_of_sd"] / median_need
    n = model.design.looks.per_arm[-1]
    return {
        "quantity": q.name, "label": q.label,
        "data": f"final look (n = {', '.join(map(str, n))}) with data at the analysis "
                "prior's mean",
        "posterior_mean": mean, "posterior_sd": sd, "table": rows, "draws_needed": needed,
        "verdict": "pass" if agree else "flag",
        "formula_agrees": agree, "seconds": time.perf_counter() - started,
    }


def _agreement(repeats: int) -> tuple[float, float]:
    tail = (1.0 - AGREEMENT_LEVEL) / 2.0
    df = repeats - 1
    low = math.sqrt(stats.chi2.ppf(tail, df) / df) * (1.0 - ASYMPTOTIC_SLACK)
    high = math.sqrt(stats.chi2.isf(tail, df) / df) * (1.0 + ASYMPTOTIC_SLACK)
    return low, high


def _quantile(cdf: Any, level: float, mean: float, sd: float) -> float:
    lo, hi = mean - 10 * sd, mean + 10 * sd
    while cdf(lo) > level:
        lo -= 10 * sd
    while cdf(hi) < level:
        hi += 10 * sd
    return float(optimize.brentq(lambda x: cdf(x) - level, lo, hi, xtol=1e-10 * sd))
