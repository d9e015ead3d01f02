"""Delayed outcomes on the count lattice: pipeline subjects under deterministic timing.

With even or fixed arrivals, a fixed lag from enrolment to outcome and nobody lost
(:attr:`~octrial.conduct.model.Conduct.deterministic`), look k happens at a fixed calendar
time with a fixed number of subjects with an outcome ``n_k`` and a fixed number enrolled
``e_k >= n_k`` per arm (:func:`octrial.conduct.timing.look_timing`); the ``e_k - n_k``
subjects enrolled but not yet observed are the look's pipeline. A study that stops at an
interim look stops enrolment; with ``analyse_pipeline`` its final analysis waits for the
pipeline and uses the ``e_k`` subjects.

Three pieces, all exact:

* :func:`pipeline_predictive`: the predictive probability of final success at a look,
  integrating first over the pipeline's outcomes and then over the subjects still to be
  enrolled up to the final analysis. Subjects are exchangeable given the parameter, so
  this equals the one-stage predictive probability over all ``N - n_k`` subjects without
  an outcome at the look, which the lattice rule's tables already hold (the engine uses
  those; tests/test_pipeline.py checks the identity and both against brute force).
* :func:`reversed_efficacy`: Pr(stop for efficacy at look k and the final analysis of the
  ``e_k`` subjects fails the final success threshold): the stopped mass at the look's
  efficacy points, convolved with the pipeline's increment pmf, summed over the points
  that miss the final threshold at ``e_k``.
* :func:`calendar_extra`: the calendar columns of oc.csv (``expected_duration``, ...,
  ``look<k>_time``, ``prob_efficacy_reversed``), exact: every quantity is fixed per
  stopping look, so expectations and quantiles are sums over the stopping probabilities
  and every ``_se`` is 0.

The per-look efficacy and futility probabilities stay the decisions taken at the looks
(as the Monte Carlo engine of :mod:`octrial.simulation.calendar_studies` counts them);
reversal is reported beside them.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from octrial.conduct.timing import LookTiming, enrolment_times, look_timing
from octrial.design.model import Design
from octrial.engines.lattice_programme import add_increment
from octrial.rules.lattice import LatticeCache, serving
from octrial.rules.stop import EFFICACY, Rule


def timing(design: Design) -> LookTiming:
    """Time, enrolled and complete counts of every look of a deterministic design."""
    conduct, looks = design.conduct, design.looks
    assert conduct is not None and conduct.deterministic
    targets = looks.n if looks.trigger == "complete" else looks.at
    return look_timing(conduct, looks.trigger, targets, [a.allocation for a in design.arms])


def final_success(design: Design, n: tuple[int, ...], sizes: tuple[int, ...],
                  cache: LatticeCache | None = None) -> np.ndarray:
    """The final success threshold applied at per-arm sizes ``n`` on a lattice of
    ``sizes`` points per arm (True where the final analysis succeeds)."""
    cache = LatticeCache() if cache is None else cache
    benefit = cache.benefit(design, n, sizes)
    rule = Rule.of(design.looks)
    success: np.ndarray = rule.decide_many(rule.last, benefit) == EFFICACY
    return success


def _remaining_pmf(design: Design, arm: int, x: int, n: int, pipeline: int, future: int,
                   size: int) -> np.ndarray:
    """Pr(statistic of the pipeline plus the future subjects = 0 .. size-1 | x of n),
    as pipeline first, then the future given the pipeline's outcome."""
    family = design.family
    post = family.posterior(design, arm, n, np.array([x]))
    first = _padded(family.predictive_pmf(design, post, pipeline, size)[0], size)
    out = np.zeros(size)
    for y in (int(v) for v in np.flatnonzero(first > 0)):
        if future == 0:
            out[y] += first[y]
            continue
        later = family.posterior(design, arm, n + pipeline, np.array([x + y]))
        second = _padded(family.predictive_pmf(design, later, future, size - y)[0], size - y)
        out[y:] += first[y] * second
    return out


def _padded(pmf: np.ndarray, size: int) -> np.ndarray:
    out = np.zeros(size)
    out[: min(size, pmf.size)] = pmf[:size]
    return out


def pipeline_predictive(design: Design, x: tuple[int, ...], complete: tuple[int, ...],
                        enrolled: tuple[int, ...], cache: LatticeCache | None = None,
                        ) -> float:
    """Predictive probability of final success at a look with a pipeline.

    PP(x) = sum_{y_p} Pr(Y_p = y_p | x) sum_{y_f} Pr(Y_f = y_f | x + y_p)
    1[final success at x + y_p + y_f], per arm independently, where ``Y_p`` is the
    statistic of the ``enrolled - complete`` pipeline subjects and ``Y_f`` that of the
    ``N - enrolled`` subjects still to be enrolled up to the final analysis (``N`` the
    final look's counts, ``design.looks.per_arm[-1]``).

    Parameters
    ----------
    design : Design
        A binary or count design with analysis priors.
    x : tuple of int
        Per arm, the statistic (responses, events) of the subjects with an outcome.
    complete, enrolled : tuple of int
        Per arm, subjects with an outcome and subjects enrolled at the look.
    cache : LatticeCache, optional
        Posterior tables to reuse.
    """
    family = design.family
    final = design.looks.per_arm[-1]
    if any(e > f for e, f in zip(enrolled, final, strict=True)):
        raise ValueError("more subjects enrolled than the final analysis uses")
    sizes = tuple(max(family.lattice_size(design, j, final[j]),
                      family.predictive_lattice_size(design, j)) for j in range(len(final)))
    success = final_success(design, final, sizes, cache)
    pmfs = [_remaining_pmf(design, j, x[j], complete[j], enrolled[j] - complete[j],
                           final[j] - enrolled[j], sizes[j] - x[j])
            for j in range(len(final))]
    if len(pmfs) == 1:
        return float(pmfs[0] @ success[x[0]:])
    return float(pmfs[0] @ success[x[0]:, x[1]:] @ pmfs[1])


