"""Write a report: the HTML page, its tables as CSV/Markdown/LaTeX, and optionally a PDF."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

from octrial.output import write_atomic
from octrial.reporting.arms_data import ArmsReportData
from octrial.reporting.arms_figures import build_arms_figures
from octrial.reporting.arms_render import render_arms_html
from octrial.reporting.arms_tables import build_arms_tables
from octrial.reporting.export import export_tables
from octrial.reporting.figures import build_figures
from octrial.reporting.pdf import print_pdf, require_chromium
from octrial.reporting.render import render_html
from octrial.reporting.tables import build_tables


@dataclass(frozen=True)
class Written:
    """The files a report wrote."""

    html: Path
    tables: tuple[Path, ...]
    pdf: Path | None


def tables_folder(html: Path) -> Path:
    """Where the exported tables of the report ``html`` go: ``<stem>-tables/`` beside it."""
    return html.parent / f"{html.stem}-tables"


def write_report(
    data: Any, html: Path, *, pdf: bool = False, paper: str = "a4",
    command: list[str] | None = None,
) -> Written:
    """Render ``data`` to ``html``, export its tables and, with ``pdf``, print it.

    Chromium is looked for before anything is written, so a missing browser leaves no
    half-made report behind.
    """
    html = Path(html)
    chromium = require_chromium() if pdf else None
    if isinstance(data, ArmsReportData):  # several treatment arms: a report of its own
        tables = build_arms_tables(data)
        page = render_arms_html(data, tables, build_arms_figures(data), command=command,
                                paper=paper)
    else:
        tables = build_tables(data)
        page = render_html(data, tables, build_figures(data), command=command, paper=paper)
    write_atomic(html, page)
    exported = export_tables(tables.all(), tables_folder(html))
    printed = print_pdf(html, html.with_suffix(".pdf"), chromium) if pdf else None
    return Written(html, tuple(exported), printed)
