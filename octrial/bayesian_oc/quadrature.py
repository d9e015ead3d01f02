"""The Bayesian operating characteristics by quadrature of the exact OC curve (see
:mod:`octrial.bayesian_oc`)."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from octrial.bayesian_oc.metrics import metrics, propagated_errors
from octrial.bayesian_oc.nodes import (
    PriorNodes,
    cumulative_nodes,
    one_dimensional_nodes,
    tensor_nodes,
)
from octrial.design.model import Design
from octrial.design_prior import design_prior_design, on_effect
from octrial.engines import choose, engine_for
from octrial.engines.exact_lattice import ExactLatticeEngine
from octrial.numerics import tanh_sinh

TOLERANCE = 1e-10
"""Tanh-sinh step halving stops when successive levels agree this closely."""
TENSOR_LEVELS = (-2, -1, 0, 1)
"""Tanh-sinh levels (steps 1/4 to 1/32 in t) per piece and arm over two arms' design
priors, tried in turn until two successive ones agree to :data:`TENSOR_TOLERANCE` (their
difference is the error estimate)."""
TENSOR_TOLERANCE = 1e-9
"""Two arms: each level has four times the true values of the one before (a two-arm
lattice programme for each), so the halving stops at 1e-9; the change is reported as the
error (conservative: tanh-sinh roughly squares the error per level)."""
CHUNK = 2000
"""True values per batched lattice programme (memory)."""


# -- Pr(success | truth) -----------------------------------------------------------------------
def success_function(design: Design) -> Callable[[np.ndarray], np.ndarray]:
    """Pr(success | truth) at many true values by the design's exact engine (the batched
    lattice programme on a count lattice)."""
    engine = choose(design, "exact")
    if engine is ExactLatticeEngine:
        from octrial.engines.lattice_batch import IncrementTables, run_batch
        from octrial.rules.lattice import build_rule

        def lattice(truths: np.ndarray) -> np.ndarray:
            rule = build_rule(design, truths=truths)
            out = [run_batch(design, rule, IncrementTables(design, truths[i:i + CHUNK]))
                   .efficacy.sum(axis=1) for i in range(0, len(truths), CHUNK)]
            return np.concatenate(out) if out else np.zeros(0)

        return lattice

    def exact(truths: np.ndarray) -> np.ndarray:
        return engine.run(design, truths, estimate=False).efficacy.sum(axis=1)

    return exact


def exact_engine_applies(design: Design) -> bool:
    """Whether an exact engine gives Pr(success | truth) for ``design``."""
    return engine_for(design, "exact") is not None


# -- quadrature ----------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Quadrature:
    """The region integrals by quadrature: values, errors and the node set to reuse."""

    nodes: PriorNodes
    values: dict[str, float]
    errors: dict[str, float]


def quadrature(design: Design, delta: float = 0.0,
               success: Callable[[np.ndarray], np.ndarray] | None = None) -> Quadrature:
    """The metrics by quadrature of the exact OC curve (see module docstring)."""
    generating = design_prior_design(design)
    success = success or success_function(design)
    if on_effect(design) or not design.two_arm:
        previous = None
        for level in range(tanh_sinh.MAX_LEVEL + 1):
            nodes = one_dimensional_nodes(design, generating, cumulative_nodes(level), delta)
            p = success(nodes.truths)
            sums = np.array([p @ nodes.w_null, p @ nodes.w_alt, p @ nodes.w_relevant])
            if previous is not None and np.max(np.abs(sums - previous)) <= TOLERANCE:
                break
            previous = sums
        change = np.abs(sums - previous) if previous is not None else np.full(3, np.nan)
    else:
        previous = None
        for level in TENSOR_LEVELS:
            nodes = tensor_nodes(design, generating, level, delta)
            p = success(nodes.truths)
            sums = np.array([p @ nodes.w_null, p @ nodes.w_alt, p @ nodes.w_relevant])
            if previous is not None and np.max(np.abs(sums - previous)) <= TENSOR_TOLERANCE:
                break
            previous = sums
        change = np.abs(sums - previous)
    values = {k: float(v) for k, v in metrics(sums[0], sums[1], sums[2], nodes.prior_null,
                                              nodes.prior_alt, nodes.prior_relevant).items()}
    errors = propagated_errors(values, float(change[0]), float(change[1]), float(change[2]),
                               nodes)
    return Quadrature(nodes, values, errors)


CALIBRATION_LEVEL = -1
"""Two arms: the tanh-sinh level of the nodes every calibration candidate is evaluated
at (49 per arm and piece; agreed with finer levels to 1e-13 to 3e-10 in our trials, at
a quarter of the next level's true values)."""


def calibration_nodes(design: Design, delta: float = 0.0) -> PriorNodes:
    """The node set on which calibration evaluates every candidate: the one the base
    design's quadrature converged on (one dimension), or :data:`CALIBRATION_LEVEL` (two
    arms; the chosen design is then checked by the full quadrature)."""
    if on_effect(design) or not design.two_arm:
        return quadrature(design, delta).nodes
    return tensor_nodes(design, design_prior_design(design), CALIBRATION_LEVEL, delta)
