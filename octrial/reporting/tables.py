"""The report's tables, built once and shown in HTML or exported (CSV, Markdown, LaTeX).

A :class:`Table` holds every cell as the text the reader sees and the number behind it,
so the HTML can carry the full-precision value beside the rounded text and tests can
check one against ``oc.csv``. Tables of files whose columns the report does not know
(``calibration.csv``, ``checks.json``, extra ``oc.csv`` columns such as bias and coverage)
are shown as they are, with generic number formatting.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

import octrial.reporting.wording as wording
from octrial.reporting.formats import FORMATS, number
from octrial.rules.boundaries import BEYOND, beyond_note

NUMERIC_KINDS = ("probability", "size", "count", "truth", "fraction", "number")


@dataclass(frozen=True)
class Column:
    """One column: its key, heading, kind of value and optional group heading."""

    key: str
    heading: str
    kind: str = "text"
    group: str = ""

    @property
    def numeric(self) -> bool:
        """Whether cells hold numbers (right-aligned, with a value behind the text)."""
        return self.kind in NUMERIC_KINDS

    @property
    def full_heading(self) -> str:
        """The heading with its group, for flat (exported) tables."""
        return f"{self.group}: {self.heading}" if self.group else self.heading


@dataclass(frozen=True)
class Cell:
    """What the reader sees (``text``) and the number behind it (``value``)."""

    text: str
    value: float | None = None


@dataclass(frozen=True)
class Row:
    """A row of cells, with classes such as 'null' and 'worst' for the HTML."""

    cells: tuple[Cell, ...]
    classes: tuple[str, ...] = ()


@dataclass(frozen=True)
class Table:
    """A table of the report.

    Attributes
    ----------
    name : str
        File stem of the exports and HTML id.
    caption : str
    columns : tuple of Column
    rows : tuple of Row
    notes : tuple of str
        Sentences shown under the table.
    blocks : int
        The HTML shows the rows in this many side-by-side blocks (long narrow tables).
    """

    name: str
    caption: str
    columns: tuple[Column, ...]
    rows: tuple[Row, ...]
    notes: tuple[str, ...] = ()
    blocks: int = 1

    @property
    def groups(self) -> list[tuple[str, int]]:
        """Runs of equal group headings: (heading, span), for a two-level header."""
        runs: list[tuple[str, int]] = []
        for column in self.columns:
            if runs and runs[-1][0] == column.group:
                runs[-1] = (column.group, runs[-1][1] + 1)
            else:
                runs.append((column.group, 1))
        return runs

    @property
    def grouped(self) -> bool:
        """Whether any column has a group heading."""
        return any(c.group for c in self.columns)

    def block_rows(self) -> list[tuple[Row, ...]]:
        """The rows split into :attr:`blocks` nearly equal runs."""
        size = -(-len(self.rows) // self.blocks) if self.rows else 0
        return [self.rows[i:i + size] for i in range(0, len(self.rows), size or 1)] or [()]

    def frame(self) -> pd.DataFrame:
        """The displayed text as a DataFrame (flat headings)."""
        return pd.DataFrame([[c.text for c in r.cells] for r in self.rows],
                            columns=[c.full_heading for c in self.columns])


def cell(value: Any, kind: str) -> Cell:
    """A cell for ``value`` formatted by ``kind``."""
    if kind == "text":
        return Cell("" if value is None else str(value))
    if value is None or (isinstance(value, float) and np.isnan(value)) or value is pd.NA:
        return Cell(FORMATS[kind](None))
    if isinstance(value, (bool, np.bool_)):
        return Cell(number(bool(value)))
    if isinstance(value, (int, np.integer)) and kind == "number":
        return Cell(str(int(value)), float(value))
    v = float(value)
    return Cell(FORMATS[kind](v), v)


def _row(values: Sequence[Any], columns: Sequence[Column], classes: Iterable[str] = ()) -> Row:
    return Row(tuple(cell(v, c.kind) for v, c in zip(values, columns, strict=True)),
               tuple(classes))


# -- design ------------------------------------------------------------------------------
def arms_table(data: Any) -> Table:
    """Arms, allocation, analysis priors with effective sample size, design priors."""
    design = data.design
    columns = (Column("arm", "arm"), Column("allocation", "allocation (share)"),
               Column("prior", "analysis prior"), Column("ess", "effective sample size",
                                                        "text"),
               Column("design_prior", "design prior"))
    rows = tuple(Row(tuple(Cell(r[c.key]) for c in columns))
                 for r in wording.arm_rows(design))
    return Table("arms", "Arms and priors", columns, rows, (wording.ess_note(design),))


def looks_table(data: Any) -> Table:
    """The looks and the thresholds at each."""
    design = data.design
    per_arm = " / ".join(design.arm_names) if design.two_arm else "treatment"
    if design.looks.uses_counts:
        heads = ("efficacy (counts)", "futility (counts)", "")
    else:
        heads = ("efficacy: B ≥", "futility: B <", "futility: predictive <")
    columns = [Column("look", "look", "count"), Column("kind", "analysis"),
               Column("n", f"total {design.family.look_unit}", "count"),
               Column("per_arm", f"{design.family.look_unit} per arm ({per_arm})"),
               Column("information", "information fraction", "fraction"),
               Column("efficacy", heads[0]), Column("futility", heads[1])]
    rules = wording.look_rules(design)
    if not design.looks.uses_counts and any(r["futility_predictive"] != "–" for r in rules):
        columns.append(Column("futility_predictive", heads[2]))
    rows = tuple(_row([r[c.key] for c in columns], columns) for r in rules)
    notes = (f"B = {wording.benefit_definition(design)}.",
             "At the final look the efficacy threshold is the success threshold.")
    return Table("looks", "Looks and decision thresholds", tuple(columns), rows, notes)


# -- boundaries --------------------------------------------------------------------------
RULE_SYMBOLS = {">=": "≥", "<=": "≤"}


def _rule(text: Any) -> str:
    if not isinstance(text, str):
        return "–"
    for ascii_op, symbol in RULE_SYMBOLS.items():
        text = text.replace(ascii_op, symbol)
    return text


def boundary_tables(data: Any) -> list[Table]:
    """The decision boundaries as a monitoring committee applies them."""
    frame = data.boundaries
    if frame is None:
        return []
    design = data.design
    statistic = design.family.statistic
    one_arm = {"look", "n", "efficacy_rule", "futility_rule"}
    control = f"control_{statistic}"
    two_arm = {"look", "n_treatment", "n_control", control, "efficacy_rule", "futility_rule"}
    if not design.two_arm and one_arm <= set(frame.columns):
        return [_one_arm_boundaries(data, frame, statistic)]
    if design.two_arm and two_arm <= set(frame.columns):
        return _two_arm_boundaries(data, frame, statistic, control)
    return [_generic_boundaries(frame)]


def _generic_boundaries(frame: pd.DataFrame) -> Table:
    """Boundaries of a shape the report does not know (for example sample means and z
    values): every column as written, rules with their symbols, and columns that hold one
    text for every look stated once under the table."""
    constant = [c for c in frame.columns if not pd.api.types.is_numeric_dtype(frame[c])
                and frame[c].nunique(dropna=False) == 1 and len(frame) > 1]
    shown = frame.drop(columns=constant)
    for column in shown.columns:
        if column.endswith("_rule"):
            shown[column] = shown[column].map(_rule)
    notes = [f"{c.replace('_', ' ')}: {frame[c].iloc[0]}" for c in constant]
    return frame_table("boundaries", "Decision boundaries per look", shown, notes)


def _one_arm_boundaries(data: Any, frame: pd.DataFrame, statistic: str) -> Table:
    last = int(frame["look"].max())
    columns = [Column("look", "look", "count"), Column("n", "n", "count")]
    if "sample_sd" in frame:  # an unknown sd: the bounds hold at this sample sd
        columns.append(Column("sample_sd", "sample sd", "truth"))
    columns += [Column("efficacy_rule", f"efficacy: {statistic}"),
               Column("posterior_at_efficacy_bound", "B at efficacy bound", "probability"),
               Column("futility_rule", f"futility: {statistic}"),
               Column("posterior_at_futility_bound", "B at futility bound", "probability")]
    if "predictive_at_futility_bound" in frame and frame[
            "predictive_at_futility_bound"].notna().any():
        columns.append(Column("predictive_at_futility_bound",
                              "predictive probability at futility bound", "probability"))
    rows = []
    for _, r in frame.iterrows():
        values = [_rule(r[c.key]) if c.key.endswith("_rule") else r[c.key] for c in columns]
        rows.append(_row(values, columns, ("final",) if int(r["look"]) == last else ()))
    if not data.design.family.lattice:  # bounds on the sample mean
        notes: tuple[str, ...] = (
            "Stop for efficacy when the sample mean meets the efficacy rule; stop for "
            "futility when it meets the futility rule ('never': no sample mean does). At "
            "the final look the efficacy rule is success and the futility rule is failure.",
            f"B = {wording.benefit_definition(data.design)} at the bound.")
        if "sample_sd" in frame:
            notes += ("With an unknown sd the decision depends on the sample mean and sd "
                      "together: the bounds hold at the sample sd of the row (octrial "
                      "decide gives the decision at any other).",)
    else:
        notes = (f"Stop for efficacy when the {statistic} reach the efficacy rule; stop for "
                 "futility when they meet the futility rule ('never': no count does). At "
                 "the final look the efficacy rule is success and the futility rule is "
                 "failure.",
                 f"B = {wording.benefit_definition(data.design)} at the boundary count.")
    notes += _beyond_notes(data.design, frame)
    return Table("boundaries", f"Decision boundaries in {statistic} per look", tuple(columns),
                 tuple(rows), notes)


def _two_arm_boundaries(data: Any, frame: pd.DataFrame, statistic: str,
                        control: str) -> list[Table]:
    tables = []
    last = int(frame["look"].max())
    for look, part in frame.groupby("look", sort=True):
        final = int(look) == last
        group = f"treatment {statistic}"
        columns = (Column(control, f"control {statistic}", "count"),
                   Column("efficacy_rule", "success" if final else "efficacy", group=group),
                   Column("futility_rule", "failure" if final else "futility", group=group))
        rows = tuple(_row([r[control], _rule(r["efficacy_rule"]), _rule(r["futility_rule"])],
                          columns) for _, r in part.iterrows())
        n_t, n_c = int(part["n_treatment"].iloc[0]), int(part["n_control"].iloc[0])
        caption = (f"Look {int(look)}{' (final analysis)' if final else ''}: "
                   f"{n_t} treatment and {n_c} control subjects")
        tables.append(Table(f"boundaries-look{int(look)}", caption, columns, rows,
                            _beyond_notes(data.design, part),
                            blocks=max(1, min(3, -(-len(rows) // 15)))))
    return tables


def _beyond_notes(design: Any, frame: pd.DataFrame) -> tuple[str, ...]:
    """Why some bound of ``frame`` lies beyond the computed range (none: no such bound)."""
    rules = pd.concat([frame[c].astype(str) for c in ("efficacy_rule", "futility_rule")
                       if c in frame])
    if not rules.str.contains(BEYOND, regex=False).any():
        return ()
    return (beyond_note(design),)


# -- operating characteristics -----------------------------------------------------------
KNOWN_OC = re.compile(r"scenario|true_.+|drift_.+|is_null|"
                      r"prob_(success|stop_efficacy|stop_futility)(_se)?|expected_n(_se)?|sd_n|"
                      r"look\d+_stop_(efficacy|futility)(_se)?|method|replicates|"
                      r"zero_estimate_bound")


def truth_columns(data: Any) -> list[Column]:
    """The columns that say where a scenario is: true values (control first, then
    treatment, then effect measures) and, for borrowing designs, the drift of each arm's
    truth from the historical estimate."""
    design = data.design
    names = [f"true_{arm}" for arm in design.arm_names]
    if design.two_arm:
        names = names[::-1]
    names += [c for c in data.oc.columns if c.startswith("true_") and c not in names]
    group = f"true {wording.parameter(data.design)}"
    columns = [Column(c, "difference" if c == "true_effect" else
                      c.removeprefix("true_").replace("_", " "), "truth", group)
               for c in names]
    columns += [Column(c, c.removeprefix("drift_"), "truth", "drift from historical")
                for c in data.oc.columns if c.startswith("drift_")]
    return columns


def simulated(data: Any) -> bool:
    """Whether any scenario was simulated (standard errors are then shown)."""
    return bool((data.oc["replicates"] > 0).any())


def _classes(data: Any, r: pd.Series) -> tuple[str, ...]:
    classes: tuple[str, ...] = ("null",) if bool(r["is_null"]) else ()
    t1 = data.type1
    if t1 is not None and int(r["scenario"]) == int(t1["scenario"]):
        classes += ("worst",)
    return classes


def oc_main_table(data: Any) -> Table:
    """Per scenario: power or type I error, early stopping, sample size."""
    mc = simulated(data)
    columns = [Column("scenario", "scenario", "count"), *truth_columns(data),
               Column("null", "null")]
    columns.append(Column("prob_success", "P(success)", "probability"))
    if mc:
        columns.append(Column("prob_success_se", "se", "probability"))
    columns += [Column("prob_stop_efficacy", "P(early efficacy)", "probability"),
                Column("prob_stop_futility", "P(early futility)", "probability"),
                Column("expected_n", "E[N]", "size")]
    if mc:
        columns.append(Column("expected_n_se", "se", "size"))
    columns.append(Column("sd_n", "sd(N)", "size"))
    rows = []
    for _, r in data.oc.iterrows():
        values = [("H0" if bool(r["is_null"]) else "") if c.key == "null" else r[c.key]
                  for c in columns]
        rows.append(_row(values, columns, _classes(data, r)))
    notes = ["P(success) is the probability of declaring success at any look: the type I "
             "error at null scenarios (marked H0, shaded), the power elsewhere. The largest "
             "type I error is in bold.",
             "Early efficacy and futility count interim looks only; E[N] and sd(N) are the "
             "mean and standard deviation of the total sample size."]
    if mc:
        notes.append("se: Monte Carlo standard error.")
    return Table("operating-characteristics", "Operating characteristics per scenario",
                 tuple(columns), tuple(rows), tuple(notes))


def oc_looks_table(data: Any) -> Table:
    """Per scenario and look: probability of stopping for efficacy and for futility."""
    design = data.design
    k_looks = design.looks.count
    columns = [Column("scenario", "scenario", "count"), *truth_columns(data)]
    for k in range(k_looks):
        final = k == k_looks - 1
        group = (f"final (n = {design.looks.n[k]})" if final
                 else f"look {k + 1} (n = {design.looks.n[k]})")
        columns += [Column(f"look{k + 1}_stop_efficacy", "success" if final else "efficacy",
                           "probability", group),
                    Column(f"look{k + 1}_stop_futility", "failure" if final else "futility",
                           "probability", group)]
    rows = tuple(_row([r[c.key] for c in columns], columns, _classes(data, r))
                 for _, r in data.oc.iterrows())
    note = ("Probability that the study ends at each look for each reason; every row sums "
            "to 1. At the final analysis the study succeeds or fails.")
    return Table("stopping-by-look", "Stopping probabilities per look", tuple(columns), rows,
                 (note,))


def oc_extra_table(data: Any) -> Table | None:
    """Further per-scenario columns of ``oc.csv`` (bias, coverage, ...), when present."""
    extra = [c for c in data.oc.columns if not KNOWN_OC.fullmatch(c)]
    if not extra:
        return None
    columns = [Column("scenario", "scenario", "count"), *truth_columns(data),
               *(Column(c, c.replace("_", " "), "number") for c in extra)]
    rows = tuple(_row([r[c.key] for c in columns], columns, _classes(data, r))
                 for _, r in data.oc.iterrows())
    return Table("simulation-summaries", "Further results per scenario (as written in oc.csv)",
                 tuple(columns), rows)


# -- files the report shows as they are --------------------------------------------------
CHOSEN = ("chosen", "selected", "is_chosen")
MAX_SHOWN_ROWS = 60


def frame_table(name: str, caption: str, frame: pd.DataFrame,
                notes: Sequence[str] = ()) -> Table:
    """Any table, with generic formatting (numbers right-aligned)."""
    columns = tuple(Column(str(c), str(c).replace("_", " "),
                           "number" if pd.api.types.is_numeric_dtype(frame[c])
                           or pd.api.types.is_bool_dtype(frame[c]) else "text")
                    for c in frame.columns)
    rows = tuple(_row([None if _is_missing(v) else v for v in r], columns)
                 for r in frame.itertuples(index=False))
    return Table(name, caption, columns, rows, tuple(notes))


def _is_missing(value: Any) -> bool:
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def _truthy(column: pd.Series) -> pd.Series:
    return column.astype(str).str.lower().isin(("true", "1", "yes"))


def _marked_rows(frame: pd.DataFrame, source: str, what: str) -> tuple[pd.DataFrame,
                                                                    list[str]]:
    """All rows when few, else those marked chosen (or smallest passing, stable from)."""
    if len(frame) <= MAX_SHOWN_ROWS:
        return frame, []
    marks = [c for c in (*CHOSEN, "smallest_passing", "stable_from") if c in frame.columns]
    if marks:
        keep = np.zeros(len(frame), dtype=bool)
        for column in marks:
            keep |= _truthy(frame[column]).to_numpy()
        shown = frame[keep]
        note = (f"Shown: the {len(shown)} marked ({', '.join(marks)}) of {len(frame)} "
                f"{what}.")
    else:
        shown = frame.head(MAX_SHOWN_ROWS)
        note = f"Shown: the first {MAX_SHOWN_ROWS} of {len(frame)} {what}."
    return shown, [note, f"Every row is in {source}."]


def calibration_tables(data: Any) -> list[Table]:
    """The calibration section's tables (:mod:`~octrial.reporting.calibration_section`,
    which builds on this module)."""
    from octrial.reporting.calibration_section import calibration_tables as build

    return build(data)


def _pairs_table(name: str, caption: str, pairs: list[tuple[str, Any]]) -> Table:
    columns = (Column("item", "item"), Column("value", "value", "number"))
    rows = tuple(Row((Cell(str(k)), _any_cell(v))) for k, v in pairs)
    return Table(name, caption, columns, rows)


def prior_size_table(data: Any) -> Table | None:
    """The priors' effective sample sizes as run.json records them, when it does."""
    sizes = data.record.get("prior_effective_sample_size")
    if not isinstance(sizes, dict) or not sizes:
        return None
    columns = (Column("for", "for"), Column("prior", "prior"),
               Column("simple", "simple ESS", "number"), Column("formula", "formula"),
               Column("fda", "ESS, n V1 / V2 - n", "number"), Column("n", "at n", "number"),
               Column("borrowing", "borrowing"))
    rows = []
    for label, entry in sizes.items():
        entry = entry if isinstance(entry, dict) else {"prior": entry}
        fda = entry.get("fda") or {}
        rows.append(_row([label, entry.get("prior", ""), entry.get("simple"),
                          entry.get("simple_formula") or "", fda.get("ess"), fda.get("n"),
                          _borrowing_text(entry.get("borrowing"))], columns))
    notes = ("Simple ESS: the prior's own count of subjects (formula shown). n V1 / V2 - n: "
             "the FDA (2010) device guidance definition, with V1 the posterior variance "
             "under a non-informative prior and V2 under this prior, for data at the prior "
             "mean; it counts the subjects the prior adds to n.",)
    return Table("prior-sample-size", "Effective sample size of the analysis priors",
                 columns, tuple(rows), notes)


