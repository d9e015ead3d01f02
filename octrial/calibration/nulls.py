"""The composite null region on a grid, and the points where power and expected sizes are read.

One arm: true values from the benchmark into the worse direction, spread over the whole
null part of the parameter's range (a rate below a benchmark of 0.2 when higher is
better: 0.2, 0.196, ..., 0.004 with 50 points). Two arms: the null boundary line (true
effect exactly at the margin) over the control value's whole range. The design file's own
null scenarios are always added, so a calibrated design's ``octrial run`` never reports a
type I error above the calibrated one.

With rules that are monotone in each arm's count (all rules octrial builds), the
probability of success increases with the treatment value in the better direction (a
coupling argument on the binomial process), so for fixed control the worst null point is on
the boundary line; which control value is worst is not known in advance, hence the line
search. One arm: the worst point is the benchmark itself; the grid confirms it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from octrial.design.model import Design
from octrial.design.scenarios import DECIMALS
from octrial.endpoints.base import SCENARIO_AXES


@dataclass(frozen=True, eq=False)
class Truths:
    """The true values every candidate is evaluated at.

    Attributes
    ----------
    values : ndarray, shape (points, arms)
        The null grid first, then the alternative (when there is one).
    nulls : int
        Number of null points (the first rows).
    reference : int
        Row of the null point where the expected sample size under the null is read (one
        arm: the benchmark; two arms: the boundary point with the alternative's control
        value, or the first boundary point).
    alternative : int or None
        Row of the alternative.
    description : str
        The null grid in words, for summaries.
    prior : PriorNodes or None
        Nodes over the design prior (:mod:`octrial.bayesian_oc`) appended as the last
        rows, for Bayesian constraints; ``None`` otherwise.
    prior_start : int or None
        Row of the first of them.
    """

    values: np.ndarray
    nulls: int
    reference: int
    alternative: int | None
    description: str
    prior: Any = None
    prior_start: int | None = None


def _span(design: Design, axis: np.ndarray, start: float, direction: int) -> float:
    """How far the null region reaches from ``start`` along ``direction``."""
    lo, hi = design.family.parameter_range
    edge = lo if direction < 0 else hi
    if math.isfinite(edge):
        return abs(edge - start)
    reach = [abs(v - start) for v in axis if (v - start) * direction > 0]
    return max(reach, default=0.0)


def on_boundary(design: Design, control: float) -> float:
    """The treatment value on the two-arm null boundary at ``control``: the effect measure
    (difference, ratio or odds ratio) equal to the claim's threshold."""
    h = design.hypothesis
    return float(SCENARIO_AXES[h.comparison or "difference"][1](control, h.threshold))


def control_range(design: Design) -> tuple[float, float]:
    """The control values searched on a two-arm null boundary line (finite).

    The parameter's range where it is finite (a rate in [0, 1] on both arms); where it is
    not (a count rate has no upper end), the range of the design's scenario control values.
    Calibration controls the type I error over this range only, and refinement between
    grid points stays inside it.
    """
    h = design.hypothesis
    lo, hi = design.family.parameter_range
    c_lo, c_hi = lo, hi
    if h.comparison in (None, "difference"):  # treatment = control + offset stays in range
        offset = h.sign * h.shift
        c_lo, c_hi = max(lo, lo - offset), min(hi, hi - offset)
    controls = np.array(design.scenarios.values, dtype=float)[:, 1]
    if not math.isfinite(c_lo):
        c_lo = float(controls.min())
    if not math.isfinite(c_hi):
        c_hi = float(controls.max())
    return c_lo, c_hi


def _benchmark(design: Design) -> float:
    """The one-arm null boundary (the design loader requires one for a one-arm design)."""
    benchmark = design.hypothesis.benchmark
    if benchmark is None:
        raise ValueError("a one-arm design without a benchmark")
    return float(benchmark)


