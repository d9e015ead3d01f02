"""Studies in calendar time: binary, count and normal designs with a ``[conduct]`` table.

Per study the simulator draws every subject's enrolment time (:mod:`octrial.conduct.arrivals`)
and, with dropout, the time each subject would be lost; a subject's outcome is observed
``lag`` after enrolment unless the subject was lost before. Subjects are assigned to arms
in fixed blocks (:func:`octrial.conduct.timing.arm_counts`). Each look happens when its
trigger is met (``looks.n`` subjects with an outcome, ``looks.enrolled`` subjects enrolled,
or the calendar time ``looks.time``); a ``looks.n`` target that dropout makes unreachable
is met when the last outcome is observed. At a look the decision uses the subjects with
an outcome, through the family's protocol (:meth:`~octrial.endpoints.base.Family.draw_statistics`,
``benefit_at``, ``predictive_at``), called once per group of studies with equal counts.

A stop stops enrolment. With ``analyse_pipeline`` a study that stops at an interim look
waits for the outcomes of its pipeline (subjects enrolled, not lost, not yet observed):
its duration ends at the last of them and its analysed subjects include them. After a
stop for efficacy those outcomes are drawn and the final analysis applies the final
success threshold; when it fails, the stop counts as reversed. Every stop still counts
at the look where it happened (the per-look efficacy and futility columns are the
decisions taken at the looks). Without ``analyse_pipeline`` a study ends at the look
where it stops. Study durations count from time 0, the start of the first accrual
period.

The predictive probability at an interim look integrates over every subject without an
outcome up to the final analysis (pipeline and subjects still to enrol are exchangeable
given the parameter, so one stage suffices). Under deterministic conduct the final
analysis has the looks' planned final counts (``looks.per_arm[-1]``); under random
conduct each study's own, expected from its state at the look
(:mod:`octrial.conduct.final_counts`: docs/methods.md, "Delayed outcomes under random
conduct"). Binary beta-mixture designs under random conduct compute the posterior and
predictive probabilities at each study's counts (:mod:`octrial.simulation.counts_benefit`,
memoised by the counts); other designs use the family's tables per distinct size.

Random numbers come from the batch's generator only: enrolment gaps (Poisson arrivals)
and dropout times first, then, look by look and arm by arm, the statistics. With even
or fixed arrivals and no dropout nothing is drawn for the calendar, and every study shares
one timeline; with lag 0 and looks by ``n`` the statistics are then drawn exactly as
the generic study loop draws them, so the numbers equal those of
:class:`~octrial.simulation.generic.StudyLoop`.
"""

from __future__ import annotations

import dataclasses
import math
from typing import Any

import numba
import numpy as np

from octrial.conduct import arrivals
from octrial.conduct.final_counts import (
    BY_ENROLMENT,
    BY_OUTCOMES,
    BY_TIME,
    expected_final_counts,
)
from octrial.conduct.timing import SLACK, allocation_block, arm_counts
from octrial.endpoints.base import Family
from octrial.rules.stop import CONTINUE, EFFICACY, FUTILITY, Rule
from octrial.simulation.base import Simulator, Tally
from octrial.simulation.calendar import (
    calendar_size,
    count_edges,
    duration_edges,
    record_studies,
)
from octrial.simulation.counts_benefit import BetaCounts, serves

CELLS = 2_000_000
"""Most study-by-subject cells held at once under random conduct (memory bound)."""


