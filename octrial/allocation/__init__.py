"""Allocation of subjects to arms: fixed ratios and response-adaptive randomisation.

* :mod:`octrial.allocation.rule` - the allocation rule as a frozen value (form, power,
  control share, minimum share, burn-in) and the allocation maths: the probabilities
  for the next block of subjects from each arm's probability of being the best.
* :mod:`octrial.numerics.beta_best` (outside this package, shared with the several-arm
  engine) - the probability that each arm is the best, for beta-mixture posteriors, by
  quadrature; the node tables the simulation kernel reads.
* :mod:`octrial.allocation.kernel` - the numba study loop for binary arms with adaptive
  allocation, driven by uniforms from one seeded generator per batch.
* :mod:`octrial.allocation.simulate` - batches, seeding and the summaries per scenario.
"""

from octrial.allocation.rule import FORMS, AllocationRule, next_allocation
from octrial.numerics.beta_best import BestTables, probability_best

__all__ = ["FORMS", "AllocationRule", "BestTables", "next_allocation", "probability_best"]
