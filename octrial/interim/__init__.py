"""Interim decisions on real data, and posterior predictive checks of the data model.

At an interim look a monitoring committee enters the data so far and gets the posterior
probability of benefit, the predictive probability of final success, posterior means and
credible intervals, and the decision the design's rule gives::

    from octrial.interim import decide
    result = decide(design, look=2, data=["treatment=14/30"])
    result.decision                      # 'continue', 'stop for efficacy', ...

Count data are ``ARM=events/exposure`` and normal data ``ARM=mean,sd,n``.

The rule is evaluated by the same code as the boundary tables (:mod:`octrial.interim.rule`),
so at the planned sample sizes the decision is the table's.
"""

from octrial.interim.decision import Assessment, Decision, assess, decide, rule_at
from octrial.interim.observations import parse_data

__all__ = ["Assessment", "Decision", "assess", "decide", "parse_data",
           "rule_at"]
