"""Simulated studies: the kernels behind the Monte Carlo engine.

* :mod:`~octrial.simulation.base`: the :class:`Simulator` interface and the additive
  :class:`Tally` every simulator returns.
* :mod:`~octrial.simulation.generic`: the generic study loop, which simulates any endpoint
  family through its protocol methods (:class:`~octrial.endpoints.base.Family`); a
  family's :meth:`~octrial.endpoints.base.Family.simulator` returns it by default.
* :mod:`~octrial.simulation.draws`: inverse-CDF tables for discrete draws.
* :mod:`~octrial.simulation.lattice`: the table kernel for lattice families (decision
  tables from :mod:`octrial.rules.lattice`).
* :mod:`~octrial.simulation.special`: special functions compiled with numba;
  :mod:`~octrial.simulation.beta_difference`: Pr(p_X - p_Y > d) for beta mixtures.
* :mod:`~octrial.simulation.normal`: normal endpoints, data as sufficient statistics;
  known sd; :mod:`~octrial.simulation.normal_unknown`: unknown sd (Student t posteriors,
  :mod:`~octrial.simulation.student_t` for two arms).
"""

from __future__ import annotations

from octrial.simulation.base import Simulator, Tally

__all__ = ["Simulator", "Tally"]
