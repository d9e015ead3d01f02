"""Reading the ``[conduct]`` table of a design file into :class:`~octrial.conduct.model.Conduct`.

Keys (docs/design-files.md, ``[conduct]``)::

    time_unit = "month"            # a word for labels; every time below is in this unit
    enrolment_rate = 8             # subjects per time unit, all arms together; or a list,
    period_starts = [0, 3]         #   one rate per period starting at these times (ramp-up)
    enrolment_times = [...]        # or: a fixed list of enrolment times (deterministic)
    arrivals = "poisson"           # "poisson" (random) or "even" (deterministic) at the rates
    max_enrolment = 300            # subjects enrolled at most
    outcome_lag = 6                # time from enrolment to the outcome (not time-to-event)
    dropout_hazard = 0.01          # loss to follow-up per time unit; or
    dropout_proportion = 0.1       #   the proportion lost ...
    dropout_by = 12                #   ... by this time after enrolment
    analyse_pipeline = false       # after a stop, wait for the pipeline's outcomes

:func:`planned_counts` gives each look's planned subjects with an outcome for looks by
enrolled subjects or calendar time, and :func:`check_complete_targets` checks looks by
subjects with an outcome against the maximum enrolment.

Every problem is recorded against its key (file, key, expected, got); the caller raises
them together with the rest of the design's problems (exit code 2 on the command line).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence

from octrial.conduct.model import Accrual, Conduct
from octrial.conduct.timing import allocation_block, arm_counts, look_timing
from octrial.design.reader import Phrase, Table

KEYS = ("time_unit", "enrolment_rate", "period_starts", "enrolment_times", "arrivals",
        "max_enrolment", "outcome_lag", "dropout_hazard", "dropout_proportion", "dropout_by",
        "analyse_pipeline")
MOST_SUBJECTS = 1_000_000
"""Largest maximum enrolment a design may state (each simulated study holds every subject)."""


def read_conduct(top: Table) -> Conduct | None:
    """The ``[conduct]`` table of ``top``, or ``None`` when the design has none (or it has
    problems, which are recorded)."""
    if not top.has("conduct"):
        return None
    table = top.table("conduct")
    if table is None:
        return None
    table.allow(*KEYS)
    unit = table.string("time_unit", required=False, default="month") or "month"
    most = table.number("max_enrolment", integer=True,
                        check=lambda v: 1 <= v <= MOST_SUBJECTS,
                        expected=f"a whole number of subjects from 1 to {MOST_SUBJECTS:,}")
    accrual = _read_accrual(table, None if most is None else int(most))
    lag = table.number("outcome_lag", required=False, default=0.0, check=lambda v: v >= 0,
                       expected=f"a time >= 0 (in {unit}s) from enrolment to the outcome")
    hazard = _read_dropout(table, unit)
    pipeline = _read_flag(table, "analyse_pipeline")
    if accrual is None or most is None or lag is None or hazard is None or pipeline is None:
        return None
    return Conduct(accrual, int(most), float(lag), hazard, pipeline, unit)


def _read_accrual(table: Table, most: int | None) -> Accrual | None:
    has_rate, has_times = table.has("enrolment_rate"), table.has("enrolment_times")
    if has_rate == has_times:
        table.fail("enrolment_rate", "either enrolment_rate (with optional period_starts) or "
                   "enrolment_times, not both", Phrase("both" if has_rate else "neither"))
        return None
    if has_times:
        for key in ("period_starts", "arrivals"):
            if table.has(key):
                table.fail(key, "no such key with enrolment_times (the times are fixed)",
                           table.data[key])
        times = table.numbers("enrolment_times", check=lambda v: v >= 0,
                              expected="a time >= 0")
        if times is None or any(t is None for t in times):
            return None
        fixed = [float(t) for t in times if t is not None]
        if any(b < a for a, b in itertools.pairwise(fixed)):
            table.fail("enrolment_times", "non-decreasing enrolment times", fixed)
            return None
        if most is not None and len(fixed) < most:
            table.fail("enrolment_times", f"at least max_enrolment ({most}) times",
                       Phrase(f"{len(fixed)} times"))
            return None
        return Accrual(times=tuple(fixed), arrivals="fixed")
    arrivals = table.string("arrivals", ("poisson", "even"), required=False,
                            default="poisson") or "poisson"
    raw = table.data["enrolment_rate"]
    expected = "an enrolment rate > 0 (subjects per time unit)"
    if isinstance(raw, list):
        rates = table.numbers("enrolment_rate", check=lambda v: v > 0, expected=expected)
        if rates is None or any(r is None for r in rates):
            return None
        starts = table.numbers("period_starts", check=lambda v: v >= 0,
                               expected="a time >= 0", length=len(rates))
        if starts is None or any(s is None for s in starts):
            return None
        begin = [float(s) for s in starts if s is not None]
        if begin[0] != 0 or any(b <= a for a, b in itertools.pairwise(begin)):
            table.fail("period_starts", "strictly increasing period starts, the first 0",
                       begin)
            return None
        return Accrual(tuple(float(r) for r in rates if r is not None), tuple(begin),
                       arrivals=arrivals)
    if table.has("period_starts"):
        table.fail("period_starts", "period starts only with a list of enrolment rates",
                   table.data["period_starts"])
    rate = table.number("enrolment_rate", check=lambda v: v > 0, expected=expected)
    if rate is None:
        return None
    return Accrual((float(rate),), (0.0,), arrivals=arrivals)


def _read_dropout(table: Table, unit: str) -> float | None:
    if table.has("dropout_hazard"):
        for key in ("dropout_proportion", "dropout_by"):
            if table.has(key):
                table.fail(key, "either dropout_hazard or dropout_proportion with dropout_by",
                           table.data[key])
        hazard = table.number("dropout_hazard", check=lambda v: v >= 0,
                              expected=f"a hazard >= 0 (losses per subject-{unit})")
        return None if hazard is None else float(hazard)
    if not table.has("dropout_proportion"):
        if table.has("dropout_by"):
            table.fail("dropout_by", "dropout_by only with dropout_proportion",
                       table.data["dropout_by"])
        return 0.0
    share = table.number("dropout_proportion", check=lambda v: 0 <= v < 1,
                         expected="a proportion in [0, 1) lost to follow-up")
    by = table.number("dropout_by", check=lambda v: v > 0,
                      expected=f"a time > 0 (in {unit}s after enrolment) by which "
                               "dropout_proportion are lost")
    if share is None or by is None:
        return None
    # an exponential time to loss with Pr(lost by `by`) = share
    return -math.log1p(-share) / by


def _read_flag(table: Table, key: str) -> bool | None:
    value = table.data.get(key, False)
    if not isinstance(value, bool):
        table.fail(key, "true or false", value)
        return None
    return value


def last_outcome(conduct: Conduct) -> float:
    """When the last subject's outcome is observed (expected, under Poisson arrivals)."""
    return conduct.accrual.time_of(conduct.max_enrolment) + conduct.lag


