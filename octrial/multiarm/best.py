"""The posterior probability that a treatment arm is the best.

Pr(arm j best) = Pr(p_j > p_i for every other arm i still in the study) =
integral of F_i over dF_j, with F the posterior CDFs (of 1 - p when lower is better). It
is summed on a uniform grid of [0, 1] as a Stieltjes trapezoid sum,
sum_g [F_j(u_{g+1}) - F_j(u_g)] x (P_j(u_g) + P_j(u_{g+1})) / 2 with P_j the product of
the other arms' CDFs: no density is needed, so posteriors with an infinite density at 0
or 1 are summed as safely as any other.
"""

from __future__ import annotations

import numba
import numpy as np
from scipy import special


@numba.njit(cache=True)
def best_probabilities(cdfs, active, out):
    """Pr(best) of each active arm among the active arms.

    Parameters
    ----------
    cdfs : ndarray, shape (T, G + 1)
        Each arm's posterior CDF on the grid.
    active : ndarray of bool, shape (T,)
        Arms in the competition; the others get 0.
    out : ndarray, shape (T,)
        Written in place.
    """
    T, G1 = cdfs.shape
    # cells where every active CDF is 0, or every one is 1, add nothing: sum between
    lo = G1 - 1
    hi = 0
    for j in range(T):
        out[j] = 0.0
        if not active[j]:
            continue
        g = 0
        while g < G1 - 1 and cdfs[j, g + 1] == 0.0:
            g += 1
        lo = min(lo, g)
        g = G1 - 1
        while g > 0 and cdfs[j, g - 1] == 1.0:
            g -= 1
        hi = max(hi, g)
    before = np.ones(T + 1)
    after = np.ones(T + 1)
    prev = np.zeros(T)
    for g in range(lo, hi + 1):
        # products of the other arms' CDFs at u_g: prefix and suffix products, O(T)
        for j in range(T):
            before[j + 1] = before[j] * (cdfs[j, g] if active[j] else 1.0)
        for j in range(T - 1, -1, -1):
            after[j] = after[j + 1] * (cdfs[j, g] if active[j] else 1.0)
        for j in range(T):
            if not active[j]:
                continue
            others = before[j] * after[j + 1]
            if g > lo:
                out[j] += (cdfs[j, g] - cdfs[j, g - 1]) * 0.5 * (others + prev[j])
            prev[j] = others


def beta_cdf_grid(a: np.ndarray, b: np.ndarray, grid: int = 1024) -> np.ndarray:
    """CDFs of Beta(a_j, b_j) on ``grid`` cells of [0, 1], shape (len(a), grid + 1)."""
    nodes = np.linspace(0.0, 1.0, grid + 1)
    return special.betainc(np.asarray(a, float)[:, None], np.asarray(b, float)[:, None],
                           nodes[None, :])


def prob_best_beta(a: np.ndarray, b: np.ndarray, grid: int = 1024) -> np.ndarray:
    """Pr(each arm has the largest rate) for independent Beta(a_j, b_j) posteriors.

    Examples
    --------
    >>> import numpy as np
    >>> p = prob_best_beta(np.array([5.0, 5.0]), np.array([5.0, 5.0]))
    >>> bool(abs(p[0] - 0.5) < 1e-6)
    True
    """
    cdfs = beta_cdf_grid(a, b, grid)
    out = np.zeros(len(cdfs))
    best_probabilities(cdfs, np.ones(len(cdfs), dtype=np.bool_), out)
    return out
