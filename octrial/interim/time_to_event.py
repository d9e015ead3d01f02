"""Interim looks for time-to-event endpoints: events and time at risk per arm.

The decision uses the family's own posterior probability of benefit
(:meth:`~octrial.endpoints.time_to_event.TimeToEventFamily.benefit_from`, the function
the simulator and the boundary table use). Looks are planned in total events, so the
observed size of the study is its total number of events; each arm's share of it is not
planned (under a hazard ratio below 1 the control arm has more events), so arms' sizes
are reported as the total split by the allocation.

Per-subject data: a CSV with ``arm``, ``time`` (time from entry to the event or to
censoring, in the endpoint's time unit) and ``event`` (1 = event, 0 = censored). Its
adequacy check compares the Kaplan-Meier curve (Kaplan & Meier 1958) with the fitted
model: the statistic is the largest distance between the Kaplan-Meier estimate and the
model's survival at the posterior mean hazards, over the observed times; its posterior
predictive distribution comes from replicated data sets with hazards drawn from the
posterior and each subject followed for as long as in the data (censored subjects to
their censoring time, subjects with an event to the arm's longest follow-up: censoring at
the analysis), as in the other adequacy checks (:mod:`octrial.interim.adequacy`).
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np
from scipy import optimize, special, stats

from octrial.design.model import Design
from octrial.endpoints import survival_maths as sm
from octrial.errors import InputError, Problem
from octrial.interim import adequacy
from octrial.interim.base import EndpointInterim, PosteriorSummary
from octrial.interim.observations import EVENTS, EventData
from octrial.interim.rule import (
    CONTINUE,
    FAILURE,
    STOP_EFFICACY,
    STOP_FUTILITY,
    SUCCESS,
    Assessment,
    probability_decision,
    thresholds_at,
)
from octrial.interim.subjects import read_subjects

CHECK_DRAWS = 2_000
"""Replicated data sets of the Kaplan-Meier check (p-value Monte Carlo error <= 0.011)."""


def kaplan_meier(times: np.ndarray, events: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(distinct event times, Kaplan-Meier survival just after each)."""
    order = np.argsort(times, kind="stable")
    t, d = np.asarray(times, dtype=float)[order], np.asarray(events)[order]
    at_risk = t.size - np.arange(t.size)
    unique, first = np.unique(t, return_index=True)
    deaths = np.add.reduceat(d.astype(float), first)
    factor = 1.0 - deaths / at_risk[first]
    keep = deaths > 0
    return unique[keep], np.cumprod(factor)[keep]


def km_distance(times: np.ndarray, events: np.ndarray, model: Any) -> float:
    """Largest |KM(t) - S(t)| over the event times, on both sides of each step."""
    t, km = kaplan_meier(times, events)
    if t.size == 0:
        return 0.0
    before = np.concatenate(([1.0], km[:-1]))
    s = model(t)
    return float(max(np.max(np.abs(km - s)), np.max(np.abs(before - s))))


def _draw_times(rng: np.random.Generator, hazards: np.ndarray, starts: tuple[float, ...],
                size: int) -> np.ndarray:
    """Piecewise-exponential times, one row per row of ``hazards`` (inverse cumulative
    hazard of a unit exponential)."""
    s = np.asarray(starts)
    widths = np.diff(s)
    cumulative = np.concatenate([np.zeros((hazards.shape[0], 1)),
                                 np.cumsum(hazards[:, :-1] * widths, axis=1)], axis=1)
    e = rng.exponential(1.0, (hazards.shape[0], size))
    j = np.sum(e[:, :, None] >= cumulative[:, None, :], axis=2) - 1
    rows = np.arange(hazards.shape[0])[:, None]
    return s[j] + (e - cumulative[rows, j]) / hazards[rows, j]


