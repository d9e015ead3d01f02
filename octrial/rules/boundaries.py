"""Decision boundaries in plain counts, as a monitoring committee applies them by hand.

One arm: per look, the smallest response count that stops for efficacy and the largest
that stops for futility (reversed when lower is better). Two arms: per look and per
control count, the same bounds on the treatment count (long format).

Beside each bound the table gives the posterior probability of benefit at the bound and
one count short of it (inside the region where the study continues), so a committee sees
how the threshold falls between two counts, and the thresholds themselves.
:func:`committee_table` renders it as plain text.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from octrial.design.model import Design
from octrial.rules.lattice import LatticeRule, LookTable

NEVER = "never"


def _bound(mask: np.ndarray, higher: bool) -> int | None:
    """The boundary count of a tail region, or None when the region is empty.

    Raises if the region is not a tail (the rule would not be monotone in the count).
    """
    hits = np.flatnonzero(mask)
    if hits.size == 0:
        return None
    bound = int(hits[0]) if higher else int(hits[-1])
    tail = np.arange(mask.size) >= bound if higher else np.arange(mask.size) <= bound
    if not np.array_equal(mask, tail):
        raise ArithmeticError("decision region is not a tail of the count; "
                              "the rule is not monotone")
    return bound


def _rule_text(bound: int | None, op: str) -> str:
    return NEVER if bound is None else f"{op} {bound}"


def _at(values: np.ndarray | None, index: tuple[int, ...] | None) -> float:
    if values is None or index is None:
        return float("nan")
    return float(values[index])


def _row(
    table: LookTable, eff_mask: np.ndarray, fut_mask: np.ndarray, higher: bool,
    prefix: tuple[int, ...] = (),
) -> dict[str, object]:
    """Bounds, rule text and the probabilities at (and next to) the bounds for one axis."""
    e = _bound(eff_mask, higher)
    f = _bound(fut_mask, not higher)
    ge, le = (">=", "<=") if higher else ("<=", ">=")
    step = 1 if higher else -1
    size = eff_mask.size

    def index(b: int | None, shift: int = 0) -> tuple[int, ...] | None:
        if b is None or not 0 <= b + shift < size:
            return None
        return (b + shift, *prefix)
    return {
        "efficacy_bound": e,
        "efficacy_rule": _rule_text(e, ge),
        "futility_bound": f,
        "futility_rule": _rule_text(f, le),
        "posterior_at_efficacy_bound": _at(table.benefit, index(e)),
        "posterior_before_efficacy_bound": _at(table.benefit, index(e, -step)),
        "posterior_at_futility_bound": _at(table.benefit, index(f)),
        "posterior_after_futility_bound": _at(table.benefit, index(f, step)),
        "predictive_at_futility_bound": _at(table.predictive, index(f)),
    }


def _thresholds(design: Design, k: int) -> dict[str, float]:
    looks = design.looks
    last = k == looks.count - 1
    def value(v: float | None) -> float:
        return float("nan") if v is None else float(v)
    return {
        "efficacy_threshold": value(looks.efficacy[k]),
        "futility_threshold": value(None if last else looks.futility[k]),
        "futility_predictive_threshold": value(None if last else looks.futility_predictive[k]),
    }


def boundary_table(design: Design, rule: LatticeRule) -> pd.DataFrame:
    """The ``boundaries.csv`` table (see module docstring).

    At the last look the futility columns describe failure at the final analysis.
    """
    higher = design.hypothesis.better == "higher"
    rows = []
    for k, table in enumerate(rule.looks):
        if not design.two_arm:
            row = {"look": table.look, "n": table.n[0]}
            row.update(_row(table, table.efficacy, table.futility, higher))
            row.update(_thresholds(design, k))
            rows.append(row)
            continue
        for x_c in range(table.shape[1]):
            row = {"look": table.look, "n_treatment": table.n[0], "n_control": table.n[1],
                   f"control_{design.family.statistic}": x_c}
            row.update(_row(table, table.efficacy[:, x_c], table.futility[:, x_c], higher,
                            (x_c,)))
            row.update(_thresholds(design, k))
            rows.append(row)
    frame = pd.DataFrame(rows)
    for column in ("efficacy_bound", "futility_bound"):
        frame[column] = frame[column].astype("Int64")
    return frame


def _probability(value: float) -> str:
    if value != value:  # NaN
        return "-"
    if 1 - 1e-4 < value < 1.0:
        return f"1 - {1 - value:.2g}"
    if 0.0 < value < 1e-4:
        return f"{value:.2g}"
    return f"{value:.4f}"


def _threshold_words(row: pd.Series, last: bool) -> tuple[str, str]:
    eff = row["efficacy_threshold"]
    efficacy = "" if eff != eff else f"posterior >= {eff:g}"
    if last:
        return efficacy, ""
    parts = []
    if row["futility_threshold"] == row["futility_threshold"]:
        parts.append(f"posterior < {row['futility_threshold']:g}")
    if row["futility_predictive_threshold"] == row["futility_predictive_threshold"]:
        parts.append(f"predictive < {row['futility_predictive_threshold']:g}")
    return efficacy, " or ".join(parts)


def committee_table(design: Design, frame: pd.DataFrame) -> str:
    """The boundary table as plain text a monitoring committee can apply without software.

    One arm: a few lines per look. Two arms: per look, one line per control count.
    """
    family, h = design.family, design.hypothesis
    counted = family.statistic
    if design.two_arm:
        sign = "-" if h.better == "higher" else "+"
        claim = (f"Pr({family.parameter} treatment - {family.parameter} control "
                 f"{'>' if h.better == 'higher' else '<'} {sign if h.shift else ''}"
                 f"{abs(h.shift):g} | data)").replace("  ", " ")
    else:
        claim = (f"Pr({family.parameter} {'>' if h.better == 'higher' else '<'} "
                 f"{h.benchmark:g} | data)")
    lines = [f"Decision rule of {design.name}, in {counted}; posterior = {claim}.",
             "Efficacy is checked first. At the final analysis a study that does not reach "
             "the success bound fails."]
    last_look = int(frame["look"].max())
    for look, part in frame.groupby("look", sort=True):
        last = look == last_look
        first = part.iloc[0]
        size = (f"{first['n_treatment']} treatment and {first['n_control']} control subjects"
                if design.two_arm else f"{first['n']} subjects")
        lines.append("")
        lines.append(f"Look {look}{' (final analysis)' if last else ''}, after {size}:")
        eff_words, fut_words = _threshold_words(first, last)
        stop, fail = ("success", "failure") if last else ("stop for efficacy",
                                                         "stop for futility")
        if not design.two_arm:
            e, f = first["efficacy_rule"], first["futility_rule"]
            if e == NEVER:
                lines.append(f"  {stop}: never")
            else:
                lines.append(f"  {stop} if {counted} {e}  (rule: {eff_words}; posterior "
                             f"{_probability(first['posterior_at_efficacy_bound'])} there, "
                             f"{_probability(first['posterior_before_efficacy_bound'])} "
                             "one short)")
            if last:
                lines.append(f"  {fail} otherwise")
                continue
            if f == NEVER:
                lines.append(f"  {fail}: never")
            else:
                extra = ""
                if first["predictive_at_futility_bound"] == first[
                        "predictive_at_futility_bound"]:
                    extra = (", predictive "
                             f"{_probability(first['predictive_at_futility_bound'])}")
                lines.append(f"  {fail} if {counted} {f}  (rule: {fut_words}; posterior "
                             f"{_probability(first['posterior_at_futility_bound'])}{extra} "
                             "there)")
            lines.append("  otherwise continue")
            continue
        lines.append(f"  {stop}: {eff_words}" + ("" if last else f"; {fail}: {fut_words}"))
        view = pd.DataFrame({
            f"control {counted}": part[f"control_{counted}"].to_numpy(),
            f"{stop} if treatment {counted}": part["efficacy_rule"].to_numpy(),
            "posterior there": part["posterior_at_efficacy_bound"].map(_probability).to_numpy(),
        })
        if not last:
            view[f"{fail} if treatment {counted}"] = part["futility_rule"].to_numpy()
            view["posterior there "] = part["posterior_at_futility_bound"].map(
                _probability).to_numpy()
        lines += ["  " + line for line in view.to_string(index=False).splitlines()]
    return "\n".join(lines) + "\n"
