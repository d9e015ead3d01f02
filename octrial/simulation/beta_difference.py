"""Pr(p_X - p_Y > d) for independent beta mixtures, compiled with numba.

B = Pr(p_X - p_Y > d) = integral of f_Y(u) Pr(p_X > u + d) du by the same tanh-sinh
quadrature as the decision tables (:func:`octrial.endpoints.binary.prob_difference_exceeds`:
the same nodes, step halving to 1e-11), per call, skipping nodes whose weighted density
is below e^-60 of the largest. Used where such probabilities are needed one study at a
time (the posterior-shrinkage checks of :mod:`octrial.checks.lattice_model`).
"""

from __future__ import annotations

import math

import numba
import numpy as np

from octrial.numerics import tanh_sinh
from octrial.simulation.special import betainc_pair, log_beta

QUADRATURE_TOLERANCE = 1e-11
NEGLIGIBLE = -60.0
"""Nodes whose log density is this far below the largest are skipped (e^-60 ~ 1e-26)."""


def quadrature_nodes() -> tuple[np.ndarray, ...]:
    """The tanh-sinh levels of :mod:`octrial.numerics.tanh_sinh`, packed: log u,
    log(1 - u), log weight, and where each level starts."""
    levels = [tanh_sinh.level_nodes(level) for level in range(tanh_sinh.MAX_LEVEL + 1)]
    start = np.cumsum([0] + [nd.log_u.size for nd in levels]).astype(np.int64)
    return (np.concatenate([nd.log_u for nd in levels]),
            np.concatenate([nd.log_1mu for nd in levels]),
            np.concatenate([nd.log_w for nd in levels]), start)


@numba.njit(cache=True)
def _mixture_cdf(w, a, b, t, upper):
    """Pr(p <= t) (or > t when ``upper``) under the beta mixture."""
    total = 0.0
    for j in range(w.size):
        lower, up = betainc_pair(a[j], b[j], t)
        total += w[j] * (up if upper else lower)
    return total


@numba.njit(cache=True)
def prob_difference_exceeds(wx, ax, bx, wy, ay, by, d, log_u_nodes, log_1mu_nodes,
                            log_w_nodes, level_start, tol):
    """Pr(p_X - p_Y > d) for beta mixtures X and Y (see module docstring)."""
    lo, hi = max(0.0, -d), min(1.0, 1.0 - d)
    width = hi - lo
    log_width = math.log(width)
    log_norm_y = np.empty(wy.size)
    for j in range(wy.size):
        log_norm_y[j] = math.log(wy[j]) - log_beta(ay[j], by[j])
    total = 0.0
    peak = -np.inf
    for level in range(level_start.size - 1):
        part = 0.0
        for i in range(level_start[level], level_start[level + 1]):
            s_log, sc_log = log_u_nodes[i], log_1mu_nodes[i]
            if lo > 0.0:
                log_u = math.log(lo + width * math.exp(s_log))
            else:
                log_u = log_width + s_log
            if hi < 1.0:
                log_1mu = math.log((1.0 - hi) + width * math.exp(sc_log))
            else:
                log_1mu = log_width + sc_log
            top = -np.inf
            for j in range(wy.size):
                top = max(top, log_norm_y[j] + (ay[j] - 1.0) * log_u
                          + (by[j] - 1.0) * log_1mu)
            # Skip terms negligible against the largest so far (never more than against
            # the largest overall; the survival factor is at most 1).
            weighted = top + log_w_nodes[i]
            if weighted < peak + NEGLIGIBLE:
                continue
            peak = max(peak, weighted)
            density = 0.0
            for j in range(wy.size):
                density += math.exp(log_norm_y[j] + (ay[j] - 1.0) * log_u
                                    + (by[j] - 1.0) * log_1mu - top)
            log_term = weighted + math.log(density) + log_width
            # 1 - (u + d) = (1 - d - hi) + width (1 - s), exact near s = 1
            complement = (1.0 - d - hi) + width * math.exp(sc_log)
            survival = 0.0
            for j in range(wx.size):
                survival += wx[j] * betainc_pair(bx[j], ax[j], complement)[0]
            part += survival * math.exp(log_term)
        if level == 0:
            total = part
            continue
        refined = 0.5 * total + part
        change = abs(refined - total)
        total = refined
        if change <= tol:
            break
    if d < 0.0:
        total += _mixture_cdf(wy, ay, by, -d, False)
    return min(max(total, 0.0), 1.0)
