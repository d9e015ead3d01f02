"""Evaluate a design: choose an engine, run every scenario, assemble the tables.

:func:`evaluate` is the public entry point returning the ``oc.csv`` table;
:func:`compute` returns everything a run writes (tables and numerical facts).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from octrial.bayesian_oc import bayesian_record
from octrial.design.load import load_design
from octrial.design.model import Design
from octrial.design_prior import assurance_record
from octrial.engines import MonteCarloSettings, choose
from octrial.errors import NumericalWarning
from octrial.execution import Execution
from octrial.results import oc_table, type1_summary
from octrial.rules.stop import DECISION_TOLERANCE


@dataclass(frozen=True, eq=False)
class Evaluation:
    """Everything one evaluation produces.

    Attributes
    ----------
    design : Design
    oc : DataFrame
        One row per scenario (the ``oc.csv`` contract).
    boundaries : DataFrame or None
        Decision boundaries (counts for discrete endpoints; sample mean and z for normal
        endpoints with known sd); ``None`` when the rule has no table form.
    info : dict
        Engine, numerical tolerances, the maximum type I error and where it occurs.
    """

    design: Design
    oc: pd.DataFrame
    boundaries: pd.DataFrame | None
    info: dict[str, Any]


def _as_design(design: Design | str | Path) -> Design:
    return design if isinstance(design, Design) else load_design(design)


def compute(
    design: Design | str | Path, method: str | None = None,
    settings: MonteCarloSettings | None = None, execution: Execution | None = None,
    assurance: bool = True, relevant_effect: float | None = None, **options: Any,
) -> Evaluation:
    """Evaluate ``design`` at all its scenarios.

    Parameters
    ----------
    design : Design or path
        A loaded design or the path of a design file.
    method : {'auto', 'exact', 'monte-carlo'}, optional
        Overrides ``simulation.method``.
    settings : MonteCarloSettings, optional
        Simulation settings (replicates, seed, target standard error); exact engines
        ignore them.
    execution : Execution, optional
        Workers, backend, checkpoints and progress bar for simulation (the scenarios,
        and the assurance when it is simulated).
    assurance : bool
        Compute the assurance under the design priors (``info['assurance']``); callers
        that do not report it (``octrial verify``) skip it, since it may be simulated.
        With it come the Bayesian operating characteristics
        (``info['bayesian_operating_characteristics']``, :mod:`octrial.bayesian_oc`).
    relevant_effect : float, optional
        Bayesian power over the clinically relevant region (effect >= this value beyond
        the null boundary) rather than the whole alternative.
    **options
        Passed to the engine.

    Returns
    -------
    Evaluation
    """
    design = _as_design(design)
    engine = choose(design, method)
    truths = np.array(design.scenarios.values, dtype=float)
    # Simulation settings go only to engines asked to use them (engines written to the
    # plain ``run(design, truths, rule)`` interface keep working).
    given = {k: v for k, v in (("settings", settings), ("execution", execution))
             if v is not None}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", NumericalWarning)
        rule = design.family.decision_rule(design, truths)
        outcome = engine.run(design, truths, rule=rule, **given, **options)
    oc = oc_table(design, truths, outcome)
    boundaries = (rule.boundary_table(design) if rule is not None
                  else design.family.boundaries_without_rule(design))
    info = {
        "engine": engine.name,
        "decision_tolerance": DECISION_TOLERANCE,
        **outcome.info,
        "interval_level": (outcome.estimation.level if outcome.estimation is not None
                           else None),
        "type1": type1_summary(oc),
        "prior_probability_of_claim": design.family.prior_probability_of_claim(design),
        "prior_effective_sample_size": design.family.effective_sample_size(design),
        "assurance": (found := assurance_record(design, rule, settings, execution)
                      if assurance else None),
        "bayesian_operating_characteristics": (
            bayesian_record(design, found, relevant_effect, execution) if assurance else None),
        "scenarios_dropped": design.scenarios.dropped,
    }
    notes = list(dict.fromkeys(str(w.message) for w in caught
                               if issubclass(w.category, NumericalWarning)))
    for w in caught:
        if not issubclass(w.category, NumericalWarning):
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    if notes:
        info["warnings"] = notes
        for note in notes:
            warnings.warn(note, NumericalWarning, stacklevel=2)
    return Evaluation(design, oc, boundaries, info)


def evaluate(
    design: Design | str | Path, method: str | None = None,
    settings: MonteCarloSettings | None = None, execution: Execution | None = None,
    **options: Any,
) -> pd.DataFrame:
    """Operating characteristics of ``design``: one row per scenario.

    Parameters
    ----------
    design : Design or path
        A loaded design or the path of a design file.
    method : {'auto', 'exact', 'monte-carlo'}, optional
        Overrides ``simulation.method``.
    settings, execution : optional
        As for :func:`compute`.

    Returns
    -------
    DataFrame
        The columns of ``oc.csv`` (see docs/output-files.md).

    Examples
    --------
    >>> import octrial
    >>> oc = octrial.evaluate("designs/single-arm-response.toml")  # doctest: +SKIP
    >>> oc[["true_treatment", "prob_success"]].head()  # doctest: +SKIP
    """
    return compute(design, method, settings, execution, **options).oc
