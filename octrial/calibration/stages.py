"""Optimal and minimax multi-stage designs (Simon 1989 criteria) for one arm.

Simon's two-stage search: over maximum sizes N and first-stage sizes n1, futility bounds
r1 (stop after stage 1 with r1 or fewer responses) and final bounds s (success with s or
more responses by the end), keep the designs with type I error <= alpha at the benchmark
and power >= the target at the alternative, and choose the one with the smallest expected
sample size under the null (optimal) or the smallest N, then the smallest expected sample
size (minimax). As in Simon's table, a design must be able to stop at stage 1
(r1 >= 0) and must need the second stage (s >= r1 + 2, i.e. r1 < r with r = s - 1). For
every (N, n1, r1), s is set to its least stringent value meeting alpha, which gives the
largest power; the expected size under the null does not depend on s.

Counts are worked in the 'good' direction: with lower better, a response count x on n
subjects is mirrored to n - x and the true rate p to 1 - p, so the same code serves both.

With more than two stages the interim looks sit at the design's information fractions
(or at equal fractions when ``--stages`` changes their number), rounded as in sizing, and
the futility bounds are searched exhaustively (nondecreasing, which loses nothing: a bound
below an earlier one can never stop a study). Count rules have no interim efficacy stop
(as in Simon's designs); posterior rules keep the design's interim efficacy thresholds and
use one posterior futility threshold at every interim look, so the search runs over the
distinct values of that threshold.

The search evaluates only the benchmark and the alternative: with these monotone rules
the type I error is largest at the benchmark (see :mod:`octrial.calibration.nulls`). The
chosen design is then evaluated on the whole null grid, and that is what is reported.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from octrial.calibration.evaluator import Assessment, Evaluator
from octrial.calibration.knobs import shortest_between
from octrial.calibration.log import Log
from octrial.calibration.request import Request
from octrial.calibration.tuning import Choice
from octrial.calibration.variants import Builder, allocation_unit, entries, looks_at
from octrial.design.model import Looks
from octrial.design.thresholds import evaluate_spec
from octrial.engines.lattice_programme import run_programme
from octrial.rules.lattice import DECISION_TOLERANCE, LatticeCache


@dataclass(frozen=True)
class Stage:
    """A searched design in good-count terms.

    ``sizes`` are cumulative look sizes; ``futility[k]`` the largest good count that stops
    for futility at interim look k (-1: none); ``efficacy[k]`` the smallest good count
    that stops for efficacy at interim look k (None: none); ``final`` the smallest good
    count that succeeds at the end.
    """

    sizes: tuple[int, ...]
    futility: tuple[int, ...]
    efficacy: tuple[int | None, ...]
    final: int
    type1: float
    power: float
    en0: float
    en1: float


@dataclass(frozen=True, eq=False)
class _Look:
    """One look of a searched design on the good-count lattice 0..n (for the lattice
    programme)."""

    n: tuple[int]
    efficacy: np.ndarray
    futility: np.ndarray
    uncertain: None = None

    @property
    def shape(self) -> tuple[int, ...]:
        return self.efficacy.shape


def _look(n: int, first_efficacy: int | None, last_futility: int) -> _Look:
    """Efficacy from ``first_efficacy`` on (None: none), futility up to ``last_futility``
    (-1: none)."""
    points = np.arange(n + 1)
    return _Look((n,), points >= (n + 1 if first_efficacy is None else first_efficacy),
                  points <= last_futility)


def _run_sum(dist: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Mass on a run of good counts, summed over a slice (the order this search always
    used; a gathered copy sums in another order and moves last bits)."""
    where = np.flatnonzero(mask)
    if where.size == 0:
        return np.zeros(dist.shape[0])
    return dist[:, where[0]: where[-1] + 1].sum(axis=1)


