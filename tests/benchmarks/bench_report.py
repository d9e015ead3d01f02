"""Benchmark: how long a report takes and how large its files are, per demo design.

Run:  python tests/benchmarks/bench_report.py

For every design in designs/ it times, in one process: the evaluation itself (what
`octrial run` computes; the reference the report's cost is compared with), reading the
run folder back, building the tables, drawing the figures, rendering the HTML,
exporting the tables, and printing the PDF with headless Chromium (when installed).
It prints the sizes of the HTML, the PDF (with its page count) and the exported tables.
Each step is timed as the best of three runs (Chromium: one run).
"""

from __future__ import annotations

import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from pypdf import PdfReader

from octrial.cli import main
from octrial.evaluation import compute
from octrial.reporting import find_chromium, from_run_folder, print_pdf
from octrial.reporting.export import export_tables
from octrial.reporting.figures import build_figures
from octrial.reporting.render import render_html
from octrial.reporting.tables import build_tables

ROOT = Path(__file__).resolve().parents[2]


def best(step: Callable[[], Any], repeat: int = 3) -> tuple[float, Any]:
    times, result = [], None
    for _ in range(repeat):
        start = time.perf_counter()
        result = step()
        times.append(time.perf_counter() - start)
    return min(times), result


def kib(path: Path) -> str:
    size = sum(p.stat().st_size for p in path.rglob("*")) if path.is_dir() else path.stat(
    ).st_size
    return f"{size / 1024:.0f} KiB"


def main_() -> None:
    chromium = find_chromium()
    print(f"Chromium: {chromium or 'not installed (PDF not timed)'}")
    for design in sorted((ROOT / "designs").glob("*.toml")):
        with tempfile.TemporaryDirectory() as tmp:
            folder = Path(tmp)
            try:
                main(["run", str(design), "--out", str(folder), "--quiet"],
                     standalone_mode=False)
            except Exception as exc:  # a design this version cannot run
                print(f"{design.stem}: skipped ({exc})")
                continue
            t_eval, _ = best(lambda d=design: compute(d))
            t_read, data = best(lambda f=folder: from_run_folder(f))
            t_tables, tables = best(lambda d=data: build_tables(d))
            t_figures, figures = best(lambda d=data: build_figures(d))
            t_html, page = best(lambda d=data, t=tables, f=figures: render_html(d, t, f))
            html = folder / "report.html"
            html.write_text(page, encoding="utf-8")
            t_export, _ = best(lambda t=tables, f=folder: export_tables(t.all(), f / "tables"))
            report = t_read + t_tables + t_figures + t_html + t_export
            print(f"\n{design.stem}: {len(data.oc)} scenarios, {len(tables.all())} tables, "
                  f"{len(figures)} figures")
            print(f"  evaluation (reference)  {t_eval:7.3f} s")
            print(f"  read run folder         {t_read:7.3f} s")
            print(f"  tables                  {t_tables:7.3f} s")
            print(f"  figures                 {t_figures:7.3f} s")
            print(f"  HTML                    {t_html:7.3f} s")
            print(f"  export CSV/MD/TeX       {t_export:7.3f} s")
            print(f"  report without PDF      {report:7.3f} s  "
                  f"({report / t_eval:.1f} x the evaluation)")
            print(f"  report.html             {kib(html)}")
            print(f"  exported tables         {kib(folder / 'tables')}")
            if chromium:
                pdf = folder / "report.pdf"
                t_pdf, _ = best(lambda h=html, p=pdf: print_pdf(h, p, chromium), repeat=1)
                pages = len(PdfReader(pdf).pages)
                print(f"  PDF (Chromium)          {t_pdf:7.3f} s, {kib(pdf)}, {pages} pages")


if __name__ == "__main__":
    sys.exit(main_())
