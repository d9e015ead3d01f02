"""Figures of a several-arm report: per-arm power, and allocation over time.

Drawn in grey scale as every report figure (:mod:`octrial.reporting.figures`: lines
differ by style and marker, never by colour alone) from oc.csv columns only.

Allocation over time reads the columns ``<arm>_block<k>_share`` (mean allocation
probability of block k; block 1 is the subjects before look 1; simulation only) and
``<arm>_look<k>_n`` (mean cumulative subjects of the arm at look k; every engine). A
run folder written before the exact engines wrote ``<arm>_look<k>_n`` gets them derived
as those engines derive them (:func:`cumulative_subjects`).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd

from octrial.arms_evaluation import sizes_per_look
from octrial.reporting.figures import LINES, MAX_PANELS, STYLE, Figure, _new, _panels, encode
from octrial.reporting.formats import truth

__all__ = ["ARMS_FIGURES", "allocation_shares", "allocation_subjects", "arm_power",
           "build_arms_figures", "cumulative_subjects", "share_columns"]


def _style(i: int) -> dict[str, Any]:
    style, marker, grey = LINES[i % len(LINES)]
    return {"linestyle": style, "marker": marker, "color": grey, "markersize": 4,
            "linewidth": 1.3}


def _effect_axis(data: Any) -> tuple[str, Callable[[pd.Series, str], float]]:
    """The horizontal axis of the power curves: each arm's effect against the control,
    or its true value against a benchmark."""
    design = data.design
    if not design.shared_control:
        return ("true value of the arm (benchmark "
                f"{truth(design.hypothesis.benchmark)})",
                lambda r, arm: float(r[f"true_{arm}"]))
    comparison = design.hypothesis.comparison
    control = design.control.name

    def effect(r: pd.Series, arm: str) -> float:
        return float(design.family.measure(comparison, float(r[f"true_{arm}"]),
                                           float(r[f"true_{control}"])))

    return f"true {comparison} of the arm against the control", effect


def arm_power(data: Any) -> Figure:
    """Per arm: probability of success over the scenarios, and against the arm's effect."""
    import matplotlib

    design, oc = data.design, data.oc
    fig, axes = _new(3.3, ncols=2)
    left, right = axes[0, 0], axes[0, 1]
    x_label, effect = _effect_axis(data)
    scenarios = oc["scenario"].to_numpy(int)
    with matplotlib.rc_context(STYLE):
        for i, arm in enumerate(design.treatment_names):
            p = oc[f"{arm}_prob_success"].to_numpy(float)
            left.plot(scenarios, p, label=arm, **_style(i))
            points = sorted((effect(r, arm), r[f"{arm}_prob_success"])
                            for _, r in oc.iterrows())
            right.plot([e for e, _ in points], [q for _, q in points], label=arm,
                       **_style(i))
        left.plot(scenarios, oc["prob_success"].to_numpy(float), label="any arm",
                  color="0.6", linewidth=2.2, linestyle="-", zorder=1)
        left.plot(scenarios, oc["fwer"].to_numpy(float), label="FWER", color="0.2",
                  linewidth=1.0, linestyle=(0, (1, 1)), marker="x", markersize=4)
        level = data.alpha
        for ax in (left, right):
            if level is not None:
                ax.axhline(level, color="0.2", linestyle=(0, (6, 2)), linewidth=0.9,
                           label=f"alpha = {truth(level)}")
            ax.set_ylim(-0.02, 1.02)
            ax.set_ylabel("probability of success")
        left.set_xticks(scenarios)
        left.set_xlabel("scenario")
        left.set_title("per scenario")
        right.set_xlabel(x_label)
        right.set_title("against the arm's effect")
        left.legend(loc="upper left", frameon=False)
    caption = ("Left: each treatment arm's probability of being declared a success, the "
               "probability that at least one arm succeeds and the family-wise error rate "
               "(at least one null arm succeeds), per scenario. Right: each arm's "
               "probability of success against its own effect: its type I error where the "
               "effect is null, its power elsewhere.")
    return Figure("arm-power", "Power and type I error per arm", caption, encode(fig),
                  "Line charts of each arm's probability of success.")


def _per_look(oc: pd.DataFrame, prefix: str, what: str, looks: int) -> np.ndarray | None:
    columns = [f"{prefix}_look{k}_{what}" for k in range(1, looks + 1)]
    if not all(c in oc.columns for c in columns):
        return None
    return oc[columns].to_numpy(float)


def cumulative_subjects(data: Any) -> dict[str, np.ndarray] | None:
    """Per arm (control first), the mean cumulative subjects at each look, shape
    (scenarios, looks): the ``<arm>_look<k>_n`` columns (every engine writes them), or,
    for a run folder without them and fixed allocation, derived as the exact engines
    derive them (:func:`octrial.arms_evaluation.sizes_per_look`); ``None`` when neither
    is possible."""
    design, oc = data.design, data.oc
    k_looks = design.looks.count
    given = {a: _per_look(oc, a, "n", k_looks) for a in design.arm_names}
    if all(v is not None and not np.isnan(v).any() for v in given.values()):
        return {a: v for a, v in given.items() if v is not None}
    if design.allocation.adaptive:
        return None
    try:
        return sizes_per_look(design, oc)
    except KeyError:  # a table without the per-look leaving columns
        return None