class StageSearch:
    """The search (see module docstring)."""

    def __init__(self, builder: Builder, request: Request, log: Log) -> None:
        self.builder = builder
        self.design = builder.design
        self.request = request
        self.log = log
        if (request.alpha is None or request.power is None or request.alternative is None
                or request.n_range is None or request.stages is None):
            raise ValueError("a stage search needs alpha, power, alternative, n_range and "
                             "stages (the request checks them)")
        self.alpha, self.power = request.alpha, request.power
        self.n_range, self.stages = request.n_range, request.stages
        h = self.design.hypothesis
        self.higher = h.better == "higher"
        p0 = h.null_value
        p1 = float(request.alternative[0])
        self.p = np.array([p0, p1]) if self.higher else np.array([1 - p0, 1 - p1])
        self.cache = LatticeCache()
        self.posterior = request.rule == "posterior"
        self.notes: list[str] = []
        self._pmfs: dict[int, np.ndarray] = {}

    # -- tables ----------------------------------------------------------------------------
    def _pmf(self, m: int) -> np.ndarray:
        if m not in self._pmfs:
            self._pmfs[m] = stats.binom.pmf(np.arange(m + 1)[None, :], m, self.p[:, None])
        return self._pmfs[m]

    def _good_benefit(self, n: int) -> np.ndarray:
        """Posterior probability of benefit indexed by good count 0..n."""
        b = self.cache.benefit(self.design, (n,))
        return b if self.higher else b[::-1]

    def _reachable(self, b: np.ndarray) -> np.ndarray:
        """Bounds g (0..n) at which a threshold separates g - 1 from g."""
        ok = np.ones(b.size, dtype=bool)
        ok[1:] = b[1:] - b[:-1] > DECISION_TOLERANCE
        return ok

    def _interim_efficacy(self, sizes: list[int]) -> list[float | None]:
        if not self.posterior:
            return [None] * (len(sizes) - 1)
        spec = dict(self.design.looks.specs).get("efficacy")
        info = tuple(n / sizes[-1] for n in sizes)
        if spec is None:
            return [None] * (len(sizes) - 1)
        if spec.form == "list":
            if len(spec.values) != len(sizes):
                self._note("the design's per-look efficacy list does not fit the searched "
                           "number of looks; interim looks get no efficacy stop")
                return [None] * (len(sizes) - 1)
            return list(spec.values[:-1])
        return evaluate_spec(spec, info)[:-1]

    def _note(self, text: str) -> None:
        if text not in self.notes:
            self.notes.append(text)

    # -- the search ------------------------------------------------------------------------
    def run(self) -> tuple[Stage | None, list[Stage]]:
        """Search the whole range; returns the best design and the per-(N, looks) bests."""
        lo, hi, step = self.n_range
        k = self.stages
        if self.design.looks.futility_predictive[:-1] != (None,) * (self.design.looks.count - 1):
            self._note("the design's predictive futility rule is not part of the search "
                       "(the searched rules use posterior futility)")
        bests: list[Stage] = []
        for n_max in range(lo, hi + 1, step):
            if k == 2:
                configurations = [[n1, n_max] for n1 in range(1, n_max)]
            else:
                sizes = self._fractions(n_max, k)
                configurations = [] if sizes is None else [sizes]
            for sizes in configurations:
                found = self._best_at(sizes)
                if found is not None:
                    bests.append(found)
                    self._log(found)
        if not bests:
            return None, bests
        passing = [s for s in bests if s.type1 <= self.alpha
                   and s.power >= self.power]
        if not passing:
            return None, bests
        if self.request.search == "minimax":
            best = min(passing, key=lambda s: (s.sizes[-1], round(s.en0, 10), s.sizes))
        else:
            best = min(passing, key=lambda s: (round(s.en0, 10), s.sizes[-1], s.sizes))
        return best, bests

    def _fractions(self, n_max: int, k: int) -> list[int] | None:
        looks = self.design.looks
        if k == looks.count:
            return looks_at(looks, n_max, "fractions", allocation_unit(self.design))
        equal = Looks(tuple(round(1000 * (i + 1) / k) for i in range(k)), (), (), (), ())
        return looks_at(equal, n_max, "fractions", 1)

    def _best_at(self, sizes: list[int]) -> Stage | None:
        """The best feasible design with these looks (or the best infeasible, flagged)."""
        n_max = sizes[-1]
        efficacy_thresholds = self._interim_efficacy(sizes)
        eff_bounds: list[int | None] = []
        for n_k, e in zip(sizes[:-1], efficacy_thresholds, strict=True):
            if e is None:
                eff_bounds.append(None)
                continue
            hits = np.flatnonzero(self._good_benefit(n_k) >= e - DECISION_TOLERANCE)
            eff_bounds.append(int(hits[0]) if hits.size else None)
        final_ok = (self._reachable(self._good_benefit(n_max)) if self.posterior
                    else np.ones(n_max + 1, dtype=bool))
        if len(sizes) == 2:
            candidates = self._two_stage(sizes, eff_bounds[0], final_ok)
        else:
            candidates = []
            for futility in self._futility_vectors(sizes, eff_bounds):
                stage = self._evaluate(sizes, futility, eff_bounds, final_ok)
                if stage is not None:
                    candidates.append(stage)
        if not candidates:
            return None
        passing = [s for s in candidates if s.power >= self.power
                   and s.type1 <= self.alpha]
        if passing:
            return min(passing, key=lambda s: (round(s.en0, 10), -s.power))
        return max(candidates, key=lambda s: s.power)

    def _two_stage(self, sizes: list[int], a1: int | None, final_ok: np.ndarray) -> list[Stage]:
        """Every futility bound r1 at once (Simon's computation, vectorised over r1).

        With b1 the first-stage pmf and T2(t) = Pr(second-stage count >= t),
        Pr(success) = Pr(g1 >= a1) + sum_{r1 < g1 < a1} b1(g1) T2(s - g1).
        """
        n1, n_max = sizes
        n2 = n_max - n1
        b1 = self._pmf(n1)                                        # (2, n1 + 1)
        tail2 = np.concatenate([np.ones((2, 1)), 1 - np.cumsum(self._pmf(n2), axis=1)],
                               axis=1)[:, :-1]                    # T2(t), t = 0..n2
        tail2 = np.clip(np.concatenate([tail2, np.zeros((2, 1))], axis=1), 0.0, 1.0)
        t = np.arange(n_max + 1)[None, :] - np.arange(n1 + 1)[:, None]   # s - g1
        t2 = np.where(t < 0, 1.0, tail2[:, np.clip(t, 0, n2 + 1)])        # (2, n1+1, N+1)
        cont = b1.copy()
        early = np.zeros(2)
        top = n1 if a1 is None else a1 - 1                       # largest continuing g1
        if a1 is not None:
            early = b1[:, a1:].sum(axis=1)
            cont[:, a1:] = 0.0
        m = cont[:, :, None] * t2
        tails = np.cumsum(m[:, ::-1], axis=1)[:, ::-1]            # sum over g1 >= x
        stop_fut = np.cumsum(b1, axis=1)                         # Pr(g1 <= r1)
        futility_ok = (self._reachable(self._good_benefit(n1)) if self.posterior
                       else np.ones(n1 + 1, dtype=bool))
        r1 = np.arange(0, min(top, n1 - 1) + 1)
        r1 = r1[futility_ok[r1 + 1]]
        if r1.size == 0:
            return []
        success = early[:, None, None] + tails[:, r1 + 1, :]       # (2, r1, s)
        ok = final_ok[None, :] & (np.arange(n_max + 1)[None, :] >= r1[:, None] + 2)
        meets = ok & (success[0] <= self.alpha)
        any_ok = ok.any(axis=1)
        first = np.argmax(meets, axis=1)
        last = ok.shape[1] - 1 - np.argmax(ok[:, ::-1], axis=1)
        s = np.where(meets.any(axis=1), first, last)
        rows = np.arange(r1.size)
        type1, power = success[0, rows, s], success[1, rows, s]
        en = n1 + (1.0 - stop_fut[:, r1] - early[:, None]) * n2   # (2, r1)
        return [Stage((n1, n_max), (int(r1[i]),), (a1,), int(s[i]), float(type1[i]),
                      float(power[i]), float(en[0, i]), float(en[1, i]))
                for i in np.flatnonzero(any_ok)]

    def _futility_vectors(self, sizes, eff_bounds):
        """Futility bound vectors to try: every non-decreasing vector (count rules), or the
        vector of each distinct posterior futility threshold (posterior rules)."""
        interim = sizes[:-1]
        caps = [n_k - 1 if a is None else a - 1 for n_k, a in zip(interim, eff_bounds,
                                                                  strict=True)]
        if not self.posterior:
            def walk(k: int, floor: int, prefix: tuple[int, ...]):
                if k == len(interim):
                    yield prefix
                    return
                for r in range(max(floor, 0), caps[k] + 1):
                    yield from walk(k + 1, r, (*prefix, r))
            yield from walk(0, 0, ())
            return
        tables = [self._good_benefit(n_k) for n_k in interim]
        values = np.unique(np.concatenate(tables))
        seen = set()
        for f in values:
            bounds = tuple(int(np.sum(t < f - DECISION_TOLERANCE)) - 1 for t in tables)
            if bounds[0] < 0 or any(b > c for b, c in zip(bounds, caps, strict=True)):
                continue
            if bounds not in seen:
                seen.add(bounds)
                yield bounds

    def _evaluate(self, sizes, futility, eff_bounds, final_ok) -> Stage | None:
        """One futility vector: the recursion over looks with two true values."""
        looks = [_look(n_k, a, r)
                 for n_k, r, a in zip(sizes[:-1], futility, eff_bounds, strict=True)]
        looks.append(_look(sizes[-1], None, -1))

        def step(dist: np.ndarray, arm: int, before: int, after: int,
                 size: int) -> np.ndarray:
            pmf = self._pmf(after - before)
            return np.stack([np.convolve(dist[i], pmf[i]) for i in range(2)])

        found = run_programme(looks, 1, step, scenarios=2, keep_final=True,
                              tally=_run_sum)
        early_eff = np.zeros(2)
        en = np.zeros(2)
        for k, n_k in enumerate(sizes[:-1]):
            early_eff += found.efficacy[:, k]
            en += n_k * (found.futility[:, k] + found.efficacy[:, k])
        reach = found.reach
        assert reach is not None
        en += sizes[-1] * reach.sum(axis=1)
        tail = np.cumsum(reach[:, ::-1], axis=1)[:, ::-1]  # tail[:, s] = Pr(reach, g >= s)
        success = early_eff[:, None] + tail
        lowest = futility[-1] + 2
        ok = final_ok.copy()
        ok[: max(lowest, 0)] = False
        meets = ok & (success[0] <= self.alpha)
        if not meets.any():
            s = int(np.flatnonzero(ok)[-1]) if ok.any() else None
            if s is None:
                return None
        else:
            s = int(np.flatnonzero(meets)[0])
        return Stage(tuple(sizes), tuple(futility), tuple(eff_bounds), s,
                     float(success[0, s]), float(success[1, s]), float(en[0]), float(en[1]))

    def _log(self, stage: Stage) -> None:
        """One row per looks configuration: its best design (posterior rules show the
        candidate thresholds at the lattice values, before they are rounded)."""
        sizes, k = stage.sizes, len(stage.sizes)
        none = (None,) * k
        if self.posterior:
            b = self._good_benefit(sizes[-1])
            eff = (*self._interim_efficacy(list(sizes)), float(b[stage.final]))
            futility = tuple(float(self._good_benefit(n)[r + 1]) for n, r in
                             zip(sizes[:-1], stage.futility, strict=True))
            looks = Looks(sizes, (), eff, (*futility, None), none)
        else:
            fut = [r if self.higher else n - r for r, n in zip(stage.futility, sizes,
                                                                strict=False)]
            final = stage.final if self.higher else sizes[-1] - stage.final
            looks = Looks(sizes, (), none, none, none, (*(None,) * (k - 1), final),
                          (*fut, None))
        a = Assessment(np.array([]), stage.type1, 0.0, self.log.truths.reference, stage.power,
                       0.0, stage.en0, stage.en1)
        passes = stage.type1 <= self.alpha and stage.power >= self.power
        self.log.add("search", looks, a, note="" if passes else "the best at these looks fails")

    # -- back to a design ------------------------------------------------------------------
    def looks_for(self, stage: Stage) -> dict[str, Any]:
        """The ``[looks]`` table of a searched design."""
        sizes = list(stage.sizes)
        k = len(sizes)
        looks: dict[str, Any] = {"n": sizes}
        if not self.posterior:
            fut = [r if self.higher else n - r for r, n in zip(stage.futility, sizes,
                                                                strict=False)]
            final = stage.final if self.higher else sizes[-1] - stage.final
            looks["futility_count"] = entries([*fut, None])
            looks["efficacy_count"] = entries([None] * (k - 1) + [final])
            return looks
        eff = [*self._interim_efficacy(sizes), self._final_threshold(sizes[-1], stage.final)]
        looks["efficacy"] = entries(eff)
        looks["futility"] = self._futility_threshold(sizes, stage)
        return looks

    def _final_threshold(self, n_max: int, s: int) -> float:
        b = self._good_benefit(n_max)
        exact = float(b[s])
        if s == 0:
            return shortest_between(exact, 0.0, closed_other=True)
        return shortest_between(exact, float(b[s - 1]))

    def _futility_threshold(self, sizes: list[int], stage: Stage) -> float:
        tables = [self._good_benefit(n_k) for n_k in sizes[:-1]]
        # f must exceed every look's value at its bound, not exceed the value just above,
        # and stay below any interim efficacy threshold (checked first anyway)
        below = max(float(t[r]) for t, r in zip(tables, stage.futility, strict=True))
        above = min(float(t[r + 1]) for t, r in zip(tables, stage.futility, strict=True)
                    if r + 1 < t.size)
        efficacy = [e for e in self._interim_efficacy(sizes) if e is not None]
        if efficacy:
            above = min(above, min(efficacy) - 1e-9)
        return shortest_between(above, below)


