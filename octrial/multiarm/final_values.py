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

The studies are the engine's own: fixed allocation runs the decision-table kernel
through :func:`octrial.multiarm.fixed_scenario.fixed_tallies` (the kernel records the
values, :func:`octrial.multiarm.kernel.simulate`); adaptive allocation runs the batches
of :func:`octrial.multiarm.adaptive.scenario_batches` and computes the last look's
probability with the same function and memo the study loop decides by
(:func:`octrial.allocation.decisions.arm_benefit`).
"""

from __future__ import annotations

import numba
import numpy as np

from octrial.allocation.decisions import arm_benefit, padded_priors
from octrial.allocation.decisions import nodes as decision_nodes
from octrial.multiarm.adaptive import (
    adaptive_study,
    benefit_memo,
    memo_identity,
    scenario_batches,
)
from octrial.multiarm.engine import BATCH, arm_nulls, truly_best
from octrial.multiarm.fixed_scenario import fixed_tallies
from octrial.multiarm.model import MultiArmDesign
from octrial.multiarm.tables import MultiArmTables, build_tables
from octrial.rules.lattice import build_rule
from octrial.rules.stop import DECISION_TOLERANCE

__all__ = ["final_benefit_tables", "final_values", "refusal", "successes"]


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
    out = np.empty((replicates, len(design.treatments)))
    # the engine's scenario, its tallies unused
    fixed_tallies(design, tables, row, replicates, seed, scenario, BATCH,
                  arm_nulls(design, row), truly_best(design, row), benefit, out)
    return out


def _adaptive_values(design: MultiArmDesign, row: tuple[float, ...], replicates: int,
                     seed: int, scenario: int) -> np.ndarray:
    study = adaptive_study(design)
    rates = np.asarray(row, float)
    priors = study.arm_priors
    assert priors is not None and study.arm_rule is not None
    rule = study.arm_rule
    prior_w, prior_a, prior_b = padded_priors(list(priors))
    first = 1 if study.control else 0
    last = len(study.looks) - 1
    # the memo the study loop decides by (scenario_batches shares it)
    memo = benefit_memo(memo_identity(study))
    parts = []
    for batch in scenario_batches(study, rates, replicates, seed, scenario, BATCH):
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
