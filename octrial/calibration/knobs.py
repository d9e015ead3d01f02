"""What calibration can turn: one value of the ``[looks]`` table each.

A knob writes one value into a ``[looks]`` table and knows its candidate values, ordered
from the least to the most stringent. On a count lattice the candidates are the values at
which the rule changes (the distinct posterior probabilities, or the function parameter
at which some look's threshold meets one of them); any value from a candidate up to, but
not including, the next less stringent one gives the same rule. For other evaluators a
knob gives a continuous range (for bisection) or a fixed grid.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from octrial.calibration.evaluator import Evaluator, distinct
from octrial.calibration.variants import entries
from octrial.design.model import Design, ThresholdSpec

INVERSES = {
    # form -> (lambda at which the threshold at t equals v, sign of d threshold / d lambda)
    "1 - lambda * t^eta": (lambda v, eta, t: (1.0 - v) / t**eta, -1),
    "lambda * t^eta": (lambda v, eta, t: v / t**eta, +1),
}
"""Inverse of each threshold function of information in its lambda (see
:data:`octrial.design.thresholds.FUNCTIONS`)."""

FUTILITY_GRID = tuple(round(0.01 * i, 2) for i in range(51))
"""Futility thresholds tried where candidates are not discrete (0, 0.01, ..., 0.50)."""
PREDICTIVE_GRID = FUTILITY_GRID
"""Predictive futility thresholds tried (0, 0.01, ..., 0.50)."""
ETA_GRID = (0.25, 0.5, 0.75, 1.0, 1.25, 1.5, 2.0, 2.5, 3.0)
"""Exponents eta of a threshold function tried (common practice: a coarse grid)."""


def _spec(design: Design, key: str) -> ThresholdSpec | None:
    return dict(design.looks.specs).get(key)


@dataclass(frozen=True)
class _Function:
    """A threshold written as a function of the information fraction t."""

    form: str
    lam: float
    eta: float


def _function(design: Design, key: str) -> _Function | None:
    """The threshold ``key`` as a function of t; ``None`` for a constant or a list (the
    design loader gives every function its lambda and eta)."""
    spec = _spec(design, key)
    if spec is None or spec.form in ("constant", "list") or spec.lam is None \
            or spec.eta is None:
        return None
    return _Function(spec.form, spec.lam, spec.eta)


class Knob:
    """One value of the ``[looks]`` table (see module docstring).

    Attributes
    ----------
    name : str
        The ``--vary`` word.
    key : str
        The ``[looks]`` key written.
    """

    name: str = ""
    key: str = ""

    def candidates(self, ev: Evaluator, design: Design) -> np.ndarray | None:
        """Candidate values from least to most stringent; ``None`` when continuous."""
        return None

    def span(self, design: Design) -> tuple[float, float]:
        """(least, most) stringent ends of the continuous range."""
        return 0.0, 1.0

    def apply(self, looks: dict[str, Any], design: Design, value: float) -> dict[str, Any]:
        """A copy of ``looks`` with this knob at ``value``."""
        raise NotImplementedError


def _lambda_candidates(
    ev: Evaluator, design: Design, spec: _Function, looks: list[int], lam_max: float,
) -> np.ndarray | None:
    """Values of lambda at which some look's threshold crosses a lattice probability."""
    inverse, sign = INVERSES[spec.form]
    info = design.looks.information
    found = []
    for k in looks:
        table = ev.benefit(design, k)
        if table is None:
            return None
        found.append(inverse(np.asarray(table).ravel(), spec.eta, info[k]))
    lam = distinct(np.concatenate(found)) if found else np.array([])
    lam = lam[(lam >= 0) & (lam <= lam_max)]
    lam = np.union1d(lam, [0.0, lam_max])
    # thresholds fall as lambda grows when sign < 0: larger lambda is less stringent
    return lam[::-1] if sign < 0 else lam


def _lambda_max(spec: _Function, design: Design) -> float:
    """Largest lambda that keeps every look's threshold within [0, 1]."""
    return min(1.0 / t**spec.eta for t in design.looks.information)


class Final(Knob):
    """The final success threshold (the last look's efficacy value or count)."""

    name, key = "final", "efficacy"

    def candidates(self, ev: Evaluator, design: Design) -> np.ndarray | None:
        looks = design.looks
        if looks.uses_counts:
            n = design.family.lattice_size(design, 0, looks.per_arm[-1][0])
            counts = np.arange(n)
            return counts if design.hypothesis.better == "higher" else counts[::-1]
        values = ev.distinct_values(design, [looks.count - 1])
        if values is None:
            return None
        if values[-1] < 1.0 - 2e-12:
            values = np.append(values, 1.0)
        return values

    def apply(self, looks: dict[str, Any], design: Design, value: float) -> dict[str, Any]:
        out = dict(looks)
        if design.looks.efficacy_count is not None:  # a rule in counts (Looks.uses_counts)
            counts = list(design.looks.efficacy_count)
            counts[-1] = int(value)
            out["efficacy_count"] = entries(counts)
        else:
            values = list(design.looks.efficacy)
            values[-1] = float(value)
            out["efficacy"] = entries(values)
        return out