class TimeToEventInterim(EndpointInterim):
    """events/exposure per arm (and per period)."""

    endpoint = "time-to-event"
    syntax = EVENTS
    size_word = "number of events"

    def _observed(self, design: Design, observed: dict[str, Any],
                  ) -> tuple[tuple[np.ndarray, ...], tuple[np.ndarray, ...]]:
        periods = design.endpoint.periods
        wrong = [Problem(arm, f"{periods} events/exposure pairs (one per hazard period, "
                         "separated by ';')", f"{len(observed[arm].events)} pairs")
                 for arm in design.arm_names if len(observed[arm].events) != periods]
        if wrong:
            raise InputError("--data", wrong)
        events = tuple(np.array([observed[a].events], dtype=float) for a in design.arm_names)
        exposure = tuple(np.array([observed[a].exposure]) for a in design.arm_names)
        return events, exposure

    def sizes(self, design: Design, observed: dict[str, Any]) -> tuple[int, ...]:
        total = sum(sum(observed[a].events) for a in design.arm_names)
        weights = [arm.allocation for arm in design.arms]
        shares = [math.floor(total * w / sum(weights)) for w in weights]
        shares[-1] += total - sum(shares)
        return tuple(shares)

    def has_prior(self, design: Design) -> bool:
        return design.family.prior_on_effect(design.endpoint, design.two_arm) or all(
            arm.prior is not None for arm in design.arms)

    def statistics(self, design: Design, observed: dict[str, Any]) -> tuple[int, ...]:
        return tuple(sum(observed[a].events) for a in design.arm_names)

    def amount(self, design: Design, n: float) -> str:
        return f"{n:g} events"

    def statement(self, design: Design) -> str:
        h, e = design.hypothesis, design.endpoint
        side = "<" if h.better == "lower" else ">"
        if design.two_arm:
            return f"Pr(hazard ratio treatment / control {side} {h.threshold:g} | data)"
        if e.periods == 1:
            return f"Pr(hazard {side} {h.benchmark:.6g} per {e.time_unit} | data)"
        assert h.benchmark is not None  # one arm: load.py requires it
        landmark = e.landmark_time(h.benchmark)
        s0 = float(sm.survival(e.starts, e.relative_hazard, h.benchmark, landmark))
        flip = ">" if side == "<" else "<"
        return f"Pr(survival at {landmark:g} {e.time_unit} {flip} {s0:.6g} | data)"

    def assess_point(self, design: Design, look: int, sizes: tuple[int, ...],
                     observed: dict[str, Any], seed: int) -> Assessment:
        k, last = look - 1, look == design.looks.count
        events, exposure = self._observed(design, observed)
        family = design.family
        b = float(family.benefit_from(design, events, exposure)[0])
        th = thresholds_at(design, k, sum(sizes))
        pp = None
        if not last and th.futility_predictive is not None:
            if family.prior_on_effect(design.endpoint, design.two_arm):
                pp = family.normal_predictive(design, look, events, exposure)
            elif (reason := family.predictive_unsupported(design)) is not None:
                raise InputError(design.source.path or design.name,
                                 [Problem("looks.futility_predictive",
                                          "a design whose predictive probability is "
                                          "available", reason)])
            else:
                # the gamma analyses' predictive probability (exact for one arm and for
                # two arms without censoring; the split approximation otherwise)
                pp = float(family.predictive_from(design, events, exposure, seed=seed)[0])
        decision, reason = probability_decision(th, b, pp, last, self.statement(design))
        names = (SUCCESS, FAILURE) if last else (STOP_EFFICACY, STOP_FUTILITY)
        assert decision in (*names, CONTINUE)
        rules = self.bound_rules(design, look, sizes)
        assert rules is not None  # always given in words
        bounds = dict(zip(("success", "failure") if last else ("efficacy", "futility"),
                          rules, strict=True))
        return Assessment(b, pp, th, decision, reason, bounds)

    def bound_rules(self, design: Design, look: int,
                    sizes: tuple[int, ...]) -> tuple[str, str] | None:
        """The boundary table's rules when the events are the planned ones; otherwise
        the thresholds on the posterior probability in words."""
        k = look - 1
        table = design.family.boundary_table(design)
        if table is not None and int(table["events"].iloc[k]) == sum(sizes):
            row = table.iloc[k]
            return str(row["efficacy_rule"]), str(row["futility_rule"])
        th = thresholds_at(design, k, sum(sizes))
        statement = self.statement(design)
        return tuple(  # type: ignore[return-value]
            "none" if v is None else f"{statement} {op} {v:g}"
            for v, op in ((th.efficacy, ">="), (th.futility, "<")))

    def quantity(self, design: Design, n: float) -> str:
        return f"{n:g}"

    # -- summaries -------------------------------------------------------------------
    def summaries(self, design: Design, observed: dict[str, Any],
                  level: float) -> tuple[PosteriorSummary, ...]:
        tail = (1.0 - level) / 2.0
        family, e, h = design.family, design.endpoint, design.hypothesis
        events, exposure = self._observed(design, observed)
        out = []
        if not family.prior_on_effect(e, design.two_arm):
            for arm, d, x in zip(design.arms, events, exposure, strict=True):
                w, a, b = family.posterior(arm.prior, d, x)
                for j in range(e.periods):
                    label = f"hazard ({arm.name})" if e.periods == 1 else (
                        f"hazard from {e.starts[j]:g} {e.time_unit} ({arm.name})")
                    out.append(PosteriorSummary(label, float(np.sum(w * a[..., j] / b[..., j])),
                                                *(_gamma_quantile(w[0], a[0, :, j], b[0, :, j], q)
                                                  for q in (tail, 1 - tail))))
        if design.two_arm:
            estimate, information = family.log_hazard_ratio_estimate(design, events, exposure)
            if family.prior_on_effect(e, design.two_arm):
                from octrial.endpoints.normal import update

                post = update(h.prior, 1, float(information[0]),
                              np.array([estimate[0] * information[0]]))
                quantiles = [_normal_quantile(post, q) for q in (tail, 1 - tail)]
                mean = float(np.sum(post.weights * np.exp(
                    post.mean + 0.5 / post.precision)))
                out.append(PosteriorSummary("hazard ratio (treatment / control)", mean,
                                            *(math.exp(v) for v in quantiles)))
            else:
                out.append(PosteriorSummary(
                    "hazard ratio (treatment / control)", None,
                    *(self._ratio_quantile(design, events, exposure, q)
                      for q in (tail, 1 - tail))))
        return tuple(out)

    @staticmethod
    def _ratio_quantile(design: Design, events: Any, exposure: Any, q: float) -> float:
        import dataclasses

        def cdf(log_r: float) -> float:
            h = dataclasses.replace(design.hypothesis, better="lower", margin=0.0,
                                    kind="superiority")
            shifted = dataclasses.replace(h, margin=1.0 - math.exp(log_r))
            return float(design.family.benefit_from(
                dataclasses.replace(design, hypothesis=shifted), events, exposure)[0]) - q
        return math.exp(optimize.brentq(cdf, -20.0, 20.0, xtol=1e-12))

    # -- per-subject data ------------------------------------------------------------
    subject_outcome = "event"

    def read_subject_file(self, design: Design, path: Path) -> dict[str, dict[str, Any]]:
        data = read_subjects(str(path), design.arm_names, "event", whole=True, largest=1,
                             exposure=math.nan, exposure_column="time")
        if any(np.isnan(data[a]["exposure"]).any() for a in design.arm_names):
            raise InputError(str(path), [Problem("header", "a column time (time from entry "
                                                 "to the event or censoring)",
                                                 "no such column")])
        return data

    def observed_from_subjects(self, design: Design, path: Path,
                               data: dict[str, dict[str, Any]]) -> dict[str, Any]:
        starts = design.endpoint.starts
        out = {}
        for arm in design.arm_names:
            d, e = sm.split_exposure(data[arm]["exposure"], data[arm]["event"], starts)
            out[arm] = EventData(tuple(int(v) for v in d), tuple(float(v) for v in e))
        return out

    def disagreements(self, design: Design, path: Path, from_file: dict[str, Any],
                      given: dict[str, Any]) -> list[Problem]:
        from octrial.interim.base import disagreement

        return [disagreement(arm, path, from_file[arm].describe(), given[arm].describe())
                for arm in design.arm_names
                if from_file[arm].events != given[arm].events or not np.allclose(
                    from_file[arm].exposure, given[arm].exposure, rtol=1e-6, atol=0)]

    def check_subjects(self, design: Design, path: Path, data: dict[str, dict[str, Any]],
                       seed: int) -> tuple[tuple[Any, ...], tuple[str, ...]]:
        family, e = design.family, design.endpoint
        if family.prior_on_effect(e, design.two_arm):
            return (), ("No Kaplan-Meier check with a prior on the hazard ratio only (the "
                        f"arms' hazards have no posterior): the file {path} gave the data "
                        "only.",)
        checks = []
        for j, arm in enumerate(design.arms):
            checks.append(self._km_check(design, arm, data[arm.name],
                                         int(np.random.SeedSequence([seed, j]).generate_state(
                                             1, np.uint64)[0])))
        return tuple(checks), ()

    def _km_check(self, design: Design, arm: Any, data: dict[str, Any],
                  seed: int) -> adequacy.AdequacyCheck:
        e = design.endpoint
        times, events = data["exposure"], data["event"].astype(int)
        d, x = sm.split_exposure(times, events, e.starts)
        w, a, b = design.family.posterior(arm.prior, d[None], x[None])
        mean = np.sum(w[0][:, None] * a[0] / b[0], axis=0)

        def model(t: np.ndarray) -> np.ndarray:
            return np.exp(-(sm.period_overlap(e.starts, t) @ mean))

        observed = km_distance(times, events, model)
        follow = np.where(events == 1, times.max(), times)
        rng = np.random.default_rng(np.random.SeedSequence(seed))
        c = rng.choice(w[0].size, size=CHECK_DRAWS, p=w[0])
        hazards = rng.gamma(a[0][c], 1.0 / b[0][c])
        drawn = _draw_times(rng, hazards, e.starts, times.size)
        replicated = np.array([km_distance(np.minimum(t, follow), (t <= follow).astype(int),
                                           model) for t in drawn])
        return adequacy._compare(arm.name, "Kaplan-Meier distance", observed, replicated, (
            "the Kaplan-Meier curve departs from the fitted model more than the model's "
            "own data do; consider more hazard periods or another model",
            "the Kaplan-Meier curve follows the fitted model more closely than the model's "
            "own data do; check the data"))


def _gamma_quantile(w: np.ndarray, a: np.ndarray, b: np.ndarray, q: float) -> float:
    def gap(x: float) -> float:
        return float(np.sum(w * special.gammainc(a, b * x))) - q
    hi = float(np.max((a + 10 * np.sqrt(a) + 10) / b))
    while gap(hi) < 0:
        hi *= 2
    return optimize.brentq(gap, 0.0, hi, xtol=1e-14 * hi, rtol=1e-13)


def _normal_quantile(post: Any, q: float) -> float:
    sd = 1.0 / np.sqrt(post.precision[0])

    def gap(x: float) -> float:
        return float(np.sum(post.weights[0] * stats.norm.cdf(x, post.mean[0], sd))) - q
    centre = float(np.sum(post.weights[0] * post.mean[0]))
    width = 20 * float(np.max(sd)) + 1.0
    return optimize.brentq(gap, centre - width, centre + width, xtol=1e-13)
