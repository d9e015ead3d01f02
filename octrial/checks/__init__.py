"""Workflow checks of a design's premises (``octrial check``; no click here).

* :mod:`~octrial.checks.prior_predictive`: the outcome and observed effect implied by the
  analysis and design priors, with flags for impossible or implausible outcomes;
* :mod:`~octrial.checks.sbc`: simulation-based calibration of every posterior
  computation (Talts et al. 2018);
* :mod:`~octrial.checks.sensitivity`: posterior shrinkage against posterior z-score at
  each look;
* :mod:`~octrial.checks.tail_accuracy`: Monte Carlo error of posterior quantiles from
  draws;
* :mod:`~octrial.checks.conflict`: prior-data conflict in borrowing designs and its effect
  on the decision;
* :mod:`~octrial.checks.model`: what the checks need from an endpoint family
  (:mod:`~octrial.checks.lattice_model`, :mod:`~octrial.checks.normal_model`);
* :mod:`~octrial.checks.core`: :func:`check`, timings and the verdict list;
* :mod:`~octrial.checks.files`: checks.json, sbc.csv, sensitivity.csv and the figures.
"""

from octrial.checks.core import CheckOutcome, check
from octrial.checks.settings import CHECKS, CheckSettings

__all__ = ["CHECKS", "CheckOutcome", "CheckSettings", "check"]