def check_complete_targets(table: Table, conduct: Conduct, n: Sequence[int]) -> None:
    """Looks by subjects with an outcome (``looks.n``): each must be reachable with
    ``max_enrolment`` subjects of whom the expected share ``1 - lost`` has an outcome."""
    reachable = conduct.max_enrolment * (1.0 - conduct.lost_before_outcome)
    for k, n_k in enumerate(n):
        if n_k > reachable + 1e-9:
            table.problems.add(f"looks.n[{k + 1}]", f"at most {math.floor(reachable + 1e-9)} "
                               f"subjects with an outcome (max_enrolment "
                               f"{conduct.max_enrolment} less the expected dropout)", n_k)
            return


def planned_counts(table: Table, conduct: Conduct, trigger: str, targets: Sequence[float],
                   weights: Sequence[float]) -> tuple[tuple[int, ...], ...] | None:
    """Planned subjects with an outcome per look and arm for looks by enrolled subjects
    or calendar time.

    Deterministic conduct gives the exact counts (:func:`look_timing`). Under Poisson
    arrivals or dropout the counts are random; the plan is then the expected schedule
    (enrolment at the expected rate, a share ``1 - lost`` of outcomes observed), rounded
    down: it sets the information fractions of the thresholds and the final sample size
    the predictive probability assumes. Records a problem and returns ``None`` when a
    look cannot be reached, sees no outcome in some arm, or sees no new outcome.
    """
    key = f"looks.{trigger}"
    last = last_outcome(conduct)
    for k, target in enumerate(targets):
        if trigger == "enrolled" and target > conduct.max_enrolment:
            table.problems.add(f"{key}[{k + 1}]", f"at most max_enrolment "
                               f"({conduct.max_enrolment}) subjects enrolled", target)
            return None
        if trigger == "time" and target > last + 1e-9:
            table.problems.add(f"{key}[{k + 1}]", f"a time at or before the last outcome "
                               f"({last:.6g} {conduct.time_unit}s: last enrolment plus lag"
                               f"{', expected' if not conduct.accrual.deterministic else ''})",
                               target)
            return None
    if conduct.deterministic:
        complete = look_timing(conduct, trigger, targets, weights).complete
        totals = [sum(c) for c in complete]
    else:
        kept = 1.0 - conduct.lost_before_outcome
        times = [conduct.accrual.time_of(int(t)) if trigger == "enrolled" else float(t)
                 for t in targets]
        totals = [math.floor(kept * min(conduct.max_enrolment, conduct.accrual.expected_count(
            t - conduct.lag)) + 1e-9) if t >= conduct.lag else 0 for t in times]
        block = allocation_block(weights)
        complete = tuple(tuple(int(v) for v in arm_counts(c, block)) for c in totals)
    if min(complete[0]) < 1:
        table.problems.add("conduct.outcome_lag", "a lag that lets every arm have an "
                           f"outcome by the first look ({key}[1] = {targets[0]:g})", conduct.lag,
                           "no outcome can be observed by then; move the first look later")
        return None
    for k, (a, b) in enumerate(itertools.pairwise(totals)):
        if b <= a:
            table.problems.add(f"{key}[{k + 2}]", "a look with new outcomes since the "
                               f"previous look ({a} planned outcomes at both)", targets[k + 1])
            return None
    return complete
