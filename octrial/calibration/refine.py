"""Refining the worst null point between grid points (two arms).

On the null boundary line the type I error is a smooth function of the control value
(for a binary endpoint, a polynomial), with several local maxima. The grid finds the
largest of them to within its spacing; here each of the few largest local maxima of the
grid is refined by bounded scalar maximisation (Brent's method,
``scipy.optimize.minimize_scalar``) between its grid neighbours, with the exact
stopping probabilities at every step. One arm needs no refinement: the worst point is the
benchmark itself, which is on the grid.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize

from octrial.calibration.evaluator import Assessment
from octrial.calibration.nulls import Truths, control_range, on_boundary
from octrial.design.model import Design
from octrial.engines.exact_lattice import stopping_probabilities
from octrial.rules.lattice import build_rule

LOCAL_MAXIMA = 3
"""How many of the grid's largest local maxima are refined."""
CONTROL_TOLERANCE = 1e-7


@dataclass(frozen=True)
class Refined:
    """The largest type I error found on the null line and where."""

    type1: float
    point: tuple[float, ...]


def refine_worst(design: Design, truths: Truths, a: Assessment,
                 span: tuple[float, float] | None = None) -> Refined | None:
    """Refine the worst null point of ``design`` along the null boundary line.

    Returns ``None`` for one arm and for endpoints without a lattice (nothing to refine
    cheaply); otherwise the refined maximum (at least the grid's). ``span`` limits the
    control values searched (``--null-range``).
    """
    if not design.two_arm or not design.family.lattice:
        return None
    values = truths.values[: truths.nulls]
    on_line = np.array([abs(t - on_boundary(design, c)) < 1e-9 for t, c in values[:, :2]],
                       dtype=bool)
    controls = values[on_line, 1]
    success = a.prob_success[: truths.nulls][on_line]
    order = np.argsort(controls)
    controls, success = controls[order], success[order]
    # the range the grid searched, finite even where the parameter's is not (a count
    # rate): a worst point at the grid's edge is refined up to that edge, not beyond
    c_lo, c_hi = control_range(design)
    if span is not None:
        c_lo, c_hi = max(c_lo, span[0]), min(c_hi, span[1])
    rule = build_rule(design)

    def type1(c: float) -> float:
        eff, _, _ = stopping_probabilities(design, rule, (on_boundary(design, c), c))
        return float(eff.sum())

    peaks = [i for i in range(len(controls))
             if (i == 0 or success[i] >= success[i - 1])
             and (i == len(controls) - 1 or success[i] >= success[i + 1])]
    peaks = sorted(peaks, key=lambda i: -success[i])[:LOCAL_MAXIMA]
    best = Refined(a.type1, tuple(float(v) for v in truths.values[a.worst]))
    for i in peaks:
        left = controls[i - 1] if i > 0 else c_lo + CONTROL_TOLERANCE
        right = controls[i + 1] if i + 1 < len(controls) else c_hi - CONTROL_TOLERANCE
        if right - left <= CONTROL_TOLERANCE:
            continue
        found = optimize.minimize_scalar(lambda c: -type1(c), bounds=(left, right),
                                         method="bounded",
                                         options={"xatol": CONTROL_TOLERANCE})
        value = -float(found.fun)
        if value > best.type1:
            c = float(found.x)
            best = Refined(value, (on_boundary(design, c), c))
    return best
