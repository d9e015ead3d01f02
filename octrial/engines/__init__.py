"""Engines: exact dynamic programming and Monte Carlo simulation.

An engine is a class with ``name``, ``unsupported(design) -> str | None`` and
``run(design, truths, ...) -> Outcome``. :func:`choose` picks one for a design and a
requested method; ``auto`` takes the first exact engine that applies. Every caller asks
:func:`choose` (or :func:`engine_for`) rather than deciding by the endpoint family.
"""

from __future__ import annotations

from typing import Any

from octrial.design.model import Design
from octrial.engines.exact_lattice import ExactLatticeEngine
from octrial.engines.exact_normal import NormalRecursionEngine
from octrial.engines.monte_carlo import MonteCarloEngine, MonteCarloSettings
from octrial.engines.outcome import Outcome
from octrial.errors import InputError, single

ENGINES: dict[str, tuple[Any, ...]] = {
    "exact": (ExactLatticeEngine, NormalRecursionEngine),
    "monte-carlo": (MonteCarloEngine,),
}
"""Engines by method name, tried in order. An engine may say which endpoint families it
serves (``serves(family) -> bool``); only those explain why they cannot run a design."""


def choose(design: Design, method: str | None = None) -> Any:
    """The engine for ``design`` under ``method`` ('auto', 'exact' or 'monte-carlo').

    Raises
    ------
    InputError
        When no engine of that method can evaluate the design.
    """
    method = method or design.simulation.method
    wanted = ("exact", "monte-carlo") if method == "auto" else (method,)
    reasons = []
    for name in wanted:
        for engine in ENGINES.get(name, ()):
            reason = engine.unsupported(design)
            if reason is None and design.conduct is not None and not getattr(
                    engine, "conduct_aware", name != "exact"):
                # an exact engine must say it models calendar time (lag, pipeline, dropout);
                # the lattice engine does, for deterministic timing (engines/pipeline.py)
                reason = "it does not model calendar-time conduct ([conduct]) yet"
            if reason is None:
                return engine
            if getattr(engine, "serves", lambda _: True)(design.family):
                reasons.append(f"{name}: {reason}")
        if name not in ENGINES:
            reasons.append(f"{name}: not available in this version")
    available = ", ".join(sorted(ENGINES)) or "none"
    raise single(design.source.path or design.name, "simulation.method",
                 f"a method that can evaluate this design (available: {available})",
                 method, "; ".join(reasons))


def engine_for(design: Design, method: str | None = None) -> Any | None:
    """The engine :func:`choose` picks for ``design`` under ``method``, or ``None`` when
    no engine of that method can evaluate it (callers that only ask whether one applies,
    or whether it is the lattice engine, ask here rather than re-deciding)."""
    try:
        return choose(design, method)
    except InputError:
        return None


__all__ = ["ENGINES", "MonteCarloSettings", "Outcome", "choose", "engine_for"]
