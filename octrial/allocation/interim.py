"""The allocation of the next block at an interim look, from the data so far."""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.special import betaln as _betaln

from octrial.allocation.rule import AllocationRule, next_allocation
from octrial.errors import Problem, SettingsError, show
from octrial.numerics.beta_best import probability_best


def next_block(rule: AllocationRule, responses: list[int], sizes: list[int],
               prior: tuple = (1.0, 1.0, 1.0), control: bool = True,
               higher: bool = True, maximum: int | None = None,
               active: list[bool] | None = None) -> pd.DataFrame:
    """Posterior summaries per arm and the allocation probabilities of the next block.

    Parameters
    ----------
    rule : AllocationRule
    responses, sizes : list of int
        Responses and subjects per arm so far (control first when ``control``).
    prior : (weights, a, b)
        Beta-mixture prior of every arm.
    control : bool
        Whether the first arm is a shared control.
    higher : bool
        Whether a higher response probability is better.
    maximum : int, optional
        The study's maximum number of subjects (needed by the information form).
    active : list of bool, optional
        Arms still enrolling; default all.

    Returns
    -------
    pandas.DataFrame
        One row per arm: ``subjects``, ``responses``, ``posterior_mean``, ``pr_best``
        (among the active treatment arms; NaN for the control) and ``allocation``.

    Examples
    --------
    >>> rule = AllocationRule("power", 1.0, control_share=0.25)
    >>> table = next_block(rule, [4, 5, 9], [20, 20, 20])
    >>> round(float(table["allocation"].sum()), 12)
    1.0
    """
    x, n = np.asarray(responses, int), np.asarray(sizes, int)
    arms = x.size
    act = np.ones(arms, bool) if active is None else np.asarray(active, bool)
    found = []
    if n.size != arms or act.size != arms:
        found.append(Problem("sizes", f"{arms} numbers of subjects (one per arm)",
                             show(list(n))))
    elif np.any(n < 0) or np.any(x < 0) or np.any(x > n):
        found.append(Problem("responses", "whole numbers between 0 and the arm's subjects",
                             show(list(x))))
    if rule.form == "information" and (maximum is None or maximum < n.sum()):
        found.append(Problem("maximum", f"the study's maximum, at least {n.sum()}",
                             show(maximum)))
    if found:
        raise SettingsError("next block", found)
    first = 1 if control else 0
    best = np.zeros(arms)
    chosen = np.flatnonzero(act[first:]) + first
    if chosen.size:
        best[chosen] = probability_best(x[chosen], n[chosen], prior, higher)
    weights, a, b = (np.atleast_1d(np.asarray(v, float)) for v in prior)
    shares = next_allocation(rule, best, act, control, int(n.sum()),
                             int(maximum if maximum is not None else n.sum()))
    means = []
    for xi, ni in zip(x, n, strict=True):
        log_w = np.log(weights / weights.sum()) + _betaln(a + xi, b + ni - xi) - _betaln(a, b)
        w = np.exp(log_w - log_w.max())
        means.append(float(np.sum(w / w.sum() * (a + xi) / (a + b + ni))))
    pr_best = best.astype(float)
    if control:
        pr_best[0] = np.nan
    return pd.DataFrame({"arm": np.arange(arms), "subjects": n, "responses": x,
                         "posterior_mean": means, "pr_best": pr_best,
                         "allocation": shares})
