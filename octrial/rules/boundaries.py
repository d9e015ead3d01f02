"""Decision boundaries in plain counts, as a monitoring committee applies them by hand.

One arm: per look, the smallest response count that stops for efficacy and the largest
that stops for futility (reversed when lower is better). Two arms: per look and per
control count, the same bounds on the treatment count (long format).
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
    """Bounds, rule text and the probabilities at the bounds for one count axis."""
    e = _bound(eff_mask, higher)
    f = _bound(fut_mask, not higher)
    ge, le = (">=", "<=") if higher else ("<=", ">=")
    def index(b: int | None) -> tuple[int, ...] | None:
        return None if b is None else (b, *prefix)
    return {
        "efficacy_bound": e,
        "efficacy_rule": _rule_text(e, ge),
        "futility_bound": f,
        "futility_rule": _rule_text(f, le),
        "posterior_at_efficacy_bound": _at(table.benefit, index(e)),
        "posterior_at_futility_bound": _at(table.benefit, index(f)),
        "predictive_at_futility_bound": _at(table.predictive, index(f)),
    }


def boundary_table(design: Design, rule: LatticeRule) -> pd.DataFrame:
    """The ``boundaries.csv`` table (see module docstring).

    At the last look the futility columns describe failure at the final analysis.
    """
    higher = design.hypothesis.better == "higher"
    rows = []
    for table in rule.looks:
        if not design.two_arm:
            row = {"look": table.look, "n": table.n[0]}
            row.update(_row(table, table.efficacy, table.futility, higher))
            rows.append(row)
            continue
        for x_c in range(table.shape[1]):
            row = {"look": table.look, "n_treatment": table.n[0], "n_control": table.n[1],
                   f"control_{design.family.statistic}": x_c}
            row.update(_row(table, table.efficacy[:, x_c], table.futility[:, x_c], higher,
                            (x_c,)))
            rows.append(row)
    frame = pd.DataFrame(rows)
    for column in ("efficacy_bound", "futility_bound"):
        frame[column] = frame[column].astype("Int64")
    return frame