def search(builder: Builder, request: Request, log: Log, evaluator: Evaluator) -> tuple[
        Choice | None, Choice | None, list[str]]:
    """Run the stage search; returns (chosen, best failing, notes)."""
    runner = StageSearch(builder, request, log)
    best, bests = runner.run()
    target = best
    if target is None and bests:
        meeting = [s for s in bests if s.type1 <= runner.alpha]
        target = max(meeting or bests, key=lambda s: s.power)
    if target is None:
        return None, None, runner.notes
    looks = runner.looks_for(target)
    design = builder.build(looks)
    if isinstance(design, str):
        raise AssertionError(f"searched design is not valid: {design}")
    a = evaluator.assess(design)
    assert a.power is not None  # the request has an alternative (StageSearch checks it)
    if abs(a.prob_success[evaluator.truths.reference] - target.type1) > 1e-9 or (
            abs(a.power - target.power) > 1e-9):
        raise AssertionError("stage search and exact engine disagree on the chosen design")
    row = log.add("search", design.looks, a, note="chosen design on the whole null grid")
    alpha_ok, power_ok = log.meets(a)
    values = {"stages": {"value": len(target.sizes), "exact": None, "equivalent": None}}
    choice = Choice(looks, design, a, row, alpha_ok, power_ok, values)
    return (choice, None, runner.notes) if best is not None else (None, choice, runner.notes)
