"""Decision bounds of a one-arm normal design with an unknown sd, per look and sample sd.

With an unknown sd the decision depends on the sample mean and the sample sd together,
so no single bound on the mean exists. For a monitoring committee the rule is tabulated
instead at a few sample sds (by default the design's ``true_sd`` times
:data:`SD_MULTIPLES`): at each look and sd, the sample means at which the study stops for
efficacy (success at the final analysis) and for futility.

The decisions are those the Monte Carlo kernel simulates
(:mod:`octrial.simulation.normal_unknown`: the Student t posterior; the predictive
probability by its Gauss-Jacobi rule; the stop rule of :mod:`octrial.rules.stop`), so
the table is the rule behind the reported operating characteristics; ``octrial decide``
computes the same probabilities with scipy quadrature (they agree to 1e-7 in the
predictive probability and 1e-12 in B). Over a
grid of :data:`GRID_POINTS` sample means spanning :data:`SPAN` standard errors s / sqrt(n)
either side of the benchmark (and the prior mean) every decision is computed, and every
change between neighbouring grid points is located by bisection on the decision itself
to :data:`BISECTIONS` halvings. With the conjugate prior B is not always monotone in the
sample mean (prior-data conflict inflates the posterior scale, so B can fall again for
means far from the prior mean); the table then shows the stopping set as intervals, and
a set that reaches the edge of the grid is taken to continue beyond it.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd

from octrial.design.model import Design
from octrial.rules.stop import CONTINUE, EFFICACY, FUTILITY, Rule

SD_MULTIPLES = (0.5, 0.75, 1.0, 1.25, 1.5, 2.0)
"""Sample sds of the table, as multiples of ``endpoint.true_sd``."""

GRID_POINTS = 241
"""Sample means per look and sd where the decision is computed."""

SPAN = 12.0
"""Half-width of the grid, in standard errors s / sqrt(n)."""

BISECTIONS = 60
"""Halvings that locate each change of decision."""


def sds_of(design: Design, sds: tuple[float, ...] | None = None) -> tuple[float, ...]:
    """The sample sds of the table: ``sds``, or the default multiples of ``true_sd``."""
    if sds:
        return tuple(float(s) for s in sds)
    return tuple(m * float(design.endpoint.true_sd) for m in SD_MULTIPLES)


def _deciders(design: Design, k: int, sd: float) -> tuple[Callable[[float], int],
                                                         Callable[[float], float],
                                                         Callable[[float], float]]:
    """The decision, B and PP of look ``k`` (from 0) as functions of the sample mean, by
    the simulation kernel's own functions (module docstring)."""
    from octrial.simulation import normal_unknown as kernel
    from octrial.simulation.special import student_t_pair

    looks = design.looks
    prior = design.arms[0].prior
    h = design.hypothesis
    sign = h.sign
    n = looks.per_arm[k][0]
    rule = Rule.of(looks)
    constants, nodes, weights = kernel.predictive_rules(design)

    def state(mean: float) -> tuple[float, float, float]:
        """(D = sign (m_n - benchmark), b_n, B)."""
        m_n, k_n, a_n, b_n = kernel.update(prior.mean, prior.mean_n, prior.shape,
                                           prior.scale, n, mean * n, (n - 1) * sd * sd)
        d = sign * (m_n - h.benchmark)
        return d, b_n, float(student_t_pair(d / math.sqrt(b_n / (a_n * k_n)), 2 * a_n)[0])

    def benefit(mean: float) -> float:
        return state(mean)[2]

    def predictive(mean: float) -> float:
        d, b_n, _ = state(mean)
        return float(kernel.predictive(d, b_n, constants[k], nodes[k], weights[k]))

    def decision(mean: float) -> int:
        d, b_n, b = state(mean)
        return rule.decide(k, b, lambda: float(kernel.predictive(
            d, b_n, constants[k], nodes[k], weights[k])))

    return decision, benefit, predictive


def _change(decision: Callable[[float], int], lo: float, hi: float) -> float:
    """Where the decision changes between ``lo`` and ``hi`` (bisection)."""
    d_lo = decision(lo)
    for _ in range(BISECTIONS):
        mid = 0.5 * (lo + hi)
        if mid in (lo, hi):
            break
        if decision(mid) == d_lo:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def stopping_sets(decision: Callable[[float], int], centre: float,
                  half_width: float) -> dict[int, list[tuple[float, float]]]:
    """Per decision, the intervals of sample means that give it (infinite ends where the
    set reaches the edge of the grid)."""
    grid = np.linspace(centre - half_width, centre + half_width, GRID_POINTS)
    codes = [decision(float(x)) for x in grid]
    out: dict[int, list[tuple[float, float]]] = {EFFICACY: [], CONTINUE: [], FUTILITY: []}
    start = -math.inf
    for i in range(1, grid.size + 1):
        if i < grid.size and codes[i] == codes[i - 1]:
            continue
        end = math.inf if i == grid.size else _change(decision, float(grid[i - 1]),
                                                      float(grid[i]))
        out[codes[i - 1]].append((start, end))
        start = end
    return out


