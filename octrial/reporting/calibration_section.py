"""The report's calibration section: what ``octrial calibrate`` searched, the constraints
it had to meet and how far the chosen design meets them, the result, and the candidates
behind it, read from ``calibration.json``, ``sizing.csv`` and ``calibration.csv``.

Tables are driven by the keys present, not by a fixed list: a constraint the record
names (``alpha``, ``power_target``, and any ``criteria`` such as
``prob_null_given_success<=0.05`` with its value in ``bayesian_operating_characteristics``
or ``bayesian_at_calibration_nodes``) becomes a row, and every entry of the record that
no table shows is listed in words under "Further entries", never as a Python repr.
"""

from __future__ import annotations

import re
from typing import Any, TypeGuard

import pandas as pd

from octrial.reporting.formats import number, probability, size, truth
from octrial.reporting.tables import (
    Cell,
    Column,
    Row,
    Table,
    _marked_rows,
    cell,
)

PROVENANCE_KEYS = ("octrial_version", "design", "command", "started", "finished", "files",
                   "file_sha256", "environment", "caution")
"""Keys of calibration.json shown in the reproducibility section, not here."""

VARIED = {
    "n": "maximum sample size N",
    "final": "final success threshold",
    "efficacy": "efficacy threshold at every look",
    "futility": "futility threshold",
    "futility-predictive": "predictive futility threshold",
    "eta": "eta of the efficacy threshold function",
}
TASKS = {"sizing": "sample size", "thresholds": "thresholds", "stage search": "stage search"}
CHOOSE = {"stable": "the smallest N from which every larger N in the range passes",
          "first": "the smallest N that passes"}
CRITERION_WORDS = {"power": "largest power", "optimal": "smallest expected N under the null"}
CONSTRAINT = re.compile(r"^\s*([A-Za-z_][\w]*)\s*(<=|>=|<|>)\s*([-+0-9.eE]+)\s*$")
SYMBOLS = {"<=": "≤", ">=": "≥", "<": "<", ">": ">"}

SHOWN_KEYS = {
    "task", "request", "alpha", "power_target", "alternative", "null_grid", "type1_error",
    "type1_error_se", "worst_null_point", "type1_error_refined", "worst_null_point_refined",
    "power", "power_se", "expected_n_null", "null_reference_point",
    "expected_n_alternative", "chosen", "looks_n", "method", "simulation", "evaluations",
    "candidates", "notes", "search", "sizing", "boundaries", "assurance",
    "prior_probability_of_claim", "calibrated_design", "criteria", "null_range",
    "assumptions",
}
"""Entries of calibration.json the tables below show; the rest go to "Further entries"."""

CSV_COLUMNS = {
    "candidate": ("candidate", "count"), "step": ("step", "text"),
    "n": ("N", "count"), "looks_n": ("looks at n", "text"),
    "efficacy": ("efficacy thresholds", "text"), "futility": ("futility", "text"),
    "futility_predictive": ("predictive futility", "text"),
    "type1_error": ("max type I error", "probability"), "type1_error_se": ("se", "number"),
    "power": ("power", "probability"), "power_se": ("se ", "number"),
    "expected_n_null": ("E[N] at null", "size"),
    "expected_n_alternative": ("E[N] at alternative", "size"),
    "meets_alpha": ("meets alpha", "text"), "meets_power": ("meets power", "text"),
    "passes": ("passes", "text"), "chosen": ("chosen", "text"),
    "smallest_passing": ("smallest passing", "text"), "stable_from": ("stable from", "text"),
    "note": ("note", "text"),
}
"""Headings and formats of calibration.csv / sizing.csv columns the report knows; other
columns are shown under their own names."""

HIDDEN_COLUMNS = ("realised",)


def calibration_tables(data: Any) -> list[Table]:
    """The calibration's search, constraints, result, further entries, its sample-size
    curve and the candidates it examined (each only when its file is present)."""
    tables: list[Table] = []
    record = data.calibration_record
    if record is not None:
        tables += [t for t in (_search_table(record), _constraints_table(record),
                               _result_table(record), _further_table(record)) if t]
    if data.sizing is not None:
        shown, notes = _marked_rows(data.sizing, "sizing.csv", "sample sizes")
        tables.append(_csv_table("sizing", "Calibration: every maximum sample size searched",
                                 shown, notes))
    if data.calibration is not None:
        shown, notes = _marked_rows(data.calibration, "calibration.csv",
                                    "candidates examined")
        tables.append(_csv_table("calibration", "Calibration: candidates examined", shown,
                                 notes))
    return tables