def share_columns(data: Any) -> dict[str, list[str]]:
    """Per arm, its ``<arm>_block<k>_share`` columns in block order (arms without any
    are left out)."""
    out = {}
    for arm in data.design.arm_names:
        found = []
        k = 1
        while (f"{arm}_block{k}_share" in data.oc.columns
               and data.oc[f"{arm}_block{k}_share"].notna().any()):
            found.append(f"{arm}_block{k}_share")
            k += 1
        if found:
            out[arm] = found
    return out


SCENARIO_VALUES = " The scenarios' true values are in the tables of the operating characteristics."


def _scenario_panels(data: Any, height_per_row: float) -> tuple[Any, Any, list[int]]:
    shown = list(range(min(len(data.oc), MAX_PANELS)))
    rows, cols = _panels(len(shown))
    fig, axes = _new(height_per_row * rows, ncols=cols, nrows=rows, sharey=True)
    for ax in axes.flat[len(shown):]:
        ax.set_visible(False)
    return fig, axes, shown


def _panel_title(data: Any, r: pd.Series) -> str:
    # the true values are in the tables; a panel is too narrow for every arm's
    return f"scenario {int(r['scenario'])}"


def allocation_subjects(data: Any) -> Figure | None:
    """Mean cumulative subjects of every arm at each look, one panel per scenario."""
    import matplotlib

    found = cumulative_subjects(data)
    if found is None:
        return None
    design, oc = data.design, data.oc
    fig, axes, shown = _scenario_panels(data, 2.3)
    looks = np.arange(1, design.looks.count + 1)
    with matplotlib.rc_context(STYLE):
        for ax, i in zip(axes.flat, shown, strict=False):
            for j, arm in enumerate(design.arm_names):
                ax.plot(looks, found[arm][i], label=arm, **_style(j))
            ax.set_xticks(looks)
            ax.set_title(_panel_title(data, oc.iloc[i]))
            ax.set_xlabel("look")
        for ax in axes[:, 0]:
            ax.set_ylabel(f"mean cumulative {design.family.look_unit}")
        axes.flat[0].legend(loc="upper left", frameon=False)
    simulated = set(oc["method"]) == {"monte-carlo"} if "method" in oc.columns else False
    how = (" As simulated (oc.csv columns <arm>_look<k>_n)." if simulated else
           " Computed from the planned sizes and each arm's probabilities of leaving at "
           "each look (fixed allocation: an arm that leaves keeps its size).")
    more = (f" The first {len(shown)} of {len(oc)} scenarios are shown."
            if len(shown) < len(oc) else "") + SCENARIO_VALUES
    caption = ("Allocation over time: mean number of subjects each arm has received by "
               "each look, over all studies (a study that ended earlier counts with its "
               "final numbers)." + how + more)
    return Figure("allocation-subjects", "Subjects per arm over the looks", caption,
                  encode(fig), "Line charts of each arm's mean cumulative subjects per look.")


def allocation_shares(data: Any) -> Figure | None:
    """Mean allocation probability of every arm per block (simulation, fixed or adaptive
    allocation)."""
    import matplotlib

    shares = share_columns(data)
    if not shares:
        return None
    oc = data.oc
    fig, axes, shown = _scenario_panels(data, 2.3)
    with matplotlib.rc_context(STYLE):
        for ax, i in zip(axes.flat, shown, strict=False):
            for j, (arm, columns) in enumerate(shares.items()):
                blocks = np.arange(1, len(columns) + 1)
                ax.plot(blocks, oc.iloc[i][columns].to_numpy(float), label=arm,
                        **_style(j))
                ax.set_xticks(blocks)
            ax.set_ylim(-0.02, 1.02)
            ax.set_title(_panel_title(data, oc.iloc[i]))
            ax.set_xlabel("block")
        for ax in axes[:, 0]:
            ax.set_ylabel("mean allocation probability")
        axes.flat[0].legend(loc="upper left", frameon=False)
    more = (f" The first {len(shown)} of {len(oc)} scenarios are shown."
            if len(shown) < len(oc) else "") + SCENARIO_VALUES
    caption = ("Allocation over time: each arm's mean probability of receiving a subject in "
               "each block (block 1: the subjects before look 1; block k + 1: those between "
               "looks k and k + 1), as simulated (oc.csv columns <arm>_block<k>_share)." + more)
    return Figure("allocation-shares", "Allocation probabilities per block", caption,
                  encode(fig), "Line charts of each arm's mean allocation probability.")


ARMS_FIGURES: tuple[Callable[[Any], Figure | None], ...] = (
    arm_power, allocation_subjects, allocation_shares)
"""The figures of a several-arm report, in their order."""


def build_arms_figures(data: Any) -> list[Figure]:
    """Every figure of a several-arm report whose inputs are present."""
    return [f for f in (make(data) for make in ARMS_FIGURES) if f is not None]