def _text(intervals: list[tuple[float, float]], kind: str) -> str:
    """The intervals in words: 'mean >= 7.1', 'mean < 2', '1 <= mean < 3', 'never'."""
    if not intervals:
        return "never"
    parts = []
    for lo, hi in intervals:
        if math.isinf(lo) and math.isinf(hi):
            return "always"
        if math.isinf(lo):
            parts.append(f"mean {'<=' if kind == 'efficacy' else '<'} {hi:.6g}")
        elif math.isinf(hi):
            parts.append(f"mean {'>=' if kind == 'efficacy' else '>'} {lo:.6g}")
        else:
            parts.append(f"{lo:.6g} <= mean <= {hi:.6g}")
    return " or ".join(parts)


def _inner(intervals: list[tuple[float, float]], towards: list[tuple[float, float]]) -> float:
    """The end of a stopping set that faces the continuation region (NaN if none)."""
    if not intervals or not towards:
        return math.nan
    middle = [x for lo, hi in towards for x in (lo, hi) if math.isfinite(x)]
    if not middle:
        return math.nan
    ends = [x for lo, hi in intervals for x in (lo, hi) if math.isfinite(x)]
    centre = 0.5 * (min(middle) + max(middle))
    return min(ends, key=lambda x: abs(x - centre)) if ends else math.nan


def boundary_table(design: Design, sds: tuple[float, ...] | None = None) -> pd.DataFrame:
    """``boundaries.csv`` of a one-arm unknown-sd design (module docstring): one row per
    look and sample sd."""
    looks = design.looks
    prior = design.arms[0].prior
    h = design.hypothesis
    rows: list[dict[str, Any]] = []
    for k in range(looks.count):
        n = looks.per_arm[k][0]
        last = k == looks.count - 1
        for sd in sds_of(design, sds):
            decision, benefit, predictive = _deciders(design, k, sd)
            half = SPAN * sd / math.sqrt(n) + abs(prior.mean - h.null_value)
            sets = stopping_sets(decision, h.null_value, half)
            eff_bound = _inner(sets[EFFICACY], sets[CONTINUE] or sets[FUTILITY])
            fut_bound = _inner(sets[FUTILITY], sets[CONTINUE] or sets[EFFICACY])
            row: dict[str, Any] = {
                "look": k + 1, "n": n, "sample_sd": sd,
                "bound_on": "sample mean",
                "efficacy_bound": eff_bound,
                "efficacy_rule": _text(sets[EFFICACY], "efficacy"),
                "futility_bound": fut_bound,
                "futility_rule": _text(sets[FUTILITY], "futility"),
                "posterior_at_efficacy_bound": (benefit(eff_bound) if math.isfinite(eff_bound)
                                                else math.nan),
                "posterior_at_futility_bound": (benefit(fut_bound) if math.isfinite(fut_bound)
                                                else math.nan),
                "predictive_at_futility_bound": (
                    predictive(fut_bound) if math.isfinite(fut_bound) and not last
                    and looks.futility_predictive[k] is not None else math.nan),
            }
            rows.append(row)
    return pd.DataFrame(rows)


def committee_text(design: Design, table: pd.DataFrame) -> str:
    """The bounds per look and sample sd in words."""
    h = design.hypothesis
    prior = design.arms[0].prior
    higher = h.better == "higher"
    claim = f"Pr(mean {'>' if higher else '<'} {h.benchmark:g} | data)"
    lines = [
        f"Decision rule of {design.name}, on the sample mean, at a few sample sds (with an "
        "unknown sd the decision depends on both); posterior = "
        f"{claim} under the prior {prior.describe()}.",
        "Efficacy is checked first. At the final analysis a study that does not reach the "
        "success set fails. For another sample sd use octrial decide.",
        "Means are shown to 6 significant digits (boundaries.csv holds them in full).",
    ]
    looks = design.looks
    last = int(table["look"].max())
    for look, part in table.groupby("look", sort=True):
        final = look == last
        k = look - 1
        rule = []
        if looks.efficacy[k] is not None:
            rule.append(f"{'success' if final else 'efficacy'}: posterior >= "
                        f"{looks.efficacy[k]:g}")
        if not final and looks.futility[k] is not None:
            rule.append(f"futility: posterior < {looks.futility[k]:g}")
        if not final and looks.futility_predictive[k] is not None:
            rule.append(f"futility: predictive < {looks.futility_predictive[k]:g}")
        lines += ["", f"Look {look}{' (final analysis)' if final else ''}, after "
                      f"{int(part['n'].iloc[0])} subjects ({'; '.join(rule)}):"]
        stop, fail = ("success", "failure") if final else ("efficacy", "futility")
        for row in part.itertuples():
            lines.append(f"  sample sd {row.sample_sd:.6g}: {stop} if {row.efficacy_rule}; "
                         f"{fail} if {row.futility_rule}")
    return "\n".join(lines) + "\n"