def _borrowing_text(borrowing: Any) -> str:
    if not isinstance(borrowing, dict):
        return "none"
    parts = [str(borrowing.get("method", "borrowing"))]
    for key, label in (("a0", "a0"), ("vague_weight", "vague weight"),
                       ("historical_estimate", "historical estimate"),
                       ("historical_size", "historical size")):
        if borrowing.get(key) is not None:
            parts.append(f"{label} {number(borrowing[key])}")
    return ", ".join(parts)


def checks_tables(data: Any) -> list[Table]:
    """``checks.json`` as tables: tailored tables for files written by ``octrial check``
    (:mod:`~octrial.reporting.check_tables`); for others, lists of records as tables and
    everything else as key/value."""
    checks = data.checks
    if checks is None:
        return []
    from octrial.reporting.check_tables import is_ours, workflow_tables

    if is_ours(checks):
        return workflow_tables(checks)
    tables, pairs = [], []
    for key, value in checks.items():
        if isinstance(value, list) and value and all(isinstance(v, dict) for v in value):
            frame = pd.DataFrame([_flatten(v) for v in value])
            tables.append(frame_table(f"checks-{_slug(key)}", key.replace("_", " "), frame))
        else:
            pairs += list(_flatten({key: value}).items())
    if pairs:
        tables.insert(0, _pairs_table("checks-summary", "Workflow checks: results", pairs))
    return tables


