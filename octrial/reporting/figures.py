"""The report's figures, drawn with matplotlib (Agg, no display) and embedded in the HTML.

Every figure reads only ``oc.csv`` columns (``true_<arm>``, ``true_effect``,
``prob_success``, ``look<k>_stop_*``, ``expected_n``, ...) and a few facts about the design
(:class:`PlotFacts`), so it works for every endpoint family and for one or two arms. The
figures are legible in grey scale: lines differ by style and marker, stacked areas by grey
level and hatching, never by colour alone.

Add a figure by writing a function ``(data, facts) -> Figure | None`` (``None`` when its
inputs are absent, for example no calibration) and listing it in :data:`FIGURES`.
"""

from __future__ import annotations

import base64
import io
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure as MplFigure
from matplotlib.rcsetup import cycler

import octrial.reporting.wording as wording
from octrial.reporting.formats import probability, truth

if TYPE_CHECKING:
    from matplotlib.typing import RcKeyType

WIDTH = 6.6
"""Figure width in inches: the printed text width of an A4 or Letter page."""

STYLE: dict[RcKeyType, Any] = {
    "font.size": 8.5, "axes.titlesize": 9, "axes.labelsize": 8.5, "legend.fontsize": 7.5,
    "xtick.labelsize": 8, "ytick.labelsize": 8, "axes.spines.top": False,
    "axes.spines.right": False, "axes.grid": True, "grid.color": "0.88",
    "grid.linewidth": 0.6, "svg.hashsalt": "octrial", "font.family": "DejaVu Sans",
    "axes.prop_cycle": cycler(color=["0.05", "0.35", "0.15", "0.45", "0.25", "0.5"]),
}
LINES = [("-", "o", "0.05"), ("--", "s", "0.35"), ("-.", "^", "0.15"), (":", "D", "0.45"),
         ((0, (5, 1, 1, 1, 1, 1)), "v", "0.25"), ((0, (1, 2)), "P", "0.5")]
"""(line style, marker, grey) per line: distinct without colour."""

MAX_PANELS = 9


@dataclass(frozen=True)
class Figure:
    """One embedded figure: what it shows, and its image as a data URI."""

    name: str
    title: str
    caption: str
    uri: str
    alt: str


@dataclass(frozen=True)
class PlotFacts:
    """What the figures need to know about the design.

    Attributes
    ----------
    x : str
        The oc.csv column on the horizontal axis (treatment's true value, or the effect).
    x_label : str
    group : str or None
        Column whose values get one line or panel each (two arms: the control value).
    group_label : str
    null_at : float or None
        Where the null boundary lies on the horizontal axis.
    looks : tuple of int
        Total sample size at each look.
    look_unit : str
        What the looks count (subjects, or events).
    alpha : float or None
        Stated type I error level (drawn as the alpha line).
    max_type1 : float or None
        Maximum type I error over the null scenarios (drawn when no alpha is stated).
    power_target : float or None
        The power a calibration was asked for (``calibration.json``), drawn on the power
        curve and the saw-tooth.
    alternative_at : float or None
        Where that calibration's alternative lies on the horizontal axis.
    chosen_n : int or None
        The maximum sample size the calibration chose (marked on the saw-tooth).
    """

    x: str
    x_label: str
    group: str | None
    group_label: str
    null_at: float | None
    looks: tuple[int, ...]
    alpha: float | None
    max_type1: float | None
    power_target: float | None = None
    alternative_at: float | None = None
    look_unit: str = "subjects"
    chosen_n: int | None = None


def _calibration_facts(data: Any) -> dict[str, Any]:
    """Target power, the alternative's place on the horizontal axis (filled in by
    :func:`plot_facts`) and the chosen N, from ``calibration.json`` when present."""
    record = getattr(data, "calibration_record", None) or {}
    target = record.get("power_target")
    looks = record.get("looks_n")
    return {"power_target": float(target) if isinstance(target, (int, float)) else None,
            "chosen_n": int(looks[-1]) if isinstance(looks, list) and looks else None}


