"""The posterior probability that each treatment arm is the best, at an interim look.

Binary arms (beta or beta-mixture priors, shared or each its own) get the project's one
Pr(best), :func:`octrial.numerics.beta_best.probability_best`, the function behind the
simulation's dropping and selection and the next block's allocation
(:func:`octrial.allocation.interim.next_block`), so a committee sees the number the design
uses. Count arms (gamma or gamma-mixture posteriors) are integrated here with scipy:

``Pr(arm j best) = sum_c w_c integral_0^1 prod_{i != j} W_i(Q_c(v)) dv``,

where ``w_c``, ``Q_c`` are the weights and quantile functions (scipy ``ppf``) of arm j's
posterior components and ``W_i(u)`` the posterior probability that arm ``i`` is worse
than ``u`` (its CDF when higher is better, its survival function when lower is better).
Substituting the quantile removes any singular density (shapes below 1), so adaptive
quadrature (``scipy.integrate.quad``) meets a smooth integrand. Other priors (logit-normal
or log-normal on a grid, normal endpoints) have no Pr(best) here: ``None``.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
from scipy import integrate, stats

from octrial.allocation import probability_best
from octrial.endpoints import binary, count

QUAD_TOLERANCE = 1e-10
"""Absolute and relative tolerance asked of ``scipy.integrate.quad``."""


def _components(prior: Any, size: float, statistic: int) -> list[tuple[float, Any]] | None:
    """Weights and frozen scipy distributions of one arm's posterior, or None when the
    prior has no conjugate form here."""
    if isinstance(prior, binary.BetaMixture):
        post = binary.update(prior, int(size), np.array([statistic]))
        return [(float(w), stats.beta(a, b)) for w, a, b in zip(
            post.weights[0], post.a[0], post.b[0], strict=True)]
    if isinstance(prior, count.GammaMixture):
        post_g = count.update(prior, float(size), np.array([statistic]))
        return [(float(w), stats.gamma(a, scale=1.0 / b)) for w, a, b in zip(
            post_g.weights[0], post_g.a[0], post_g.b[0], strict=True)]
    return None


def probability_best_at(priors: Sequence[Any], sizes: Sequence[float],
                        statistics: Sequence[int], higher: bool) -> np.ndarray | None:
    """Posterior probability that each arm has the best parameter among ``priors``' arms.

    Parameters
    ----------
    priors : sequence
        Each arm's analysis prior (``BetaMixture`` or ``GammaMixture``).
    sizes : sequence of float
        Subjects (binary) or total exposure (count) per arm.
    statistics : sequence of int
        Responses or events per arm.
    higher : bool
        Whether a higher rate is better.

    Returns
    -------
    numpy.ndarray or None
        One probability per arm; ``None`` when a prior has no conjugate form here.

    Examples
    --------
    >>> from octrial.endpoints.binary import BetaMixture
    >>> flat = BetaMixture.single(1, 1)
    >>> probability_best_at([flat, flat], [10, 10], [3, 3], True).round(6).tolist()
    [0.5, 0.5]
    """
    arms = len(priors)
    if arms == 1:
        return np.ones(1)
    if all(isinstance(p, binary.BetaMixture) for p in priors):
        result: np.ndarray = probability_best(
            np.asarray(statistics, int), np.asarray(sizes, int), higher=higher,
            priors=[(p.weights, p.a, p.b) for p in priors])
        return result
    parts = [_components(p, n, x) for p, n, x in zip(priors, sizes, statistics, strict=True)]
    if any(p is None for p in parts):
        return None
    posts: list[list[tuple[float, Any]]] = [p for p in parts if p is not None]

    def worse(i: int, u: float) -> float:
        side = (lambda d: d.cdf(u)) if higher else (lambda d: d.sf(u))
        return float(sum(w * side(d) for w, d in posts[i]))

    out = np.zeros(arms)
    for j in range(arms):
        for w, dist in posts[j]:
            def integrand(v: float, dist: Any = dist, j: int = j) -> float:
                u = float(dist.ppf(v))
                return float(np.prod([worse(i, u) for i in range(arms) if i != j]))
            value = integrate.quad(integrand, 0.0, 1.0, epsabs=QUAD_TOLERANCE,
                                   epsrel=QUAD_TOLERANCE, limit=200)[0]
            out[j] += w * value
    return out
