"""Figures of the workflow checks, in the report's grey style.

Each function draws from the plain records of checks.json (and the sensitivity points of
sensitivity.csv), so ``octrial check`` saves them as PNG files and the report embeds the
same drawings from a run folder. Greys, line styles and hatching only; both axes labelled.
"""

from __future__ import annotations

import io
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.figure import Figure as MplFigure

from octrial.reporting.figures import LINES, RASTER_DPI, STYLE, _new, _panels, fit_text

SOURCE_STYLE = {"analysis": ("-", "0.1", "analysis prior"),
                "design": ("--", "0.5", "design prior")}


def png(fig: MplFigure) -> bytes:
    """The figure as PNG bytes (no timestamp, so equal figures give equal files)."""
    import matplotlib

    buffer = io.BytesIO()
    with matplotlib.rc_context(STYLE):
        fit_text(fig)
        fig.savefig(buffer, format="png", dpi=RASTER_DPI, metadata={"Software": None})
    return buffer.getvalue()


def _sbc_panel(ax: Any, entry: dict[str, Any], title: bool = True,
               ylabel: bool = True) -> None:
    counts = np.asarray(entry["counts"], dtype=float)
    bins = counts.size
    edges = np.arange(bins + 1)
    low = np.asarray(entry["band_lower"], dtype=float)
    high = np.asarray(entry["band_upper"], dtype=float)
    expected = np.asarray(entry["probabilities"], dtype=float) * counts.sum()
    ax.fill_between(edges, np.append(low, low[-1]), np.append(high, high[-1]), step="post",
                    color="0.85", linewidth=0, label="binomial band", zorder=1)
    ax.stairs(expected, edges, color="0.35", linestyle=(0, (4, 2)), linewidth=0.9,
              label="expected (uniform)", zorder=2)
    ax.bar(edges[:-1] + 0.5, counts, width=0.8, color="0.3", edgecolor="0.1",
           linewidth=0.3, label="simulated studies", zorder=3)
    ax.set_xlim(0, bins)
    ticks = np.linspace(0, bins, 5)
    ax.set_xticks(ticks, [f"{t / bins:g}" for t in ticks])
    ax.set_xlabel("rank of the truth / (draws + 1)" if entry["kind"] == "rank"
                  else "posterior CDF at the true value")
    if ylabel:
        ax.set_ylabel("simulated studies per bin")
    ax.grid(False)
    if title:
        verdict = entry["verdict"].upper()
        ax.set_title(f"{entry['label']}, look {entry['look']}"
                     f"{' (ranks)' if entry['kind'] == 'rank' else ''}\n"
                     f"p = {entry['p_adjusted']:.2g} (Holm): {verdict}", fontsize=8)


