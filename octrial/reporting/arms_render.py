"""The several-arm report as one self-contained HTML page
(``templates/report/arms_report.html``, with the macros and style of every report)."""

from __future__ import annotations

from typing import Any

import octrial.reporting.precision as precision
from octrial.plurals import count
from octrial.reporting import arms_wording
from octrial.reporting.figures import Figure
from octrial.reporting.formats import probability, truth
from octrial.reporting.render import environment, page_context
from octrial.reporting.tables import Tables
from octrial.reporting.wording import alpha_verdict, largest_error, standard_error

ARMS_SECTIONS = (
    ("design", "Design"),
    ("boundaries", "Decision boundaries of each arm"),
    ("operating-characteristics", "Operating characteristics"),
    ("stopping", "Stopping and dropping per arm and look"),
    ("figures", "Figures"),
    ("precision", "Precision of the numbers"),
    ("reproducibility", "Reproducibility"),
    ("caution", "Caution and assumptions"),
)
"""Section ids and titles of a several-arm report, in reading order."""


def _glance(data: Any) -> dict[str, str]:
    design, oc = data.design, data.oc
    t1 = data.type1
    if t1 is None:
        fwer = "not assessed (no scenario with a null arm)"
    else:
        fwer = largest_error(t1)
    reps = oc.loc[oc["replicates"] > 0, "replicates"]
    method = "exact" if reps.empty else f"Monte Carlo, {int(reps.min()):,} replicates"
    arms = ", ".join(design.treatment_names)
    control = " against a shared control" if design.shared_control else (
        f" against the benchmark {truth(design.hypothesis.benchmark)}")
    return {"fwer": fwer, "arms": f"{len(design.treatments)} ({arms}){control}",
            "looks": f"{design.looks.count} (total n = "
                     f"{', '.join(str(n) for n in design.looks.n)})",
            "scenarios": str(len(oc)), "method": method}


def fwer_sentence(data: Any) -> str:
    """The largest family-wise error rate, where it is reached, and against alpha."""
    t1 = data.type1
    if t1 is None:
        return ("No scenario of the grid has a null arm, so the family-wise error rate is "
                "not assessed by this report.")
    at = ", ".join(f"{arm} = {truth(v)}" for arm, v in t1["at"].items())
    return (f"Largest family-wise error rate over the {count(t1['null_scenarios'], 'scenario')}"
            f" with a null arm: {probability(t1['max_type1_error'])}{standard_error(t1)}, at "
            f"scenario {t1['scenario']} ({at}).{alpha_verdict(t1, data.alpha)}")


def _design(data: Any) -> dict[str, Any]:
    design = data.design
    pair = design.pairs[0]
    from octrial.reporting import wording

    null, alternative = wording.hypotheses(pair)
    return {
        "endpoint": f"{design.family.name}; parameter: {wording.parameter(pair)} "
                    f"({wording.unit(pair)}); {design.hypothesis.better} is better",
        "arms": _glance(data)["arms"],
        "null": null, "alternative": alternative,
        "benefit": wording.benefit_definition(pair),
        "allocation": arms_wording.allocation_sentence(design),
        "selection": arms_wording.selection_sentence(design),
        "sample_size": f"at most {design.looks.n[-1]} {design.family.look_unit} in total "
                       "(fewer when arms leave early)",
        "rules": arms_wording.conduct_sentences(design),
        "shared": design.shared_control,
    }


def render_arms_html(data: Any, tables: Tables, figures: list[Figure],
                     command: list[str] | None = None, paper: str = "a4") -> str:
    """The several-arm report page for ``data`` (an
    :class:`~octrial.reporting.arms_data.ArmsReportData`) as HTML text."""
    stopping = [t for t in tables.oc if t.name.startswith("stopping")]
    context = {
        **page_context(data, ARMS_SECTIONS, command, paper),
        "glance": _glance(data),
        "design": _design(data),
        "tables": tables,
        "oc_tables": [t for t in tables.oc if t not in stopping],
        "stopping_tables": stopping,
        "figures": figures,
        "fwer": fwer_sentence(data),
        # the study's type I error here is its largest family-wise error rate
        "precision": [p.replace("The maximum type I error", "The largest family-wise error "
                                "rate") for p in precision.statement(data)],
        "assumptions": arms_wording.assumptions(data),
    }
    return environment().get_template("arms_report.html").render(context)