def _any_cell(value: Any) -> Cell:
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return cell(value, "number")
    return Cell(number(value))


def _flatten(record: dict[str, Any], prefix: str = "") -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, value in record.items():
        name = f"{prefix}.{key}" if prefix else str(key)
        if isinstance(value, dict):
            out.update(_flatten(value, name))
        elif isinstance(value, list):
            text = ", ".join(number(v) for v in value[:20])
            out[name] = text + (f", ... ({len(value)} values)" if len(value) > 20 else "")
        else:
            out[name] = value
    return out


def _slug(text: str) -> str:
    return re.sub(r"[^a-z0-9]+", "-", str(text).lower()).strip("-") or "table"


@dataclass
class Tables:
    """Every table of one report, by section."""

    design: list[Table] = field(default_factory=list)
    rule: list[Table] = field(default_factory=list)
    boundaries: list[Table] = field(default_factory=list)
    oc: list[Table] = field(default_factory=list)
    calibration: list[Table] = field(default_factory=list)
    checks: list[Table] = field(default_factory=list)
    bayesian: list[Table] = field(default_factory=list)

    def all(self) -> list[Table]:
        """All tables in report order."""
        return [*self.design, *self.rule, *self.boundaries, *self.oc, *self.bayesian,
                *self.calibration, *self.checks]