def _alternative_at(data: Any, column: str) -> float | None:
    """The calibration's alternative on the axis ``column`` (a true value, difference or
    ratio), when calibration.json names one for every arm."""
    record = getattr(data, "calibration_record", None) or {}
    alternative = record.get("alternative")
    design = data.design
    if not isinstance(alternative, dict) or not all(
            isinstance(alternative.get(arm), (int, float)) for arm in design.arm_names):
        return None
    values = [float(alternative[arm]) for arm in design.arm_names]
    if not design.two_arm:
        return values[0]
    t, c = values
    if column == "true_effect":
        return t - c
    return float(design.family.measure(design.hypothesis.comparison, t, c))


def plot_facts(data: Any) -> PlotFacts:
    """The :class:`PlotFacts` of a report's data."""
    facts = _plot_facts(data)
    if facts.power_target is None:
        return facts
    return replace(facts, alternative_at=_alternative_at(data, facts.x))


def _plot_facts(data: Any) -> PlotFacts:
    design = data.design
    p, u = wording.parameter(design), wording.unit(design)
    h = design.hypothesis
    t1 = data.type1
    common = {"looks": tuple(design.looks.n), "look_unit": design.family.look_unit,
              "alpha": data.alpha,
              "max_type1": None if t1 is None else float(t1["max_type1_error"]),
              **_calibration_facts(data)}
    if not design.two_arm:
        return PlotFacts("true_treatment", f"true {p} of the treatment arm ({u})", None, "",
                         h.benchmark, **common)
    if h.comparison in (None, "difference"):
        label = f"true difference in {p}, treatment − control ({u})"
        null_at = h.shift if h.better == "higher" else -h.shift
        return PlotFacts("true_effect", label, "true_control", f"control {p}", null_at,
                         **common)
    # Ratio scales: oc.csv carries the measure as true_ratio or true_odds_ratio.
    column = "true_" + h.comparison.replace("-", "_")
    null_at = float(getattr(h, "threshold", 1.0 + h.sign * h.shift))
    if column not in data.oc.columns:
        column, null_at = "true_effect", None
    label = f"true {h.comparison.replace('-', ' ')} of {p}s, treatment to control"
    return PlotFacts(column, label, "true_control", f"control {p}", null_at, **common)


def _x(oc: pd.DataFrame, facts: PlotFacts) -> pd.DataFrame:
    """oc with the horizontal-axis column present (two arms without ``true_effect``)."""
    if facts.x in oc.columns:
        return oc
    return oc.assign(**{facts.x: oc["true_treatment"] - oc["true_control"]})


def _groups(oc: pd.DataFrame, facts: PlotFacts) -> list[tuple[str, pd.DataFrame]]:
    oc = _x(oc, facts)
    if facts.group is None:
        return [("", oc.sort_values(facts.x))]
    return [(f"{facts.group_label} {truth(value)}", part.sort_values(facts.x))
            for value, part in oc.groupby(facts.group, sort=True)]


def _new(height: float, ncols: int = 1, nrows: int = 1, **kw: Any) -> tuple[MplFigure, Any]:
    import matplotlib

    with matplotlib.rc_context(STYLE):
        fig = MplFigure(figsize=(WIDTH, height), layout="constrained")
        FigureCanvasAgg(fig)
        axes = fig.subplots(nrows, ncols, squeeze=False, **kw)
    return fig, axes


RASTER_DPI = 200


FIT_ROUNDS = 40
"""Most layouts :func:`fit_text` tries (each wraps every text too wide one character
narrower; wrapping one text can move the others)."""


