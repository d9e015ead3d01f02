"""Per-study estimation summaries shared by every simulation kernel.

Each kernel adds the error of the posterior mean of one stopped study (its estimate minus
the truth) and whether the equal-tailed credible interval covers the truth; the engine
turns the sums into bias, root-mean-square error and coverage with their standard errors.
"""

from __future__ import annotations

import numba


@numba.njit(cache=True, inline="always")
def add_estimate(err, cdf, tail, sums):
    """Add one stopped study's error powers (err, err^2, err^4) to ``sums``; return 1 if
    its interval covers the truth, i.e. the posterior CDF at the truth lies in
    [tail, 1 - tail]."""
    e2 = err * err
    sums[0] += err
    sums[1] += e2
    sums[2] += e2 * e2
    return 1 if tail <= cdf <= 1.0 - tail else 0