# -- calibration.json ---------------------------------------------------------------------
def _pairs(name: str, caption: str, pairs: list[tuple[str, str]],
           notes: tuple[str, ...] = ()) -> Table | None:
    if not pairs:
        return None
    columns = (Column("item", "item"), Column("value", "value"))
    rows = tuple(Row((Cell(k), Cell(v))) for k, v in pairs)
    return Table(name, caption, columns, rows, notes)


def _point(point: Any) -> str:
    """``{'treatment': 0.2}`` as ``treatment = 0.2``."""
    if isinstance(point, dict):
        return ", ".join(f"{k} = {truth(v) if _numeric(v) else v}" for k, v in point.items())
    if isinstance(point, (list, tuple)):
        return ", ".join(truth(v) if _numeric(v) else str(v) for v in point)
    return _words(point)


def _numeric(value: Any) -> TypeGuard[float]:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _words(value: Any) -> str:
    """Any JSON value in plain text: numbers as the report writes them, lists joined,
    objects as ``key = value`` pairs."""
    if isinstance(value, dict):
        return "; ".join(f"{str(k).replace('_', ' ')} = {_words(v)}" for k, v in value.items())
    if isinstance(value, (list, tuple)):
        return ", ".join(_words(v) for v in value) if value else "none"
    if value is None:
        return "–"
    return number(value)


def _search_table(record: dict[str, Any]) -> Table | None:
    request = record.get("request") or {}
    pairs: list[tuple[str, str]] = []
    task = record.get("task")
    if task is not None:
        pairs.append(("searched for", TASKS.get(task, str(task))))
    vary = request.get("vary")
    if vary and not record.get("search"):
        pairs.append(("varied", ", ".join(VARIED.get(v, str(v)) for v in vary)))
    search = record.get("search")
    if isinstance(search, dict):
        words = {"optimal": "optimal (smallest expected N under the null)",
                 "minimax": "minimax (smallest maximum N)"}
        criterion = str(search.get("criterion"))
        pairs.append(("stage search", f"{words.get(criterion, criterion)}, rule in "
                      f"{search.get('rule') or 'the design’s terms'}, "
                      f"{search.get('stages') or 'the design’s'} looks"))
    n_range = request.get("n_range") or (search or {}).get("range")
    if n_range and (task in ("sizing", "stage search") or "n" in (vary or ())):
        lo, hi, *step = n_range
        pairs.append(("sample sizes tried", f"N from {lo} to {hi}"
                      + (f" in steps of {step[0]}" if step and step[0] != 1 else "")))
        looks = request.get("looks")
        if looks:
            pairs.append(("interim looks", "at the same information fractions as the design"
                          if looks == "fractions" else "at the design's own counts"))
    if task == "sizing" and request.get("choose"):
        pairs.append(("sizing rule", CHOOSE.get(request["choose"], request["choose"])))
    grids = {"futility", "futility-predictive", "eta"} & set(vary or ())
    if grids and request.get("criterion"):
        pairs.append(("grid values chosen by", CRITERION_WORDS.get(
            request["criterion"], str(request["criterion"]))))
    if record.get("null_grid"):
        pairs.append(("null region searched", str(record["null_grid"])))
    null_range = record.get("null_range")
    if isinstance(null_range, dict) and null_range.get("assumption"):
        pairs.append(("null region limited to", str(null_range["assumption"])))
    if record.get("candidates") is not None:
        text = f"{record['candidates']:,} candidates"
        if record.get("evaluations") not in (None, record.get("candidates")):
            text += f" ({record['evaluations']:,} evaluations)"
        method = record.get("method")
        if method:
            text += f", computed {'exactly' if method == 'exact' else 'by ' + str(method)}"
        sim = record.get("simulation")
        if isinstance(sim, dict) and sim.get("replicates"):
            text += (f" ({sim['replicates']:,} simulated studies per true value, seed "
                     f"{sim.get('seed')})")
        pairs.append(("candidates examined", text))
    return _pairs("calibration-search", "Calibration: what was searched", pairs)


