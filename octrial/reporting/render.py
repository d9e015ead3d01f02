"""The report as one self-contained HTML page, rendered from the package's templates.

The templates live in ``octrial/templates/report/``: ``report.html`` (the page),
``macros.html`` (tables) and ``report.css`` (inlined into the page). Figures are SVG data
URIs, so the page needs no other file and no network access.
"""

from __future__ import annotations

import re
import shlex
import sys
from dataclasses import dataclass
from typing import Any

from jinja2 import Environment, PackageLoader, StrictUndefined, select_autoescape
from markupsafe import Markup, escape

import octrial.reporting.precision as precision
import octrial.reporting.wording as wording
from octrial._version import __version__
from octrial.caution import CAUTION
from octrial.provenance import display_command, now
from octrial.reporting.figures import Figure, build_figures
from octrial.reporting.formats import probability, truth
from octrial.reporting.tables import Tables, build_tables

PAPERS = {"a4": "A4", "letter": "letter"}
"""Paper sizes for printing, by option value."""
CHECK_FIGURES = "checks-"
"""Figures whose name starts with this are shown in the workflow-checks section."""
CALIBRATION_FIGURES = ("sawtooth",)
"""Figures shown in the calibration section."""


@dataclass(frozen=True)
class Section:
    """A numbered section of the report."""

    id: str
    title: str
    number: int


SECTIONS = (
    ("design", "Design"),
    ("boundaries", "Decision boundaries"),
    ("operating-characteristics", "Operating characteristics"),
    ("bayesian", "Operating characteristics under the design prior"),
    ("figures", "Figures"),
    ("calibration", "Calibration"),
    ("checks", "Workflow checks"),
    ("precision", "Precision of the numbers"),
    ("reproducibility", "Reproducibility"),
    ("caution", "Caution and assumptions"),
)
"""Section ids and titles, in the order a reviewer reads a simulation appendix."""

_ARM_SUFFIX = re.compile(r"\b([A-Za-z]+)_([TC])\b")


def subscripts(text: str) -> Markup:
    """Escape ``text`` and write ``rate_T`` as rate with a subscript T."""
    return Markup(_ARM_SUFFIX.sub(r"\1<sub>\2</sub>", str(escape(text))))


def exact(value: float) -> str:
    """A float written so that it reads back bit for bit."""
    return repr(float(value))


def environment() -> Environment:
    """The jinja2 environment over the package's report templates."""
    env = Environment(loader=PackageLoader("octrial", "templates/report"),
                      autoescape=select_autoescape(("html",)), undefined=StrictUndefined,
                      trim_blocks=False, lstrip_blocks=False, keep_trailing_newline=True)
    env.filters["subscripts"] = subscripts
    env.filters["exact"] = exact
    return env


def _made(command: list[str] | None) -> dict[str, str]:
    return {"version": __version__, "date": now(),
            "command": shlex.join(display_command(command if command is not None
                                                  else sys.argv))}


def _glance(data: Any) -> dict[str, str]:
    design, oc = data.design, data.oc
    t1 = data.type1
    if t1 is None:
        type1 = "not assessed (no null scenario)"
    else:
        type1 = wording.largest_error(t1)
    low, high = wording.sample_size_range(design, data.boundaries)
    reps = oc.loc[oc["replicates"] > 0, "replicates"]
    if reps.empty:
        method = "exact"
    else:
        share = "" if len(reps) == len(oc) else f" ({len(reps)} of {len(oc)} scenarios)"
        method = f"Monte Carlo, {int(reps.min()):,} replicates{share}"
    claim = data.record.get("prior_probability_of_claim")
    dropped = data.record.get("scenarios_dropped") or 0
    unit = design.family.look_unit
    return {
        "type1": type1,
        "sample_size": (f"{low} to {high} {unit}" if low != high else f"{high} {unit}"),
        "looks": f"{design.looks.count} (n = {', '.join(str(n) for n in design.looks.n)})",
        "scenarios": f"{len(oc)}" + (f" ({dropped} left out)" if dropped else ""),
        "method": method,
        "prior_claim": "–" if claim is None else probability(claim),
    }


