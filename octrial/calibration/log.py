"""The record of every candidate a calibration examined (``calibration.csv``)."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from octrial.calibration.evaluator import Assessment, bayesian_at
from octrial.calibration.nulls import Truths
from octrial.design.model import Design, Looks

RULE_KEYS = ("efficacy", "futility", "futility_predictive", "efficacy_count", "futility_count")


def _text(values: tuple | list | None) -> str:
    if values is None or all(v is None for v in values):
        return ""
    # repr: the shortest text that reads back as the same float (thresholds must round-trip)
    return " ".join("none" if v is None else repr(v) for v in values)


def rule_columns(looks: Looks, final: float | None = None) -> dict[str, Any]:
    """The per-look rule of a candidate as text columns (``final`` overrides the final
    success threshold or count)."""
    out: dict[str, Any] = {"n": looks.n[-1], "looks_n": " ".join(map(str, looks.n))}
    for key in RULE_KEYS:
        values = getattr(looks, key)
        if final is not None and values is not None and key == (
                "efficacy_count" if looks.uses_counts else "efficacy"):
            values = (*values[:-1], final)
        if key.startswith("futility") and values is not None:
            values = values[:-1]  # interim looks only
        out[key] = _text(values)
    return out


def _metric_names() -> tuple[str, ...]:
    from octrial.bayesian_oc import METRICS

    return METRICS


class Log:
    """Rows of ``calibration.csv``, one per candidate examined.

    With Bayesian constraints every row also holds every Bayesian operating
    characteristic of the candidate (columns named as in run.json) and
    ``meets_criteria``; ``meets_alpha`` is then the frequentist bound alone (true when no
    ``--alpha`` is given) and ``passes`` needs both.
    """

    def __init__(self, design: Design, truths: Truths, alpha: float | None,
                 power: float | None, constraints: tuple = ()) -> None:
        self.design = design
        self.truths = truths
        self.alpha = alpha
        self.power = power
        self.constraints = constraints
        self.rows: list[dict[str, Any]] = []

    def criteria_met(self, bayesian: dict[str, Any] | None, i: int | None = None) -> bool:
        """Whether every Bayesian constraint holds (``i``: one candidate of arrays)."""
        if not self.constraints:
            return True
        if bayesian is None:
            return False
        return all(c.met(float(bayesian[c.name] if i is None else bayesian[c.name][i]))
                   for c in self.constraints)

    def meets(self, a: Assessment) -> tuple[bool, bool]:
        """(type I error <= alpha and every Bayesian constraint met, power >= target) for
        an assessment."""
        alpha_ok = (self.alpha is None or a.type1 <= self.alpha) and self.criteria_met(
            a.bayesian)
        power_ok = self.power is None or (a.power is not None and a.power >= self.power)
        return alpha_ok, power_ok

    def _bayesian_columns(self, bayesian: dict[str, Any] | None, i: int | None = None,
                          ) -> dict[str, Any]:
        if not self.constraints:
            return {}
        names = _metric_names()
        if bayesian is None:
            return {**{k: np.nan for k in names}, "meets_criteria": False}
        return {**{k: float(bayesian[k] if i is None else bayesian[k][i]) for k in names},
                "meets_criteria": self.criteria_met(bayesian, i)}

    def add(
        self, step: str, looks: Looks, a: Assessment | None, final: float | None = None,
        note: str = "",
    ) -> int:
        """Record one candidate; returns its row number (from 1)."""
        row: dict[str, Any] = {"candidate": len(self.rows) + 1, "step": step}
        row.update(rule_columns(looks, final))
        arms = self.design.arm_names
        if a is None:
            row.update({"type1_error": np.nan, "type1_error_se": np.nan,
                        **{f"type1_at_{arm}": np.nan for arm in arms},
                        "power": np.nan, "power_se": np.nan, "expected_n_null": np.nan,
                        "expected_n_alternative": np.nan, "meets_alpha": False,
                        "meets_power": False, "passes": False, **self._bayesian_columns(None)})
        else:
            ok, power_ok = self.meets(a)
            alpha_ok = self.alpha is None or a.type1 <= self.alpha
            worst = self.truths.values[a.worst]
            row.update({"type1_error": a.type1, "type1_error_se": a.type1_se,
                        **{f"type1_at_{arm}": float(worst[j]) for j, arm in enumerate(arms)},
                        "power": np.nan if a.power is None else a.power,
                        "power_se": a.power_se,
                        "expected_n_null": a.expected_n_null,
                        "expected_n_alternative": np.nan if a.expected_n_alternative is None
                        else a.expected_n_alternative,
                        "meets_alpha": alpha_ok, "meets_power": power_ok,
                        "passes": ok and power_ok, **self._bayesian_columns(a.bayesian)})
        row["chosen"] = False
        row["note"] = note
        self.rows.append(row)
        return row["candidate"]

    def add_sweep(self, step: str, looks: Looks, values: np.ndarray, prob: np.ndarray,
                  expected_n: np.ndarray) -> None:
        """Record every candidate final threshold of a sweep (one row each).

        ``prob`` has one row per value and one column per true value.
        """
        truths = self.truths
        fixed = rule_columns(looks)
        key = "efficacy_count" if looks.uses_counts else "efficacy"
        head = fixed[key].rsplit(" ", 1)[0] + " " if looks.count > 1 else ""
        null = prob[:, : truths.nulls]
        worst = np.argmax(null, axis=1)
        type1 = null[np.arange(len(values)), worst]
        alt = truths.alternative
        power = prob[:, alt] if alt is not None else np.full(len(values), np.nan)
        alpha_ok = (np.ones(len(values), dtype=bool) if self.alpha is None
                    else type1 <= self.alpha)
        power_ok = (np.ones(len(values), dtype=bool) if self.power is None
                    else power >= self.power)
        bayesian = bayesian_at(truths, prob)
        arms = self.design.arm_names
        en_alt = np.nan if alt is None else float(expected_n[alt])
        for i, value in enumerate(values):
            row = {"candidate": len(self.rows) + 1, "step": step, **fixed,
                   key: head + repr(value.item())}
            row.update({"type1_error": float(type1[i]), "type1_error_se": 0.0,
                        **{f"type1_at_{arm}": float(truths.values[worst[i], j])
                           for j, arm in enumerate(arms)},
                        "power": float(power[i]), "power_se": 0.0,
                        "expected_n_null": float(expected_n[truths.reference]),
                        "expected_n_alternative": en_alt,
                        "meets_alpha": bool(alpha_ok[i]), "meets_power": bool(power_ok[i]),
                        "passes": bool(alpha_ok[i] and power_ok[i]
                                       and self.criteria_met(bayesian, i)),
                        **self._bayesian_columns(bayesian, i), "chosen": False,
                        "note": ""})
            self.rows.append(row)

    def acceptable(self, type1: np.ndarray, prob: np.ndarray) -> np.ndarray:
        """Per candidate of a sweep (rows of ``prob``): alpha and every constraint met."""
        ok = np.ones(len(type1), dtype=bool) if self.alpha is None else type1 <= self.alpha
        if self.constraints:
            bayesian = bayesian_at(self.truths, prob)
            ok &= np.array([self.criteria_met(bayesian, i) for i in range(len(type1))])
        return ok

    def choose(self, candidate: int) -> None:
        """Mark the chosen candidate."""
        self.rows[candidate - 1]["chosen"] = True

    def frame(self) -> pd.DataFrame:
        """The table; rule columns a design never uses are left out."""
        frame = pd.DataFrame(self.rows)
        for key in RULE_KEYS:
            if key in frame and (frame[key] == "").all():
                frame = frame.drop(columns=key)
        if self.truths.alternative is None:
            frame = frame.drop(columns=["power", "power_se", "expected_n_alternative",
                                        "meets_power"])
        return frame
