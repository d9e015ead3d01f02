"""What every engine returns: stopping probabilities per scenario and look.

Every operating characteristic of the ``oc.csv`` contract follows from the probability of
stopping for efficacy and for futility at each look (at the last look: success and
failure), the sample size at each look and, for simulation, the number of replicates; so
engines return only these, and :mod:`octrial.results` derives the table once for all.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np


@dataclass(frozen=True, eq=False)
class Estimation:
    """How well a study estimates its target parameter at the look where it stops.

    The target is what the hypothesis is about (one arm: the arm's parameter; two arms:
    the effect, treatment - control). e = posterior mean - true value at the stopping look.

    Attributes
    ----------
    error_moments : ndarray, shape (scenarios, 3)
        E[e], E[e^2] and E[e^4] (exact expectations, or averages over simulated studies).
    coverage : ndarray, shape (scenarios,)
        Pr(the equal-tailed credible interval at ``level`` contains the true value).
    level : float
        The credible interval's level.
    """

    error_moments: np.ndarray
    coverage: np.ndarray
    level: float


@dataclass(frozen=True, eq=False)
class Outcome:
    """Per-scenario results of one engine.

    Attributes
    ----------
    efficacy : ndarray, shape (scenarios, looks)
        Pr(stop for efficacy at look k); the last column is Pr(success at the final look).
    futility : ndarray, shape (scenarios, looks)
        Pr(stop for futility at look k); the last column is Pr(failure at the final look).
        Each row of ``efficacy + futility`` sums to 1.
    replicates : ndarray of int, shape (scenarios,)
        Simulated studies behind each row (0 when exact).
    method : str
        'exact' or 'monte-carlo'.
    extra : dict of str to ndarray
        Further per-scenario columns an engine provides.
    info : dict
        Numerical facts for run.json (tolerances, neglected mass, seeds).
    estimation : Estimation or None
        Bias, RMSE and coverage ingredients (``None`` when the design has no priors).
    """

    efficacy: np.ndarray
    futility: np.ndarray
    replicates: np.ndarray
    method: str
    extra: dict[str, np.ndarray] = field(default_factory=dict)
    info: dict[str, Any] = field(default_factory=dict)
    estimation: Estimation | None = None