def _constraints_table(record: dict[str, Any]) -> Table | None:
    columns = (Column("constraint", "constraint"), Column("target", "required"),
               Column("value", "chosen design", "probability"),
               Column("where", "where"), Column("met", "met"))
    rows = []
    alpha = record.get("alpha")
    if alpha is not None and record.get("type1_error") is not None:
        t1 = float(record["type1_error"])
        where = "worst point of the null region: " + _point(record.get("worst_null_point"))
        if record.get("type1_error_se"):
            where += f" (Monte Carlo se {probability(record['type1_error_se'])})"
        rows.append(_constraint("maximum type I error", f"≤ {truth(alpha)}", t1, where,
                                t1 <= alpha))
        refined = record.get("type1_error_refined")
        if refined is not None:
            rows.append(_constraint(
                "maximum type I error between grid points", f"≤ {truth(alpha)}",
                float(refined), "refined worst point: "
                + _point(record.get("worst_null_point_refined")), refined <= alpha))
    target = record.get("power_target")
    if target is not None and record.get("power") is not None:
        p = float(record["power"])
        where = "alternative: " + _point(record.get("alternative"))
        if record.get("power_se"):
            where += f" (Monte Carlo se {probability(record['power_se'])})"
        rows.append(_constraint("power", f"≥ {truth(target)}", p, where, p >= target))
    found = {**(record.get("bayesian_at_calibration_nodes") or {}),
             **(record.get("bayesian_operating_characteristics") or {})}
    for text in record.get("criteria") or ():
        match = CONSTRAINT.match(str(text))
        if match is None:
            rows.append(Row((Cell(str(text)), Cell(""), cell(None, "probability"),
                             Cell(""), Cell("–"))))
            continue
        name, op, limit = match.group(1), match.group(2), float(match.group(3))
        value = found.get(name)
        value = float(value) if _numeric(value) else None
        met = None if value is None else {
            "<=": value <= limit, ">=": value >= limit, "<": value < limit,
            ">": value > limit}[op]
        source = ("by quadrature or simulation over the design prior"
                  if name in (record.get("bayesian_operating_characteristics") or {})
                  else "on the calibration's nodes over the design prior")
        rows.append(_constraint(name.replace("_", " "), f"{SYMBOLS[op]} {truth(limit)}",
                                value, source, met))
    if not rows:
        return None
    notes = ("The chosen design is the least stringent candidate meeting every constraint "
             "(docs/calibration.md).",)
    return Table("calibration-constraints", "Calibration: constraints and how the chosen "
                 "design meets them", columns, tuple(rows), notes)


def _constraint(name: str, target: str, value: float | None, where: str,
                met: bool | None) -> Row:
    return Row((Cell(name), Cell(target), cell(value, "probability"), Cell(where),
                Cell("–" if met is None else "yes" if met else "no")))


def _result_table(record: dict[str, Any]) -> Table | None:
    pairs: list[tuple[str, str]] = []
    looks = record.get("looks_n")
    if looks:
        pairs.append(("maximum sample size", f"N = {looks[-1]} (looks at n = "
                      f"{', '.join(str(n) for n in looks)})"))
    sizing = record.get("sizing")
    if isinstance(sizing, dict):
        if sizing.get("smallest_passing") is not None:
            pairs.append(("smallest N that passes", str(sizing["smallest_passing"])))
        if sizing.get("stable_from") is not None:
            pairs.append(("every N passes from", str(sizing["stable_from"])))
    for name, chosen in (record.get("chosen") or {}).items():
        pairs.append((VARIED.get(name, str(name).replace("_", " ")), _chosen_words(chosen)))
    for row in record.get("boundaries") or ():
        if isinstance(row, dict) and {"look", "n"} <= set(row):
            rule = "; ".join(f"{k} {_rule(row[k])}" for k in ("efficacy", "futility")
                             if k in row)
            pairs.append((f"bounds at look {row['look']} (n = {row['n']})", rule))
    if record.get("expected_n_null") is not None:
        at = _point(record.get("null_reference_point"))
        pairs.append(("expected N at the null", f"{size(record['expected_n_null'])}"
                      + (f" ({at})" if at else "")))
    if record.get("expected_n_alternative") is not None:
        pairs.append(("expected N at the alternative",
                      f"{size(record['expected_n_alternative'])} "
                      f"({_point(record.get('alternative'))})"))
    if record.get("prior_probability_of_claim") is not None:
        pairs.append(("prior probability of the claim",
                      probability(record["prior_probability_of_claim"])))
    assurance = record.get("assurance")
    if isinstance(assurance, dict) and assurance.get("probability") is not None:
        pairs.append(("assurance (design prior)", probability(assurance["probability"])))
    notes = tuple(str(n) for n in (record.get("notes") or ()))
    notes += tuple(str(a) for a in (record.get("assumptions") or ())
                   if not isinstance(record.get("null_range"), dict)
                   or a != record["null_range"].get("assumption"))
    written = [f for f in record.get("files") or () if str(f).endswith(".calibrated.toml")]
    if written:
        notes += (f"The calibrated design file {written[0]} holds the chosen looks and "
                  "thresholds.",)
    return _pairs("calibration-result", "Calibration: the result", pairs, notes)


