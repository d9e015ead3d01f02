"""How the Bayesian operating characteristics depend on the design prior.

The Bayesian operating characteristics (:mod:`octrial.bayesian_oc`) average over a design
prior that is itself a judgement, so ``octrial check`` recomputes every one of them under
alternative design priors built from the stated one, component by component (each
mixture component's weight kept), by matching the first two moments:

* **as stated**: the design prior of the design file;
* **sceptical**: each component's mean moved one of its standard deviations toward the
  null (the worse direction), its standard deviation kept;
* **optimistic**: each component's mean moved one standard deviation toward the
  alternative, its standard deviation kept;
* **vaguer**: each component's standard deviation doubled, its mean kept.

Two arms with a design prior on each arm: only the treatment arm's design prior changes
(the control's is kept), so the effect moves as described. Beta components keep their
mean within [0.005, 0.995] and their variance below half of m (1 - m) (a + b >= 1); gamma
components keep their mean above a tenth of the stated mean; normal-inverse-gamma priors
move the mean of mu by the sd of its marginal Student t distribution and divide
``mean_n`` by 4 for "vaguer". The shift of one standard deviation and the doubling are
our choice (a common way to probe a prior; no published rule).
"""

from __future__ import annotations

import copy
import math
import tomllib
from typing import Any

from octrial.bayesian_oc import METRICS, bayesian_record
from octrial.design.load import parse_design
from octrial.design.model import Design, Source
from octrial.design.write import dumps
from octrial.design_prior import assurance_record, has_design_prior, on_effect
from octrial.engines import MonteCarloSettings

VARIANTS = (("as stated", 0.0, 1.0), ("sceptical", -1.0, 1.0), ("optimistic", 1.0, 1.0),
            ("vaguer", 0.0, 2.0))
"""(name, mean shift in component sds toward the alternative, sd factor)."""


def _beta(c: dict[str, Any], shift: float, factor: float) -> dict[str, Any]:
    a, b = float(c["a"]), float(c["b"])
    m = a / (a + b)
    s = math.sqrt(a * b / ((a + b) ** 2 * (a + b + 1)))
    m2 = min(max(m + shift * s, 0.005), 0.995)
    v2 = min((factor * s) ** 2, 0.5 * m2 * (1 - m2))
    total = m2 * (1 - m2) / v2 - 1
    return {**c, "a": m2 * total, "b": (1 - m2) * total}


def _gamma(c: dict[str, Any], shift: float, factor: float) -> dict[str, Any]:
    shape, rate = float(c["shape"]), float(c["rate"])
    m, s = shape / rate, math.sqrt(shape) / rate
    m2 = max(m + shift * s, m / 10)
    v2 = (factor * s) ** 2
    return {**c, "shape": m2**2 / v2, "rate": m2 / v2}


def _normal(c: dict[str, Any], shift: float, factor: float) -> dict[str, Any]:
    return {**c, "mean": float(c["mean"]) + shift * float(c["sd"]),
            "sd": factor * float(c["sd"])}


COMPONENTS = {"beta": _beta, "gamma": _gamma, "normal": _normal}
MIXTURES = {"beta-mixture": _beta, "gamma-mixture": _gamma, "normal-mixture": _normal}


def varied(prior: dict[str, Any], direction: int, shift: float, factor: float
           ) -> dict[str, Any] | None:
    """A design-prior table moved ``shift`` sds in ``direction`` (+1: higher values) with
    its sds times ``factor``; ``None`` for a distribution this cannot vary."""
    kind = prior.get("distribution")
    step = direction * shift
    if kind in COMPONENTS:
        return COMPONENTS[kind](prior, step, factor)
    if kind in MIXTURES:
        return {**prior, "components": [MIXTURES[kind](c, step, factor)
                                        for c in prior["components"]]}
    if kind == "normal-inverse-gamma":
        shape, scale, n0 = (float(prior[k]) for k in ("shape", "scale", "mean_n"))
        sd = math.sqrt(scale / (shape * n0))  # scale of mu's marginal t
        return {**prior, "mean": float(prior["mean"]) + step * sd, "mean_n": n0 / factor**2}
    return None


def _variant(design: Design, data: dict[str, Any], shift: float, factor: float
             ) -> Design | None:
    data = copy.deepcopy(data)
    sign = design.hypothesis.sign
    if on_effect(design):
        holder, direction = data["hypothesis"], sign
    else:
        holder, direction = data["arms"][design.arm_names[0]], sign
    new = varied(holder["design_prior"], direction, shift, factor)
    if new is None:
        return None
    holder["design_prior"] = new
    return parse_design(data, Source(design.source.path, "", dumps(data)))


def run_design_prior_sensitivity(design: Design, seed: int | None = None) -> dict[str, Any]:
    """Every Bayesian operating characteristic under each alternative design prior.

    Returns the checks.json entry: ``rows`` (one per variant: its design prior, every
    metric and its ``_error`` or ``_se``) and ``construction`` in words; or
    ``{'not_applicable': reason}``.
    """
    if not has_design_prior(design):
        return {"not_applicable": "the design has no design prior for every arm (or the "
                                  "effect)"}
    data = tomllib.loads(design.source.text)
    settings = MonteCarloSettings(seed=seed if seed is not None else design.simulation.seed)
    rows = []
    for name, shift, factor in VARIANTS:
        variant = design if name == "as stated" else _variant(design, data, shift, factor)
        if variant is None:
            return {"not_applicable": "the design prior's distribution has no moments this "
                                      "check can move"}
        record = bayesian_record(variant, assurance_record(variant, settings=settings))
        if record is None or "prob_success" not in record:
            return {"not_applicable": (record or {}).get("unavailable", "no design prior")}
        holder = (variant.hypothesis if on_effect(variant) else variant.arms[0])
        row: dict[str, Any] = {"variant": name,
                               "design_prior": holder.design_prior.describe()
                               if hasattr(holder.design_prior, "describe")
                               else repr(holder.design_prior),
                               "method": record["method"]}
        for metric in METRICS:
            row[metric] = record[metric]
            for suffix in ("_error", "_se"):
                if f"{metric}{suffix}" in record:
                    row[f"{metric}{suffix}"] = record[f"{metric}{suffix}"]
        rows.append(row)
    arm = "the effect" if on_effect(design) else f"the {design.arm_names[0]} arm"
    return {"rows": rows, "varied": arm,
            "construction": (__doc__ or "").split("\n\n", 1)[1].strip()}


def sensitivity_verdict(entry: dict[str, Any]) -> str:
    """One line on how far Pr(null | success) and the average type I error move."""
    rows = entry["rows"]

    def spread(name: str) -> str:
        values = [r[name] for r in rows if r.get(name) is not None]
        return f"{min(values):.4g} to {max(values):.4g}" if values else "not defined"

    return (f"over {len(rows)} design priors ({', '.join(r['variant'] for r in rows)}): "
            f"Pr(null | success) {spread('prob_null_given_success')}, average type I error "
            f"{spread('average_type1_error')}, Bayesian power {spread('bayesian_power')}")
