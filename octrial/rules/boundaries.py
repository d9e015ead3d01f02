"""Decision boundaries in plain counts, as a monitoring committee applies them by hand.

One arm: per look, the smallest response count that stops for efficacy and the largest
that stops for futility (reversed when lower is better). Two arms: per look and per
control count, the same bounds on the treatment count (long format).

Beside each bound the table gives the posterior probability of benefit at the bound and
one count short of it (inside the region where the study continues), so a committee sees
how the threshold falls between two counts, and the thresholds themselves.
:func:`committee_table` renders it as plain text.

A truncated lattice (counts) ends where the design's scenarios make more events
negligible, but a bound may lie beyond that edge (a strong prior, a far threshold), and
``octrial decide`` stops there all the same. When a stopping region that starts above
the edge is empty on the lattice, or one that ends at the edge fills it, the rule is
rebuilt on lattices serving larger rates (:data:`EXTENSIONS`, the rule of
``octrial decide`` on the larger lattice) until the bound is inside. A bound still
beyond the largest of them is written as such (:data:`BEYOND`), never as ``never``,
which is kept for regions no count can reach (no threshold, or a bound below 0).
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
import pandas as pd

from octrial.design.model import Design
from octrial.rules.lattice import LatticeRule, LookTable, build_rule, serving

NEVER = "never"
BEYOND = "beyond the computed range"
"""Marks a rule whose bound lies past the largest lattice examined (see module docstring)."""

EXTENSIONS = (2.0, 4.0, 8.0, 16.0)
"""Factors on the lattice's reach (the largest rate it serves) tried in turn for a bound
beyond the design's own lattice."""

MAX_POINTS = 2_000_000
"""Largest extended lattice (points over both arms at a look) built to find such a bound."""


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


def _open(mask: np.ndarray, upper: bool, applies: bool) -> bool:
    """Whether the lattice cannot show the bound of a region of a truncated lattice: an
    upper tail (x >= b) that is empty although a threshold applies, or a lower tail
    (x <= b) that reaches the last point."""
    if not applies:
        return False
    return not mask.any() if upper else bool(mask[-1])


def _rule_text(bound: int | None, op: str) -> str:
    return NEVER if bound is None else f"{op} {bound}"


def with_unit(rule: str, unit: str) -> str:
    """``rule`` with the words ``unit`` after its count (``>= 13 responses``; a rule
    beyond the computed range keeps its remark last); ``never`` as it is."""
    if rule == NEVER:
        return rule
    head, sep, tail = rule.partition(" (")
    return f"{head}{unit}{sep}{tail}"


def beyond_text(edge: int, upper: bool) -> str:
    """The rule of a bound past the largest lattice examined, whose last count is
    ``edge``."""
    if upper:
        return f"none up to {edge} ({BEYOND})"
    return f"every count up to {edge} ({BEYOND})"


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


EFFICACY_KEYS = ("efficacy_bound", "efficacy_rule", "posterior_at_efficacy_bound",
                 "posterior_before_efficacy_bound")
FUTILITY_KEYS = ("futility_bound", "futility_rule", "posterior_at_futility_bound",
                 "posterior_after_futility_bound", "predictive_at_futility_bound")


def _applies(design: Design, k: int) -> tuple[bool, bool]:
    """Whether look ``k`` has an efficacy rule and a futility rule at all."""
    looks = design.looks
    last = k == looks.count - 1
    if looks.efficacy_count is not None:  # the rule is stated in counts
        efficacy = looks.efficacy_count[k] is not None
        futility = efficacy if last else (looks.futility_count is not None
                                          and looks.futility_count[k] is not None)
        return efficacy, futility
    efficacy = looks.efficacy[k] is not None
    if last:
        return efficacy, efficacy
    return efficacy, looks.futility[k] is not None or looks.futility_predictive[k] is not None


class _Extensions:
    """Rules of ``design`` on lattices serving ``EXTENSIONS`` times its reach, built on
    first use (the rule ``octrial decide`` applies to a count past the design's lattice)."""

    def __init__(self, design: Design, rule: LatticeRule) -> None:
        self.design, self.rule = design, rule
        self._rules: dict[float, LatticeRule | None] = {}

    def rules(self) -> Iterator[LatticeRule]:
        """The extended rules, smallest first, until one would be too large."""
        reach = self.rule.reach
        if reach is None:
            return
        for factor in EXTENSIONS:
            if factor not in self._rules:
                self._rules[factor] = self._build(np.array([reach], dtype=float) * factor)
            found = self._rules[factor]
            if found is None:
                return
            yield found

    def _build(self, truths: np.ndarray) -> LatticeRule | None:
        design = serving(self.design, truths)
        family = design.family
        for n in design.looks.per_arm:
            points = np.prod([family.lattice_size(design, j, m) for j, m in enumerate(n)])
            if points > MAX_POINTS:
                return None
        return build_rule(design)