def sbc_figure(entries: Sequence[dict[str, Any]], band_level: float) -> MplFigure:
    """Rank histograms of every SBC quantity as small multiples (one panel for one)."""
    import matplotlib

    nrows, ncols = _panels(len(entries))
    fig, axes = _new(1.0 + 2.2 * nrows, ncols, nrows)
    with matplotlib.rc_context(STYLE):
        for i, entry in enumerate(entries):
            _sbc_panel(axes[i // ncols, i % ncols], entry, ylabel=i % ncols == 0)
        for j in range(len(entries), nrows * ncols):
            axes[j // ncols, j % ncols].set_visible(False)
        handles, labels = axes[0, 0].get_legend_handles_labels()
        labels = [f"{band_level:.0%} {lab}" if lab == "binomial band" else lab
                  for lab in labels]
        fig.legend(handles, labels, loc="outside lower center", ncols=3, frameon=False)
    return fig


def sensitivity_figure(points: pd.DataFrame, label: str) -> MplFigure:
    """Posterior z-score against posterior shrinkage, one panel per look."""
    import matplotlib

    looks = sorted(points["look"].unique())
    nrows, ncols = _panels(len(looks))
    fig, axes = _new(1.0 + 2.4 * nrows, ncols, nrows, sharey=True)
    z_max = float(np.nanmax(np.abs(points["z"].replace([np.inf, -np.inf], np.nan))))
    with matplotlib.rc_context(STYLE):
        for i, look in enumerate(looks):
            ax = axes[i // ncols, i % ncols]
            part = points[points["look"] == look]
            ax.axhspan(-2, 2, color="0.92", zorder=0, linewidth=0)
            ax.axvline(0.1, color="0.4", linestyle=(0, (2, 2)), linewidth=0.8)
            ax.scatter(np.clip(part["shrinkage"], -0.05, 1.0), part["z"], s=3, color="0.15",
                       alpha=0.35, linewidths=0, rasterized=True)
            ax.set_xlim(-0.05, 1.02)
            ax.set_ylim(-max(4.0, min(z_max, 8.0)), max(4.0, min(z_max, 8.0)))
            ax.set_title(f"look {look}")
            ax.set_xlabel("posterior shrinkage")
            if i % ncols == 0:
                ax.set_ylabel(f"posterior z-score ({label})")
        for j in range(len(looks), nrows * ncols):
            axes[j // ncols, j % ncols].set_visible(False)
    return fig


STEMS = 60
"""Discrete distributions with at most this many support points are drawn as stems;
larger counts as a pmf line, and observed effects on an irregular lattice (differences or
ratios of two arms' rates) as their cumulative distribution, which has no aliasing."""


WIDE = 6
"""Prior predictive drawings with at least this many panels get three per row."""


def predictive_figure(distributions: dict[str, list[Any]]) -> MplFigure:
    """Prior predictive pmf or density of each observable, one panel each; the analysis
    prior solid and dark, the design prior dashed and lighter."""
    import textwrap

    import matplotlib

    names: list[str] = []
    for found in distributions.values():
        names += [p.name for p in found if p.drawn and p.name not in names]
    # many observables (time-to-event: several per look) in rows of three
    ncols = 3 if len(names) >= WIDE else min(len(names), 2)
    nrows = -(-len(names) // ncols)
    fig, axes = _new(0.8 + 2.5 * nrows, ncols, nrows)
    with matplotlib.rc_context(STYLE):
        for i, name in enumerate(names):
            ax = axes[i // ncols, i % ncols]
            ylabel = "density"
            for source, found in distributions.items():
                style, grey, legend = SOURCE_STYLE[source]
                for p in found:
                    if p.name != name:
                        continue
                    x, y = p.curve()
                    if p.discrete and x.size <= STEMS:
                        ax.vlines(x, 0, y, color=grey, linestyle=style, label=legend,
                                  linewidth=1.4 if source == "analysis" else 0.9)
                        ylabel = "probability"
                    elif p.discrete and np.all(x == np.round(x)):
                        ax.plot(x, y, color=grey, linestyle=style, linewidth=1.1,
                                drawstyle="steps-mid", label=legend)
                        ylabel = "probability"
                    elif p.discrete:
                        ax.plot(x, np.cumsum(y), color=grey, linestyle=style, linewidth=1.2,
                                drawstyle="steps-post", label=legend)
                        ylabel = "cumulative probability"
                    else:
                        ax.plot(x, y, color=grey, linestyle=style, linewidth=1.2,
                                label=legend)
                    ax.set_xlabel(textwrap.fill(p.label, 48))
            ax.set_ylabel(ylabel)
            ax.set_ylim(bottom=0)
        for j in range(len(names), nrows * ncols):
            axes[j // ncols, j % ncols].set_visible(False)
        handles, labels = axes[0, 0].get_legend_handles_labels()
        fig.legend(handles, labels, loc="outside lower center", ncols=2, frameon=False)
    return fig


def tail_figure(record: dict[str, Any]) -> MplFigure:
    """Monte Carlo SE of each posterior quantile (relative to the posterior sd) against
    the number of draws: observed (markers) and the asymptotic formula (lines)."""
    import matplotlib

    table = pd.DataFrame(record["table"])
    sd = record["posterior_sd"]
    fig, axes = _new(3.2)
    ax = axes[0, 0]
    with matplotlib.rc_context(STYLE):
        for i, (q, part) in enumerate(table.groupby("quantile", sort=True)):
            style, marker, grey = LINES[i % len(LINES)]
            ax.plot(part["draws"], part["mc_se_formula"] / sd, linestyle=style, color=grey,
                    linewidth=1.0)
            ax.plot(part["draws"], part["mc_se_observed"] / sd, linestyle="none",
                    marker=marker, color=grey, markersize=4,
                    label=f"{q:g} quantile (repeated draws)")
        ax.plot([], [], color="0.3", linewidth=1.0,
                label="lines: sqrt(q (1 - q) / L) / f(x_q)")
        ax.axhline(0.01, color="0.5", linestyle=(0, (1, 2)), linewidth=0.8,
                   label="1% of the posterior sd")
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel("posterior draws")
        ax.set_ylabel("Monte Carlo SE / posterior sd")
        ax.legend(loc="center left", bbox_to_anchor=(1.01, 0.5), frameon=False)
    return fig