def build_tables(data: Any) -> Tables:
    """Every table of the report for ``data``."""
    oc = [oc_main_table(data), oc_looks_table(data)]
    extra = oc_extra_table(data)
    if extra is not None:
        oc.append(extra)
    design = [arms_table(data)]
    sizes = prior_size_table(data)
    if sizes is not None:
        design.append(sizes)
    return Tables(design=design, rule=[looks_table(data)], boundaries=boundary_tables(data),
                  oc=oc,
                  calibration=calibration_tables(data), checks=checks_tables(data),
                  bayesian=[t for t in [bayesian_oc_table(data),
                                        design_prior_sensitivity_table(data)]
                            if t is not None])


# -- Bayesian operating characteristics ------------------------------------------------------
BAYESIAN_WORDS = (
    ("prob_success", "Probability of success (assurance)",
     "How often the study succeeds when its true value is drawn from the design prior."),
    ("prior_prob_null", "Prior probability of the null",
     "How much of the design prior lies in the null region, before any data."),
    ("average_type1_error", "Average type I error",
     "How often the study succeeds when the treatment does not work, averaged over the "
     "null part of the design prior."),
    ("bayesian_power", "Bayesian power",
     "How often the study succeeds when the treatment works, averaged over the "
     "alternative (or clinically relevant) part of the design prior."),
    ("prob_null_and_success", "Pr(null and success)",
     "How often the study both succeeds and the treatment does not work."),
    ("prob_alternative_and_failure", "Pr(alternative and no success)",
     "How often the study fails although the treatment works."),
    ("prob_null_given_success", "Pr(null | success)",
     "Of the studies that succeed, the share whose claim is false: how often a success "
     "is wrong."),
    ("prob_alternative_given_failure", "Pr(alternative | no success)",
     "Of the studies that do not succeed, the share whose treatment works: how often a "
     "failure is wrong."),
)


