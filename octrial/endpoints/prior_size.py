"""Effective sample size of an analysis prior.

Two summaries, both reported per arm in run.json:

* the simple one of each conjugate family: a + b for a beta prior, b / (exposure per
  subject) for a gamma prior with rate b, sd^2 / s0^2 for a normal prior with sd s0 on a
  mean, sd^2 (1/w_T + 1/w_C) / s0^2 total subjects for a prior on a difference in means
  with allocation fractions w, mean_n for a normal-inverse-gamma prior; weighted by the
  component weights for a mixture (common practice, no single source);
* FDA's (2010 guidance on Bayesian statistics in medical device trials): with n subjects,
  ESS = n V1 / V2 - n, where V1 is the posterior variance under a non-informative prior
  and V2 under the proposed prior. octrial evaluates both at the arm's final sample size
  with data equal to their expectation under the prior (x = n x prior mean), and takes as
  non-informative the prior flat on the scale the likelihood is smooth on (logit rate,
  log rate, mean), for which the formula reproduces the simple summaries exactly for
  gamma and normal priors and as n grows for beta priors.
"""

from __future__ import annotations

from typing import Any


def fda_summary(n: float, v_reference: float, v_prior: float) -> dict[str, Any]:
    """FDA (2010) effective sample size n V1 / V2 - n with its ingredients (``ess`` None
    when V2 is lost to rounding: a prior far from 0 in units of its own sd)."""
    return {
        "n": n,
        "v1_noninformative": v_reference,
        "v2_prior": v_prior,
        "ess": n * v_reference / v_prior - n if v_prior > 0 else None,
        "data": "expected under the prior (x = n x prior mean)",
    }


def arm_summary(
    description: str, simple: float | None, simple_formula: str | None,
    fda: dict[str, Any] | None, borrowing: Any = None,
) -> dict[str, Any]:
    """One arm's (or the effect's) prior summary for run.json."""
    out: dict[str, Any] = {"prior": description}
    if simple is not None:
        out["simple"] = simple
        out["simple_formula"] = simple_formula
    if fda is not None:
        out["fda"] = fda
    if borrowing is not None:
        out["borrowing"] = {
            "method": borrowing.method,
            "a0": borrowing.a0,
            "vague_weight": borrowing.vague_weight,
            "historical": borrowing.data(),
            "historical_estimate": borrowing.estimate,
            "historical_size": borrowing.size,
        }
    return out
