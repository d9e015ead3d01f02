"""Read a design's ``[conduct]`` table and what its looks see in calendar time.

:func:`read_conduct` turns the table into a :class:`~octrial.conduct.model.Conduct`;
:func:`planned_counts` gives each look's planned subjects with an outcome for looks
triggered by enrolment or calendar time, and records the problems that make a look
unreachable or empty. Key names and meanings: docs/design-files.md, ``[conduct]``.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence

from octrial.conduct.model import ARRIVALS, Accrual, Conduct
from octrial.conduct.timing import allocation_block, arm_counts, look_timing
from octrial.design.reader import Phrase, Table

KEYS = ("time_unit", "arrivals", "rate", "rates", "period_starts", "enrolment_times",
        "max_enrolment", "lag", "dropout_hazard", "dropout_lost", "dropout_by",
        "analyse_pipeline")


def read_conduct(top: Table) -> Conduct | None:
    """The ``[conduct]`` table of a design (``None`` when the design has none or it is
    unusable; problems are recorded in ``top.problems``)."""
    table = top.table("conduct", required=False)
    if table is None:
        return None
    table.allow(*KEYS)
    count_before = len(table.problems)
    unit = table.string("time_unit", required=False, default="month") or "month"
    accrual = _read_accrual(table)
    given = len(accrual.times) if accrual is not None and accrual.arrivals == "fixed" else None
    enrolment = table.number("max_enrolment", required=given is None, default=given,
                             integer=True, check=lambda v: v >= 1,
                             expected="a whole number >= 1 (subjects enrolled at most)")
    if (accrual is not None and enrolment is not None and given is not None
            and given < enrolment):
        table.fail("enrolment_times", f"at least max_enrolment ({int(enrolment)}) times",
                   Phrase(f"{given} times"))
    lag = table.number("lag", required=False, default=0.0, check=lambda v: v >= 0,
                       expected="a time >= 0 from enrolment to the outcome")
    hazard = _read_dropout(table)
    pipeline = table.raw("analyse_pipeline", "true or false", required=False)
    if pipeline is not None and not isinstance(pipeline, bool):
        table.fail("analyse_pipeline", "true or false", pipeline)
    if len(table.problems) > count_before or accrual is None or enrolment is None:
        return None
    return Conduct(accrual, int(enrolment), float(lag or 0.0), hazard, bool(pipeline), unit)


def _read_accrual(table: Table) -> Accrual | None:
    fixed = table.has("enrolment_times")
    arrivals = table.string("arrivals", ARRIVALS, required=False,
                            default="fixed" if fixed else "poisson")
    if arrivals is None:
        return None
    if arrivals == "fixed" or fixed:
        if arrivals != "fixed":
            table.fail("arrivals", "'fixed' (or nothing) with enrolment_times", arrivals)
        for key in ("rate", "rates", "period_starts"):
            if table.has(key):
                table.fail(key, "no rates with fixed enrolment_times", table.data[key])
        times = table.numbers("enrolment_times", check=lambda v: v >= 0,
                              expected="a time >= 0")
        if times is None or any(t is None for t in times):
            return None
        values = [float(t) for t in times if t is not None]
        if any(b < a for a, b in itertools.pairwise(values)):
            table.fail("enrolment_times", "non-decreasing enrolment times", values)
            return None
        return Accrual(times=tuple(values), arrivals="fixed")
    positive = {"check": lambda v: v > 0, "expected": "a rate > 0 (subjects per time unit)"}
    if table.has("rate") == table.has("rates"):
        table.fail("rate", "either rate (one rate) or rates with period_starts",
                   Phrase("both" if table.has("rate") else "neither"))
        return None
    if table.has("rate"):
        if table.has("period_starts"):
            table.fail("period_starts", "period_starts only with rates",
                       table.data["period_starts"])
        rate = table.number("rate", **positive)
        return None if rate is None else Accrual(rates=(rate,), arrivals=arrivals)
    rates = table.numbers("rates", **positive)
    starts = table.numbers("period_starts", check=lambda v: v >= 0, expected="a time >= 0")
    if rates is None or starts is None or None in rates or None in starts:
        return None
    rate_values = tuple(float(r) for r in rates if r is not None)
    start_values = tuple(float(s) for s in starts if s is not None)
    if len(start_values) != len(rate_values):
        table.fail("period_starts", f"one start per rate ({len(rate_values)})",
                   Phrase(f"{len(start_values)} starts"))
        return None
    if start_values[0] != 0 or any(b <= a for a, b in itertools.pairwise(start_values)):
        table.fail("period_starts", "strictly increasing period starts, the first 0",
                   list(start_values))
        return None
    return Accrual(rates=rate_values, starts=start_values, arrivals=arrivals)


def _read_dropout(table: Table) -> float:
    if table.has("dropout_hazard"):
        for key in ("dropout_lost", "dropout_by"):
            if table.has(key):
                table.fail(key, "either dropout_hazard or dropout_lost with dropout_by",
                           table.data[key])
        hazard = table.number("dropout_hazard", check=lambda v: v >= 0,
                              expected="a hazard >= 0 (losses per subject per time unit)")
        return hazard or 0.0
    if not (table.has("dropout_lost") or table.has("dropout_by")):
        return 0.0
    lost = table.number("dropout_lost", check=lambda v: 0 <= v < 1,
                        expected="a proportion in [0, 1) lost by dropout_by")
    by = table.number("dropout_by", check=lambda v: v > 0, expected="a time > 0")
    if lost is None or by is None:
        return 0.0
    # exponential loss: 1 - exp(-hazard x by) = lost
    return -math.log1p(-lost) / by


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
        table.problems.add("conduct.lag", "a lag that lets every arm have an outcome by the "
                           f"first look ({key}[1] = {targets[0]:g})", conduct.lag,
                           "no outcome can be observed by then; move the first look later")
        return None
    for k, (a, b) in enumerate(itertools.pairwise(totals)):
        if b <= a:
            table.problems.add(f"{key}[{k + 2}]", "a look with new outcomes since the "
                               f"previous look ({a} planned outcomes at both)", targets[k + 1])
            return None
    return complete
