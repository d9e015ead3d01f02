"""The report's tables as CSV, Markdown and LaTeX files, for a statistical analysis plan.

Each file holds the table as the report shows it (same headings, same rounded text);
the full-precision numbers stay in ``oc.csv`` and ``boundaries.csv``. LaTeX tables use
the ``booktabs`` rules (``\\usepackage{booktabs}``) and escape every special character.
"""

from __future__ import annotations

from pathlib import Path

from octrial.output import csv_text, write_atomic
from octrial.reporting.tables import Table

FORMATS = ("csv", "md", "tex")

_LATEX_SPECIALS = {
    "\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
    "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}",
    "≥": r"$\geq$", "≤": r"$\leq$", "−": r"$-$", "–": "--", "<": r"\textless{}",
    ">": r"\textgreater{}", "α": r"$\alpha$",
}


def latex_escape(text: str) -> str:
    """``text`` with LaTeX's special characters escaped.

    Examples
    --------
    >>> latex_escape("P(success) >= 5% & n_1")
    'P(success) \\\\textgreater{}= 5\\\\% \\\\& n\\\\_1'
    """
    return "".join(_LATEX_SPECIALS.get(ch, ch) for ch in text)


def to_csv(table: Table) -> str:
    """The table as CSV text (headings include their group)."""
    return csv_text(table.frame())


def _md_escape(text: str) -> str:
    return text.replace("|", "\\|")


def to_markdown(table: Table) -> str:
    """The table as a GitHub-flavoured Markdown table with its caption and notes."""
    heads = [_md_escape(c.full_heading) for c in table.columns]
    align = ["---:" if c.numeric else ":---" for c in table.columns]
    lines = [f"**{_md_escape(table.caption)}**", "", "| " + " | ".join(heads) + " |",
             "| " + " | ".join(align) + " |"]
    for row in table.rows:
        lines.append("| " + " | ".join(_md_escape(c.text) for c in row.cells) + " |")
    for note in table.notes:
        lines += ["", note]
    return "\n".join(lines).rstrip() + "\n"


def to_latex(table: Table) -> str:
    """The table as a LaTeX ``table`` with a ``tabular`` in booktabs style."""
    spec = "".join("r" if c.numeric else "l" for c in table.columns)
    lines = [r"\begin{table}[htbp]", r"\centering", r"\small",
             rf"\caption{{{latex_escape(table.caption)}}}",
             rf"\label{{tab:{table.name}}}", rf"\begin{{tabular}}{{{spec}}}", r"\toprule"]
    if table.grouped:
        groups: list[str] = []
        rules, start = [], 1
        for heading, span in table.groups:
            if heading:
                groups.append(rf"\multicolumn{{{span}}}{{c}}{{{latex_escape(heading)}}}")
                rules.append(rf"\cmidrule(lr){{{start}-{start + span - 1}}}")
            else:
                groups += [""] * span
            start += span
        lines.append(" & ".join(groups) + r" \\")
        lines.append(" ".join(rules))
    lines.append(" & ".join(latex_escape(c.heading if table.grouped else c.full_heading)
                            for c in table.columns) + r" \\")
    lines.append(r"\midrule")
    for row in table.rows:
        lines.append(" & ".join(latex_escape(c.text) for c in row.cells) + r" \\")
    lines += [r"\bottomrule", r"\end{tabular}"]
    if table.notes:
        lines.append(r"\par\smallskip\footnotesize " + " ".join(latex_escape(n)
                                                               for n in table.notes))
    lines.append(r"\end{table}")
    return "\n".join(lines) + "\n"


WRITERS = {"csv": to_csv, "md": to_markdown, "tex": to_latex}


def export_tables(tables: list[Table], folder: Path) -> list[Path]:
    """Write every table in every format to ``folder``; return the paths written."""
    written = []
    for table in tables:
        for fmt in FORMATS:
            written.append(write_atomic(Path(folder) / f"{table.name}.{fmt}",
                                        WRITERS[fmt](table)))
    return written