def _resolve(
    row: dict[str, object], extensions: _Extensions, k: int,
    axis: slice | int | tuple[slice, int],
    higher: bool, applies: tuple[bool, bool], prefix: tuple[int, ...],
    table: LookTable,
) -> None:
    """Replace, in ``row``, the bounds the lattice of ``table`` cannot show (see
    :func:`_open`) by those of the first extended lattice that shows them, or by
    :func:`beyond_text` when none does."""
    eff, fut = table.efficacy[axis], table.futility[axis]
    wanted = [kind for kind, mask, upper, ok in (
        ("efficacy", eff, higher, applies[0]), ("futility", fut, not higher, applies[1]))
        if _open(mask, upper, ok)]
    if not wanted:
        return
    edge = eff.size - 1
    for bigger in extensions.rules():
        wide = bigger.looks[k]
        eff_w, fut_w = wide.efficacy[axis], wide.futility[axis]
        try:
            found = _row(wide, eff_w, fut_w, higher, prefix)
        except ArithmeticError:
            # far past the design's scenarios a region need not stay a tail (predictive
            # mass beyond even this lattice); the bound then stays beyond what is computed
            break
        edge = eff_w.size - 1
        for kind, mask, upper in (("efficacy", eff_w, higher),
                                  ("futility", fut_w, not higher)):
            if kind in wanted and not _open(mask, upper, True):
                keys = EFFICACY_KEYS if kind == "efficacy" else FUTILITY_KEYS
                row.update({key: found[key] for key in keys})
                wanted.remove(kind)
        if not wanted:
            return
    for kind in wanted:
        upper = higher if kind == "efficacy" else not higher
        keys = EFFICACY_KEYS if kind == "efficacy" else FUTILITY_KEYS
        row.update({key: float("nan") for key in keys})
        row[f"{kind}_bound"] = None
        row[f"{kind}_rule"] = beyond_text(edge, upper)


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

    At the last look the futility columns describe failure at the final analysis. On a
    truncated lattice, a bound past its edge is looked for on larger lattices.
    """
    higher = design.hypothesis.better == "higher"
    truncated = design.family.truncates
    extensions = _Extensions(design, rule)
    rows = []
    for k, table in enumerate(rule.looks):
        applies = _applies(design, k) if truncated else (False, False)
        if not design.two_arm:
            row: dict[str, object] = {"look": table.look, "n": table.n[0]}
            row.update(_row(table, table.efficacy, table.futility, higher))
            _resolve(row, extensions, k, slice(None), higher, applies, (), table)
            row.update(_thresholds(design, k))
            rows.append(row)
            continue
        for x_c in range(table.shape[1]):
            row = {"look": table.look, "n_treatment": table.n[0], "n_control": table.n[1],
                   f"control_{design.family.statistic}": x_c}
            row.update(_row(table, table.efficacy[:, x_c], table.futility[:, x_c], higher,
                            (x_c,)))
            _resolve(row, extensions, k, (slice(None), x_c), higher, applies, (x_c,), table)
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


def claim_text(design: Design) -> str:
    """The posterior probability the rule compares with its thresholds, in plain text.

    Two arms: the comparison as the endpoint family computes it (a difference treatment -
    control against the margin's shift, signed; a rate ratio or odds ratio against the
    relative threshold 1 + sign x shift, :attr:`~octrial.design.model.Hypothesis.threshold`).
    """
    family, h = design.family, design.hypothesis
    p = family.parameter
    op = ">" if h.better == "higher" else "<"
    if not design.two_arm:
        return f"Pr({p} {op} {h.benchmark:g} | data)"
    if h.comparison in (None, "difference"):
        value = h.sign * h.shift
        limit = f"{value:+g}" if value else "0"
        return f"Pr({p} treatment - {p} control {op} {limit} | data)"
    if h.comparison == "ratio":
        return f"Pr({p} treatment / {p} control {op} {h.threshold:g} | data)"
    if h.comparison == "odds-ratio":
        return f"Pr(odds ratio of {p} treatment to {p} control {op} {h.threshold:g} | data)"
    return f"Pr({h.comparison} of {p} treatment to {p} control {op} {h.threshold:g} | data)"


def committee_table(design: Design, frame: pd.DataFrame) -> str:
    """The boundary table as plain text a monitoring committee can apply without software.

    One arm: a few lines per look. Two arms: per look, one line per control count.
    """
    family = design.family
    counted = family.statistic
    claim = claim_text(design)
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
            elif BEYOND in e:
                lines.append(f"  {stop}: {with_unit(e, ' ' + counted)}; see the note below")
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
            elif BEYOND in f:
                lines.append(f"  {fail}: {with_unit(f, ' ' + counted)}; see the note below")
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
    if _has_beyond(frame):
        lines += ["", "Note: " + beyond_note(design)]
    return "\n".join(lines) + "\n"


def _has_beyond(frame: pd.DataFrame) -> bool:
    return any(frame[c].astype(str).str.contains(BEYOND, regex=False).any()
               for c in ("efficacy_rule", "futility_rule") if c in frame)


def beyond_note(design: Design) -> str:
    """Why a bound can lie beyond the computed range, and what that costs."""
    family = design.family
    epsilon = family.truncation_epsilon
    share = epsilon / (design.looks.count * len(design.arms))
    return (f"'{BEYOND}': the bound lies past the largest count computed, the one "
            "stated ('none up to N': no count up to N stops the study that way; 'every "
            "count up to N': every one does). The count lattice ends where more events "
            f"have probability below {share:.2g} per look and arm under every scenario "
            f"of the design (at most {epsilon:.2g} per scenario in all, the neglected "
            "mass of run.json); to find a bound past that edge the rule was rebuilt on "
            f"lattices serving up to {EXTENSIONS[-1]:g} times the largest rate the "
            f"scenarios need (at most {MAX_POINTS:,} lattice points), and the bound lies "
            "past them too. octrial decide gives the decision at any count.")
