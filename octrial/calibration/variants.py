"""Candidate designs: the original design file with another ``[looks]`` table.

Every candidate is built the way a user's file is read: its ``[looks]`` table (as TOML
data) goes through :func:`octrial.design.load.parse_design` with the rest of the original
file, so what calibration evaluates is exactly what ``octrial run`` will read back from the
calibrated file, and an invalid candidate (futility above efficacy, looks that collide) is
rejected by the same checks as a user's file.
"""

from __future__ import annotations

import copy
import itertools
import json
import math
import tomllib
from typing import Any

from octrial.design.load import parse_design
from octrial.design.model import Design, Looks
from octrial.design.reader import NONE_WORD
from octrial.errors import DesignError


def entries(values: tuple[float | int | None, ...] | list) -> list:
    """Per-look values as a TOML list, ``'none'`` where a look has no value."""
    return [NONE_WORD if v is None else v for v in values]


class Builder:
    """Builds (and remembers) candidate designs from ``[looks]`` tables.

    Parameters
    ----------
    design : Design
        The design being calibrated; its source text is the base of every candidate.
    """

    def __init__(self, design: Design) -> None:
        if not design.source.text:
            raise ValueError("calibration needs the design file's text; load the design with "
                             "octrial.load_design")
        self.design = design
        self.data = tomllib.loads(design.source.text)
        self._designs: dict[str, Design | str] = {}

    @property
    def looks(self) -> dict[str, Any]:
        """A copy of the original ``[looks]`` table."""
        return copy.deepcopy(self.data["looks"])

    def data_for(self, looks: dict[str, Any]) -> dict[str, Any]:
        """The whole design file's data with ``looks`` as its ``[looks]`` table."""
        data = copy.deepcopy(self.data)
        data["looks"] = copy.deepcopy(looks)
        return data

    def build(self, looks: dict[str, Any]) -> Design | str:
        """The candidate design, or the loader's message when ``looks`` is invalid."""
        key = json.dumps(looks, sort_keys=True)
        if key not in self._designs:
            try:
                self._designs[key] = parse_design(self.data_for(looks), self.design.source)
            except DesignError as exc:
                self._designs[key] = "; ".join(p.describe("").lstrip(": ")
                                               for p in exc.problems)
        return self._designs[key]


def allocation_unit(design: Design) -> int:
    """The smallest total sample size that the allocation splits into whole per-arm sizes."""
    weights = [a.allocation for a in design.arms]
    total = sum(weights)
    for unit in range(1, 10_001):
        if all(abs(unit * w / total - round(unit * w / total)) < 1e-9 for w in weights):
            return unit
    raise ValueError("allocation weights too irregular to size")


def round_half_up(x: float) -> int:
    """Round to the nearest whole number, halves upwards (so 7.5 -> 8)."""
    return math.floor(x + 0.5)


def looks_at(looks: Looks, n_max: int, rule: str, unit: int) -> list[int] | None:
    """Cumulative look sizes for maximum ``n_max``, or ``None`` when the looks collide.

    ``rule = 'fractions'``: interim look k at ``unit * round_half_up(t_k * n_max / unit)``
    (at least ``unit``), t_k the original information fraction; ``'counts'``: the interim
    looks keep their sizes. ``n_max`` must be a multiple of ``unit``.
    """
    if n_max % unit:
        return None
    if rule == "counts":
        sizes = [*looks.n[:-1], n_max]
    else:
        sizes = [max(unit, unit * round_half_up(t * n_max / unit))
                 for t in looks.information[:-1]]
        sizes.append(n_max)
    if any(b <= a for a, b in itertools.pairwise(sizes)):
        return None
    return sizes
