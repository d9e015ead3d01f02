"""The generic study loop: any endpoint family simulated through its protocol methods.

Per batch of studies and per look, the loop asks the family for the increment of every
arm's statistic in all still-running studies at once
(:meth:`~octrial.endpoints.base.Family.draw_statistics`), adds it to the accumulated
statistic, asks for the posterior probability of benefit
(:meth:`~octrial.endpoints.base.Family.benefit_at`) and, at looks with predictive
futility, for the predictive probability of final success of the studies the benefit
left running (:meth:`~octrial.endpoints.base.Family.predictive_at`), and decides with
the one stop rule (:meth:`octrial.rules.stop.Rule.decide_many`). Studies that stop are
counted per look and reason, and, when the family offers a posterior mean
(:meth:`~octrial.endpoints.base.Family.estimate_at`), their estimation sums are added.

Random numbers come from the batch's generator only, drawn look by look and arm by arm
for the studies still running, so a batch's numbers depend on the seed and the batch
alone (whatever ``--jobs``).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from octrial.rules.stop import CONTINUE, EFFICACY, FUTILITY, Rule
from octrial.simulation.base import Simulator, Tally


class StudyLoop(Simulator):
    """Studies of ``design`` at the true values ``truth``, by the family's protocol.

    Parameters
    ----------
    design : Design
        A design whose family can simulate it
        (:meth:`~octrial.endpoints.base.Family.simulation_unsupported` is ``None``).
    truth : tuple of float
        One true parameter value per arm.
    level : float
        Credible level of the intervals whose coverage is counted.
    """

    kernel = "general"

    def __init__(self, design: Any, truth: tuple[float, ...], level: float) -> None:
        reason = design.family.simulation_unsupported(design)
        if reason:
            raise ValueError(reason)
        self.design = design
        self.truth = tuple(float(t) for t in truth)
        self.rule = Rule.of(design.looks)
        self.looks = design.looks.count
        self.tail = (1.0 - level) / 2.0
        self.target = float(design.family.target_value(design.hypothesis, self.truth))

    def simulate(self, rng: np.random.Generator, replicates: int) -> Tally:
        """Simulate ``replicates`` studies with random numbers from ``rng`` only."""
        design, family, rule = self.design, self.design.family, self.rule
        arms = len(design.arms)
        efficacy = np.zeros(self.looks, dtype=np.int64)
        futility = np.zeros(self.looks, dtype=np.int64)
        sums = np.zeros(3)
        covered = 0
        estimated = True
        statistics: list[np.ndarray] = [np.zeros(replicates) for _ in range(arms)]
        before = (0,) * arms
        for k, n in enumerate(design.looks.per_arm):
            running = statistics[0].size
            if running == 0:
                break
            for j in range(arms):
                statistics[j] = statistics[j] + family.draw_statistics(
                    design, j, self.truth[j], n[j] - before[j], rng, running)
            before = n
            now = tuple(statistics)
            benefit = family.benefit_at(design, now, n)
            codes = rule.decide_many(k, benefit)
            if rule.has_predictive(k) and np.any(codes == CONTINUE):
                # the predictive probability only of studies the benefit left running
                # (the expensive part); the others keep their decision at pp = 1
                open_ = codes == CONTINUE
                predictive = np.ones(running)
                predictive[open_] = family.predictive_at(
                    design, tuple(x[open_] for x in now), n)
                codes = rule.decide_many(k, benefit, predictive)
            stops = codes != CONTINUE
            efficacy[k] = int(np.count_nonzero(codes == EFFICACY))
            futility[k] = int(np.count_nonzero(codes == FUTILITY))
            if estimated and np.any(stops):
                found = family.estimate_at(design, tuple(x[stops] for x in now), n,
                                           self.target)
                if found is None:
                    estimated = False
                else:
                    error = found[0] - self.target
                    squared = error * error
                    sums += (error.sum(), squared.sum(), (squared * squared).sum())
                    covered += int(np.count_nonzero((self.tail <= found[1])
                                                    & (found[1] <= 1.0 - self.tail)))
            statistics = [x[~stops] for x in statistics]
        if not estimated:
            return Tally(replicates, efficacy, futility)
        return Tally(replicates, efficacy, futility, sums, covered)
