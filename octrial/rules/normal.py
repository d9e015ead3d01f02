"""The decision rule of a known-sd normal design as bounds on the score, per look.

On the benefit scale (see :mod:`octrial.endpoints.normal`) the posterior probability of
benefit B and the predictive probability of success are increasing in the score S, so at
look k the rule is: efficacy if S >= upper_k; futility if S < lower_k; continue in
between. Each bound solves B(S) = threshold (or PP(S) = threshold): in closed form for
one prior component, S = P c + z sqrt(P) - m p0 with z = Phi^{-1}(threshold); for a
mixture, by Brent's method between the smallest and largest component roots (the
mixture's B is a convex combination of the components', so its root lies between them).
Thresholds are lowered by the decision tolerance, as for lattice rules.

The boundary table gives the bounds as a sample mean (one arm) or a difference in sample
means (two arms), and as the z statistic (estimate - null value) / standard error, which
under a flat prior is exactly Phi^{-1}(threshold).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import optimize, special

from octrial.design.model import Design
from octrial.endpoints.normal import benefit_components, update
from octrial.rules.stop import DECISION_TOLERANCE

ROOT_TOLERANCE = 1e-12
"""Relative tolerance of the bounds on the score (Brent's method)."""


@dataclass(frozen=True)
class NormalLook:
    """The rule at one look, on the benefit-scale score S.

    ``upper`` is +inf when efficacy is never declared and -inf when always; ``lower`` is
    -inf when futility never stops; at the last look ``lower == upper`` (failure below).
    """

    look: int
    n: tuple[int, ...]
    information: float
    upper: float
    lower: float
    posterior_at_upper: float
    posterior_at_lower: float
    predictive_at_lower: float


@dataclass(frozen=True, eq=False)
class NormalRule:
    """Every look's bounds, and what is needed to read them on the data's scale."""

    looks: tuple[NormalLook, ...]
    sign: int
    claim: float

    def boundary_table(self, design: Design) -> pd.DataFrame:
        """``boundaries.csv`` for a normal design (see module docstring)."""
        name = "difference" if design.two_arm else "mean"
        higher = self.sign > 0
        rows = []
        for look in self.looks:
            row: dict[str, Any] = {"look": look.look}
            if design.two_arm:
                row.update(n_treatment=look.n[0], n_control=look.n[1])
            else:
                row["n"] = look.n[0]
            row["bound_on"] = ("difference in sample means (treatment - control)"
                               if design.two_arm else "sample mean")
            for kind, s, op in (("efficacy", look.upper, ">=" if higher else "<="),
                                ("futility", look.lower, "<" if higher else ">")):
                estimate = self.sign * s / look.information
                row[f"{kind}_bound"] = estimate if math.isfinite(s) else math.nan
                row[f"{kind}_z"] = ((s - self.claim * look.information)
                                    / math.sqrt(look.information)) if math.isfinite(s) else math.nan
                row[f"{kind}_rule"] = _rule(kind, s, f"{name} {op} {estimate:.6g}")
            row["posterior_at_efficacy_bound"] = look.posterior_at_upper
            row["posterior_at_futility_bound"] = look.posterior_at_lower
            row["predictive_at_futility_bound"] = look.predictive_at_lower
            rows.append(row)
        return pd.DataFrame(rows)

    def info(self) -> dict[str, Any]:
        return {"boundary_root_tolerance": ROOT_TOLERANCE}


def committee_text(design: Design, table: pd.DataFrame) -> str:
    """The bounds per look in words, as a monitoring committee applies them by hand: the
    bound on the sample mean (difference in sample means), the same bound as a z value with
    the standard error to compute it, the thresholds behind each bound and the posterior
    (and predictive) probability there."""
    h = design.hypothesis
    family = design.family
    higher = h.better == "higher"
    sd = design.endpoint.sd
    if design.two_arm:
        name = "difference"
        better, worse = ("treatment", "control") if higher else ("control", "treatment")
        claim = f"Pr(mean_{better} - mean_{worse} > {h.shift:g} | data)"
        null = h.shift if higher else -h.shift
        error = f"{sd:g} x sqrt(1/n_treatment + 1/n_control)"
    else:
        name = "mean"
        claim = f"Pr(mean {'>' if higher else '<'} {h.benchmark:g} | data)"
        null = h.null_value
        error = f"{sd:g} / sqrt(n)"
    z = (f"({name} - {null:g}) / standard error" if higher
         else f"({null:g} - {name}) / standard error")
    prior = family.analysis_prior(design)
    lines = [
        f"Decision rule of {design.name}, on the {table['bound_on'].iloc[0]}; posterior = "
        f"{claim}, with the known sd {sd:g} and the analysis prior {prior.describe()}.",
        "Efficacy is checked first. At the final analysis a study that does not reach the "
        "success bound fails.",
        f"z = {z} (positive favours the treatment); standard error = {error}.",
        "Bounds are shown to 6 significant digits (boundaries.csv holds them in full).",
    ]
    looks = design.looks
    last = int(table["look"].max())
    for row in table.itertuples():
        k = row.look - 1
        final = row.look == last
        size = (f"{row.n_treatment} treatment and {row.n_control} control subjects"
                if design.two_arm else f"{row.n} subjects")
        info = family.information(design, looks.per_arm[k])
        lines += ["", f"Look {row.look}{' (final analysis)' if final else ''}, after {size} "
                      f"(standard error {1 / math.sqrt(info):.6g}):"]
        stop, fail = ("success", "failure") if final else ("stop for efficacy",
                                                          "stop for futility")
        efficacy = f"posterior >= {looks.efficacy[k]:g}" if looks.efficacy[k] is not None else ""
        if row.efficacy_rule in ("never", "always"):
            lines.append(f"  {stop}: {row.efficacy_rule}")
        else:
            lines.append(f"  {stop} if {row.efficacy_rule}  (z >= {row.efficacy_z:.6g}; rule: "
                         f"{efficacy}; posterior {row.posterior_at_efficacy_bound:.4f} there)")
        if final:
            if row.efficacy_rule not in ("never", "always"):
                op = "<" if higher else ">"
                lines.append(f"  {fail} if {name} {op} {row.efficacy_bound:.6g}")
            continue
        if row.futility_rule in ("never", "always"):
            lines.append(f"  {fail}: {row.futility_rule}")
        else:
            rules = []
            if looks.futility[k] is not None:
                rules.append(f"posterior < {looks.futility[k]:g}")
            if looks.futility_predictive[k] is not None:
                rules.append(f"predictive < {looks.futility_predictive[k]:g}")
            there = f"posterior {row.posterior_at_futility_bound:.4f}"
            if not math.isnan(row.predictive_at_futility_bound):
                there += f", predictive {row.predictive_at_futility_bound:.4f}"
            lines.append(f"  {fail} if {row.futility_rule}  (z < {row.futility_z:.6g}; rule: "
                         f"{' or '.join(rules)}; {there} there)")
        lines.append("  otherwise continue")
    return "\n".join(lines) + "\n"


def _rule(kind: str, s: float, text: str) -> str:
    if math.isfinite(s):
        return text
    if kind == "efficacy":
        return "never" if s > 0 else "always"
    return "never" if s < 0 else "always"


def build_normal_rule(design: Design) -> NormalRule:
    """The bounds of every look (see module docstring)."""
    family = design.family
    h = design.hypothesis
    prior = family.analysis_prior(design)
    sign, claim = h.sign, family.claim_value(design)
    looks = design.looks
    info = [family.information(design, n) for n in looks.per_arm]
    last = looks.count - 1
    final_upper = _benefit_root(prior, sign, info[last], claim, looks.efficacy[last])
    out = []
    for k in range(looks.count):
        upper = final_upper if k == last else _benefit_root(prior, sign, info[k], claim,
                                                            looks.efficacy[k])
        predictive_at = math.nan
        if k == last:
            lower = upper
        else:
            lower = -math.inf
            if looks.futility[k] is not None:
                lower = _benefit_root(prior, sign, info[k], claim, looks.futility[k])
            g = looks.futility_predictive[k]
            if g is not None:
                lower = max(lower, _predictive_root(prior, sign, info[k], info[last],
                                                    final_upper, g))
            lower = min(lower, upper)
            if g is not None and math.isfinite(lower):
                predictive_at = float(predictive(prior, sign, info[k], info[last],
                                                 final_upper, np.array([lower]))[0])
        out.append(NormalLook(
            k + 1, looks.per_arm[k], info[k], upper, lower,
            _benefit_at(prior, sign, info[k], claim, upper),
            _benefit_at(prior, sign, info[k], claim, lower), predictive_at))
    return NormalRule(tuple(out), sign, claim)


def benefit(prior: Any, sign: int, information: float, claim: float,
            score: np.ndarray) -> np.ndarray:
    """B = Pr(eta > claim | S) at scores S."""
    return update(prior, sign, information, score).sf(claim)


def predictive(prior: Any, sign: int, info_now: float, info_end: float, final_upper: float,
               score: np.ndarray) -> np.ndarray:
    """Pr(S_K >= final_upper | S_k) at scores S_k (posterior predictive)."""
    if not math.isfinite(final_upper):
        return np.full(np.shape(score), 0.0 if final_upper > 0 else 1.0)
    post = update(prior, sign, info_now, score)
    d = info_end - info_now
    s = np.asarray(score, dtype=float)[:, None]
    spread = np.sqrt(d + d**2 / post.precision)
    return np.sum(post.weights * special.ndtr((s + post.mean * d - final_upper) / spread),
                  axis=1)


def _benefit_at(prior: Any, sign: int, information: float, claim: float, s: float) -> float:
    if not math.isfinite(s):
        return math.nan
    return float(benefit(prior, sign, information, claim, np.array([s]))[0])


def _target(threshold: float | None) -> float | None:
    return None if threshold is None else threshold - DECISION_TOLERANCE


def _benefit_root(prior: Any, sign: int, information: float, claim: float,
                  threshold: float | None) -> float:
    """The score S where B(S) = threshold - tolerance: B reaches the threshold iff S >= it
    (-inf when every score does; +inf when there is no threshold)."""
    t = _target(threshold)
    if t is None:
        return math.inf
    if t <= 0:
        return -math.inf
    return benefit_score(prior, sign, information, claim, t)


def benefit_score(prior: Any, sign: int, information: float, claim: float,
                  probability: float) -> float:
    """The score S where Pr(eta > claim | S) = ``probability`` (in (0, 1))."""
    t = probability
    _, m, p0 = benefit_components(prior, sign)
    precision = p0 + information
    z = special.ndtri(t)
    roots = precision * claim + z * np.sqrt(precision) - m * p0
    return _solve(lambda s: benefit(prior, sign, information, claim, np.array([s]))[0] - t,
                  roots)


def _predictive_root(prior: Any, sign: int, info_now: float, info_end: float,
                     final_upper: float, threshold: float) -> float:
    t = threshold - DECISION_TOLERANCE
    if t <= 0:
        return -math.inf
    if not math.isfinite(final_upper):
        return math.inf if final_upper > 0 else -math.inf
    _, m, p0 = benefit_components(prior, sign)
    precision = p0 + info_now
    d = info_end - info_now
    spread = np.sqrt(d + d**2 / precision)
    z = special.ndtri(t)
    roots = (final_upper - m * p0 * d / precision + z * spread) / (1 + d / precision)
    return _solve(lambda s: predictive(prior, sign, info_now, info_end, final_upper,
                                       np.array([s]))[0] - t, roots)


def _solve(f: Any, roots: np.ndarray) -> float:
    """The root of increasing ``f`` between the smallest and largest component roots."""
    lo, hi = float(np.min(roots)), float(np.max(roots))
    if hi - lo <= ROOT_TOLERANCE * max(1.0, abs(hi)):
        return hi
    pad = 1e-9 * (hi - lo)
    lo, hi = lo - pad, hi + pad
    if f(lo) >= 0:
        return lo
    if f(hi) <= 0:
        return hi
    return float(optimize.brentq(f, lo, hi, xtol=1e-300, rtol=ROOT_TOLERANCE, maxiter=500))
