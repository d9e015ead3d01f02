"""The tables of a several-arm report, built from its oc.csv and boundaries.csv.

Same :class:`~octrial.reporting.tables.Table` cells as every report (shown text and the
full-precision value), so the HTML carries each number in ``data-value`` and the tables
are exported as CSV, Markdown and LaTeX.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from types import SimpleNamespace
from typing import Any

import octrial.reporting.wording as wording
from octrial.reporting.arms_wording import arm_rows, look_rows
from octrial.reporting.tables import (
    Cell,
    Column,
    Row,
    Table,
    Tables,
    _classes,
    _row,
    _two_arm_boundaries,
    boundary_tables,
    cell,
    simulated,
)

__all__ = ["build_arms_tables", "truth_columns"]


def truth_columns(data: Any) -> list[Column]:
    """The true value of every arm (control first), grouped under the parameter."""
    design = data.design
    group = f"true {wording.parameter(design.pairs[0])}"
    return [Column(f"true_{a}", a, "truth", group) for a in design.arm_names]


def _rows(data: Any, columns: list[Column]) -> tuple[Row, ...]:
    rows = []
    for _, r in data.oc.iterrows():
        values = [("H0" if bool(r["is_null"]) else "") if c.key == "null" else r[c.key]
                  for c in columns]
        rows.append(_row(values, columns, _classes(data, r)))
    return tuple(rows)


# -- design --------------------------------------------------------------------------------
def design_tables(data: Any) -> list[Table]:
    """Arms with their priors and shares; looks with thresholds and planned sizes."""
    design = data.design
    columns = (Column("arm", "arm"), Column("role", "role"),
               Column("allocation", "allocation weight (share)"),
               Column("prior", "analysis prior"))
    arms = Table("arms", "Arms and analysis priors", columns,
                 tuple(Row(tuple(Cell(r[c.key]) for c in columns)) for r in arm_rows(design)))
    look_columns = [Column("look", "look", "count"),
                    Column("n", f"total {design.family.look_unit}", "count"),
                    *(Column(f"n_{a}", a, "count", "planned per arm")
                      for a in design.arm_names),
                    Column("efficacy", "efficacy: B ≥"), Column("futility", "futility: B <"),
                    Column("futility_predictive", "futility: predictive <"),
                    Column("drop", "drop if Pr(best) <")]
    rows = tuple(_row([r[c.key] for c in look_columns], look_columns)
                 for r in look_rows(design))
    notes = (f"B = {wording.benefit_definition(design.pairs[0])}, for each treatment arm "
             "against the " + ("shared control" if design.shared_control else "benchmark")
             + ".",
             "Planned sizes hold while an arm is in the study; an arm that leaves enrols "
             "nobody afterwards. At the final look the efficacy threshold is the success "
             "threshold.")
    looks = Table("looks", "Looks, thresholds and planned sizes", tuple(look_columns), rows,
                  notes)
    return [arms, looks]


# -- boundaries ----------------------------------------------------------------------------
def arms_boundary_tables(data: Any) -> list[Table]:
    """Each arm's own boundary tables; once for all arms when their rules are the same."""
    frame = data.boundaries
    if frame is None or "arm" not in frame.columns:
        return []
    design = data.design
    parts = {arm: frame[frame["arm"] == arm].drop(columns="arm").reset_index(drop=True)
             for arm in design.treatment_names}
    first = design.treatment_names[0]
    same = all(parts[a].equals(parts[first]) for a in design.treatment_names)
    shown = [first] if same else list(design.treatment_names)
    tables = []
    for arm in shown:
        j = design.treatment_names.index(arm)
        pair = design.pairs[j]
        shim = SimpleNamespace(design=pair, boundaries=parts[arm])
        statistic = pair.family.statistic
        control = f"control_{statistic}"
        if pair.two_arm and control in parts[arm].columns:
            found = _two_arm_boundaries(shim, parts[arm], statistic, control)
        else:
            found = boundary_tables(shim)
        who = "each treatment arm" if same else arm
        for t in found:
            columns = tuple(dataclasses.replace(c, group=c.group.replace("treatment", who))
                            for c in t.columns)
            tables.append(dataclasses.replace(
                t, name=t.name if same else f"{arm}-{t.name}", columns=columns,
                caption=t.caption.replace(" treatment and", " per treatment arm and" if same
                                          else f" {arm} and"),
                notes=t.notes + (("The same bounds hold for every treatment arm.",)
                                 if same else ())))
    return tables


