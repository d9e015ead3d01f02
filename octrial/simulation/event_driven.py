"""Event-driven time-to-event studies simulated subject by subject (numba).

One study: up to ``max_enrolment`` subjects enter in calendar time (a Poisson process with
piecewise-constant rates, evenly at those rates, or at fixed times:
:class:`octrial.conduct.model.Accrual`), are allocated in fixed blocks by the arms'
allocation weights (1:1 alternates the arms), and each has a time from enrolment to the
event drawn from its arm's (piecewise-)exponential distribution by the inverse cdf over
the pieces, and, with a dropout hazard, an independent exponential time to loss. Look k
happens at the calendar time of the D_k-th observed event (``trigger = "events"``) or at
the stated calendar time (``trigger = "time"``). At the look each subject enrolled so far
contributes exposure min(time to event, time to loss, time since enrolment), split over
the analysis model's pieces, and an event in the piece where it happened if it has been
seen (administrative censoring at the analysis). When fewer than D_k events can ever be
seen (losses, or fewer subjects than events), the look happens when every subject's
follow-up has ended and it is the final analysis. The decision is the stop rule of
:mod:`octrial.rules.stop` on the posterior probability of benefit from the gamma (mixture)
posterior of one piece's hazard (``decision_piece``; with one analysis piece, the constant
hazard): one arm, Pr(lambda < benchmark) by the regularized incomplete gamma; two arms,
Pr(lambda_T / lambda_C < c) by the beta identity b_T l_T / (b_T l_T + b_C l_C) ~
Beta(a_T, a_C). One arm with several pieces decides on the survival at a landmark
(:func:`landmark_benefit`: a sum of gamma laws, the Moschopoulos series); two arms with
the normal approximation on the log hazard ratio on the score of the log HR estimate
(:func:`normal_benefit`). A stop ends enrolment. Predictive futility (looks at event
counts) uses the predictive probability of final success: with gamma posteriors (one
analysis piece) that of :mod:`octrial.endpoints.survival_predictive`, one arm in closed
form (:func:`one_arm_predictive`), two arms by the split approximation
(:func:`two_arm_predictive`: a beta-binomial sum with one prior component per arm, else
a fixed number of draws from the study's generator); with the normal approximation the
known-variance model's (:func:`normal_predictive`).

Random numbers come only from the generator passed to :meth:`PatientLevelSimulator.
simulate`, drawn inside the kernel study by study in a fixed order (the study's
enrolment gaps, then per subject in enrolment order its event time and its loss time;
then, at each two-arm look with mixture priors that needs it, the predictive
probability's draws), so a
batch's numbers depend on the seed and the batch only, whatever ``--jobs``.

Speed: every subject is simulated (about 3 standard exponentials per subject, which are
most of the time; the looks' event times by a bucket pass, not a sort; arithmetic rather
than branches over the subjects); ``tests/benchmarks/bench_event_driven.py`` measures it
against a vectorised numpy version and a plain Python loop. docs/methods.md says why the
gamma shortcut of one arm's exposure is a check here rather than the simulator.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from itertools import pairwise
from types import SimpleNamespace
from typing import Any

import numba
import numpy as np

from octrial.conduct.arrivals import fill_enrolment_times
from octrial.conduct.model import Accrual, Conduct
from octrial.conduct.timing import allocation_block
from octrial.rules.stop import (
    CONTINUE,
    DECISION_TOLERANCE,
    EFFICACY,
)
from octrial.simulation.base import Simulator, Tally
from octrial.simulation.calendar import (
    calendar_size,
    count_edges,
    duration_edges,
    record_study,
)
from octrial.simulation.event_driven_decisions import benefit_at, look_code

ARRIVALS = {"poisson": 0, "even": 1, "fixed": 2}
PREDICTIVE_DRAWS = 1000
"""Draws of one two-arm predictive probability with mixture priors (standard error at
most 0.016); one component per arm needs none."""
TRIGGERS = {"events": 0, "time": 1}


def allocation_pattern(weights: tuple[float, ...]) -> np.ndarray:
    """The fixed allocation block as arm indices in the order subjects are allocated
    (:func:`octrial.conduct.timing.allocation_block`, filled in the order of
    :func:`~octrial.conduct.timing.arm_counts`): (1, 1) gives [0, 1], (2, 1) gives
    [0, 0, 1] and (1.5, 1) gives [0, 0, 0, 1, 1]."""
    block = allocation_block(weights)
    return np.repeat(np.arange(len(block), dtype=np.int64), block)


def _nan(values: tuple[float | None, ...]) -> tuple[float, ...]:
    return tuple(math.nan if v is None else float(v) for v in values)


@dataclass(frozen=True)
class EventDrivenSetup:
    """Everything one scenario of an event-driven study needs, as plain numbers.

    Attributes
    ----------
    hazards : tuple of tuple of float
        True hazard of each arm (arm 0 = treatment, arm 1 = control) in each piece of
        ``hazard_starts`` (time since enrolment).
    claim : float
        One arm: the benchmark hazard; two arms: the hazard-ratio margin c of
        Pr(HR < c) (HR = treatment / control).
    efficacy, futility : tuple of float or None
        Posterior-probability thresholds per look (``None``: none at that look); the last
        efficacy value is the final success threshold.
    targets : tuple of float
        Events (``trigger = "events"``, whole numbers, increasing) or calendar times
        (``trigger = "time"``, increasing) of the looks.
    accrual : Accrual
        Enrolment over calendar time.
    max_enrolment : int
        Subjects enrolled at most, all arms together.
    prior_a, prior_b : tuple of tuple of tuple of float
        Gamma prior shape and rate of each arm's hazard in each analysis piece, one value
        per mixture component (``prior_a[arm][piece][component]``).
    prior_weights : tuple of tuple of tuple of float, or None
        Mixture weights in the same layout (``None``: one component per piece).
    hazard_starts : tuple of float
        Start of each true-hazard piece: 0 first, strictly increasing.
    analysis_starts : tuple of float
        Start of each piece of the analysis model (its own pieces; (0,) is the
        exponential model).
    decision_piece : int
        The analysis piece whose hazard (ratio) the decision is about.
    lower_better : bool
        Whether a lower hazard (ratio) is the benefit.
    trigger : str
        ``"events"`` or ``"time"``.
    dropout_hazard : float
        Exponential hazard of loss to follow-up (0: nobody is lost).
    allocation : tuple of float
        Allocation weights of the arms.
    futility_predictive : tuple of float or None
        Predictive-probability futility thresholds per look (empty, or ``None`` at a
        look: none); needs looks at event counts and one analysis piece.
    predictive_draws : int
        Monte Carlo draws of one two-arm predictive probability (module docstring).
    landmark_overlap : tuple of float
        One arm with several analysis pieces: the time Delta_j each piece overlaps
        [0, L) for the landmark L (empty: decide on ``decision_piece``). The decision is
        then on Pr(sum_j Delta_j h_j < ``landmark_limit``) = Pr(S(L) > S0(L)), the
        pieces' hazards h_j sharing the mixture component (``prior_weights`` equal in
        every piece).
    landmark_limit : float
        lambda0 H0(L): the benchmark's cumulative hazard at the landmark.
    log_hazard_ratio_prior : tuple of three tuples of float, or None
        Two arms, the normal approximation on the log hazard ratio: the prior's mixture
        weights, means and sds on log HR. ``None``: gamma
        posteriors per arm. The estimate is log(d_T / sum_j r_j E_Tj) - log(d_C /
        sum_j r_j E_Cj) over all analysis pieces, with information D q / (1 + q)^2 from
        the D events seen (q the allocation ratio; ``prior_a``/``prior_b`` unused).
    analysis_shape : tuple of float
        The relative hazard r_j of each analysis piece (empty: all 1).
    """

    hazards: tuple[tuple[float, ...], ...]
    claim: float
    efficacy: tuple[float | None, ...]
    futility: tuple[float | None, ...]
    targets: tuple[float, ...]
    accrual: Accrual
    max_enrolment: int
    prior_a: tuple[tuple[tuple[float, ...], ...], ...]
    prior_b: tuple[tuple[tuple[float, ...], ...], ...]
    prior_weights: tuple[tuple[tuple[float, ...], ...], ...] | None = None
    hazard_starts: tuple[float, ...] = (0.0,)
    analysis_starts: tuple[float, ...] = (0.0,)
    decision_piece: int = 0
    lower_better: bool = True
    trigger: str = "events"
    dropout_hazard: float = 0.0
    allocation: tuple[float, ...] = field(default=())
    futility_predictive: tuple[float | None, ...] = ()
    predictive_draws: int = PREDICTIVE_DRAWS
    landmark_overlap: tuple[float, ...] = ()
    landmark_limit: float = math.nan
    log_hazard_ratio_prior: tuple[tuple[float, ...], tuple[float, ...],
                                  tuple[float, ...]] | None = None
    analysis_shape: tuple[float, ...] = ()

    def __post_init__(self) -> None:
        wrong = self.problems()
        if wrong:
            raise ValueError("event-driven setup: " + "; ".join(wrong))

    @property
    def arms(self) -> int:
        """Number of arms (1 or 2)."""
        return len(self.hazards)

    @property
    def looks(self) -> int:
        """Number of looks."""
        return len(self.targets)

    def problems(self) -> list[str]:
        """What is wrong with the setup, each naming the attribute, expected and got."""
        wrong: list[str] = []

        def starts_ok(name: str, starts: tuple[float, ...]) -> None:
            if not starts or starts[0] != 0.0 or any(
                    b <= a for a, b in pairwise(starts)):
                wrong.append(f"{name}: expected 0 then strictly increasing times, got "
                             f"{starts}")

        if self.arms not in (1, 2):
            wrong.append(f"hazards: expected 1 or 2 arms, got {self.arms}")
        starts_ok("hazard_starts", self.hazard_starts)
        starts_ok("analysis_starts", self.analysis_starts)
        for j, row in enumerate(self.hazards):
            if len(row) != len(self.hazard_starts) or any(not h > 0 for h in row):
                wrong.append(f"hazards[{j}]: expected {len(self.hazard_starts)} positive "
                             f"hazards, got {row}")
        pieces = len(self.analysis_starts)
        for name, value in (("prior_a", self.prior_a), ("prior_b", self.prior_b),
                            ("prior_weights", self.prior_weights)):
            if value is None:
                continue
            # arms may have different numbers of mixture components (a robust mixture
            # on the control only), each arm the same number in every piece
            if len(value) != self.arms or any(
                    len(arm) != pieces or any(len(c) != len(self.prior_a[j][0])
                                              or any(not x > 0 for x in c) for c in arm)
                    for j, arm in enumerate(value)):
                wrong.append(f"{name}: expected positive values for {self.arms} arm(s) x "
                             f"{pieces} piece(s) x each arm's components, got {value}")
        if not 0 <= self.decision_piece < pieces:
            wrong.append(f"decision_piece: expected 0 to {pieces - 1}, got "
                         f"{self.decision_piece}")
        if not self.claim > 0:
            wrong.append(f"claim: expected a positive hazard or ratio, got {self.claim}")
        if self.trigger not in TRIGGERS:
            wrong.append(f"trigger: expected one of {sorted(TRIGGERS)}, got {self.trigger!r}")
        if not self.targets or any(b <= a for a, b in
                                   pairwise(self.targets)) or \
                self.targets[0] <= 0:
            wrong.append(f"targets: expected positive increasing values, got {self.targets}")
        elif self.trigger == "events" and any(t != int(t) for t in self.targets):
            wrong.append(f"targets: expected whole numbers of events, got {self.targets}")
        if len(self.efficacy) != self.looks or len(self.futility) != self.looks:
            wrong.append(f"efficacy, futility: expected {self.looks} values each, got "
                         f"{len(self.efficacy)} and {len(self.futility)}")
        elif self.efficacy[-1] is None:
            wrong.append("efficacy: expected a final success threshold, got None")
        if self.max_enrolment < 1:
            wrong.append(f"max_enrolment: expected at least 1, got {self.max_enrolment}")
        a = self.accrual
        if a.arrivals not in ARRIVALS:
            wrong.append(f"accrual.arrivals: expected one of {sorted(ARRIVALS)}, got "
                         f"{a.arrivals!r}")
        elif a.arrivals == "fixed" and (len(a.times) < self.max_enrolment or any(
                y < x for x, y in pairwise(a.times)) or min(a.times) < 0):
            wrong.append(f"accrual.times: expected at least {self.max_enrolment} "
                         f"non-negative non-decreasing times, got {a.times}")
        elif a.arrivals != "fixed" and (not a.rates or any(not r > 0 for r in a.rates)
                                        or len(a.rates) != len(a.starts)):
            wrong.append(f"accrual.rates: expected one positive rate per start, got "
                         f"{a.rates} for starts {a.starts}")
        if not self.dropout_hazard >= 0:
            wrong.append(f"dropout_hazard: expected 0 or more, got {self.dropout_hazard}")
        if self.landmark_overlap:
            weights = self.prior_weights or ((None,),)
            if self.arms != 1 or len(self.landmark_overlap) != pieces or any(
                    not x >= 0 for x in self.landmark_overlap) or not sum(
                    self.landmark_overlap) > 0:
                wrong.append(f"landmark_overlap: expected one arm and {pieces} overlaps "
                             f">= 0, not all 0, got {self.landmark_overlap} for "
                             f"{self.arms} arm(s)")
            elif any(w != weights[0][0] for w in weights[0]):
                wrong.append("prior_weights: expected the same mixture weights in every "
                             f"piece (a landmark decision), got {weights[0]}")
            if not self.landmark_limit > 0:
                wrong.append(f"landmark_limit: expected a cumulative hazard > 0, got "
                             f"{self.landmark_limit}")
        if self.log_hazard_ratio_prior is not None:
            w, m, sd = self.log_hazard_ratio_prior
            if self.arms != 2 or not w or len(w) != len(m) or len(w) != len(sd) or any(
                    not x > 0 for x in (*w, *sd)) or any(not math.isfinite(x) for x in m):
                wrong.append("log_hazard_ratio_prior: expected two arms and equal numbers of "
                             "weights > 0, finite means and sds > 0, got "
                             f"{self.log_hazard_ratio_prior} for {self.arms} arm(s)")
        if self.analysis_shape and (len(self.analysis_shape) != pieces or any(
                not x > 0 for x in self.analysis_shape)):
            wrong.append(f"analysis_shape: expected {pieces} relative hazards > 0, got "
                         f"{self.analysis_shape}")
        if any(v is not None for v in self.futility_predictive):
            if len(self.futility_predictive) != self.looks:
                wrong.append(f"futility_predictive: expected {self.looks} values, got "
                             f"{len(self.futility_predictive)}")
            normal = self.log_hazard_ratio_prior is not None
            if self.trigger != "events" or (pieces != 1 and not normal):
                wrong.append("futility_predictive: expected looks at event counts and one "
                             f"analysis piece, got trigger {self.trigger!r} and {pieces} "
                             "piece(s)")
            if self.predictive_draws < 1:
                wrong.append(f"predictive_draws: expected at least 1, got "
                             f"{self.predictive_draws}")
        if self.allocation and (len(self.allocation) != self.arms
                                or any(not w > 0 for w in self.allocation)):
            wrong.append(f"allocation: expected {self.arms} positive weights, got "
                         f"{self.allocation}")
        return wrong

    def duration_edges(self) -> np.ndarray:
        """Bin edges of the duration histogram (:mod:`octrial.simulation.calendar`)."""
        conduct = Conduct(self.accrual, self.max_enrolment)
        return duration_edges(SimpleNamespace(conduct=conduct))

    def count_edges(self) -> np.ndarray:
        """Bin edges of the enrolled and analysed histograms."""
        return count_edges(SimpleNamespace(conduct=Conduct(self.accrual, self.max_enrolment)))


def setup_of_design(design: Any, truth: tuple[float, ...]) -> EventDrivenSetup:
    """The setup of a time-to-event design at true hazards ``truth`` (one per arm):
    gamma-mixture priors, looks at event counts or calendar times. An endpoint with
    hazard periods (``starts`` and ``relative_hazard``: each arm's hazard is its
    ``truth`` times the period's relative hazard) is simulated piecewise, analysed per
    period with the arm's prior on each, and decided on the first period's hazard ratio
    (two arms); one arm with several periods decides on the survival at the landmark
    (``endpoint.landmark_time``: the landmark, or the benchmark's median), as the
    family does. With ``analysis = 'normal-log-hazard-ratio'`` the decision is the
    normal approximation with the prior ``hypothesis.prior`` on log HR."""
    conduct = design.conduct
    if conduct is None:
        raise ValueError("an event-driven design needs a [conduct] table")
    arms = design.arms
    h = design.hypothesis
    looks = design.looks
    endpoint = design.endpoint
    starts = tuple(float(x) for x in getattr(endpoint, "starts", (0.0,)))
    shape = tuple(float(x) for x in getattr(endpoint, "relative_hazard", (1.0,)))
    benchmark = getattr(h, "benchmark", None)
    claim = (benchmark if benchmark is not None else h.null_value) if len(arms) == 1 \
        else h.threshold
    overlap: tuple[float, ...] = ()
    limit = math.nan
    if len(starts) > 1 and len(arms) == 1:
        from octrial.endpoints import survival_maths as sm

        landmark = endpoint.landmark_time(float(claim))
        overlap = tuple(float(v) for v in sm.period_overlap(starts, landmark))
        limit = float(claim) * float(sm.base_cumulative_hazard(starts, shape, landmark))
    # looks at event counts are read into n; calendar-time looks carry their times in at
    trigger = "time" if looks.trigger == "time" else "events"
    targets = tuple(float(t) for t in (looks.at if looks.trigger in TRIGGERS and looks.at
                                       else looks.n))

    def per_period(values: Any) -> tuple[tuple[float, ...], ...]:
        return (tuple(float(x) for x in values),) * len(starts)

    normal = None
    if getattr(endpoint, "analysis", "gamma") == "normal-log-hazard-ratio":
        prior = h.prior  # a normal mixture on log HR (the family's check_design)
        normal = (tuple(float(v) for v in prior.weights),
                  tuple(float(v) for v in prior.mean), tuple(float(v) for v in prior.sd))
        # the arms' gamma priors are unused by the normal approximation
        unused = SimpleNamespace(a=(1.0,), b=(1.0,), weights=(1.0,))
        arms = tuple(SimpleNamespace(prior=unused, allocation=arm.allocation) for arm in arms)

    return EventDrivenSetup(
        hazards=tuple(tuple(float(t) * r for r in shape) for t in truth),
        claim=float(claim),
        efficacy=tuple(looks.efficacy), futility=tuple(looks.futility),
        targets=targets, accrual=conduct.accrual, max_enrolment=conduct.max_enrolment,
        prior_a=tuple(per_period(arm.prior.a) for arm in arms),
        prior_b=tuple(per_period(arm.prior.b) for arm in arms),
        prior_weights=tuple(per_period(arm.prior.weights) for arm in arms),
        hazard_starts=starts, analysis_starts=starts,
        lower_better=h.better == "lower", trigger=trigger,
        dropout_hazard=float(conduct.dropout_hazard),
        allocation=tuple(float(a.allocation) for a in arms),
        futility_predictive=tuple(getattr(looks, "futility_predictive", ())),
        landmark_overlap=overlap, landmark_limit=limit, log_hazard_ratio_prior=normal,
        analysis_shape=shape)


class PatientLevelSimulator(Simulator):
    """Studies of one :class:`EventDrivenSetup`, every subject simulated."""

    kernel = "event-driven"

    def __init__(self, setup: EventDrivenSetup) -> None:
        self.setup = s = setup
        self.looks = s.looks
        accrual = s.accrual
        self.kind = ARRIVALS[accrual.arrivals]
        self.rates = np.asarray(accrual.rates or (1.0,), dtype=float)
        self.starts = np.asarray(accrual.starts or (0.0,), dtype=float)
        self.times = np.asarray(accrual.times or (0.0,), dtype=float)
        self.pattern = allocation_pattern(s.allocation or (1.0,) * s.arms)
        self.hazards = np.asarray(s.hazards, dtype=float)
        self.hazard_starts = np.asarray(s.hazard_starts, dtype=float)
        self.analysis_starts = np.asarray(s.analysis_starts, dtype=float)
        # the decision piece's prior, arms padded to the widest mixture with components
        # of weight 0 (log weight -inf), which the posterior skips
        p = s.decision_piece
        width = max(len(arm[p]) for arm in s.prior_a)
        self.a = np.ones((s.arms, width))
        self.b = np.ones((s.arms, width))
        self.log_w = np.full((s.arms, width), -np.inf)
        for j in range(s.arms):
            size = len(s.prior_a[j][p])
            weights = (np.ones(size) if s.prior_weights is None else
                       np.asarray(s.prior_weights[j][p], dtype=float))
            self.a[j, :size] = s.prior_a[j][p]
            self.b[j, :size] = s.prior_b[j][p]
            self.log_w[j, :size] = np.log(weights / weights.sum())
        # one arm's prior in every analysis piece, for a landmark decision
        pieces = len(s.analysis_starts)
        self.piece_a = np.ones((pieces, width))
        self.piece_b = np.ones((pieces, width))
        for q in range(pieces):
            size = len(s.prior_a[0][q])
            self.piece_a[q, :size] = s.prior_a[0][q]
            self.piece_b[q, :size] = s.prior_b[0][q]
        self.overlap = np.asarray(s.landmark_overlap, dtype=float)
        self.normal = self.normal_setup()
        self.targets = np.asarray(s.targets, dtype=float)
        self.efficacy = np.asarray(_nan(s.efficacy))
        self.futility = np.asarray(_nan(s.futility))
        self.edges = s.duration_edges()
        self.counts = s.count_edges()
        self.predictive = np.asarray(_nan(s.futility_predictive or (None,) * s.looks))
        self.bound, self.quantiles = self.predictive_setup()

    def normal_setup(self) -> tuple[np.ndarray, ...]:
        """The normal approximation's numbers for the kernel: (prior weights, means and
        precisions on the benefit scale eta = sign log HR, then one array of [sign,
        claim sign log c, information per event q / (1 + q)^2, final information, final
        score bound], then the analysis pieces' relative hazards); empty arrays for the
        gamma analysis. The final score bound S* (final success iff S >= S*) is the
        known-variance rule's (:func:`octrial.rules.normal.benefit_score`), for the
        predictive probability."""
        s = self.setup
        pieces = len(s.analysis_starts)
        shape = np.asarray(s.analysis_shape or (1.0,) * pieces, dtype=float)
        if s.log_hazard_ratio_prior is None:
            return np.empty(0), np.empty(0), np.empty(0), np.empty(5), shape
        from octrial.endpoints.normal import NormalMixture
        from octrial.rules.normal import benefit_score

        w, m, sd = (np.asarray(v, dtype=float) for v in s.log_hazard_ratio_prior)
        sign = -1.0 if s.lower_better else 1.0
        q = (s.allocation[0] / s.allocation[1]) if s.allocation else 1.0
        factor = q / (1.0 + q) ** 2
        claim = sign * math.log(s.claim)
        final_info = float(s.targets[-1]) * factor if s.trigger == "events" else math.nan
        upper = math.nan
        if s.trigger == "events" and any(v is not None for v in s.futility_predictive):
            final_efficacy = s.efficacy[-1]
            assert final_efficacy is not None  # problems() requires it
            target = float(final_efficacy) - DECISION_TOLERANCE
            prior = NormalMixture(tuple(w / w.sum()), tuple(m), tuple(sd))
            upper = -math.inf if target <= 0 else benefit_score(
                prior, int(sign), final_info, claim, target)
        p0 = 1.0 / sd**2
        numbers = np.array([sign, claim, factor, final_info, upper])
        return w / w.sum(), sign * m, p0, numbers, shape

    def predictive_setup(self) -> tuple[float, np.ndarray]:
        """What the predictive probability needs beyond the posterior, found once per
        scenario: one arm, the final exposure t* at which the final analysis succeeds
        (:func:`octrial.endpoints.survival_predictive.exposure_bound` on this kernel's
        :func:`benefit_at`); two arms with one prior component each, per number i of
        the treatment's final events, the beta quantile q_i with success iff k / (1 + k)
        >= q_i (lower hazards better; <= otherwise), k = c b_T / b_C the final posterior
        rates' ratio (``nan`` placeholders when not needed)."""
        from scipy import special

        from octrial.endpoints.survival_predictive import exposure_bound

        s = self.setup
        none = (math.nan, np.empty(0))
        if np.all(np.isnan(self.predictive)) or s.log_hazard_ratio_prior is not None:
            return none
        final = float(self.targets[-1])
        threshold = float(self.efficacy[-1])
        if s.arms == 1:
            def benefit(t: float) -> float:
                return float(benefit_at(np.array([final]), np.array([t]), self.log_w,
                                        self.a, self.b, s.claim, s.lower_better))

            scale = final / float(np.exp(self.log_w[0]) @ (self.a[0] / self.b[0]))
            return exposure_bound(benefit, threshold, s.lower_better, scale), none[1]
        if np.isfinite(self.log_w).sum() != 2:
            return none
        target = threshold - DECISION_TOLERANCE
        i = np.arange(int(final) + 1, dtype=float)
        a_t, a_c = self.a[0, 0] + i, self.a[1, 0] + final - i
        level = target if s.lower_better else 1.0 - target
        quantiles = special.betaincinv(a_t, a_c, min(max(level, 0.0), 1.0))
        return math.nan, np.asarray(quantiles, dtype=float)

    def simulate(self, rng: np.random.Generator, replicates: int) -> Tally:
        efficacy = np.zeros(self.looks, dtype=np.int64)
        futility = np.zeros(self.looks, dtype=np.int64)
        calendar = np.zeros(calendar_size(self.looks))
        s = self.setup
        patient_level_studies(
            rng, replicates, s.max_enrolment, self.kind, self.rates, self.starts,
            self.times, self.pattern, self.hazards, self.hazard_starts, s.dropout_hazard,
            TRIGGERS[s.trigger], self.targets, self.analysis_starts, s.decision_piece,
            self.log_w, self.a, self.b, s.claim, s.lower_better, self.efficacy,
            self.futility, DECISION_TOLERANCE, self.edges, self.counts, efficacy, futility,
            calendar, self.predictive, self.bound, self.quantiles, s.predictive_draws,
            self.overlap, s.landmark_limit, self.piece_a, self.piece_b, *self.normal)
        return Tally(replicates, efficacy, futility, calendar=calendar)

    def subjects(self, rng: np.random.Generator) -> dict[str, np.ndarray]:
        """One study's subjects, all ``max_enrolment`` of them, from the random numbers
        one study of :meth:`simulate` draws: ``enrolled`` (calendar time), ``arm``,
        ``follow`` (time from enrolment to the event or the loss, whichever is first)
        and ``seen`` (whether it is the event)."""
        m = self.setup.max_enrolment
        out = {"enrolled": np.empty(m), "arm": np.empty(m, dtype=np.int64),
               "follow": np.empty(m), "seen": np.empty(m, dtype=np.bool_)}
        draw_subjects(rng, self.kind, self.rates, self.starts, self.times, self.pattern,
                      self.hazards, self.hazard_starts, self.setup.dropout_hazard,
                      np.empty(m), out["enrolled"], out["arm"], out["follow"], out["seen"])
        return out


class EventDrivenSimulator(PatientLevelSimulator):
    """Studies of a time-to-event design at the true hazards ``truth`` (one per arm)."""

    def __init__(self, design: Any, truth: tuple[float, ...], level: float) -> None:
        self.design = design
        super().__init__(setup_of_design(design, truth))


@numba.njit(cache=True, inline="always")
def piecewise_time(unit: float, hazards: np.ndarray, starts: np.ndarray) -> float:
    """The time whose cumulative hazard is ``unit`` (a standard exponential): the inverse
    cdf of the piecewise-exponential distribution with ``hazards`` from ``starts``."""
    left = unit
    last = hazards.size - 1
    for p in range(last):
        room = hazards[p] * (starts[p + 1] - starts[p])  # cumulative hazard of piece p
        if left <= room:
            return starts[p] + left / hazards[p]
        left -= room
    return starts[last] + left / hazards[last]


@numba.njit(cache=True)
def subject_buffers(m: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray,
                                     np.ndarray]:
    """The work arrays :func:`draw_subjects` fills for studies of ``m`` subjects: gaps
    between entries, entry times, arms, follow-up times and whether each follow-up ends
    in an event."""
    return (np.empty(m), np.empty(m), np.empty(m, dtype=np.int64), np.empty(m),
            np.empty(m, dtype=np.bool_))


@numba.njit(cache=True)
def draw_subjects(rng: Any, kind: int, rates: np.ndarray, starts: np.ndarray,
                  times: np.ndarray, pattern: np.ndarray, hazards: np.ndarray,
                  hazard_starts: np.ndarray, dropout: float, gaps: np.ndarray,
                  enrolled: np.ndarray, arm_of: np.ndarray, follow: np.ndarray,
                  seen: np.ndarray) -> float:
    """One study's subjects, in the order of the module docstring; returns the calendar
    time at which every follow-up has ended."""
    m = enrolled.size
    if kind == 0:
        for i in range(m):
            gaps[i] = rng.standard_exponential()
    fill_enrolment_times(gaps, kind, rates, starts, times, enrolled)
    resolved = 0.0
    one_piece = hazard_starts.size == 1
    place = 0  # i modulo the block's size, without a division per subject
    for i in range(m):
        j = pattern[place]
        place = place + 1 if place + 1 < pattern.size else 0
        arm_of[i] = j
        # one piece: u / h, what piecewise_time returns (0 + u / h), without taking a
        # row of hazards, whose reference counting cost more than the division
        t_event = (rng.standard_exponential() / hazards[j, 0] if one_piece else
                   piecewise_time(rng.standard_exponential(), hazards[j], hazard_starts))
        t_loss = rng.standard_exponential() / dropout if dropout > 0.0 else np.inf
        seen[i] = t_event <= t_loss
        follow[i] = t_event if seen[i] else t_loss
        resolved = max(resolved, enrolled[i] + follow[i])
    return resolved


@numba.njit(cache=True)
def piece_statistics(enrolled: np.ndarray, follow: np.ndarray, seen: np.ndarray,
                     arm_of: np.ndarray, tau: float, starts: np.ndarray,
                     events: np.ndarray, exposure: np.ndarray) -> int:
    """Each arm's events and exposure in each analysis piece (rows: arms, columns:
    pieces of ``starts``) at the analysis at calendar time ``tau``; returns the subjects
    enrolled by then (``enrolled`` non-decreasing, as enrolment times are)."""
    pieces = starts.size
    entered = 0
    if pieces == 1 and exposure.shape[0] <= 2:
        # one piece, one or two arms: sums in registers, in the same order as below
        # (arithmetic rather than branches for whether a subject has ended, a coin toss
        # the processor cannot predict; the arm follows the allocation block's pattern)
        e0 = e1 = d0 = d1 = 0.0
        for i in range(enrolled.size):
            if enrolled[i] > tau:
                break  # enrolment times are non-decreasing
            entered += 1
            ended = enrolled[i] + follow[i] <= tau
            f = follow[i] if ended else tau - enrolled[i]
            g = 1.0 * (ended & seen[i])
            if arm_of[i] == 0:
                e0 += f
                d0 += g
            else:
                e1 += f
                d1 += g
        exposure[0, 0] = e0
        events[0, 0] = d0
        if exposure.shape[0] == 2:
            exposure[1, 0] = e1
            events[1, 0] = d1
        return entered
    events[:] = 0.0
    exposure[:] = 0.0
    for i in range(enrolled.size):
        if enrolled[i] > tau:
            break  # enrolment times are non-decreasing
        entered += 1
        j = arm_of[i]
        # compared in calendar time, as the event times were, so the event at tau counts
        ended = enrolled[i] + follow[i] <= tau
        f = follow[i] if ended else tau - enrolled[i]
        if pieces == 1:
            # arithmetic rather than branches: whether a subject has ended is a coin
            # toss the processor cannot predict
            exposure[j, 0] += f
            events[j, 0] += 1.0 * (ended & seen[i])
            continue
        for p in range(pieces):
            if f <= starts[p]:
                break
            end = starts[p + 1] if p + 1 < pieces else np.inf
            exposure[j, p] += min(f, end) - starts[p]
            if ended and seen[i] and f <= end:
                events[j, p] += 1.0
    return entered


@numba.njit(cache=True)
def select_rank(values: np.ndarray, lo: int, hi: int, k: int) -> float:
    """The value of rank ``k`` (0-based) of ``values[lo:hi]``, rearranging that slice so
    that everything before position ``k`` is at most it and everything after at least it
    (Hoare's selection with a median-of-three pivot: linear time on average, where a
    sort of the event times is n log n and was most of the kernel's time)."""
    while hi - lo > 1:
        mid = (lo + hi - 1) // 2
        a, b, c = values[lo], values[mid], values[hi - 1]
        pivot = max(min(a, b), min(max(a, b), c))
        i, j = lo, hi - 1
        while i <= j:
            while values[i] < pivot:
                i += 1
            while values[j] > pivot:
                j -= 1
            if i <= j:
                values[i], values[j] = values[j], values[i]
                i += 1
                j -= 1
        if k <= j:
            hi = j + 1
        elif k >= i:
            lo = i
        else:
            return values[k]
    return values[k]


BUCKETS = 256
"""Buckets of the event times' distribution pass (:func:`ranked_times`)."""


@numba.njit(cache=True)
def ranked_times(values: np.ndarray, count: int, ranks: np.ndarray, top: float,
                 tally: np.ndarray, scattered: np.ndarray, out: np.ndarray) -> None:
    """The values of the 0-based ``ranks`` (increasing, each below ``count``) of
    ``values[:count]`` (all in [0, ``top``]), into ``out``: a distribution pass into
    equal-width buckets (the bucket index is non-decreasing in the value, so the order
    between buckets is exact), then a selection inside the bucket holding each rank (a
    few values). The same numbers as a sort, in two linear passes where a selection on
    the whole array spends most of its time on mispredicted branches."""
    buckets = tally.size - 1
    scale = buckets / top if top > 0.0 else 0.0
    tally[:] = 0
    for i in range(count):
        tally[min(int(values[i] * scale), buckets - 1) + 1] += 1
    for b in range(buckets):  # tally[b] becomes the start of bucket b
        tally[b + 1] += tally[b]
    for i in range(count):
        b = min(int(values[i] * scale), buckets - 1)
        scattered[tally[b]] = values[i]
        tally[b] += 1
    # now tally[b] is the end of bucket b (the start of bucket b + 1)
    b = 0
    for k in range(ranks.size):
        r = ranks[k]
        while tally[b] <= r:
            b += 1
        start = tally[b - 1] if b > 0 else 0
        out[k] = select_rank(scattered, start, tally[b], r)


@numba.njit(cache=True)
def look_buffers(m: int, trigger: int, targets: np.ndarray) -> tuple[
        np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The work arrays of :func:`look_times` for studies of at most ``m`` subjects:
    event times, their scattered copy, the bucket tally, the 0-based rank of each look's
    event target (``trigger`` 0: events; 1: calendar times, no ranks needed) and the
    look times."""
    looks = targets.size
    ranks = np.empty(looks, dtype=np.int64)
    for k in range(looks):
        ranks[k] = int(targets[k]) - 1 if trigger == 0 else 0
    return (np.empty(m), np.empty(m), np.zeros(BUCKETS + 1, dtype=np.int64), ranks,
            np.empty(looks))


@numba.njit(cache=True, inline="always")
def look_times(trigger: int, targets: np.ndarray, enrolled: np.ndarray,
               follow: np.ndarray, seen: np.ndarray, event_times: np.ndarray,
               scattered: np.ndarray, tally: np.ndarray, ranks: np.ndarray,
               taus: np.ndarray) -> int:
    """The calendar times of one study's looks, into ``taus``; returns how many looks
    happen at them (the rest happen when the events run out, at the end of every
    follow-up: :func:`draw_subjects`' return value).

    ``trigger`` 1: the looks are at the calendar times ``targets``, all of them. ``trigger``
    0: look k is at the ``targets[k]``-th observed event (:func:`ranked_times` on the
    event times of the ``seen`` subjects), for the looks whose target is reached. The
    work arrays come from :func:`look_buffers`. Inlined: a call passing arrays pays
    reference counting on each, once per study."""
    looks = targets.size
    if trigger == 1:
        for k in range(looks):
            taus[k] = targets[k]
        return looks
    count = 0
    top = 0.0
    for i in range(enrolled.size):
        # written always, kept when seen: no branch on a coin toss
        t = enrolled[i] + follow[i]
        event_times[count] = t
        top = max(top, t if seen[i] else 0.0)
        count += seen[i]
    reached = 0  # looks whose event target is reached
    while reached < looks and targets[reached] <= count:
        reached += 1
    ranked_times(event_times, count, ranks[:reached], top, tally, scattered, taus)
    return reached


@numba.njit(cache=True)
def patient_level_studies(
    rng: Any, studies: int, m: int, kind: int, rates: np.ndarray, starts: np.ndarray,
    times: np.ndarray, pattern: np.ndarray, hazards: np.ndarray,
    hazard_starts: np.ndarray, dropout: float, trigger: int, targets: np.ndarray,
    analysis_starts: np.ndarray, piece: int, log_w: np.ndarray, a: np.ndarray,
    b: np.ndarray, claim: float, lower: bool, efficacy: np.ndarray, futility: np.ndarray,
    tol: float, edges: np.ndarray, counts: np.ndarray, stop_efficacy: np.ndarray,
    stop_futility: np.ndarray, calendar: np.ndarray, predictive: np.ndarray,
    bound: float, quantiles: np.ndarray, draws: int, overlap: np.ndarray, limit: float,
    piece_a: np.ndarray, piece_b: np.ndarray, normal_w: np.ndarray, normal_m: np.ndarray,
    normal_p: np.ndarray, normal: np.ndarray, shape: np.ndarray,
) -> None:
    """Simulate ``studies`` studies, adding their stops and calendar totals.

    ``predictive``: the predictive futility threshold per look (``nan``: none; looks at
    event counts, one analysis piece); one arm uses the final exposure bound ``bound``,
    two arms ``draws`` draws and the table ``quantiles``
    (:meth:`PatientLevelSimulator.predictive_setup`). A non-empty ``overlap`` makes a
    one-arm decision on the landmark survival (:func:`landmark_benefit`, priors per piece
    ``piece_a``, ``piece_b``). Non-empty ``normal_w`` selects the normal approximation on
    the log hazard ratio (:meth:`PatientLevelSimulator.normal_setup`)."""
    looks = targets.size
    arms = hazards.shape[0]
    pieces = analysis_starts.size
    gaps, enrolled, arm_of, follow, seen = subject_buffers(m)
    event_times, scattered, tally, ranks, taus = look_buffers(m, trigger, targets)
    events = np.zeros((arms, pieces))
    exposure = np.zeros((arms, pieces))
    d = np.zeros(arms)
    e = np.zeros(arms)
    for _ in range(studies):
        resolved = draw_subjects(rng, kind, rates, starts, times, pattern, hazards,
                                 hazard_starts, dropout, gaps, enrolled, arm_of, follow,
                                 seen)
        reached = look_times(trigger, targets, enrolled, follow, seen, event_times,
                             scattered, tally, ranks, taus)
        for k in range(looks):
            final = k == looks - 1
            if k < reached:
                tau = taus[k]
            else:  # the events run out: the analysis when every follow-up has ended
                tau = resolved
                final = True
            entered = piece_statistics(enrolled, follow, seen, arm_of, tau,
                                       analysis_starts, events, exposure)
            for j in range(arms):
                d[j] = events[j, piece]
                e[j] = exposure[j, piece]
            code = look_code(rng, k, final, arms, looks, targets, events, exposure, d, e,
                             log_w, a, b, claim, lower, efficacy, futility, tol, predictive,
                             bound, quantiles, draws, overlap, limit, piece_a, piece_b,
                             normal_w, normal_m, normal_p, normal, shape)
            record_study(calendar, edges, k, tau, entered, events.sum(),
                         code != CONTINUE, counts)
            if code == EFFICACY:
                stop_efficacy[k] += 1
                break
            if code != CONTINUE:
                stop_futility[k] += 1
                break
