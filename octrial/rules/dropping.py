"""The several-arm dropping rule after each arm's own decision at an interim look.

Arms still in the study whose posterior probability of being the best is below the
look's threshold leave; then, while more than ``keep`` are left, the arm least likely
to be the best leaves (ties: the later arm). One numba function, applied by the
fixed-allocation kernel (:mod:`octrial.multiarm.kernel`) and the adaptive study loop
(:mod:`octrial.allocation.kernel`), so both drop and select the same way.
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True, inline="always")
def drop_arms(pr_best: np.ndarray, active: np.ndarray, start: int, threshold: float,
              keep: int, left: int, gone: np.ndarray) -> int:
    """Apply the rule to arms ``start`` onwards; return how many leave.

    Parameters
    ----------
    pr_best, active : arrays over the arms
        Each arm's probability of being the best, and whether it is still in; the arms
        that leave are set inactive.
    start : int
        First treatment arm (arms before it, a shared control, take no part).
    threshold : float
        Arms below it leave (0 or below: none by this part of the rule).
    keep : int
        At most this many arms go on (0: any number).
    left : int
        Treatment arms in the study before the rule.
    gone : boolean array over the arms
        Written: True for the arms that leave here.
    """
    out = 0
    for j in range(start, active.size):
        gone[j] = False
        if active[j] and pr_best[j] < threshold:
            active[j] = False
            gone[j] = True
            out += 1
    while keep > 0 and left - out > keep:
        worst = -1
        for j in range(start, active.size):
            if active[j] and (worst < 0 or pr_best[j] <= pr_best[worst]):
                worst = j
        active[worst] = False
        gone[worst] = True
        out += 1
    return out
