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
- ``monte-carlo (several arms)``, :mod:`octrial.multiarm.engine`: everything, one task
  per scenario through :mod:`octrial.execution` (workers, checkpoints, resumption).
"""

from __future__ import annotations

import dataclasses
import inspect
import json
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from octrial._version import __version__
from octrial.engines.arms_exact import evaluate_design, unsupported
from octrial.engines.arms_joint import joint_exact
from octrial.errors import InputError, Problem, bad_setting
from octrial.execution import Execution, run_grid
from octrial.execution.checkpoints import kept_seed
from octrial.multiarm import engine as multiarm_engine
from octrial.multiarm import family_loop
from octrial.multiarm.engine import arm_nulls, simulate_design
from octrial.multiarm.model import MultiArmDesign
from octrial.multiarm.tables import MultiArmTables, build_tables
from octrial.rules.lattice import build_rule

__all__ = ["EXACT_PATHS", "JOINT", "METHODS", "SIMULATION", "ArmsEvaluation",
           "arms_type1", "choose_engine", "compute_arms", "oc_columns"]

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
    """The documented columns of a several-arm oc.csv, in their order (docs/output-files.md).

    Columns an engine adds beyond these (the allocation's ``<arm>_block<k>_share`` and
    ``<arm>_look<k>_n``) follow them, before ``method`` and ``replicates``.
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
    return cols


def _ordered(design: MultiArmDesign, table: pd.DataFrame) -> pd.DataFrame:
    """``table`` with the documented columns first (empty where absent), then the
    engine's further columns, then ``method`` and ``replicates``."""
    documented = oc_columns(design)
    tail = ["method", "replicates"]
    extra = [c for c in table.columns if c not in documented and c not in tail]
    out = table.reindex(columns=[*documented, *extra, *tail])
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
    """The columns every exact table shares: standard errors 0, no replicates."""
    for column in ("prob_success_se", "fwer_se",
                   *(f"{a}_prob_success_se" for a in design.treatment_names)):
        table[column] = 0.0
    table["method"] = "exact"
    table["replicates"] = 0


# -- simulation ---------------------------------------------------------------------------
@dataclass(frozen=True)
class ArmsScenarioTask:
    """One scenario of a several-arm simulation (picklable, checkpointed)."""

    design: MultiArmDesign
    index: int
    replicates: int
    seed: int

    def identity(self) -> dict[str, Any]:
        """What this task's checkpoint records."""
        return {"design_sha256": self.design.source.sha256, "seed": self.seed,
                "scenario": self.index, "replicates": self.replicates,
                "kernel": "several arms"}

    def problems(self, arrays: dict[str, np.ndarray]) -> list[str]:
        """What is wrong with ``arrays`` as this scenario's saved row."""
        try:
            row = json.loads(str(arrays["row"]))
        except (KeyError, ValueError) as exc:
            return [f"no readable row ({type(exc).__name__})"]
        if not isinstance(row, dict) or row.get("replicates") != self.replicates:
            return ["a row of another number of replicates"]
        probabilities = [v for k, v in row.items()
                         if "prob" in k or "look" in k or k == "fwer"]
        if any(isinstance(v, float) and not 0.0 <= v <= 1.0 for v in probabilities
               if v == v):  # NaN (nothing selected) is allowed
            return ["a probability outside [0, 1]"]
        return []


def simulate_scenario(task: ArmsScenarioTask) -> dict[str, np.ndarray]:
    """Simulate one scenario with the several-arm engine's own per-scenario routine
    (seeded by the scenario's index, so the numbers are those of
    :func:`octrial.multiarm.engine.simulate_design`)."""
    design = task.design
    row = design.scenarios.values[task.index]
    found = multiarm_engine._scenario(design, _tables(design), row, task.replicates,
                                      task.seed, task.index)
    found["scenario"] = task.index + 1
    text = json.dumps({k: _plain(v) for k, v in found.items()})
    return {"row": np.array(text)}