def _chosen_words(chosen: Any) -> str:
    """A chosen value with its exact value and the range that gives the same rule."""
    if not isinstance(chosen, dict) or "value" not in chosen:
        return _words(chosen)
    value = chosen["value"]
    text = truth(value) if isinstance(value, float) else _words(value)
    exact = chosen.get("exact")
    if _numeric(exact) and exact != value:
        text += f" (exact candidate {exact:.10g})"
    span = chosen.get("equivalent")
    if isinstance(span, (list, tuple)) and len(span) == 2:
        text += f"; any value from {span[0]:.6g} to {span[1]:.6g} gives the same decisions"
    return text


def _rule(text: Any) -> str:
    return str(text).replace(">=", "≥").replace("<=", "≤")


def _further_table(record: dict[str, Any]) -> Table | None:
    """Entries of calibration.json no other table shows (written by later versions or
    other commands), in words; the request too when the record is not one of
    ``octrial calibrate`` (no ``task``), whose tables would not show it."""
    shown = SHOWN_KEYS if "task" in record else SHOWN_KEYS - {"request"}
    pairs = [(str(k).replace("_", " "), _words(v)) for k, v in record.items()
             if k not in shown and k not in PROVENANCE_KEYS]
    return _pairs("calibration-further", "Calibration: further entries of calibration.json",
                  pairs)


# -- sizing.csv and calibration.csv -------------------------------------------------------
def _csv_table(name: str, caption: str, frame: pd.DataFrame, notes: list[str]) -> Table:
    """A calibration CSV with the headings and formats of :data:`CSV_COLUMNS`; columns of
    standard errors that are all 0 (exact) and bookkeeping columns are left out."""
    keep = []
    for column in frame.columns:
        values = frame[column]
        if column in HIDDEN_COLUMNS:
            continue
        if str(column).endswith("_se") and pd.to_numeric(values, errors="coerce").fillna(
                0).eq(0).all():
            continue
        keep.append(column)
    # a column with one value in every row is said once, under the table
    constant = [c for c in keep if len(frame) > 1 and c not in ("chosen", "passes")
                and frame[c].astype(str).nunique(dropna=False) == 1]
    keep = [c for c in keep if c not in constant]
    columns = tuple(Column(str(c), _heading(c), CSV_COLUMNS.get(str(c), ("", _kind(
        frame[c])))[1]) for c in keep)
    rows = []
    for _, r in frame[keep].iterrows():
        cells = []
        for c in columns:
            v = r[c.key]
            if isinstance(v, (bool,)) or str(v) in ("True", "False"):
                cells.append(Cell("yes" if str(v) == "True" else ""))
            elif c.kind == "text":
                cells.append(Cell("" if _missing(v) else str(v)))
            else:
                cells.append(cell(None if _missing(v) else v, c.kind))
        chosen = "chosen" in frame.columns and str(r.get("chosen")) == "True"
        rows.append(Row(tuple(cells), ("chosen",) if chosen else ()))
    same = [f"{_heading(c)}: {_text(frame[c].iloc[0])}" for c in constant
            if not _missing(frame[c].iloc[0]) and str(frame[c].iloc[0]) != ""]
    if same:
        notes = [*notes, "In every row: " + "; ".join(same) + "."]
    notes = [*notes, "The chosen row is marked. Every column is in the CSV file."]
    return Table(name, caption, columns, tuple(rows), tuple(notes))


def _text(value: Any) -> str:
    return {"True": "yes", "False": "no"}.get(str(value), str(value))


def _heading(column: Any) -> str:
    name = str(column)
    if name in CSV_COLUMNS:
        return CSV_COLUMNS[name][0]
    if name.startswith("type1_at_"):
        return f"worst null point: {name.removeprefix('type1_at_')}"
    return name.replace("_", " ")


def _kind(values: pd.Series) -> str:
    return "number" if pd.api.types.is_numeric_dtype(values) and not \
        pd.api.types.is_bool_dtype(values) else "text"


def _missing(value: Any) -> bool:
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False
