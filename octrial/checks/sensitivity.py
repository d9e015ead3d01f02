"""How much each simulated study learns: posterior shrinkage against posterior z-score.

For studies simulated with true values from the design prior (the analysis prior when
the design gives none), at every look and for the target quantity:

    shrinkage = 1 - Var(theta | y) / Var(theta)     (Var(theta): the analysis prior's)
    z = (E(theta | y) - theta_true) / SD(theta | y)

(Betancourt 2018, "Calibrating model-based inferences and decisions", arXiv:1803.08393,
where the two are plotted against each other; both are common practice.) Shrinkage near 0
means the data barely move the prior: the look learns little. |z| well above 2 means the
posterior is confidently wrong, typically because the truth lies where the analysis prior
puts little mass. When the truths come from the analysis prior itself the posterior is
calibrated, so z has mean 0 and variance 1 (exactly standard normal for a normal prior
with known sd); a design prior that differs from the analysis prior shows how the
analysis behaves when the prior is wrong.

Flags (heuristics, common practice without a published source): more than
:data:`CONFIDENTLY_WRONG` of the studies with |z| > 2 at a look (a correct Gaussian
posterior gives 4.6%), or more than :data:`LEARNS_LITTLE` of the studies with shrinkage
below 0.1 at the final look.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from octrial.checks.model import ANALYSIS, DESIGN, CheckModel
from octrial.checks.settings import CheckSettings, generator

Z_LIMIT = 2.0
SHRINKAGE_LIMIT = 0.1
CONFIDENTLY_WRONG = 0.10
"""Flag a look when more than this share of studies has |z| > 2."""
LEARNS_LITTLE = 0.5
"""Flag the final look when more than this share of studies has shrinkage < 0.1."""


@dataclass(frozen=True, eq=False)
class SensitivityResult:
    """The per-look table (checks.json) and every study's point (sensitivity.csv)."""

    record: dict[str, Any]
    points: pd.DataFrame


def run_sensitivity(model: CheckModel, settings: CheckSettings) -> SensitivityResult:
    """Posterior shrinkage and z-score of the target at every look (module docstring)."""
    reason = model.cannot_compute()
    if reason is not None:
        return SensitivityResult({"not_applicable": reason}, pd.DataFrame())
    source = DESIGN if model.cannot_draw(DESIGN) is None else ANALYSIS
    if model.cannot_draw(source) is not None:
        return SensitivityResult({"not_applicable": f"{model.cannot_draw(ANALYSIS)}; and "
                                                    f"{model.cannot_draw(DESIGN)}"},
                                 pd.DataFrame())
    started = time.perf_counter()
    rng = generator(settings.seed, "sensitivity")
    m = settings.simulations
    truths = model.draw_truths(rng, m, source)
    data = model.simulate(rng, truths)
    q = model.target()
    truth = model.true_value(q, truths)
    prior_variance = float(np.asarray(model.prior().variance(q))[0])
    rows: list[dict[str, Any]] = []
    frames: list[pd.DataFrame] = []
    looks = model.design.looks
    for k in range(looks.count):
        post = model.posterior(data, k)
        mean, variance = post.mean(q), post.variance(q)
        sd = np.sqrt(variance)
        shrinkage = 1.0 - variance / prior_variance
        z = (mean - truth) / sd
        frames.append(pd.DataFrame({"look": k + 1, "simulation": np.arange(1, m + 1),
                                    "truth": truth, "posterior_mean": mean,
                                    "posterior_sd": sd, "shrinkage": shrinkage, "z": z}))
        rows.append({
            "look": k + 1, "n": list(looks.per_arm[k]), "studies": m,
            "share_abs_z_above_2": float(np.mean(np.abs(z) > Z_LIMIT)),
            "share_shrinkage_below_0.1": float(np.mean(shrinkage < SHRINKAGE_LIMIT)),
            "mean_shrinkage": float(np.mean(shrinkage)),
            "median_shrinkage": float(np.median(shrinkage)),
            "mean_z": float(np.mean(z)), "sd_z": float(np.std(z, ddof=1)),
        })
    flags = []
    for row in rows:
        if row["share_abs_z_above_2"] > CONFIDENTLY_WRONG:
            flags.append(f"look {row['look']}: {row['share_abs_z_above_2']:.1%} of studies "
                         f"have |z| > 2 (a calibrated posterior gives about 4.6%): the "
                         "posterior is often confidently wrong about the truths generated")
    last = rows[-1]
    if last["share_shrinkage_below_0.1"] > LEARNS_LITTLE:
        flags.append(f"final look: {last['share_shrinkage_below_0.1']:.1%} of studies shrink "
                     "the prior variance by less than 10%: the study learns little beyond "
                     "the prior")
    record = {
        "quantity": q.name, "label": q.label, "studies": m,
        "truths_from": "design prior" if source == DESIGN else
        "analysis prior (the design gives no design prior)",
        "prior_variance": prior_variance, "looks": rows, "flags": flags,
        "verdict": "flag" if flags else "pass", "seconds": time.perf_counter() - started,
    }
    return SensitivityResult(record, pd.concat(frames, ignore_index=True))
