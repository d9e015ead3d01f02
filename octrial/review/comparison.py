"""The two-sided test of one claimed number against its recomputation.

For a claimed value c (rounded to half a unit h in its last stated decimal) and the
recomputed value r, with standard errors se_c (the claim's Monte Carlo error, 0 when it
says it is exact) and se_r (the recomputation's, 0 when exact):

    z = sign(c - r) max(|c - r| - h - tol, 0) / sqrt(se_c^2 + se_r^2),
    p = 2 (1 - Phi(|z|)).

Rounding is bounded, not random: the unrounded claim lies somewhere in [c - h, c + h], and
the p-value above is the largest of the usual two-sample z-test p-values over that
interval (the least favourable unrounded value), so a rounded claim is never called
discrepant because of its rounding. ``tol`` is the numerical tolerance of exact
computation. When both standard errors are 0 the test is exact: p = 1 within the
allowance h + tol, p = 0 beyond it.

Standard errors of probabilities come from the binomial variance p0 (1 - p0) / R at the
value p0 the null hypothesis implies: the exact side's value when one side is exact, and
otherwise the replicate-weighted pool of the two estimates (the usual two-proportion
z-test). Expected sample sizes use sd(N) / sqrt(R) with sd(N) from the recomputation.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

EXPECTED_N = "expected_n"


def null_proportion(
    claimed: np.ndarray, claim_replicates: np.ndarray, recomputed: np.ndarray,
    recomputed_replicates: np.ndarray,
) -> np.ndarray:
    """The common probability both estimates share under the null hypothesis.

    Replicates of 0 mean exact: an exact side fixes the value (the claim's when the claim
    says it is exact); two Monte Carlo estimates are pooled with weights R.
    """
    rc = np.asarray(claim_replicates, dtype=float)
    rr = np.asarray(recomputed_replicates, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        pooled = (claimed * rc + recomputed * rr) / (rc + rr)
    value = np.where(rc == 0, claimed, np.where(rr == 0, recomputed, pooled))
    return np.clip(value, 0.0, 1.0)


def binomial_se(p: np.ndarray, replicates: np.ndarray) -> np.ndarray:
    """sqrt(p (1 - p) / R), and 0 where R is 0 (exact)."""
    r = np.asarray(replicates, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        se = np.sqrt(p * (1.0 - p) / r)
    return np.where(r > 0, se, 0.0)


def standard_errors(
    metric: np.ndarray, claimed: np.ndarray, claim_replicates: np.ndarray,
    claim_se: np.ndarray, recomputed: np.ndarray, recomputed_replicates: np.ndarray,
    sd_n: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Standard errors of the claim and of the recomputation, per claim.

    Parameters
    ----------
    metric : array of str
        The oc.csv column of each claim.
    claimed, recomputed : array of float
    claim_replicates, recomputed_replicates : array of int
        Replicates behind each value (0 when exact).
    claim_se : array of float
        The claim's own standard error, NaN where the claims file gives none.
    sd_n : array of float
        The recomputed standard deviation of the sample size (for ``expected_n``).

    Returns
    -------
    claim_se, recomputed_se : ndarray
    """
    is_n = np.asarray(metric) == EXPECTED_N
    p0 = null_proportion(claimed, claim_replicates, recomputed, recomputed_replicates)
    rc = np.asarray(claim_replicates, dtype=float)
    rr = np.asarray(recomputed_replicates, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        n_claim = np.where(rc > 0, sd_n / np.sqrt(rc), 0.0)
        n_recomputed = np.where(rr > 0, sd_n / np.sqrt(rr), 0.0)
    se_c = np.where(is_n, n_claim, binomial_se(p0, rc))
    se_r = np.where(is_n, n_recomputed, binomial_se(p0, rr))
    given = np.isfinite(claim_se)
    return np.where(given, claim_se, se_c), se_r


def z_scores(
    claimed: np.ndarray, recomputed: np.ndarray, allowance: np.ndarray, claim_se: np.ndarray,
    recomputed_se: np.ndarray,
) -> np.ndarray:
    """The rounding-aware z statistic (module docstring); +-inf for exact disagreement."""
    difference = np.asarray(claimed, dtype=float) - np.asarray(recomputed, dtype=float)
    excess = np.maximum(np.abs(difference) - allowance, 0.0)
    scale = np.hypot(claim_se, recomputed_se)
    with np.errstate(invalid="ignore", divide="ignore"):
        z = np.where(scale > 0, np.sign(difference) * excess / scale,
                     np.copysign(np.inf, difference))
    return np.where(excess == 0.0, 0.0, z)


def two_sided_p(z: np.ndarray) -> np.ndarray:
    """2 (1 - Phi(|z|)), computed in the upper tail for accuracy."""
    return np.minimum(1.0, 2.0 * stats.norm.sf(np.abs(z)))