def fit_text(fig: MplFigure) -> None:
    """Wrap every panel title and horizontal-axis label that would not fit beside its
    neighbours or would be cut at the figure's edge.

    Constrained layout makes room above and below panels for their text but not beside
    them, so a title wider than its share of the figure's width runs into the next panel
    or is cut at the edge. Each such text is re-wrapped at word boundaries, one character
    narrower at a time, and the layout redone until every text fits.
    """
    for _ in range(FIT_ROUNDS):
        canvas = fig.canvas
        if not isinstance(canvas, FigureCanvasAgg):  # text extents need Agg's renderer
            raise TypeError("fit_text needs a figure on an Agg canvas (as _new makes)")
        canvas.draw()
        renderer = canvas.get_renderer()
        wrapped = False
        for ax in fig.axes:
            spec = ax.get_subplotspec()
            if not ax.get_visible() or spec is None:
                continue
            share = fig.bbox.width / spec.get_gridspec().ncols
            for text in (ax.title, ax.xaxis.label):
                if text.get_text() and not _fits(text, renderer, share, fig.bbox.width):
                    _narrower(text)
                    wrapped = True
        if not wrapped:
            return


def _fits(text: Any, renderer: Any, share: float, edge: float) -> bool:
    # margins of 2% absorb the text widths of other resolutions (fonts are hinted per dpi)
    box = text.get_window_extent(renderer)
    margin = 0.02 * edge
    return box.width <= share - margin and box.x0 >= margin and box.x1 <= edge - margin


def _narrower(text: Any) -> None:
    """Wrap ``text`` one step narrower than its longest line (never below 8 characters),
    each of its own lines separately."""
    import textwrap

    original = getattr(text, "_unwrapped", None) or text.get_text()
    text._unwrapped = original
    width = max(8, max(len(line) for line in text.get_text().splitlines()) - 1)
    text.set_text("\n".join(textwrap.fill(line, width) for line in original.splitlines()))


def encode(fig: MplFigure, raster: bool = False) -> str:
    """The figure as a data URI: SVG (vector, sharp at any zoom), or PNG with ``raster``.

    Hatched areas are better as PNG: Chromium prints every SVG hatch pattern as its own
    bitmap, which makes a PDF ten times larger than the same figure as one PNG.
    """
    import matplotlib

    buffer = io.BytesIO()
    with matplotlib.rc_context(STYLE):
        fit_text(fig)
        if raster:
            fig.savefig(buffer, format="png", dpi=RASTER_DPI, metadata={"Software": None})
        else:
            fig.savefig(buffer, format="svg", metadata={"Date": None, "Creator": None})
    mime = "image/png" if raster else "image/svg+xml"
    return f"data:{mime};base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def _reference_lines(ax: Axes, facts: PlotFacts, probability_axis: bool) -> None:
    if facts.null_at is not None:
        ax.axvline(facts.null_at, color="0.3", linestyle=(0, (1, 1.5)), linewidth=0.9,
                   label=f"null boundary ({truth(facts.null_at)})")
    if probability_axis:
        if facts.alpha is not None:
            ax.axhline(facts.alpha, color="0.2", linestyle=(0, (6, 2)), linewidth=0.9,
                       label=f"alpha = {truth(facts.alpha)}")
        elif facts.max_type1 is not None:
            ax.axhline(facts.max_type1, color="0.2", linestyle=(0, (6, 2)), linewidth=0.9,
                       label=f"maximum type I error ({probability(facts.max_type1)})")


def _calibration_marks(ax: Axes, facts: PlotFacts) -> None:
    """The target power and the alternative a calibration asked for, when it did."""
    if facts.power_target is None:
        return
    ax.axhline(facts.power_target, color="0.35", linestyle="-.", linewidth=0.9,
               label=f"target power {truth(facts.power_target)}")
    if facts.alternative_at is not None:
        ax.axvline(facts.alternative_at, color="0.35", linestyle="-.", linewidth=0.9,
                   label=f"alternative ({truth(facts.alternative_at)})")


