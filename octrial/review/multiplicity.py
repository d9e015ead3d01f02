"""Adjusting p-values for testing many claims at once.

Holm (1979), "A simple sequentially rejective multiple test procedure", Scandinavian
Journal of Statistics 6:65-70. With the m p-values ordered p_(1) <= ... <= p_(m), the
adjusted p-value of the i-th smallest is

    max over j <= i of min(1, (m - j + 1) p_(j)),

and rejecting every hypothesis whose adjusted p-value is below alpha controls the
family-wise error rate at alpha under any dependence between the tests. It is the closed
testing procedure (Marcus, Peritz & Gabriel 1976) built on Bonferroni tests of each
intersection, and rejects at least as much as Bonferroni.
"""

from __future__ import annotations

import numpy as np


def holm(p: np.ndarray) -> np.ndarray:
    """Holm-adjusted p-values, in the order given.

    Parameters
    ----------
    p : array_like
        Unadjusted p-values in [0, 1].

    Returns
    -------
    ndarray
        Adjusted p-values, each at least its unadjusted value and at most 1.

    Examples
    --------
    >>> holm([0.01, 0.04, 0.03]).round(4).tolist()
    [0.03, 0.06, 0.06]
    """
    p = np.asarray(p, dtype=float)
    m = p.size
    if m == 0:
        return p.copy()
    order = np.argsort(p, kind="stable")
    scaled = np.minimum(1.0, (m - np.arange(m)) * p[order])
    adjusted = np.empty(m)
    adjusted[order] = np.maximum.accumulate(scaled)
    return adjusted