class Common(Knob):
    """One threshold at every look where the design has one (efficacy: all looks with a
    value; futility kinds: every interim look), or the lambda of its function."""

    def __init__(self, name: str, key: str, interim_only: bool) -> None:
        self.name, self.key, self.interim_only = name, key, interim_only

    def looks_with(self, design: Design) -> list[int]:
        k = design.looks.count
        values = getattr(design.looks, self.key)
        spec = _spec(design, self.key)
        indices = range(k - 1) if self.interim_only else range(k)
        if spec is None or spec.form != "list":
            return list(indices)
        return [i for i in indices if values[i] is not None]

    def is_function(self, design: Design) -> bool:
        return _function(design, self.key) is not None

    def candidates(self, ev: Evaluator, design: Design) -> np.ndarray | None:
        function = _function(design, self.key)
        if function is not None:
            return _lambda_candidates(ev, design, function, self.looks_with(design),
                                      _lambda_max(function, design))
        values = ev.distinct_values(design, self.looks_with(design))
        if values is None:
            return None
        if self.interim_only:  # futility: larger is more stringent; 0 means no stop
            return np.union1d([0.0], values[values < 1.0])
        return values if values[-1] >= 1.0 - 2e-12 else np.append(values, 1.0)

    def span(self, design: Design) -> tuple[float, float]:
        function = _function(design, self.key)
        if function is not None:
            lam_max = _lambda_max(function, design)
            sign = INVERSES[function.form][1]
            return (lam_max, 0.0) if sign < 0 else (0.0, lam_max)
        return 0.0, 1.0

    def apply(self, looks: dict[str, Any], design: Design, value: float) -> dict[str, Any]:
        out = dict(looks)
        spec = _spec(design, self.key)
        function = _function(design, self.key)
        if function is not None:
            out[self.key] = {"function": function.form, "lambda": float(value),
                             "eta": float(function.eta)}
        elif spec is None or spec.form == "constant":
            out[self.key] = float(value)
        else:
            current = list(getattr(design.looks, self.key))
            if self.interim_only:
                current = current[:-1]
            out[self.key] = entries([None if v is None else float(value) for v in current])
        return out


class Grid(Common):
    """A futility kind searched over a grid (candidates are not ordered by stringency)."""

    def __init__(self, name: str, key: str, grid: tuple[float, ...]) -> None:
        super().__init__(name, key, interim_only=True)
        self.grid = grid

    def candidates(self, ev: Evaluator, design: Design) -> np.ndarray:
        found = None if self.key == "futility_predictive" else super().candidates(ev, design)
        return np.asarray(self.grid if found is None else found, dtype=float)


class Eta(Knob):
    """The exponent eta of the efficacy threshold's function of information (a grid)."""

    name, key = "eta", "efficacy"

    def candidates(self, ev: Evaluator, design: Design) -> np.ndarray:
        return np.asarray(ETA_GRID)

    def apply(self, looks: dict[str, Any], design: Design, value: float) -> dict[str, Any]:
        out = dict(looks)
        function = _function(design, "efficacy")
        if function is None:  # the request admits eta only for a function (request.py)
            raise ValueError("eta varies only for an efficacy threshold written as a function")
        out["efficacy"] = {"function": function.form, "lambda": float(function.lam),
                           "eta": float(value)}
        return out


def knob(name: str) -> Knob:
    """The knob for a ``--vary`` word."""
    return {
        "final": Final(),
        "efficacy": Common("efficacy", "efficacy", interim_only=False),
        "futility": Grid("futility", "futility", FUTILITY_GRID),
        "futility-predictive": Grid("futility-predictive", "futility_predictive",
                                    PREDICTIVE_GRID),
        "eta": Eta(),
    }[name]


def grid_knob(name: str) -> Grid | Eta:
    """The knob for a value searched over a grid (one of ``request.GRID``)."""
    found = knob(name)
    if not isinstance(found, Grid | Eta):
        raise ValueError(f"{name!r} is not searched over a grid")
    return found


def shortest_between(chosen: float, other: float, closed_other: bool = False) -> float:
    """The value with fewest decimals between ``chosen`` (included) and ``other`` (excluded
    unless ``closed_other``), kept 1e-10 away from an excluded end; ``chosen`` if none.

    Examples
    --------
    >>> shortest_between(0.9531472, 0.9410021)
    0.95
    >>> shortest_between(0.975000000004, 0.974999999996, closed_other=True)
    0.975
    """
    lo, hi = sorted((chosen, other))
    margin = 1e-10
    for digits in range(0, 16):
        step = 10.0**-digits
        options = {round(math.ceil(lo / step - 1e-9) * step, digits),
                   round(math.floor(hi / step + 1e-9) * step, digits)}
        good = [v for v in options if lo <= v <= hi
                and (closed_other or abs(v - other) > margin)]
        if good:
            return min(good, key=lambda v: abs(v - chosen))
    return chosen