def power_curve(data: Any, facts: PlotFacts) -> Figure:
    """Probability of success against the true value (one line per control value)."""
    import matplotlib

    fig, axes = _new(3.4)
    ax = axes[0, 0]
    with matplotlib.rc_context(STYLE):
        banded = False
        for i, (label, part) in enumerate(_groups(data.oc, facts)):
            style, marker, grey = LINES[i % len(LINES)]
            x = part[facts.x].to_numpy(float)
            p = part["prob_success"].to_numpy(float)
            se = part["prob_success_se"].to_numpy(float)
            if (part["replicates"] > 0).any():
                ax.fill_between(x, np.clip(p - 1.96 * se, 0, 1), np.clip(p + 1.96 * se, 0, 1),
                                color="0.8", linewidth=0, zorder=1,
                                label=None if banded else "95% Monte Carlo band")
                banded = True
            ax.plot(x, p, linestyle=style, marker=marker, color=grey, markersize=4,
                    linewidth=1.3, zorder=3, label=label or "P(success)")
        _reference_lines(ax, facts, probability_axis=True)
        _calibration_marks(ax, facts)
        ax.set_ylim(-0.02, 1.02)
        ax.set_xlabel(facts.x_label)
        ax.set_ylabel("probability of declaring success")
        ax.legend(loc="center left", bbox_to_anchor=(1.01, 0.5), frameon=False)
    caption = ("Probability of declaring success at any look against the true value: the "
               "type I error left of the null boundary (inclusive), the power to its right.")
    if facts.alpha is None and facts.max_type1 is not None:
        caption += (" No type I error level was stated, so the dashed line marks the maximum "
                    "type I error over the null scenarios.")
    if banded:
        caption += " The grey band is the pointwise 95% Monte Carlo interval (± 1.96 se)."
    if facts.power_target is not None:
        caption += (f" The calibration asked for power {truth(facts.power_target)}"
                    + (f" at the alternative {truth(facts.alternative_at)}"
                       if facts.alternative_at is not None else "")
                    + ": the dash-dotted lines mark them.")
    return Figure("power", "Power and type I error", caption, encode(fig),
                  "Line chart of the probability of success against the true value.")


def _stack_layers(k_looks: int) -> list[tuple[str, str, str, str]]:
    """(column, legend label, grey, hatch) from the bottom up: efficacy stops and success
    (dark greys, earliest darkest), then failure and futility stops (light greys, hatched,
    earliest lightest), so the border between dark and light is the probability of
    success."""
    eff_greys = np.linspace(0.12, 0.55, k_looks)
    fut_greys = np.linspace(0.97, 0.78, k_looks)
    hatches = ["", "///", "\\\\\\", "xx", "---", "|||"]
    layers = []
    for k in range(k_looks):
        final = k == k_looks - 1
        layers.append((f"look{k + 1}_stop_efficacy",
                       "final: success" if final else f"look {k + 1}: efficacy stop",
                       f"{eff_greys[k]:.2f}", ""))
    for k in reversed(range(k_looks)):
        final = k == k_looks - 1
        layers.append((f"look{k + 1}_stop_futility",
                       "final: failure" if final else f"look {k + 1}: futility stop",
                       f"{fut_greys[k]:.2f}", hatches[(k_looks - 1 - k) % len(hatches)]))
    return layers


