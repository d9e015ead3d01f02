"""Operating characteristics of a several-arm design, as ``octrial run`` writes them.

The several-arm counterpart of :mod:`octrial.evaluation`: the engine is chosen
(:func:`choose_engine`), every scenario evaluated, and the result gathered into one table
with the columns of docs/multi-arm.md in one order whatever the engine
(:func:`oc_columns`; a column an engine does not compute is left empty), each arm's own
boundary table with an ``arm`` column, and the facts run.json records.

Engines:

- ``exact (several arms, control paths)``, :mod:`octrial.engines.arms_exact`: fixed
  allocation, each arm judged by its own rule, within the engine's memory bound;
- ``exact (several arms, joint lattice)``, :mod:`octrial.engines.arms_joint`: small
  binary studies whose arms are coupled by Pr(best) dropping or selection (only when
  asked for with method ``exact``: its cost grows with the power of the arms);
- ``monte-carlo (several arms)``, :mod:`octrial.multiarm.engine`: everything, fixed and
  response-adaptive allocation, one task per scenario through :mod:`octrial.execution`
  (workers, checkpoints, resumption).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from octrial._version import __version__
from octrial.engines.arms_exact import evaluate_design, unsupported
from octrial.engines.arms_joint import joint_exact
from octrial.errors import InputError, Problem
from octrial.execution import Execution
from octrial.execution.checkpoints import kept_seed
from octrial.multiarm.engine import BATCH, arm_nulls, simulate_scenarios
from octrial.multiarm.model import MultiArmDesign
from octrial.multiarm.tables import build_tables
from octrial.rules.lattice import build_rule

__all__ = ["EXACT_PATHS", "JOINT", "METHODS", "SIMULATION", "ArmsEvaluation",
           "arms_type1", "choose_engine", "compute_arms", "oc_columns", "sizes_per_look"]

METHODS = ("auto", "exact", "monte-carlo")
EXACT_PATHS = "exact (several arms, control paths)"
JOINT = "exact (several arms, joint lattice)"
SIMULATION = "monte-carlo (several arms)"


@dataclass(frozen=True, eq=False)
class ArmsEvaluation:
    """A several-arm design evaluated at all its scenarios.

    Attributes
    ----------
    design : MultiArmDesign
        The design, with the seed used when it was simulated.
    oc : DataFrame
        One row per scenario, columns as :func:`oc_columns` orders them.
    boundaries : DataFrame or None
        Each treatment arm's own boundary table (its rule against the control or the
        benchmark), the arm's name in the first column ``arm``.
    info : dict
        Facts for run.json: ``engine``, ``seed``, ``type1`` (largest family-wise error),
        ``type1_per_arm``, numerical bounds of the exact engines.
    """

    design: MultiArmDesign
    oc: pd.DataFrame
    boundaries: pd.DataFrame | None
    info: dict[str, Any]


def oc_columns(design: MultiArmDesign) -> list[str]:
    """The documented columns of a several-arm oc.csv, in their order (docs/output-files.md),
    without the last two, ``method`` and ``replicates``.

    Allocation over time comes last: per arm (the control first) its
    ``<arm>_block<k>_share`` and then its ``<arm>_look<k>_n`` columns.
    """
    looks = range(1, design.looks.count + 1)
    cols = ["scenario", *(f"true_{a}" for a in design.arm_names), "is_null",
            "prob_success", "prob_success_se", "fwer", "fwer_se", "prob_select_best",
            "selected_bias", "prob_stop_efficacy", "prob_stop_futility"]
    cols += [f"look{k}_stop_{why}" for k in looks for why in ("efficacy", "futility")]
    cols += ["expected_n", "sd_n"]
    if design.shared_control:
        cols += ["control_expected_n", "control_sd_n"]
    for arm in design.treatment_names:
        cols += [f"{arm}_is_null", f"{arm}_prob_success", f"{arm}_prob_success_se",
                 f"{arm}_expected_n", f"{arm}_sd_n"]
        cols += [f"{arm}_look{k}_{what}" for k in looks
                 for what in ("stop_efficacy", "stop_futility", "drop")]
    for arm in design.arm_names:
        cols += [f"{arm}_block{k}_share" for k in looks]
        cols += [f"{arm}_look{k}_n" for k in looks]
    return cols


def _ordered(design: MultiArmDesign, table: pd.DataFrame) -> pd.DataFrame:
    """``table`` in the documented order, empty where the engine does not compute a
    column."""
    out = table.reindex(columns=[*oc_columns(design), "method", "replicates"])
    return out.reset_index(drop=True)


# -- the engine ---------------------------------------------------------------------------
def choose_engine(design: MultiArmDesign, method: str) -> tuple[str, str | None]:
    """The engine for ``method`` and, for ``auto``, why no exact engine was taken.

    Returns
    -------
    engine : str
        :data:`EXACT_PATHS`, :data:`JOINT` or :data:`SIMULATION`.
    reason : str or None
        Why the control-path engine does not apply (``None`` when it does).

    Raises
    ------
    InputError
        ``method='exact'`` for a design no exact engine serves.
    """
    why = unsupported(design)
    if method == "monte-carlo":
        return SIMULATION, why
    if why is None:
        return EXACT_PATHS, None
    if method == "auto":
        return SIMULATION, why
    joint = _joint_unsupported(design)
    if joint is None:
        return JOINT, why
    raise InputError(design.source.path, [Problem(
        "simulation.method", "a design an exact several-arm engine serves (fixed "
        "allocation; each arm judged by its own rule, or a small binary study with Pr(best) "
        "dropping or selection), or method 'monte-carlo'", f"{why}; {joint}")])


def _joint_unsupported(design: MultiArmDesign) -> str | None:
    if design.allocation.adaptive:
        return "the joint lattice engine needs fixed allocation"
    if getattr(design.family, "name", "") != "binary":
        return "the joint lattice engine serves binary endpoints only"
    if any(p.conduct is not None for p in design.pairs):
        return "the joint lattice engine has no calendar-time conduct"
    return None


def compute_arms(design: MultiArmDesign, method: str | None = None,
                 execution: Execution | None = None) -> ArmsEvaluation:
    """Evaluate a several-arm design at all its scenarios.

    Parameters
    ----------
    design : MultiArmDesign
    method : {'auto', 'exact', 'monte-carlo'}, optional
        Overrides ``simulation.method``. ``auto`` takes the control-path exact engine
        when it applies and its memory bound allows, else simulation.
    execution : Execution, optional
        Workers, backend, checkpoints and progress of the simulation (one task per
        scenario); in-process without checkpoints when not given.

    Raises
    ------
    InputError
        When the method cannot serve the design, or the design cannot be simulated.
    """
    method = method or design.simulation.method or "auto"
    engine, why = choose_engine(design, method)
    info: dict[str, Any] = {"engine": engine, "method_asked": method}
    if why is not None and method == "auto":
        info["exact_not_used"] = why
    if engine == EXACT_PATHS:
        try:
            table, facts = _exact_paths(design)
        except ValueError as exc:  # beyond the engine's memory bound
            if method == "exact":
                raise InputError(design.source.path, [Problem(
                    "simulation.method", "a design small enough for the exact several-arm "
                    "engine, or method 'monte-carlo'", str(exc))]) from None
            engine, info["engine"], info["exact_not_used"] = SIMULATION, SIMULATION, str(exc)
        else:
            info.update(facts)
    if engine == JOINT:
        try:
            table = _joint(design)
        except ValueError as exc:
            raise InputError(design.source.path, [Problem(
                "simulation.method", "a binary design small enough for the joint exact "
                "engine, or method 'monte-carlo'", str(exc))]) from None
    if engine == SIMULATION:
        design, table, facts = _simulated(design, execution or Execution())
        info.update(facts)
    if engine != SIMULATION:
        info["seed"] = None  # exact: no random numbers
    oc = _ordered(design, table)
    info["type1"], info["type1_per_arm"] = arms_type1(design, oc)
    return ArmsEvaluation(design, oc, boundary_table(design), info)


def _exact_paths(design: MultiArmDesign) -> tuple[pd.DataFrame, dict[str, Any]]:
    table, outcome = evaluate_design(design)
    table.insert(0, "scenario", np.arange(1, len(table) + 1))
    nulls = [f"{arm}_is_null" for arm in design.treatment_names]
    table["is_null"] = table[nulls].all(axis=1)
    _exact_extras(design, table)
    facts = {"max_neglected_mass": float(outcome.neglected.max()),
             "max_uncertain_mass": float(outcome.uncertain.max())}
    return table, facts


def _joint(design: MultiArmDesign) -> pd.DataFrame:
    rows = []
    tables = build_tables(design)
    for i, row in enumerate(design.scenarios.values):
        out: dict[str, Any] = {"scenario": i + 1}
        out.update({f"true_{a}": v for a, v in zip(design.arm_names, row, strict=True)})
        nulls = arm_nulls(design, row)
        out["is_null"] = bool(nulls.all())
        out.update({f"{a}_is_null": bool(n)
                    for a, n in zip(design.treatment_names, nulls, strict=True)})
        found = joint_exact(design, row, tables)
        k_last = design.looks.count
        found["prob_stop_efficacy"] = sum(found[f"look{k}_stop_efficacy"]
                                          for k in range(1, k_last))
        found["prob_stop_futility"] = sum(found[f"look{k}_stop_futility"]
                                          for k in range(1, k_last))
        out.update(found)
        rows.append(out)
    table = pd.DataFrame(rows)
    _exact_extras(design, table)
    return table


def _exact_extras(design: MultiArmDesign, table: pd.DataFrame) -> None:
    """The columns every exact table shares: standard errors 0, no replicates, and each
    arm's mean cumulative size per look."""
    for column in ("prob_success_se", "fwer_se",
                   *(f"{a}_prob_success_se" for a in design.treatment_names)):
        table[column] = 0.0
    for arm, sizes in sizes_per_look(design, table).items():
        for k in range(design.looks.count):
            table[f"{arm}_look{k + 1}_n"] = sizes[:, k]
    table["method"] = "exact"
    table["replicates"] = 0