def null_truths(
    design: Design, points: int = 50, alternative: tuple[float, ...] | None = None,
    extra: tuple[tuple[float, ...], ...] = (),
    null_range: tuple[float, float] | None = None,
) -> Truths:
    """The null grid of ``design`` (see module docstring), with the alternative appended.

    Parameters
    ----------
    design : Design
    points : int
        Grid points (for unbounded parameters, spread up to the design's farthest null
        scenario).
    alternative : tuple of float, optional
        Appended as the last row.
    extra : tuple of tuple of float
        Further null points (worst points found by refinement).
    null_range : (float, float), optional
        Limit the null region to these treatment values (one arm) or control values (two
        arms, along the null boundary); the design's own null scenarios outside it are
        left out too.
    """
    family, h = design.family, design.hypothesis
    scenario = np.array(design.scenarios.values, dtype=float)
    own_nulls = [tuple(t) for t in scenario if family.is_null(h, tuple(t))]
    own_nulls += [tuple(round(v, DECIMALS) for v in t) for t in extra]
    if null_range is not None:
        axis = 1 if design.two_arm else 0
        own_nulls = [t for t in own_nulls
                     if null_range[0] - 1e-12 <= t[axis] <= null_range[1] + 1e-12]
    grid: list[tuple[float, ...]]
    if not design.two_arm and null_range is not None:
        b = _benchmark(design)
        worse = -h.sign
        near = min(null_range[1], b) if worse < 0 else max(null_range[0], b)
        far = null_range[0] if worse < 0 else null_range[1]
        lo_p, hi_p = design.family.parameter_range
        far = min(max(far, lo_p), hi_p)
        steps = max(points - 1, 1)
        grid = [(round(near + (far - near) * i / steps, DECIMALS),) for i in range(points)]
        grid = [g for g in grid if family.true_value_problem(g[0]) is None] or [(near,)]
        rows = sorted(set(grid) | set(own_nulls), key=lambda t: -worse * t[0])
        reference = rows.index((b,)) if (b,) in rows else 0
        text = (f"{len(rows)} points, {design.arm_names[0]} from {min(r[0] for r in rows):.6g}"
                f" to {max(r[0] for r in rows):.6g} (benchmark {b:g}; null region limited "
                f"to {null_range[0]:g}..{null_range[1]:g})")
    elif not design.two_arm:
        b = _benchmark(design)
        worse = -h.sign
        span = _span(design, scenario[:, 0], b, worse)
        grid = [(round(b + worse * span * i / points, DECIMALS),) for i in range(points)]
        grid = [g for g in grid if family.true_value_problem(g[0]) is None] or [(b,)]
        rows = sorted(set(grid) | set(own_nulls), key=lambda t: -worse * t[0])
        reference = rows.index((b,)) if (b,) in rows else 0
        lo_v, hi_v = min(r[0] for r in rows), max(r[0] for r in rows)
        text = (f"{len(rows)} points, {design.arm_names[0]} from {lo_v:.6g} to {hi_v:.6g} "
                f"(benchmark {b:g})")
    else:
        offset = h.sign * h.shift  # treatment = control + offset on the null boundary
        c_lo, c_hi = control_range(design)
        if null_range is not None:
            c_lo, c_hi = max(c_lo, null_range[0]), min(c_hi, null_range[1])
        wanted = [c_lo + (c_hi - c_lo) * (i + 0.5) / points for i in range(points)]
        if alternative is not None and (null_range is None or null_range[0] <= alternative[1]
                                        <= null_range[1]):
            wanted.append(alternative[1])
        grid = []
        for c in wanted:
            t = (round(on_boundary(design, c), DECIMALS), round(c, DECIMALS))
            if all(family.true_value_problem(v) is None for v in t):
                grid.append(t)
        rows = sorted(set(grid) | set(own_nulls), key=lambda t: (t[1], t[0]))
        reference = 0
        if alternative is not None:
            ref = (round(on_boundary(design, alternative[1]), DECIMALS),
                   round(alternative[1], DECIMALS))
            reference = rows.index(ref) if ref in rows else 0
        line = (f"{design.arm_names[0]} = {design.arm_names[1]} "
                f"{'+' if offset >= 0 else '-'} {abs(offset):g}"
                if h.comparison in (None, "difference") else
                f"{h.comparison} {design.arm_names[0]} : {design.arm_names[1]} = "
                f"{h.threshold:g}")
        text = (f"{len(rows)} points on the null boundary ({line}), "
                f"{design.arm_names[1]} from {min(r[1] for r in rows):.6g} to "
                f"{max(r[1] for r in rows):.6g}, plus the design's null scenarios"
                + ("" if null_range is None else
                   f" (null region limited to {design.arm_names[1]} in "
                   f"{null_range[0]:g}..{null_range[1]:g})"))
    values = np.array(rows, dtype=float)
    alt_row = None
    if alternative is not None:
        values = np.vstack([values, np.array(alternative, dtype=float)[None, :]])
        alt_row = len(rows)
    return Truths(values, len(rows), reference, alt_row, text)