def _panels(n: int) -> tuple[int, int]:
    """(rows, columns) of small multiples: one row up to three panels, then three wide."""
    ncols = min(n, 3)
    return -(-n // ncols), ncols


def _subset(groups: list[tuple[str, pd.DataFrame]]) -> tuple[list[tuple[str, pd.DataFrame]],
                                                            bool]:
    if len(groups) <= MAX_PANELS:
        return groups, False
    keep = np.unique(np.linspace(0, len(groups) - 1, MAX_PANELS).round().astype(int))
    return [groups[i] for i in keep], True


def stopping(data: Any, facts: PlotFacts) -> Figure:
    """Stacked probabilities of ending at each look for each reason."""
    import matplotlib

    k_looks = len(facts.looks)
    groups, subset = _subset(_groups(data.oc, facts))
    nrows, ncols = _panels(len(groups))
    fig, axes = _new(1.2 + 2.3 * nrows, ncols, nrows, sharey=True)
    layers = [layer for layer in _stack_layers(k_looks) if data.oc[layer[0]].any()]
    with matplotlib.rc_context({**STYLE, "hatch.color": "0.45", "hatch.linewidth": 0.6}):
        for i, (label, part) in enumerate(groups):
            ax = axes[i // ncols, i % ncols]
            x = part[facts.x].to_numpy(float)
            gaps = np.diff(np.unique(x))
            width = 0.8 * (gaps.min() if gaps.size else 1.0)
            bottom = np.zeros(len(part))
            for column, name, grey, hatch in layers:
                height = part[column].to_numpy(float)
                ax.bar(x, height, width, bottom=bottom, color=grey, hatch=hatch,
                       edgecolor="0.25" if len(x) <= 30 else "none", linewidth=0.3,
                       label=name if i == 0 else None)
                bottom = bottom + height
            ax.set_ylim(0, 1)
            ax.grid(False)
            if label:
                ax.set_title(label)
            if i % ncols == 0:
                ax.set_ylabel("probability")
        for j in range(len(groups), nrows * ncols):
            axes[j // ncols, j % ncols].set_visible(False)
        fig.supxlabel(facts.x_label, fontsize=STYLE["axes.labelsize"])
        handles, labels = axes[0, 0].get_legend_handles_labels()
        fig.legend(handles[::-1], labels[::-1], loc="outside right center", frameon=False)
    caption = ("Probability of ending at each look for each reason, stacked in the order of "
               "the legend. Efficacy stops and final success (dark greys) stack from the "
               "bottom, futility stops and final failure (light, hatched) from the top; "
               "the border between dark and light is the probability of success.")
    if len(groups) > 1:
        caption += f" One panel per {facts.group_label}."
    if subset:
        caption += f" Shown: {len(groups)} evenly spaced control values; the tables have all."
    return Figure("stopping", "Stopping probabilities per look", caption,
                  encode(fig, raster=True),
                  "Stacked bar chart of the probability of stopping at each look.")


def expected_sample_size(data: Any, facts: PlotFacts) -> Figure:
    """Expected total sample size against the true value, with the looks marked."""
    import matplotlib

    fig, axes = _new(3.2)
    ax = axes[0, 0]
    with matplotlib.rc_context(STYLE):
        for i, (label, part) in enumerate(_groups(data.oc, facts)):
            style, marker, grey = LINES[i % len(LINES)]
            x = part[facts.x].to_numpy(float)
            y = part["expected_n"].to_numpy(float)
            ax.plot(x, y, linestyle=style, marker=marker, color=grey, markersize=4,
                    linewidth=1.3, label=label or "E[N]")
            if (part["replicates"] > 0).any():
                ax.errorbar(x, y, yerr=1.96 * part["expected_n_se"].to_numpy(float),
                            fmt="none", color=grey, ecolor=grey, elinewidth=0.8, capsize=2)
        for k, n in enumerate(facts.looks):
            ax.axhline(n, color="0.55", linewidth=0.7, linestyle=(0, (2, 2)))
            ax.annotate(f"look {k + 1}: n = {n}", (1.0, n), xycoords=("axes fraction", "data"),
                        xytext=(2, 0), textcoords="offset points", va="center", fontsize=7,
                        color="0.3")
        if facts.null_at is not None:
            ax.axvline(facts.null_at, color="0.3", linestyle=(0, (1, 1.5)), linewidth=0.9,
                       label=f"null boundary ({truth(facts.null_at)})")
        ax.set_ylim(0, facts.looks[-1] * 1.05)
        ax.set_xlabel(facts.x_label)
        ax.set_ylabel(f"expected total sample size ({facts.look_unit})")
        ax.legend(loc="lower left", frameon=True, framealpha=0.9, edgecolor="0.8")
    caption = ("Expected total sample size E[N] against the true value; the dashed "
               "horizontal lines are the planned looks.")
    return Figure("expected-n", "Expected sample size", caption, encode(fig),
                  "Line chart of the expected sample size against the true value.")


def duration_and_enrolment(data: Any, facts: PlotFacts) -> Figure | None:
    """Designs in calendar time: the study's duration (median, 10% to 90% range and mean)
    and the subjects enrolled and analysed, against the true value."""
    import matplotlib

    oc = data.oc
    if "expected_duration" not in oc.columns:
        return None
    unit = data.design.conduct.time_unit if data.design.conduct is not None else "time unit"
    fig, axes = _new(3.2, ncols=2)
    left, right = axes[0, 0], axes[0, 1]
    with matplotlib.rc_context(STYLE):
        for i, (label, part) in enumerate(_groups(oc, facts)):
            style, marker, grey = LINES[i % len(LINES)]
            x = part[facts.x].to_numpy(float)
            median = part["duration_q50"].to_numpy(float)
            spread = np.vstack([median - part["duration_q10"].to_numpy(float),
                                part["duration_q90"].to_numpy(float) - median])
            left.errorbar(x, median, yerr=np.clip(spread, 0, None), fmt="none", ecolor=grey,
                          elinewidth=0.9, capsize=2)
            left.plot(x, part["expected_duration"].to_numpy(float), linestyle=style,
                      marker=marker, color=grey, markersize=4, linewidth=1.2,
                      label=label or "mean")
            right.plot(x, part["expected_enrolled"].to_numpy(float), linestyle=style,
                       marker=marker, color=grey, markersize=4, linewidth=1.2,
                       label=f"enrolled {label}".strip())
            right.plot(x, part["expected_analysed"].to_numpy(float), linestyle=style,
                       marker=marker, color=grey, markersize=4, linewidth=1.2,
                       markerfacecolor="white",
                       label=f"analysed {label}".strip())
        for ax in (left, right):
            if facts.null_at is not None:
                ax.axvline(facts.null_at, color="0.3", linestyle=(0, (1, 1.5)),
                           linewidth=0.9)
            ax.set_xlabel(facts.x_label)
            ax.set_ylim(0, ax.get_ylim()[1] * 1.08)
        left.set_ylabel(f"study duration ({unit}s)")
        right.set_ylabel("expected subjects")
        left.legend(loc="lower left", frameon=True, framealpha=0.9, edgecolor="0.8")
        right.legend(loc="lower left", frameon=True, framealpha=0.9, edgecolor="0.8")
    caption = ("Left: the study's duration from the start of enrolment to the final analysis "
               "(line: mean; bars: 10% to 90% of the simulated studies, from the median). "
               "Right: expected subjects enrolled when enrolment stops (filled) and "
               "subjects in the final analysis (open).")
    return Figure("duration", "Duration and enrolment", caption, encode(fig),
                  "Line charts of the study duration and of the subjects enrolled and "
                  "analysed against the true value.")


SIZE_COLUMNS = ("max_n", "n_max", "n", "N", "sample_size")
ERROR_COLUMNS = ("max_type1_error", "type1_error", "type1", "alpha_attained")
POWER_COLUMNS = ("power",)


def _first(frame: pd.DataFrame, names: tuple[str, ...]) -> str | None:
    return next((c for c in names if c in frame.columns), None)


def sawtooth(data: Any, facts: PlotFacts) -> Figure | None:
    """Type I error and power against the maximum sample size, when calibration sized N.

    Reads ``sizing.csv`` (one row per N) or else ``calibration.csv``, columns named in
    :data:`SIZE_COLUMNS`, :data:`ERROR_COLUMNS` and :data:`POWER_COLUMNS`; ``None`` when
    the calibration did not vary N. With several candidates per N in calibration.csv the
    chosen one (column ``chosen``) or else the first is drawn.
    """
    import matplotlib

    frame = getattr(data, "sizing", None)
    if frame is None:
        frame = data.calibration
    if frame is None:
        return None
    n_col, e_col, p_col = (_first(frame, names) for names in (SIZE_COLUMNS, ERROR_COLUMNS,
                                                               POWER_COLUMNS))
    if n_col is None or (e_col is None and p_col is None) or frame[n_col].nunique() < 2:
        return None
    if "chosen" in frame.columns and frame.duplicated(n_col).any():
        frame = frame.sort_values("chosen", ascending=False, kind="stable")
    curve = frame.dropna(subset=[c for c in (e_col, p_col) if c]).drop_duplicates(
        n_col).sort_values(n_col)
    fig, axes = _new(3.2, 2 if e_col and p_col else 1, 1)
    with matplotlib.rc_context(STYLE):
        panels = [(c, name) for c, name in ((e_col, "type I error"), (p_col, "power")) if c]
        for i, (column, name) in enumerate(panels):
            ax = axes[0, i]
            style, marker, grey = LINES[i]
            ax.plot(curve[n_col], curve[column], drawstyle="steps-mid", linestyle=style,
                    marker=marker, markersize=2.5, color=grey, linewidth=1.0)
            if name == "type I error" and facts.alpha is not None:
                ax.axhline(facts.alpha, color="0.2", linestyle=(0, (6, 2)), linewidth=0.9,
                           label=f"alpha = {truth(facts.alpha)}")
            if name == "power" and facts.power_target is not None:
                ax.axhline(facts.power_target, color="0.35", linestyle="-.", linewidth=0.9,
                           label=f"target power {truth(facts.power_target)}")
            if facts.chosen_n is not None and (curve[n_col] == facts.chosen_n).any():
                ax.axvline(facts.chosen_n, color="0.5", linestyle=(0, (1, 1.5)),
                           linewidth=0.9, label=f"chosen N = {facts.chosen_n}")
            if ax.get_legend_handles_labels()[0]:
                ax.legend(frameon=False, loc="best")
            ax.set_xlabel("maximum sample size N (subjects)")
            ax.set_ylabel(name)
    caption = ("Type I error and power against the maximum sample size, from the "
               "calibration. With a discrete endpoint both move in a saw-tooth, not "
               "monotonically, so a larger N can fail where a smaller one passes.")
    if facts.chosen_n is not None:
        caption += " The dotted vertical line marks the N chosen."
    return Figure("sawtooth", "Sample size search", caption, encode(fig),
                  "Step chart of type I error and power against the maximum sample size.")


def _check_record(data: Any, key: str) -> dict[str, Any]:
    """Entry ``key`` of the run's checks.json when ``octrial check`` wrote it, else {}."""
    from octrial.reporting.check_tables import is_ours

    checks = getattr(data, "checks", None)
    if checks is None or not is_ours(checks):
        return {}
    return checks.get(key) or {}


def prior_predictive(data: Any, facts: PlotFacts) -> Figure | None:
    """The prior predictive distributions drawn by ``octrial check`` (prior-predictive.png
    beside checks.json: the distributions themselves are not in checks.json)."""
    drawing = getattr(data, "prior_predictive_png", None)
    if drawing is None:
        return None
    record = _check_record(data, "prior_predictive")
    flags = [flag for source in ("analysis", "design")
             for flag in (record.get(source) or {}).get("flags", [])]
    caption = ("Prior predictive distribution of each observable at the final look: what "
               "the analysis prior (solid, dark) and the design prior (dashed, lighter), "
               "with the data model, expect the study to see before any data. ")
    caption += ("Flagged: " + "; ".join(flags) + "." if flags else
                "No prior puts visible mass on implausible outcomes.")
    uri = "data:image/png;base64," + base64.b64encode(drawing).decode("ascii")
    return Figure("checks-prior-predictive", "Prior predictive distributions", caption, uri,
                  "Prior predictive probability or density of each observable.")


def sbc_histograms(data: Any, facts: PlotFacts) -> Figure | None:
    """Simulation-based calibration histograms (checks.json written by ``octrial check``)."""
    import octrial.reporting.check_figures as check_figures

    sbc = _check_record(data, "sbc")
    entries = sbc.get("quantities") or []
    if not entries:
        return None
    fig = check_figures.sbc_figure(entries, sbc["band_level"])
    failed = [e["id"] for e in entries if e["verdict"] == "fail"]
    caption = (f"Simulation-based calibration: for {sbc['simulations']:,} studies with true "
               "values drawn from the analysis prior, the posterior CDF at the true value "
               "(or the rank of the truth among posterior draws) in "
               f"{sbc['bins']} bins. A correct posterior computation gives a flat histogram "
               f"within the grey {sbc['band_level']:.0%} binomial band. ")
    caption += (f"Failing: {', '.join(failed)}." if failed else
                "Every computation passes (Holm-adjusted p-values in the panel titles).")
    return Figure("checks-sbc", "Simulation-based calibration", caption,
                  encode(fig, raster=True),
                  "Histograms of posterior CDF values at the true value, one per quantity.")


def sensitivity_scatter(data: Any, facts: PlotFacts) -> Figure | None:
    """Posterior z-score against shrinkage per look (sensitivity.csv and checks.json)."""
    import octrial.reporting.check_figures as check_figures

    record = _check_record(data, "sensitivity")
    points = getattr(data, "sensitivity", None)
    if points is None or "looks" not in record or points.empty:
        return None
    fig = check_figures.sensitivity_figure(points, record["label"])
    caption = (f"Posterior z-score (posterior mean − truth) / posterior sd against posterior "
               f"shrinkage 1 − posterior variance / prior variance of {record['label']}, for "
               f"{record['studies']:,} studies with true values from the "
               f"{record['truths_from']}, at each look. The grey band is |z| ≤ 2; left of the "
               "dotted line (shrinkage < 0.1) a study learns little beyond the prior.")
    return Figure("checks-sensitivity", "Posterior shrinkage and z-score", caption,
                  encode(fig, raster=True),
                  "Scatter plots of posterior z-score against posterior shrinkage per look.")


def tail_accuracy(data: Any, facts: PlotFacts) -> Figure | None:
    """Monte Carlo error of posterior quantiles against the number of draws (checks.json)."""
    import octrial.reporting.check_figures as check_figures

    record = _check_record(data, "tail_accuracy")
    if "table" not in record:
        return None
    fig = check_figures.tail_figure(record)
    caption = (f"Monte Carlo standard error of posterior quantiles of {record['label']} "
               f"({record['data']}), relative to the posterior sd, against the number of "
               "posterior draws: repeated draws (markers) and the asymptotic formula (lines). "
               "Tail quantiles need several times the draws of the median for the same "
               "precision.")
    return Figure("checks-tail-accuracy", "Accuracy of posterior tail quantiles", caption,
                  encode(fig), "Log-log plot of quantile standard error against draws.")


FIGURES: tuple[Callable[[Any, PlotFacts], Figure | None], ...] = (
    power_curve, stopping, expected_sample_size, duration_and_enrolment, sawtooth,
    prior_predictive, sbc_histograms, sensitivity_scatter, tail_accuracy,
)
"""Figure builders in report order. Figures named ``checks-...`` are shown in the
workflow-checks section."""


def build_figures(data: Any) -> list[Figure]:
    """Every figure that the data allow, in report order."""
    facts = plot_facts(data)
    return [f for f in (build(data, facts) for build in FIGURES) if f is not None]