# -- operating characteristics -------------------------------------------------------------
def study_table(data: Any) -> Table:
    """Per scenario: the study's success, family-wise error, selection and sizes."""
    design = data.design
    mc = simulated(data)
    columns = [Column("scenario", "scenario", "count"), *truth_columns(data),
               Column("null", "null"),
               Column("prob_success", "P(any arm succeeds)", "probability")]
    if mc:
        columns.append(Column("prob_success_se", "se", "probability"))
    columns.append(Column("fwer", "FWER", "probability"))
    if mc:
        columns.append(Column("fwer_se", "se", "probability"))
    columns += [Column("prob_select_best", "P(select best)", "probability"),
                Column("selected_bias", "bias of selected", "number"),
                Column("expected_n", "E[N] total", "size")]
    if design.shared_control:
        columns.append(Column("control_expected_n", "E[N] control", "size"))
    columns.append(Column("sd_n", "sd(N)", "size"))
    notes = ["P(any arm succeeds): at least one treatment arm is declared a success. FWER: "
             "at least one null arm is declared a success (the family-wise error rate; "
             "under the global null, marked H0 and shaded, it is the study's type I error). "
             "The largest FWER is in bold.",
             "P(select best): the selected arm (the successful arm with the best posterior "
             "mean at its decision) is truly the best. Bias of selected: mean of its "
             "posterior mean minus its true value, over studies with a selected arm.",
             ]
    if data.oc[[c.key for c in columns if c.kind != "text"]].isna().any().any():
        notes.append("'–': not computed by the engine used (the exact engines give neither "
                     "the selection summaries nor the sd of the total, whose arms are "
                     "correlated).")
    if mc:
        notes.append("se: Monte Carlo standard error.")
    return Table("operating-characteristics", "Operating characteristics of the study per "
                 "scenario", tuple(columns), _rows(data, columns), tuple(notes))


def per_arm_table(data: Any) -> Table:
    """Per scenario and treatment arm: probability of success and expected size."""
    design = data.design
    mc = simulated(data)
    columns = [Column("scenario", "scenario", "count"), *truth_columns(data)]
    for arm in design.treatment_names:
        columns.append(Column(f"{arm}_prob_success", "P(success)", "probability", arm))
        if mc:
            columns.append(Column(f"{arm}_prob_success_se", "se", "probability", arm))
        columns.append(Column(f"{arm}_expected_n", "E[N]", "size", arm))
    t1 = data.type1_per_arm
    notes = ["P(success) of an arm is its type I error where it is null (its true value "
             "does not beat the " + ("control" if design.shared_control else "benchmark")
             + " by the margin) and its power elsewhere."]
    for arm, found in t1.items():
        worst = cell(found["max_type1_error"], "probability").text
        notes.append(f"Largest type I error of arm {arm}: {worst} (scenario "
                     f"{found['scenario']}).")
    return Table("per-arm", "Success and sample size per treatment arm", tuple(columns),
                 _rows(data, columns), tuple(notes))


def arm_looks_table(data: Any, arm: str) -> Table:
    """How treatment arm ``arm`` leaves the study at each look."""
    def of_look(k: int, final: bool, group: str) -> list[Column]:
        leaving = [Column(f"{arm}_look{k}_stop_efficacy", "success" if final else "efficacy",
                          "probability", group),
                   Column(f"{arm}_look{k}_stop_futility", "failure" if final else "futility",
                          "probability", group)]
        dropped = [] if final else [Column(f"{arm}_look{k}_drop", "dropped", "probability",
                                           group)]
        return leaving + dropped

    columns = _by_look(data, of_look)
    note = (f"Probability that arm {arm} leaves the study at each look: by its own rule "
            "(efficacy, futility) or dropped (low Pr(best), or not selected). At the final "
            "analysis it succeeds or fails. Every row sums to 1: the study ends only when "
            "no treatment arm is left.")
    return Table(f"stopping-{arm}", f"Arm {arm}: leaving the study per look",
                 tuple(columns), _rows(data, columns), (note,))


def _by_look(data: Any, of_look: Callable[[int, bool, str], list[Column]]) -> list[Column]:
    """The scenario and true values, then ``of_look(k, final, group)`` for each look k
    from 1, grouped under "look k" (the last under "final analysis")."""
    k_looks = data.design.looks.count
    columns = [Column("scenario", "scenario", "count"), *truth_columns(data)]
    for k in range(1, k_looks + 1):
        final = k == k_looks
        columns += of_look(k, final, "final analysis" if final else f"look {k}")
    return columns


def study_looks_table(data: Any) -> Table:
    """Per scenario and look: the study ends with or without a success."""
    columns = _by_look(data, lambda k, final, group: [
        Column(f"look{k}_stop_efficacy", "with success", "probability", group),
        Column(f"look{k}_stop_futility", "without", "probability", group)])
    note = ("Probability that the study ends at each look (no treatment arm left), with at "
            "least one successful arm or with none; every row sums to 1.")
    return Table("stopping-by-look", "The study's end per look", tuple(columns),
                 _rows(data, columns), (note,))


def build_arms_tables(data: Any) -> Tables:
    """Every table of a several-arm report."""
    oc = [study_table(data), per_arm_table(data), study_looks_table(data),
          *(arm_looks_table(data, arm) for arm in data.design.treatment_names)]
    design = design_tables(data)
    return Tables(design=design[:1], rule=design[1:], boundaries=arms_boundary_tables(data),
                  oc=oc)