def sizes_per_look(design: MultiArmDesign, table: pd.DataFrame) -> dict[str, np.ndarray]:
    """Per arm (control first), its mean cumulative size at each look under fixed
    allocation, shape (scenarios, looks), from the planned sizes and the probabilities
    of leaving at each look in ``table``.

    With fixed allocation an arm enrols its planned subjects until it leaves and keeps
    the size it reached, so the mean size at look k is the sum over looks m <= k of the
    planned size at m times Pr(leave at m) for m < k, plus the planned size at k times
    Pr(still in at k). The control leaves when the study ends (the study's
    ``look<k>_stop_*`` columns), a treatment arm by its own rule or when dropped.
    The block shares are not computed here: their mean over the studies enrolling a
    block depends on which arms are in together, not on each arm's probabilities.
    """
    k_looks = design.looks.count
    out = {}
    for j, arm in enumerate(design.arm_names):
        planned = np.array([n[j] for n in design.looks.per_arm], dtype=float)
        if design.shared_control and j == 0:
            whys = [f"look{{k}}_stop_{why}" for why in ("efficacy", "futility")]
        else:
            whys = [f"{arm}_look{{k}}_{why}" for why in ("stop_efficacy", "stop_futility",
                                                          "drop")]
        left_at = sum(table[[w.format(k=k) for k in range(1, k_looks + 1)]].to_numpy(float)
                      for w in whys)
        left_at = np.asarray(left_at, dtype=float)
        gone_before = np.cumsum(left_at, axis=1) - left_at
        kept = np.cumsum(left_at * planned, axis=1) - left_at * planned
        out[arm] = kept + (1.0 - gone_before) * planned
    return out