def _design(data: Any) -> dict[str, Any]:
    design = data.design
    null, alternative = wording.hypotheses(design)
    low, high = wording.sample_size_range(design, data.boundaries)
    claim = data.record.get("prior_probability_of_claim")
    if design.two_arm:
        ratio = ":".join(f"{a.allocation:g}" for a in design.arms)
        arms = f"treatment and control, randomised {ratio}"
    else:
        arms = f"treatment only, against the benchmark {truth(design.hypothesis.benchmark)}"
    dropped = data.record.get("scenarios_dropped") or 0
    scenarios = f"{len(data.oc)} true-value combinations (tables in section 3)"
    if dropped:
        scenarios += f"; {dropped} grid points outside the parameter's range were left out"
    return {
        "endpoint": f"{design.family.name}; parameter: {wording.parameter(design)} "
                    f"({wording.unit(design)}); {design.hypothesis.better} is better",
        "arms": arms,
        "null": null,
        "alternative": alternative,
        "claim": wording.claim(design),
        "benefit": wording.benefit_definition(design),
        "prior_claim": "not available (no analysis prior)" if claim is None else
        f"{probability(claim)} (Pr(H1) under the analysis priors alone)",
        "sample_size": f"minimum {low}, maximum {high} {design.family.look_unit} "
                       "(total over arms)",
        "borrowing": wording.borrowing(design),
        "effect_prior": wording.effect_prior(design),
        "scenarios": scenarios,
        "rules": wording.rule_sentences(design),
    }


def _run(data: Any) -> dict[str, str]:
    record = data.record
    env = record.get("environment") or {}
    libraries = env.get("libraries") or {}
    command = record.get("command")
    seed = record.get("seed")
    return {
        "octrial_version": str(record.get("octrial_version", "not recorded")),
        "design_path": (record.get("design") or {}).get("path") or data.design.source.path,
        "sha256": data.design.source.sha256 or "not recorded",
        "seed": "none set" if seed is None else str(seed),
        "engine": str(record.get("engine", "not recorded")),
        "started": str(record.get("started", "?")),
        "finished": str(record.get("finished", "?")),
        "command": shlex.join(command) if isinstance(command, list) else str(command),
        "python": str(env.get("python", "not recorded")),
        "libraries": ", ".join(f"{k} {v}" for k, v in libraries.items()) or "not recorded",
        "platform": f"{env.get('platform', 'not recorded')} ({env.get('machine', '?')})",
        "design_text": data.design.source.text,
    }


def page_context(data: Any, sections: tuple[tuple[str, str], ...],
                 command: list[str] | None, paper: str) -> dict[str, Any]:
    """What every report page shows besides its sections' contents: title, origin,
    paper, how it was made, the numbered sections, the run's reproducibility facts and
    the caution."""
    numbered = [Section(id_, title, i + 1) for i, (id_, title) in enumerate(sections)]
    return {
        "title": data.design.title or data.design.name,
        "name": data.design.name,
        "origin": data.origin,
        "paper": PAPERS[paper],
        "made": _made(command),
        "sections": numbered,
        "sections_by_id": {s.id: s for s in numbered},
        "run": _run(data),
        "caution": CAUTION,
    }


def render_html(
    data: Any, tables: Tables | None = None, figures: list[Figure] | None = None,
    command: list[str] | None = None, paper: str = "a4",
) -> str:
    """The report page for ``data`` as HTML text.

    Parameters
    ----------
    data : ReportData
    tables, figures : optional
        Built from ``data`` when not given.
    command : list of str, optional
        The report's own command line (default ``sys.argv``).
    paper : {'a4', 'letter'}
        Page size when printed.
    """
    tables = build_tables(data) if tables is None else tables
    figures = build_figures(data) if figures is None else figures
    context = {
        **page_context(data, SECTIONS, command, paper),
        "glance": _glance(data),
        "design": _design(data),
        "tables": tables,
        "figures": figures,
        "main_figures": [f for f in figures if not f.name.startswith(CHECK_FIGURES)
                         and f.name not in CALIBRATION_FIGURES],
        "calibration_figures": [f for f in figures if f.name in CALIBRATION_FIGURES],
        "check_figures": [f for f in figures if f.name.startswith(CHECK_FIGURES)],
        "type1": wording.type1_sentence(data),
        "precision": precision.statement(data),
        "assumptions": wording.assumptions(data),
    }
    return environment().get_template("report.html").render(context)