def bayesian_oc_table(data: Any) -> Table | None:
    """run.json's ``bayesian_operating_characteristics``, one row per metric with its
    standard error or numerical error and a plain explanation."""
    rec = data.record.get("bayesian_operating_characteristics")
    if not isinstance(rec, dict) or "prob_success" not in rec:
        return None
    simulated = rec.get("method") == "simulation"
    suffix = "_se" if simulated else "_error"
    columns = (Column("metric", "metric"), Column("value", "value", "probability"),
               Column("uncertainty", "Monte Carlo SE" if simulated else "numerical error",
                      "number"),
               Column("meaning", "in plain words"))
    rows = tuple(_row([label, rec.get(key), rec.get(key + suffix), words], columns)
                 for key, label, words in BAYESIAN_WORDS)
    notes = [f"Method: {rec.get('method')}. Null region: {rec.get('null_region')}. "
             f"Bayesian power is over {rec.get('power_region')}."]
    if simulated:
        notes.append(f"{rec.get('replicates')} studies, each with its true value drawn from "
                     "the design prior (seed " f"{rec.get('seed')}); standard errors of "
                     "conditional probabilities by the delta method.")
    elif rec.get("nodes"):
        notes.append(f"Quadrature: {rec['nodes']}; numerical errors from the change between "
                     "the last two quadrature levels.")
    if rec.get("warning"):
        notes.append(f"Warning: {rec['warning']}.")
    return Table("bayesian-operating-characteristics",
                 "Operating characteristics under the design prior", columns, rows,
                 tuple(notes))


def design_prior_sensitivity_table(data: Any) -> Table | None:
    """checks.json's ``design_prior_sensitivity``: every metric under each alternative
    design prior (``octrial check``)."""
    entry = (data.checks or {}).get("design_prior_sensitivity") or {}
    rows_in = entry.get("rows")
    if not rows_in:
        return None
    columns = (Column("variant", "design prior"), Column("prior", "distribution"),
               *(Column(key, label, "probability") for key, label, _ in BAYESIAN_WORDS))
    rows = tuple(_row([r.get("variant"), r.get("design_prior"),
                       *(r.get(key) for key, _, _ in BAYESIAN_WORDS)], columns)
                 for r in rows_in)
    notes = (f"Written by octrial check; the design prior of {entry.get('varied')} varied. "
             "Sceptical: each component's mean one standard deviation toward the null; "
             "optimistic: one toward the alternative; vaguer: standard deviation doubled "
             "(moments matched; see docs/methods.md).",)
    return Table("design-prior-sensitivity", "Sensitivity to the design prior", columns,
                 rows, notes)