# -- simulation ---------------------------------------------------------------------------
def _simulated(design: MultiArmDesign, execution: Execution
               ) -> tuple[MultiArmDesign, pd.DataFrame, dict[str, Any]]:
    """The several-arm engine on every scenario, fixed or adaptive allocation: one task
    per scenario through ``execution`` (workers, checkpoints, resumption), the engine's
    own checkpoints; a seed drawn for the run is kept beside them so that a resumed run
    draws no other."""
    replicates = design.simulation.replicates
    ingredients = {"design_sha256": design.source.sha256, "design": repr(design),
                   "engine": SIMULATION, "replicates": replicates,
                   "seed": "drawn" if design.simulation.seed is None else design.simulation.seed,
                   "octrial": __version__}
    store = execution.store(ingredients) if design.simulation.seed is None else None
    seed, drawn = kept_seed(store, design.simulation.seed)
    design = dataclasses.replace(
        design, simulation=dataclasses.replace(design.simulation, seed=seed))
    simulated = simulate_scenarios(design, replicates, seed, execution=execution)
    facts: dict[str, Any] = {
        "seed": seed, "seed_drawn": drawn, "replicates_per_scenario": replicates,
        "batch_size": BATCH, "scenarios_resumed": simulated.resumed,
        "random_numbers": "numpy PCG64; scenario i (from 0), batch b: "
                          "SeedSequence(seed, spawn_key=(i, b))"}
    return design, simulated.table, facts


# -- summaries ----------------------------------------------------------------------------
def arms_type1(design: MultiArmDesign, oc: pd.DataFrame
               ) -> tuple[dict[str, Any] | None, dict[str, Any]]:
    """The largest family-wise error rate over the scenarios with a null arm, and per
    treatment arm its largest probability of success over the scenarios where it is
    null (its type I error), each with the scenario where it occurs."""
    nulls = [f"{a}_is_null" for a in design.treatment_names]
    any_null = oc[nulls].astype(bool).any(axis=1)
    study = _worst(oc[any_null], "fwer", "fwer_se")
    if study is not None:
        study["measure"] = "family-wise error rate (at least one null arm succeeds)"
    per_arm = {}
    for arm in design.treatment_names:
        found = _worst(oc[oc[f"{arm}_is_null"].astype(bool)], f"{arm}_prob_success",
                       f"{arm}_prob_success_se")
        if found is not None:
            per_arm[arm] = found
    return study, per_arm


def _worst(rows: pd.DataFrame, column: str, se: str) -> dict[str, Any] | None:
    if rows.empty:
        return None
    worst = rows.loc[rows[column].idxmax()]
    return {"max_type1_error": float(worst[column]), "se": float(worst[se]),
            "scenario": int(worst["scenario"]),
            "at": {c.removeprefix("true_"): float(worst[c]) for c in rows.columns
                   if c.startswith("true_")},
            "null_scenarios": len(rows)}


def boundary_table(design: MultiArmDesign) -> pd.DataFrame | None:
    """Each treatment arm's own boundary table (its two-arm or one-arm rule in counts),
    stacked with the arm's name in the first column; ``None`` when the endpoint has no
    count lattice."""
    if not getattr(design.family, "lattice", False):
        return None
    parts = []
    for arm, pair in zip(design.treatment_names, design.pairs, strict=True):
        truths = np.array(pair.scenarios.values, dtype=float)
        table = build_rule(pair, truths=truths).boundary_table(pair)
        table.insert(0, "arm", arm)
        parts.append(table)
    return pd.concat(parts, ignore_index=True)
