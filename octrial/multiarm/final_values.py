"""Per-study final posterior probabilities of benefit of a several-arm design.

Calibrating the final success threshold by simulation (:mod:`octrial.calibration.
arms_simulated`) needs, for every simulated study and treatment arm, what the final
threshold acts on. The final threshold is read at the last look only, so everything
before it (allocation, interim stops, dropping, selection) is the same for a given random
stream whatever that threshold is. Each study and arm is recorded as one number:

- ``+inf``: the arm succeeded at an interim look (a success at every final threshold);
- ``-inf``: the arm left before the last look without a success (futility, dropped or
  not selected; a failure at every final threshold);
- otherwise its posterior probability of benefit at the last look.

The arm succeeds at final threshold ``u`` when its value is ``>= u - tol``
(:data:`octrial.rules.stop.DECISION_TOLERANCE`), the project's one stop rule, so the
successes of the simulation engine are recovered for any ``u``
(:func:`successes`; tests/test_calibrate_arms_simulated.py checks the family-wise error
at the design's own threshold against :func:`octrial.multiarm.engine.simulate_design`
count for count).

The random streams are the engine's: fixed allocation draws the words of
:func:`octrial.engines.monte_carlo.batch_generator` and replays the decision-table
kernel's study (:mod:`octrial.multiarm.kernel`) up to the last look; adaptive allocation
runs the same batches of :func:`octrial.allocation.simulate.simulate_batch` and
computes the last look's probability with the same function the study loop decides by
(:func:`octrial.allocation.decisions.arm_benefit`).
"""

from __future__ import annotations

import numba
import numpy as np

from octrial.allocation.decisions import arm_benefit, padded_priors
from octrial.allocation.decisions import nodes as decision_nodes
from octrial.allocation.simulate import simulate_batch
from octrial.engines.monte_carlo import batch_generator
from octrial.multiarm.adaptive import (
    _memo,
    _memo_identity,
    _tables,
    adaptive_study,
)
from octrial.multiarm.engine import _increment_pmfs, best_memo
from octrial.multiarm.kernel import EFFICACY, FUTILITY, best_memoised
from octrial.multiarm.model import MultiArmDesign
from octrial.multiarm.tables import MultiArmTables, build_tables
from octrial.rules.lattice import build_rule
from octrial.rules.stop import DECISION_TOLERANCE
from octrial.simulation.draws import DrawTables, draw

__all__ = ["BATCH", "final_benefit_tables", "final_values", "refusal", "successes"]

BATCH = 50_000
"""Studies per batch, as :data:`octrial.multiarm.engine.BATCH` (the batches' seeds
depend on it)."""


def refusal(design: MultiArmDesign) -> str | None:
    """Why the final threshold of ``design`` cannot be calibrated from recorded values,
    or ``None``: a predictive futility rule reads the final threshold at interim looks,
    and a rule stated in counts has no posterior threshold."""
    looks = design.pairs[0].looks
    if any(v is not None for p in design.pairs for v in p.looks.futility_predictive):
        return ("looks.futility_predictive: the predictive probability of success depends "
                "on the final threshold, so interim decisions change with it")
    if looks.efficacy_count is not None or looks.futility_count is not None:
        return "looks.efficacy_count: a rule stated in counts has no posterior threshold"
    if any(p.looks.efficacy[-1] is None for p in design.pairs):
        return "looks.efficacy: the last look needs a success threshold"
    return None


def successes(values: np.ndarray, threshold: float) -> np.ndarray:
    """Whether each study's arm succeeds with final threshold ``threshold``."""
    return values >= threshold - DECISION_TOLERANCE