_TABLES: dict[str, MultiArmTables] = {}
"""The decision tables of the last design simulated in this process (a worker runs many
scenarios of one design; building them takes longer than simulating a scenario)."""


def _tables(design: MultiArmDesign) -> MultiArmTables:
    key = design.source.sha256 + repr(design)
    if key not in _TABLES:
        _TABLES.clear()
        _TABLES[key] = build_tables(design)
    return _TABLES[key]


def _plain(value: Any) -> Any:
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer, int)):
        return int(value)
    if isinstance(value, (np.floating, float)):
        return float(value)  # json writes repr: read back bit for bit
    return value


def _engine_takes_execution() -> bool:
    return "execution" in inspect.signature(simulate_design).parameters


SCENARIO_ROUTINE = ("design", "tables", "row", "replicates", "seed", "index")
"""The parameters of the several-arm engine's per-scenario routine that
:func:`simulate_scenario` calls."""


def _per_scenario(design: MultiArmDesign) -> bool:
    """Whether the scenarios can be run one task each by the engine's own routine (fixed
    allocation; the routine present with the parameters it is called with)."""
    routine = getattr(multiarm_engine, "_scenario", None)
    if design.allocation.adaptive or routine is None or family_loop.serves(design):
        # normal and time-to-event designs: simulate_design's own study loop
        return False
    return tuple(inspect.signature(routine).parameters)[:6] == SCENARIO_ROUTINE


def _simulated(design: MultiArmDesign, execution: Execution
               ) -> tuple[MultiArmDesign, pd.DataFrame, dict[str, Any]]:
    replicates = design.simulation.replicates
    ingredients = {"design_sha256": design.source.sha256, "design": repr(design),
                   "engine": SIMULATION, "replicates": replicates,
                   "seed": "drawn" if design.simulation.seed is None else design.simulation.seed,
                   "octrial": __version__}
    store = execution.store(ingredients)
    seed, drawn = kept_seed(store, design.simulation.seed)
    design = dataclasses.replace(
        design, simulation=dataclasses.replace(design.simulation, seed=seed))
    facts: dict[str, Any] = {
        "seed": seed, "seed_drawn": drawn, "replicates_per_scenario": replicates,
        "batch_size": multiarm_engine.BATCH,
        "random_numbers": "numpy PCG64; scenario i (from 0), batch b: "
                          "SeedSequence(seed, spawn_key=(i, b))"}
    if not _per_scenario(design):
        table = _whole_design(design, replicates, seed, execution)
        facts["checkpointed_by_engine"] = _engine_takes_execution()
        return design, table, facts
    tasks = [ArmsScenarioTask(design, i, replicates, seed)
             for i in range(len(design.scenarios.values))]
    results, resumed = run_grid(simulate_scenario, tasks, execution, store)
    facts["scenarios_resumed"] = resumed
    rows = [json.loads(str(r["row"])) for r in results]
    return design, pd.DataFrame(rows), facts


def _whole_design(design: MultiArmDesign, replicates: int, seed: int,
                  execution: Execution) -> pd.DataFrame:
    """The engine's own loop over the scenarios (adaptive allocation, or an engine that
    runs the grid itself)."""
    call: Callable[..., pd.DataFrame] = simulate_design
    given = {"execution": execution} if _engine_takes_execution() else {}
    if not given and (execution.jobs > 1 or execution.backend != "joblib"):
        raise bad_setting("jobs", "jobs", "1 (this design is simulated in one process: its "
                          "engine runs its own loop over the scenarios)",
                          f"jobs {execution.jobs}, backend {execution.backend}")
    try:
        return call(design, replicates, seed, **given)
    except NotImplementedError as exc:
        raise InputError(design.source.path, [Problem(
            "allocation.kind", "an allocation this version simulates ('fixed')",
            design.allocation.kind, str(exc))]) from None


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