def reversed_efficacy(design: Design, truth: tuple[float, ...], stopped: np.ndarray,
                      complete: tuple[int, ...], enrolled: tuple[int, ...],
                      cache: LatticeCache | None = None) -> float:
    """Pr(the studies in ``stopped`` fail the final analysis of their pipeline).

    Parameters
    ----------
    design : Design
    truth : tuple of float
        True values per arm.
    stopped : ndarray
        The mass of studies that stopped for efficacy at a look, per lattice point of the
        look (counts of ``complete`` subjects per arm).
    complete, enrolled : tuple of int
        Per arm, subjects with an outcome at the look and subjects enrolled.
    cache : LatticeCache, optional
        Posterior tables to reuse.

    Returns
    -------
    float
        The mass whose final analysis at ``enrolled`` misses the final success threshold.
        A truncated lattice drops the mass beyond it (the caller's neglected mass bounds
        it).
    """
    family = design.family
    served = serving(design, np.array([truth]))
    sizes = tuple(family.lattice_size(served, j, enrolled[j]) for j in range(len(truth)))
    dist = stopped
    for j in range(len(truth)):
        pmf = family.increment_pmf(served, truth[j], enrolled[j] - complete[j], sizes[j])
        dist = add_increment(dist, pmf, j, sizes[j])
    success = final_success(served, enrolled, sizes, cache)
    return float(dist[~success].sum())


def duration_quantile(atoms: np.ndarray, weights: np.ndarray, q: float) -> float:
    """The q-quantile of a discrete distribution: the least atom whose cumulative
    probability reaches ``q`` (NaN without mass)."""
    total = weights.sum()
    if total <= 0:
        return float("nan")
    order = np.argsort(atoms, kind="stable")
    cumulative = np.cumsum(weights[order]) / total
    at = min(int(np.searchsorted(cumulative, q - 1e-12, side="left")), atoms.size - 1)
    return float(atoms[order][at])


def calendar_extra(design: Design, plan: LookTiming, efficacy: np.ndarray,
                   futility: np.ndarray, reversed_: np.ndarray) -> dict[str, np.ndarray]:
    """The calendar columns of oc.csv from exact stopping probabilities.

    Parameters
    ----------
    design : Design
    plan : LookTiming
        The looks' times and counts.
    efficacy, futility : ndarray, shape (scenarios, looks)
        Pr(stop for efficacy / futility at look k).
    reversed_ : ndarray, shape (scenarios,)
        Pr(an efficacy stop that the pipeline's final analysis reverses).
    """
    conduct = design.conduct
    assert conduct is not None
    k_last = len(plan.time) - 1
    enrol = enrolment_times(conduct)
    duration, enrolled, analysed = [], [], []
    for k, t in enumerate(plan.time):
        e_total, n_total = sum(plan.enrolled[k]), sum(plan.complete[k])
        enrolled.append(float(e_total))
        if conduct.analyse_pipeline and k < k_last:
            last = float(enrol[e_total - 1]) + conduct.lag if e_total > 0 else t
            duration.append(max(t, last))
            analysed.append(float(e_total))
        else:
            duration.append(t)
            analysed.append(float(n_total))
    stops = efficacy + futility
    reach = 1.0 - np.concatenate([np.zeros((stops.shape[0], 1)),
                                  np.cumsum(stops, axis=1)[:, :-1]], axis=1)
    zeros = np.zeros(stops.shape[0])
    d, e, a = np.array(duration), np.array(enrolled), np.array(analysed)
    out: dict[str, np.ndarray] = {
        "expected_duration": stops @ d, "expected_duration_se": zeros,
    }
    out.update({"expected_enrolled": stops @ e, "expected_enrolled_se": zeros.copy(),
                "expected_analysed": stops @ a, "expected_analysed_se": zeros.copy()})
    for name, atoms in (("duration", d), ("enrolled", e), ("analysed", a)):
        for q in (10, 50, 90):
            out[f"{name}_q{q}"] = np.array([duration_quantile(atoms, row, q / 100)
                                            for row in stops])
    for k, t in enumerate(plan.time):
        out[f"look{k + 1}_time"] = np.where(reach[:, k] > 1e-15, t, np.nan)
    if conduct.analyse_pipeline:
        out["prob_efficacy_reversed"] = np.asarray(reversed_, dtype=float)
        out["prob_efficacy_reversed_se"] = zeros.copy()
    return out


def exact_unsupported(design: Any) -> str | None:
    """Why the exact lattice engine cannot evaluate a design in calendar time."""
    conduct = design.conduct
    if conduct is None:
        return None
    if not conduct.deterministic:
        return ("the counts at each look are random under Poisson arrivals or dropout "
                "(exact needs even or fixed arrivals and no dropout)")
    if design.looks.trigger == "events":
        return "looks by events need a time-to-event engine"
    if design.looks.uses_counts and conduct.analyse_pipeline:
        return ("a rule stated in counts has no final threshold at the pipeline's sizes "
                "(analyse_pipeline); state it as probability thresholds")
    return None