def final_benefit_tables(design: MultiArmDesign) -> np.ndarray:
    """Per treatment arm, its posterior probability of benefit at the last look on its
    lattice, shape (T, X, C), padded with ``-inf`` (the decision tables' futility
    padding: a count pair outside an arm's lattice never succeeds)."""
    finals = []
    for pair in design.pairs:
        benefit = build_rule(pair).final.benefit
        assert benefit is not None, "refusal() requires posterior thresholds"
        finals.append(benefit if benefit.ndim == 2 else benefit[:, None])
    x_max = max(b.shape[0] for b in finals)
    c_max = max(b.shape[1] for b in finals)
    out = np.full((len(finals), x_max, c_max), -np.inf)
    for t, b in enumerate(finals):
        out[t, :b.shape[0], :b.shape[1]] = b
    return out


def final_values(design: MultiArmDesign, row: tuple[float, ...], replicates: int,
                 seed: int, scenario: int, tables: MultiArmTables | None = None,
                 benefit: np.ndarray | None = None) -> np.ndarray:
    """Every simulated study's value per treatment arm (module docstring), shape
    (replicates, T), for true values ``row`` (``design.arm_names`` order) drawn as
    :func:`octrial.multiarm.engine.simulate_design` draws scenario number ``scenario``
    (0-based) with ``seed``.

    Parameters
    ----------
    tables, benefit : ndarray, optional
        Fixed allocation: :func:`~octrial.multiarm.tables.build_tables` and
        :func:`final_benefit_tables` of ``design``, when already built.

    Raises
    ------
    ValueError
        When :func:`refusal` gives a reason.
    """
    why = refusal(design)
    if why is not None:
        raise ValueError(f"the final threshold cannot be calibrated by simulation: {why}")
    if design.allocation.adaptive:
        return _adaptive_values(design, row, replicates, seed, scenario)
    tables = build_tables(design) if tables is None else tables
    benefit = final_benefit_tables(design) if benefit is None else benefit
    return _fixed_values(design, tables, benefit, row, replicates, seed, scenario)


