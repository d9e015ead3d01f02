"""What a study estimates at the look where it stops, at every lattice point.

For simulation summaries (bias and root-mean-square error of the posterior mean, coverage
of the equal-tailed credible interval) every quantity depends on the data only through
each arm's count, like the decision rule; so they are tables over the lattice, per look,
shared by the exact engine (expectations over the exact stopping distribution) and the
Monte Carlo table kernel (averages over simulated stopping points).

The target parameter is what the hypothesis is about: one arm, the arm's parameter (the
rate); two arms, the effect measure (the difference treatment - control). The
equal-tailed interval at level L covers the true value t exactly when
(1 - L) / 2 <= F(t | data) <= (1 + L) / 2, with F the posterior CDF of the target, so
coverage needs F at the truth, not the interval's end points.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from octrial.design.model import Design
from octrial.endpoints.base import LatticeFamily
from octrial.rules.lattice import LatticeRule


@dataclass(frozen=True, eq=False)
class LatticeEstimates:
    """Posterior means of the target parameter at every lattice point of every look.

    Attributes
    ----------
    means : tuple of ndarray
        Per look, the posterior mean on the look's lattice (one axis per arm).
    posteriors : tuple
        Per look, the family's posteriors per arm (for the posterior CDF at a truth).
    cdf_cache : dict
        Posterior CDF tables already computed, by target value: scenarios sharing a true
        effect (a control x effect grid) share them, and for two arms each costs a
        quadrature over the whole lattice.
    """

    means: tuple[np.ndarray, ...]
    posteriors: tuple[tuple, ...]
    cdf_cache: dict[float, tuple[np.ndarray, ...]] = field(default_factory=dict, repr=False)


def lattice_estimates(design: Design, rule: LatticeRule | None = None) -> LatticeEstimates | None:
    """The posterior-mean tables, or ``None`` when the design or family has none (a rule
    stated in counts without priors, or a family without target summaries). With a
    ``rule``, the tables follow its lattice (a truncated lattice may have been sized for
    other truths than the design's scenarios)."""
    family = design.family
    if not family.lattice or any(a.prior is None for a in design.arms):
        return None
    means, posteriors = [], []
    for k, n_k in enumerate(design.looks.per_arm):
        sizes = (rule.looks[k].shape if rule is not None else
                 [family.lattice_size(design, j, n_k[j]) for j in range(len(design.arms))])
        posts = tuple(family.posterior(design, j, n_k[j], np.arange(sizes[j]))
                      for j in range(len(design.arms)))
        mean = family.target_mean(design, posts)
        if mean is None:
            return None
        means.append(np.asarray(mean, dtype=float))
        posteriors.append(posts)
    return LatticeEstimates(tuple(means), tuple(posteriors))


def coverage_tables(
    design: Design, estimates: LatticeEstimates, truth: tuple[float, ...], level: float,
) -> tuple[np.ndarray, ...]:
    """Per look, whether the equal-tailed ``level`` interval covers the true target."""
    family: LatticeFamily = design.family
    # Rounded as true_effect is in oc.csv, so that 0.25 - 0.2 and 0.15 - 0.1 share a table.
    value = round(family.target_value(design.hypothesis, truth), 12)
    tail = (1.0 - level) / 2.0
    if value not in estimates.cdf_cache:
        estimates.cdf_cache[value] = tuple(
            np.asarray(family.target_cdf(design, posts, value), dtype=float)
            for posts in estimates.posteriors)
    return tuple((cdf >= tail) & (cdf <= 1.0 - tail) for cdf in estimates.cdf_cache[value])