def _groups(counts: np.ndarray) -> list[tuple[tuple[int, ...], np.ndarray]]:
    """Studies with equal per-arm counts: (counts, indices) per distinct row, in
    ascending order of the rows."""
    if counts.shape[0] == 0:
        return []
    rows, inverse = np.unique(counts, axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    return [(tuple(int(v) for v in row), np.flatnonzero(inverse == g))
            for g, row in enumerate(rows)]


@numba.njit(cache=True)
def _look_state(enrol: np.ndarray, observed: np.ndarray, ordered: np.ndarray,
                rows: np.ndarray, trigger: int, target: float, arm_of: np.ndarray,
                times: np.ndarray, complete: np.ndarray,
                in_study: np.ndarray) -> None:  # pragma: no cover - compiled
    """Per study ``rows[r]`` of the subject arrays: the look's time, its subjects with an
    outcome per arm and its subjects enrolled (the look ``target``: outcomes, enrolled
    subjects or a time). ``ordered``: the outcome times sorted per study (equal to
    ``observed`` when they are already in order)."""
    m = enrol.shape[1]
    for r in range(rows.size):
        s = rows[r]
        if trigger == BY_TIME:
            t = target
        elif trigger == BY_ENROLMENT:
            t = enrol[s, int(target) - 1]
        else:
            t = ordered[s, int(target) - 1]
            if not math.isfinite(t):
                # a target dropout made unreachable: the look waits for the last outcome
                t = -math.inf
                for i in range(m - 1, -1, -1):
                    if math.isfinite(ordered[s, i]):
                        t = ordered[s, i]
                        break
        times[r] = t
        limit = t + SLACK * max(1.0, abs(t))
        for i in range(m):
            if observed[s, i] <= limit:
                complete[r, arm_of[i]] += 1
            if enrol[s, i] <= limit:
                in_study[r] += 1


@numba.njit(cache=True)
def _pipeline_state(enrol: np.ndarray, observed: np.ndarray, rows: np.ndarray,
                    t: np.ndarray, arm_of: np.ndarray, final: np.ndarray,
                    last: np.ndarray) -> None:  # pragma: no cover - compiled
    """Per study ``rows[r]`` stopped at time ``t[r]``: the subjects enrolled by then
    whose outcome will be observed, per arm (``final``), and the last of those outcome
    times (``last``; ``-inf`` when none)."""
    for r in range(rows.size):
        s = rows[r]
        limit = t[r] + SLACK * max(1.0, abs(t[r]))
        top = -math.inf
        for i in range(enrol.shape[1]):
            if enrol[s, i] <= limit and math.isfinite(observed[s, i]):
                final[r, arm_of[i]] += 1
                top = max(top, observed[s, i])
        last[r] = top


def calendar_unsupported(design: Any) -> str | None:
    """Why :class:`CalendarStudies` cannot simulate ``design``, or ``None``."""
    family, looks = design.family, design.looks
    if looks.uses_counts:
        return ("a rule stated in counts is not simulated in calendar time yet; state it "
                "as probability thresholds")
    if type(family).benefit_at is Family.benefit_at:
        return f"{family.name} endpoints have no posterior probability per simulated study"
    if any(v is not None for v in looks.futility_predictive) and not family.offers_predictive():
        return (f"{family.name} endpoints offer no predictive probability per simulated "
                "study, so a design with [conduct] and looks.futility_predictive cannot be "
                "simulated")
    return None


class CalendarStudies(Simulator):
    """Studies of a design with ``[conduct]`` at the true values ``truth``.

    Parameters
    ----------
    design : Design
        A design with ``conduct`` whose family the generic study loop can simulate.
    truth : tuple of float
        One true parameter value per arm.
    level : float
        Credible level of the intervals whose coverage is counted.
    """

    kernel = "general"

    def __init__(self, design: Any, truth: tuple[float, ...], level: float) -> None:
        reason = calendar_unsupported(design)
        if reason:
            raise ValueError(reason)
        if design.looks.trigger == "events":
            raise ValueError("looks by events need a time-to-event simulator")
        self.design = design
        self.conduct = design.conduct
        self.truth = tuple(float(t) for t in truth)
        self.rule = Rule.of(design.looks)
        self.looks = design.looks.count
        self.tail = (1.0 - level) / 2.0
        self.target = float(design.family.target_value(design.hypothesis, self.truth))
        block = allocation_block([a.allocation for a in design.arms])
        m = self.conduct.max_enrolment
        # arm of each subject in enrolment order
        self.arm_of = np.argmax(np.diff(arm_counts(np.arange(m + 1), block), axis=0), axis=1)
        self.edges = duration_edges(design)
        self.counts = count_edges(design)
        # Under random conduct the sizes reached vary from study to study: binary
        # beta-mixture designs then compute each study's probabilities at its own counts
        # (memoised) instead of a table per distinct size. Deterministic conduct keeps
        # the tables (one size per look), so its numbers stay those of the tables.
        self._finals: dict[tuple[int, ...], Any] = {}
        self.at_counts = (BetaCounts(design) if not self.conduct.deterministic
                          and serves(design) else None)

    def simulate(self, rng: np.random.Generator, replicates: int) -> Tally:
        """Simulate ``replicates`` studies with random numbers from ``rng`` only."""
        conduct = self.conduct
        if conduct.deterministic:
            return self._chunk(rng, replicates)
        size = max(1, CELLS // conduct.max_enrolment)
        tally: Tally | None = None
        for start in range(0, replicates, size):
            part = self._chunk(rng, min(size, replicates - start))
            tally = part if tally is None else tally + part
        assert tally is not None
        return tally

    # -- one chunk of studies -------------------------------------------------------
    def _timeline(self, rng: np.random.Generator, studies: int,
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Enrolment and outcome times (``inf``: lost before the outcome) and times from
        enrolment to loss (a 1 x 1 placeholder without dropout); one shared row under
        deterministic conduct."""
        conduct = self.conduct
        m = conduct.max_enrolment
        gaps = (None if conduct.accrual.deterministic
                else rng.standard_exponential((studies, m)))
        enrol = arrivals.enrolment_times(conduct.accrual, gaps, studies, m)
        observed = enrol + conduct.lag
        lost = np.full((1, 1), np.inf)
        if conduct.dropout_hazard > 0:
            lost = arrivals.dropout_times(rng.standard_exponential((studies, m)),
                                          conduct.dropout_hazard)
            observed = np.where(lost < conduct.lag, np.inf, np.broadcast_to(observed,
                                                                           lost.shape))
        return enrol, observed, lost

    def _look(self, k: int, enrol: np.ndarray, observed: np.ndarray, ordered: np.ndarray,
              rows: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Look ``k`` of the studies ``rows`` of the subject arrays: time, subjects with
        an outcome per arm, subjects enrolled (:func:`_look_state`)."""
        looks = self.design.looks
        trigger = {"time": BY_TIME, "enrolled": BY_ENROLMENT}.get(looks.trigger, BY_OUTCOMES)
        target = float(looks.n[k]) if trigger == BY_OUTCOMES else float(looks.at[k])
        times = np.empty(rows.size)
        complete = np.zeros((rows.size, len(self.design.arms)), dtype=np.int64)
        in_study = np.zeros(rows.size, dtype=np.int64)
        _look_state(enrol, observed, ordered, rows, trigger, target, self.arm_of, times,
                    complete, in_study)
        return times, complete, in_study

    def _draw(self, rng: np.random.Generator, statistics: list[np.ndarray],
              increments: np.ndarray) -> None:
        """Add each arm's statistic of its new subjects, grouped by equal increments."""
        family, design = self.design.family, self.design
        for j in range(len(statistics)):
            values = increments[:, j]
            distinct = np.unique(values)
            if distinct.size == 1:
                if distinct[0] > 0:
                    statistics[j] = statistics[j] + family.draw_statistics(
                        design, j, self.truth[j], int(distinct[0]), rng, values.size)
                continue
            added = np.zeros(values.size)
            for v in distinct:
                if v > 0:
                    where = values == v
                    added[where] = family.draw_statistics(design, j, self.truth[j], int(v),
                                                          rng, int(where.sum()))
            statistics[j] = statistics[j] + added

    def _decide(self, k: int, statistics: list[np.ndarray], counts: np.ndarray,
                subjects: tuple[np.ndarray, ...], rows: np.ndarray,
                t: np.ndarray) -> np.ndarray:
        """Decision codes at look ``k`` from the data of subjects with an outcome
        (``subjects``, ``rows`` and ``t``: the studies' subject arrays, their rows there
        and the look's times, for the predictive probability's final counts)."""
        design, family, rule = self.design, self.design.family, self.rule
        codes = np.full(counts.shape[0], CONTINUE if k < rule.last else FUTILITY,
                        dtype=np.int64)
        # an arm without outcomes: no decision possible
        where = np.flatnonzero(counts.min(axis=1) >= 1)
        benefit = np.full(counts.shape[0], np.nan)
        if self.at_counts is not None:
            benefit[where] = self.at_counts.benefit(tuple(x[where] for x in statistics),
                                                    counts[where])
        else:
            for n, group in _groups(counts[where]):
                chosen = where[group]
                benefit[chosen] = family.benefit_at(
                    design, tuple(x[chosen] for x in statistics), n)
        codes[where] = rule.decide_many(k, benefit[where])
        open_ = where[codes[where] == CONTINUE]
        if not rule.has_predictive(k) or open_.size == 0:
            return codes
        if self.conduct.deterministic:
            final = np.broadcast_to(np.array(design.looks.per_arm[-1], dtype=np.int64),
                                    (open_.size, counts.shape[1]))
        else:
            final = self._final_counts(subjects, np.ascontiguousarray(rows[open_]),
                                       np.ascontiguousarray(t[open_], dtype=float))
        if self.at_counts is not None:
            predictive = self.at_counts.predictive(
                tuple(x[open_] for x in statistics), counts[open_], final,
                float(rule.efficacy[rule.last]) - rule.tolerance)
            codes[open_] = rule.decide_many(k, benefit[open_], predictive)
            return codes
        predictive = np.ones(open_.size)
        sizes = np.concatenate([counts[open_], final], axis=1)
        arms = counts.shape[1]
        for key, group in _groups(sizes):
            n, sizes_final = key[:arms], key[arms:]
            chosen = open_[group]
            if all(a <= b for a, b in zip(n, sizes_final, strict=True)):
                predictive[group] = family.predictive_at(
                    self._with_final(sizes_final), tuple(x[chosen] for x in statistics), n)
            else:
                # past the planned final counts: the final threshold on the current data
                passed = rule.decide_many(rule.last, benefit[chosen]) == EFFICACY
                predictive[group] = passed.astype(float)
        codes[open_] = rule.decide_many(k, benefit[open_], predictive)
        return codes

    def _final_counts(self, subjects: tuple[np.ndarray, ...], rows: np.ndarray,
                      t: np.ndarray) -> np.ndarray:
        """Each study's expected final size per arm from its own state at its look time
        (:func:`octrial.conduct.final_counts.expected_final_counts`)."""
        conduct, looks = self.conduct, self.design.looks
        trigger = {"time": BY_TIME, "enrolled": BY_ENROLMENT}.get(looks.trigger, BY_OUTCOMES)
        target = float(looks.n[-1]) if trigger == BY_OUTCOMES else float(looks.at[-1])
        out = np.zeros((rows.size, len(self.design.arms)), dtype=np.int64)
        accrual = conduct.accrual
        enrol, observed, lost = subjects
        expected_final_counts(enrol, observed, lost, rows, t, accrual.arrivals == "poisson",
                              np.asarray(accrual.rates, dtype=float),
                              np.asarray(accrual.starts, dtype=float), float(conduct.lag),
                              float(conduct.dropout_hazard), trigger, target, self.arm_of,
                              out)
        return out

    def _with_final(self, final: tuple[int, ...]) -> Any:
        """The design with final per-arm sizes ``final`` (what the family's predictive
        probability reads as the final analysis)."""
        if final == tuple(self.design.looks.per_arm[-1]):
            return self.design
        design = self._finals.get(final)
        if design is None:
            looks = self.design.looks
            looks = dataclasses.replace(looks, per_arm=(*looks.per_arm[:-1], final),
                                        n=(*looks.n[:-1], sum(final)))
            design = dataclasses.replace(self.design, looks=looks)
            self._finals[final] = design
        return design

    def _final_success(self, statistics: list[np.ndarray], counts: np.ndarray) -> np.ndarray:
        success = np.zeros(counts.shape[0], dtype=bool)
        if self.at_counts is not None:
            where = np.flatnonzero(counts.min(axis=1) >= 1)
            benefit = self.at_counts.benefit(tuple(x[where] for x in statistics),
                                             counts[where])
            success[where] = self.rule.decide_many(self.rule.last, benefit) == EFFICACY
            return success
        for n, where in _groups(counts):
            if min(n) < 1:
                continue
            benefit = self.design.family.benefit_at(
                self.design, tuple(x[where] for x in statistics), n)
            success[where] = self.rule.decide_many(self.rule.last, benefit) == EFFICACY
        return success

    def _estimate(self, statistics: list[np.ndarray], counts: np.ndarray,
                  sums: np.ndarray) -> int | None:
        """Add the estimation sums of stopping studies; their covered count (``None``:
        the family offers no estimate)."""
        covered = 0
        groups: list[tuple[tuple[int, ...], np.ndarray]]
        if self.at_counts is not None:
            groups = [((), np.flatnonzero(counts.min(axis=1) >= 1))]
        else:
            groups = _groups(counts)
        for n, where in groups:
            if self.at_counts is not None:
                found = self.at_counts.estimate(tuple(x[where] for x in statistics),
                                                counts[where], self.target)
            elif min(n) < 1:
                continue
            else:
                found = self.design.family.estimate_at(
                    self.design, tuple(x[where] for x in statistics), n, self.target)
            if found is None:
                return None
            error = found[0] - self.target
            squared = error * error
            sums += (error.sum(), squared.sum(), (squared * squared).sum())
            covered += int(np.count_nonzero((self.tail <= found[1])
                                            & (found[1] <= 1.0 - self.tail)))
        return covered

    def _chunk(self, rng: np.random.Generator, studies: int) -> Tally:
        conduct, design = self.conduct, self.design
        arms = len(design.arms)
        shared = conduct.deterministic
        enrol, observed, lost = self._timeline(rng, studies)
        enrol = np.ascontiguousarray(np.broadcast_to(enrol, observed.shape))
        observed = np.ascontiguousarray(observed)
        subjects = (enrol, observed, np.ascontiguousarray(lost))
        # looks by n with dropout read the n-th outcome time: sort each study's once
        ordered = (np.sort(observed, axis=1) if design.looks.trigger == "complete"
                   and conduct.dropout_hazard > 0 else observed)
        efficacy = np.zeros(self.looks, dtype=np.int64)
        futility = np.zeros(self.looks, dtype=np.int64)
        sums, covered, estimated = np.zeros(3), 0, True
        duration = np.zeros(studies)
        enrolled = np.zeros(studies)
        analysed = np.zeros(studies)
        look_times = np.full((studies, self.looks), np.nan)
        reversed_ = 0
        running = np.arange(studies)
        statistics: list[np.ndarray] = [np.zeros(studies) for _ in range(arms)]
        before = np.zeros((studies, arms), dtype=np.int64)
        for k in range(self.looks):
            if running.size == 0:
                break
            # one shared timeline (row 0) under deterministic conduct
            rows = np.zeros(1, dtype=np.int64) if shared else running
            t, complete, in_study = self._look(k, enrol, observed, ordered, rows)
            if shared:
                t = np.broadcast_to(t, running.shape)
                complete = np.broadcast_to(complete, (running.size, arms))
                in_study = np.broadcast_to(in_study, running.shape)
            self._draw(rng, statistics, complete - before)
            before = np.array(complete)
            codes = self._decide(k, statistics, before, subjects, rows, t)
            stops = codes != CONTINUE
            efficacy[k] = int(np.count_nonzero(codes == EFFICACY))
            futility[k] = int(np.count_nonzero(codes == FUTILITY))
            look_times[running, k] = t
            ended = running[stops]
            duration[ended] = t[stops]
            enrolled[ended] = in_study[stops]
            analysed[ended] = before[stops].sum(axis=1)
            if estimated and np.any(stops):
                found = self._estimate([x[stops] for x in statistics], before[stops], sums)
                if found is None:
                    estimated = False
                else:
                    covered += found
            if conduct.analyse_pipeline and k < self.rule.last and np.any(stops):
                reversed_ += self._pipeline(rng, codes, running, t, statistics, before,
                                            enrol, observed, duration, analysed, shared)
            keep = ~stops
            running = running[keep]
            statistics = [x[keep] for x in statistics]
            before = before[keep]
        calendar = np.zeros(calendar_size(self.looks))
        record_studies(calendar, self.edges, duration, enrolled, analysed, look_times,
                       reversed_, self.counts)
        if not estimated:
            return Tally(studies, efficacy, futility, calendar=calendar)
        return Tally(studies, efficacy, futility, sums, covered, calendar=calendar)

    def _pipeline(self, rng: np.random.Generator, codes: np.ndarray, running: np.ndarray,
                  t: np.ndarray, statistics: list[np.ndarray], counts: np.ndarray,
                  enrol: np.ndarray, observed: np.ndarray, duration: np.ndarray,
                  analysed: np.ndarray, shared: bool) -> int:
        """The pipeline of studies that stopped at an interim look: their duration ends
        at the last pipeline outcome and their analysed subjects include it; the final
        analysis of stops for efficacy is redone with it. Returns how many of those
        stops the final analysis reverses."""
        chosen = codes != CONTINUE
        t_c = np.ascontiguousarray(t[chosen], dtype=float)
        rows = np.zeros(1, dtype=np.int64) if shared else running[chosen]
        final_counts = np.zeros((rows.size, counts.shape[1]), dtype=np.int64)
        last = np.empty(rows.size)
        _pipeline_state(enrol, observed, rows, t_c[:rows.size], self.arm_of, final_counts,
                        last)
        if shared:
            final_counts = np.broadcast_to(final_counts, (t_c.size, counts.shape[1]))
            last = np.broadcast_to(last, t_c.shape)
        ids = running[chosen]
        duration[ids] = np.maximum(t_c, last)
        analysed[ids] = final_counts.sum(axis=1)
        won = codes[chosen] == EFFICACY
        if not np.any(won):
            return 0
        stats = [x[chosen][won] for x in statistics]
        self._draw(rng, stats, np.asarray(final_counts)[won] - counts[chosen][won])
        success = self._final_success(stats, np.asarray(final_counts)[won])
        return int(np.count_nonzero(~success))
