"""The planning-document report: a self-contained HTML simulation appendix, its tables as
CSV, Markdown and LaTeX, and an optional PDF printed by headless Chromium.

Gather the inputs with :func:`from_design` or :func:`from_run_folder`, then
:func:`write_report`::

    from octrial.reporting import from_run_folder, write_report
    data = from_run_folder("reports/single-arm-response")
    write_report(data, "reports/single-arm-response/report.html", pdf=True)

Modules: ``data`` (gathering), ``wording`` (the design in words), ``tables`` (the tables),
``figures`` (matplotlib), ``precision`` (precision statement), ``export`` (CSV, Markdown,
LaTeX), ``render`` (jinja2 HTML), ``pdf`` (Chromium), ``build`` (writing it all).
"""

from octrial.reporting.build import Written, tables_folder, write_report
from octrial.reporting.data import ReportData, from_design, from_run_folder
from octrial.reporting.pdf import PrintError, find_chromium, print_pdf
from octrial.reporting.render import render_html

__all__ = ["PrintError", "ReportData", "Written", "find_chromium", "from_design",
           "from_run_folder", "print_pdf", "render_html", "tables_folder", "write_report"]