def _fixed_values(design: MultiArmDesign, tables: MultiArmTables, benefit: np.ndarray,
                  row: tuple[float, ...], replicates: int, seed: int,
                  scenario: int) -> np.ndarray:
    # the set-up of octrial.multiarm.engine.fixed_sums, so the words and draws are its own
    T, K = tables.decision.shape[:2]
    A = tables.increments.shape[1]
    order = np.roll(np.arange(A), -1) if design.shared_control else np.arange(A)
    truth = np.asarray(row, dtype=float)[order]
    increments = np.ascontiguousarray(tables.increments[:, order])
    sizes = np.ascontiguousarray(tables.sizes[:, order])
    draws = DrawTables.from_pmfs(_increment_pmfs(design, truth, increments, sizes))
    memo = best_memo(tables)
    out = np.empty((replicates, T))
    for b in range(-(-replicates // BATCH)):
        reps = min(BATCH, replicates - b * BATCH)
        rng = batch_generator(seed, scenario, b)
        words = rng.bit_generator.random_raw(reps * K * A).reshape(reps, K, A)
        fixed_studies(words, increments, sizes, tables.decision, benefit, tables.density,
                      tables.worse, tables.support, tables.reach, tables.weights,
                      tables.drop_below, tables.keep, tables.control,
                      out[b * BATCH:b * BATCH + reps], *memo, *draws.arrays())
    return out


@numba.njit(cache=True)
def fixed_studies(words, increments, sizes, decision, benefit, density, worse, support,
                  reach, weights, drop_below, keep, control, out, memo_keys, memo_values,
                  memo_held, bounds, t_start, t_length, guide, guide_start,
                  shift):  # pragma: no cover - compiled
    """The study of :func:`octrial.multiarm.kernel.simulate` (same words, draws,
    interim decisions, dropping and selection), writing each arm's value (module
    docstring) into ``out`` (studies, T) instead of adding up tallies."""
    reps = words.shape[0]
    K, A = increments.shape
    T = decision.shape[0]
    X = decision.shape[2]
    needs_best = density.shape[0] > 0
    x = np.zeros(A, np.int64)
    active = np.zeros(T, np.bool_)
    probs = np.zeros(T)
    rows = np.zeros(T, np.int64)
    for r in range(reps):
        x[:] = 0
        active[:] = True
        for t in range(T):
            out[r, t] = -np.inf
        for k in range(K):
            for a in range(A):
                y = draw(words[r, k, a], k * A + a, bounds, t_start, t_length, guide,
                         guide_start, shift)
                if a < T and not active[a]:
                    continue
                x[a] += y
                if x[a] >= sizes[k, a]:
                    x[a] = sizes[k, a] - 1
            c = x[T] if control else 0
            left = 0
            for t in range(T):
                if not active[t]:
                    continue
                if k == K - 1:
                    active[t] = False
                    out[r, t] = benefit[t, x[t], c]
                    continue
                code = decision[t, k, x[t], c]
                if code == EFFICACY:
                    active[t] = False
                    out[r, t] = np.inf
                elif code == FUTILITY:
                    active[t] = False
                else:
                    left += 1
            if left > 0 and k < K - 1 and needs_best and (drop_below[k] >= 0 or keep > 0):
                best_memoised(density, worse, support, reach, weights, K, X, k, x, active,
                              rows, memo_keys, memo_values, memo_held, probs)
                if drop_below[k] >= 0:
                    for t in range(T):
                        if active[t] and probs[t] < drop_below[k]:
                            active[t] = False
                            left -= 1
                while keep > 0 and left > keep:
                    worst = -1
                    for t in range(T):
                        if active[t] and (worst < 0 or probs[t] <= probs[worst]):
                            worst = t
                    active[worst] = False
                    left -= 1
            if left == 0:
                break


def _adaptive_values(design: MultiArmDesign, row: tuple[float, ...], replicates: int,
                     seed: int, scenario: int) -> np.ndarray:
    # the batches of octrial.multiarm.adaptive.scenario_sums (same tables and memo)
    study = adaptive_study(design)
    rates = np.asarray(row, float)
    study.check(rates.size)
    priors = study.arm_priors
    assert priors is not None and study.arm_rule is not None
    table = _tables(tuple(priors), int(study.looks[-2]) if len(study.looks) > 1 else 0,
                    study.higher)
    memo = _memo(_memo_identity(study))
    rule = study.arm_rule
    prior_w, prior_a, prior_b = padded_priors(list(priors))
    first = 1 if study.control else 0
    last = len(study.looks) - 1
    parts = []
    for b, start in enumerate(range(0, replicates, BATCH)):
        batch = simulate_batch(study, rates, min(BATCH, replicates - start), seed,
                               scenario, b, table, memo)
        values = np.where(batch.outcome[:, first:] == 1, np.inf, -np.inf)
        reached = (batch.dropped[:, first:] == last) & (batch.outcome[:, first:] != 0)
        values[reached] = -np.inf  # filled below
        adaptive_final(  # type: ignore[call-arg]
            reached, batch.sizes[:, last], batch.responses[:, last], first,
            rule.versus_control, rule.higher, float(rule.shift), float(rule.benchmark),
            prior_w, prior_a, prior_b, int(study.looks[-1]), *decision_nodes(), memo,
            values)
        parts.append(values)
    return np.concatenate(parts) if parts else np.empty((0, rates.size - first))


@numba.njit(cache=True)
def adaptive_final(reached, n, x, first, versus_control, higher, shift, benchmark,
                   prior_w, prior_a, prior_b, largest, log_u, log_1mu, log_w, start, memo,
                   out):  # pragma: no cover - compiled
    """The last look's probability of benefit of every arm that reached it, as the
    study loop computes it (same function, counts and memo)."""
    for r in range(reached.shape[0]):
        for t in range(reached.shape[1]):
            if reached[r, t]:
                j = first + t
                out[r, t] = arm_benefit(versus_control, higher, shift, benchmark, j,
                                        prior_w, prior_a, prior_b, n[r, j], x[r, j],
                                        n[r, 0], x[r, 0], largest, log_u, log_1mu, log_w,
                                        start, memo)
