"""Simulated studies: the kernels behind the Monte Carlo engine.

* :mod:`~octrial.simulation.base`: the :class:`Simulator` interface and the additive
  :class:`Tally` every simulator returns.
* :mod:`~octrial.simulation.draws`: inverse-CDF tables for discrete draws.
* :mod:`~octrial.simulation.lattice`: the table kernel for lattice families (decision
  tables from :mod:`octrial.rules.lattice`).
* :mod:`~octrial.simulation.special`: special functions compiled with numba.
* :mod:`~octrial.simulation.binary`: the general kernel for binary endpoints (posterior
  and predictive probabilities evaluated per study).
* :mod:`~octrial.simulation.count`: the general kernel for count endpoints (gamma-Poisson).
* :mod:`~octrial.simulation.normal`: normal endpoints, data as sufficient statistics;
  known sd; :mod:`~octrial.simulation.normal_unknown`: unknown sd (Student t posteriors,
  :mod:`~octrial.simulation.student_t` for two arms).

Families add a general kernel by registering a factory in :data:`GENERAL_KERNELS`.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from octrial.simulation.base import Simulator, Tally

GENERAL_KERNELS: dict[str, Callable[..., Simulator]] = {}
"""Factories ``(design, truth, level) -> Simulator`` by ``endpoint.type``, for designs
that no decision table covers (and to check the table kernel)."""

GENERAL_LIMITS: dict[str, Callable[[Any], str | None]] = {}
"""Per family: why its general kernel cannot simulate a design, or ``None``."""


def register_general(name: str, factory: Callable[..., Simulator],
                     limits: Callable[[Any], str | None]) -> None:
    """Register a family's general kernel."""
    GENERAL_KERNELS[name] = factory
    GENERAL_LIMITS[name] = limits


def general_unsupported(design: Any) -> str | None:
    """Why no general kernel can simulate ``design``, or ``None`` when one can."""
    name = design.family.name
    if name not in GENERAL_KERNELS:
        return f"no general simulation kernel for {name} endpoints"
    return GENERAL_LIMITS[name](design)


def _register_builtin() -> None:
    from octrial.simulation import binary, count, normal

    register_general("binary", binary.BinarySimulator, binary.unsupported)
    register_general("count", count.CountSimulator, count.unsupported)
    register_general("normal", normal.NormalSimulator, normal.unsupported)


_register_builtin()

__all__ = ["GENERAL_KERNELS", "Simulator", "Tally", "general_unsupported", "register_general"]
