"""Bayesian operating characteristics: decision errors averaged over the design prior.

With the true value theta drawn from the design prior pi rather than fixed, a study's
outcome (success or not) and the truth of its claim (theta in the null region or not) have
a joint distribution. Its summaries, as FDA's January 2026 draft guidance on Bayesian
methodology for drugs and biologics puts them beside the frequentist type I error, and as
Yang, Wang & Yuan (2026) use them to calibrate success criteria:

* ``prob_success``: Pr(success) = ∫ Pr(success | theta) pi(theta) dtheta (assurance);
* ``prior_prob_null``: q = pi(null), the design prior's mass on the null region;
* ``prob_null_and_success``: ∫_null Pr(success | theta) pi(theta) dtheta;
* ``average_type1_error``: Pr(success | null) = Pr(null and success) / q;
* ``bayesian_power``: Pr(success | alternative) over the alternative region (or over the
  clinically relevant region, effect >= delta, when one is given);
* ``prob_alternative_and_failure``: Pr(alternative and no success);
* ``prob_null_given_success``: Pr(null | success) = Pr(null and success) / Pr(success), how
  often a success is wrong;
* ``prob_alternative_given_failure``: Pr(alternative | no success), how often a failure is
  wrong.

"Null" is the design's own null region, boundary included: effect <= 0 in the better
direction beyond the benchmark or margin (:meth:`octrial.endpoints.base.Family.effect`).

**Quadrature, where an exact engine applies.** Pr(success | theta) comes from the exact
engine (the batched lattice programme for counts, recursive integration for normal
endpoints with a known sd). One dimension (one arm, or a design prior on the two-arm
effect): over each mixture component's quantile function theta = Q(u), split at the null
boundary u_0 = F(boundary) (and at F(delta) for the relevant region), since the integrand
has a kink there and one rule over [0, 1] converges slowly across it; each piece by
tanh-sinh quadrature (Takahasi & Mori 1974) with step halving until two levels agree; the
difference between the last two levels is the numerical error. Two arms with a design
prior on each arm: tanh-sinh over the control arm's quantiles and, for each control
node c, the treatment integral split at the boundary value t*(c) where the effect is 0;
tanh-sinh in both, halving the step from 1/4 until two levels agree to 1e-9, their
difference being the error. Errors of the ratios are propagated to first order. On a count lattice
the probability of success is the exact predictive dynamic programme of
:mod:`octrial.design_prior` (the quadrature's own total is checked against it).

**Simulation, otherwise** (a normal endpoint with an unknown sd): every study draws its
truth from the design prior (the same studies as the assurance's simulation: same seed,
same batches), is classified null or alternative by that truth, and is tallied jointly
with its outcome. Joint probabilities have standard errors sqrt(p (1 - p) / R); a
conditional probability x / m (m the studies in the conditioning event) has the delta
method standard error sqrt(p (1 - p) / m), which for ratios of multinomial counts is
exact to first order.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from octrial._version import __version__
from octrial.design.model import Design
from octrial.design_prior import design_prior_design, has_design_prior, on_effect
from octrial.endpoints.base import COMPARISONS, NULL_TOLERANCE, SCENARIO_AXES, LatticeFamily
from octrial.engines import choose
from octrial.errors import InputError
from octrial.execution import Execution, run_grid
from octrial.numerics import tanh_sinh

METRICS = ("prob_success", "average_type1_error", "bayesian_power", "prob_null_and_success",
           "prob_alternative_and_failure", "prob_null_given_success",
           "prob_alternative_given_failure", "prior_prob_null")
"""The Bayesian operating characteristics, as named in run.json and accepted by
``octrial calibrate --criterion`` and ``octrial verify``."""

TOLERANCE = 1e-10
"""Tanh-sinh step halving stops when successive levels agree this closely."""
TAIL = 1e-14
"""Quantile levels closer than this to 0 or 1 are left out (their mass bounds the error;
a truncated count lattice must not be sized for rates at the 1 - 1e-300 quantile)."""
LOG_TAIL = math.log(TAIL)
TENSOR_LEVELS = (-2, -1, 0, 1)
"""Tanh-sinh levels (steps 1/4 to 1/32 in t) per piece and arm over two arms' design
priors, tried in turn until two successive ones agree to :data:`TENSOR_TOLERANCE` (their
difference is the error estimate)."""
TENSOR_TOLERANCE = 1e-9
"""Two arms: each level has four times the true values of the one before (a two-arm
lattice programme for each), so the halving stops at 1e-9; the change is reported as the
error (conservative: tanh-sinh roughly squares the error per level)."""
CHUNK = 2000
"""True values per batched lattice programme (memory)."""
AGREEMENT = 1e-7
"""The quadrature's Pr(success) must agree with the exact predictive programme this
closely, else the record carries a warning."""


# -- where the null region ends ----------------------------------------------------------------
def boundary_value(design: Design, effect: float, control: np.ndarray | None = None
                   ) -> np.ndarray:
    """The parameter value at which the hypothesis' effect equals ``effect``.

    One arm: the treatment value; a design prior on the two-arm effect: the difference
    in means; two arms with per-arm design priors: the treatment value for each control
    value in ``control``. The effect increases with ``sign x value`` in every case.
    """
    h = design.hypothesis
    if on_effect(design):
        return np.asarray(h.sign * (h.shift + effect), dtype=float)
    if not design.two_arm:
        return np.asarray(h.benchmark + h.sign * effect, dtype=float)
    measure = COMPARISONS[h.comparison][1] + h.sign * (h.shift + effect)
    lo, hi = design.family.parameter_range
    c = np.asarray(control, dtype=float)
    if COMPARISONS[h.comparison][1] == 1.0 and measure <= 0:
        return np.full(c.shape, lo)  # a ratio cannot reach a non-positive value
    with np.errstate(all="ignore"):
        t = SCENARIO_AXES[h.comparison][1](c, measure)
    return np.clip(np.nan_to_num(t, nan=hi, posinf=hi, neginf=lo), lo, hi)


def effect_of(design: Design, values: np.ndarray) -> np.ndarray:
    """The effect (better direction, beyond the benchmark or margin) of true values, one
    row per study: (treatment[, control]), or the difference for priors on the effect."""
    h = design.hypothesis
    v = np.asarray(values, dtype=float)
    if on_effect(design):
        return h.sign * v[:, 0] - h.shift
    if v.shape[1] == 1:
        return h.sign * (v[:, 0] - h.benchmark)
    return h.sign * (COMPARISONS[h.comparison][0](v[:, 0], v[:, 1])
                     - COMPARISONS[h.comparison][1]) - h.shift


# -- nodes with region weights -----------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class PriorNodes:
    """True values with weights that integrate over the design prior by region.

    ``w_null @ p`` is Pr(null and success) when ``p`` holds Pr(success | truth) at
    ``truths``; likewise ``w_alt`` (alternative) and ``w_relevant`` (effect >= delta).

    Attributes
    ----------
    truths : ndarray, shape (nodes, arms)
        As the engines take them (a prior on the effect: treatment = control + effect).
    w_null, w_alt, w_relevant : ndarray, shape (nodes,)
    prior_null, prior_alt, prior_relevant : float
        The design prior's mass on each region (by the same rule, so that the weights
        of the null and alternative sum to these).
    description : str
    """

    truths: np.ndarray
    w_null: np.ndarray
    w_alt: np.ndarray
    w_relevant: np.ndarray
    prior_null: float
    prior_alt: float
    prior_relevant: float
    description: str


def _components(design: Design, prior: Any) -> list[tuple[float, Any]]:
    components = design.family.prior_components(prior)
    if components is None:
        raise ValueError(f"{design.family.name} design prior "
                         f"{type(prior).__name__} has no quantile function for quadrature")
    return components


def _cuts(dist: Any, values: list[float]) -> list[tuple[float, float]]:
    """(F, 1 - F) at each cut value, accurate in both tails, sorted, with 0 and 1."""
    found = [(0.0, 1.0), (1.0, 0.0)]
    for v in values:
        found.append((float(dist.cdf(v)), float(dist.sf(v))))
    return sorted(set(found))


def _theta(dist: Any, u: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Q(u) with 1 - u = v given accurately: the upper half through the survival."""
    with np.errstate(all="ignore"):
        return np.where(u < 0.5, dist.ppf(u), dist.isf(v))


def _pieces(dist: Any, cuts: list[float], u: np.ndarray, v: np.ndarray, w: np.ndarray
            ) -> list[tuple[np.ndarray, np.ndarray, float]]:
    """Nodes (theta, weight) of a rule on [0, 1] mapped onto each piece between cuts, with
    the value at the piece's middle (which classifies the whole piece: a node rounded onto
    the boundary stays on its side)."""
    out = []
    points = _cuts(dist, cuts)
    for (lo, lo_c), (hi, hi_c) in itertools.pairwise(points):
        width = hi - lo if hi - lo > 0.5 else lo_c - hi_c
        if width <= 0:
            continue
        uu, vv = lo + width * u, hi_c + width * v
        middle = float(_theta(dist, np.array([lo + width / 2]), np.array([hi_c + width / 2]))[0])
        out.append((_theta(dist, uu, vv), width * w, middle))
    return out


def _classify(design: Design, truths: np.ndarray, delta: float) -> tuple[np.ndarray, ...]:
    """Null, alternative and relevant masks of true values (engine layout)."""
    effect = effect_of(design, truths if not on_effect(design) else truths[:, :1]
                       - truths[:, 1:2])
    null = effect <= 0.0
    return null, ~null, effect >= delta


def _as_truths(design: Design, theta: np.ndarray) -> np.ndarray:
    if not on_effect(design):
        return theta[:, None]
    # the operating characteristics depend on the effect only: the control at the
    # design's first scenario, the treatment at control + effect (as assurance does)
    control = design.scenarios.values[0][1]
    return np.column_stack([control + theta, np.full(theta.size, control)])


def one_dimensional_nodes(design: Design, generating: Design, nodes: tanh_sinh.Nodes,
                          delta: float) -> PriorNodes:
    """Tanh-sinh ``nodes`` on [0, 1] mapped onto each piece of each mixture component of a
    one-dimensional design prior (one arm, or the effect)."""
    prior = (generating.hypothesis.prior if on_effect(design) else generating.arms[0].prior)
    u, v, w = _kept(nodes)
    cuts = [float(boundary_value(design, 0.0)), float(boundary_value(design, delta))]
    thetas, weights, middles = [], [], []
    masses = np.zeros(3)
    for weight, dist in _components(design, prior):
        for theta, wt, middle in _pieces(dist, cuts, u, v, w):
            thetas.append(theta)
            weights.append(weight * wt)
            middles.append(np.full(theta.size, middle))
    theta = np.concatenate(thetas)
    weight = np.concatenate(weights)
    truths = _as_truths(design, theta)
    null, alt, relevant = _classify(design, _as_truths(design, np.concatenate(middles)), delta)
    for weight_k, dist in _components(design, prior):
        b0, bd = (float(boundary_value(design, e)) for e in (0.0, delta))
        low0, low_d = float(dist.cdf(b0)), float(dist.cdf(bd))
        up0, up_d = float(dist.sf(b0)), float(dist.sf(bd))
        sign = design.hypothesis.sign
        masses += weight_k * np.array([low0 if sign > 0 else up0, up0 if sign > 0 else low0,
                                       up_d if sign > 0 else low_d])
    return PriorNodes(truths, weight * null, weight * alt, weight * relevant, *masses,
                      description=f"tanh-sinh over the design prior's quantiles, "
                                  f"{theta.size} nodes, split at the null boundary")


def _kept(nodes: tanh_sinh.Nodes) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    keep = (nodes.log_u > LOG_TAIL) & (nodes.log_1mu > LOG_TAIL)
    return nodes.u[keep], nodes.one_minus_u[keep], np.exp(nodes.log_w[keep])


def tensor_nodes(design: Design, generating: Design, level: int, delta: float) -> PriorNodes:
    """Tanh-sinh at one level over the control arm's design prior and, per control node,
    over the treatment arm's, split where the effect is 0 (and delta)."""
    x, y, w = _kept(cumulative_nodes(level))
    control_nodes = [(weight * w, _theta(dist, x, y))
                     for weight, dist in _components(design, generating.arms[1].prior)]
    wc = np.concatenate([a for a, _ in control_nodes])
    c = np.concatenate([b for _, b in control_nodes])
    tops = [boundary_value(design, e, c) for e in (0.0, delta)]
    rows, weights, middles = [], [], []
    masses = np.zeros(3)
    sign = design.hypothesis.sign
    for weight_t, dist in _components(design, generating.arms[0].prior):
        for i, (ci, wi) in enumerate(zip(c, wc, strict=True)):
            cuts = [float(tops[0][i]), float(tops[1][i])]
            for theta, wt, middle in _pieces(dist, cuts, x, y, w):
                rows.append(np.column_stack([theta, np.full(theta.size, ci)]))
                weights.append(weight_t * wi * wt)
                middles.append(np.tile([middle, ci], (theta.size, 1)))
            f0, fd = float(dist.cdf(tops[0][i])), float(dist.cdf(tops[1][i]))
            s0, sd_ = float(dist.sf(tops[0][i])), float(dist.sf(tops[1][i]))
            masses += weight_t * wi * np.array([f0 if sign > 0 else s0, s0 if sign > 0 else f0,
                                                sd_ if sign > 0 else fd])
    truths = np.vstack(rows)
    weight = np.concatenate(weights)
    lo, hi = design.family.parameter_range
    truths = np.clip(truths, np.nextafter(lo, hi), np.nextafter(hi, lo))
    null, alt, relevant = _classify(design, np.vstack(middles), delta)
    return PriorNodes(truths, weight * null, weight * alt, weight * relevant, *masses,
                      description=f"tanh-sinh over both arms' design prior quantiles, "
                                  f"{x.size} nodes per arm and piece ({len(truths)} true "
                                  "values), treatment split at the null boundary for each "
                                  "control node")


# -- Pr(success | truth) -----------------------------------------------------------------------
def success_function(design: Design) -> Callable[[np.ndarray], np.ndarray]:
    """Pr(success | truth) at many true values by the design's exact engine (the batched
    lattice programme on a count lattice)."""
    if isinstance(design.family, LatticeFamily):
        from octrial.engines.lattice_batch import IncrementTables, run_batch
        from octrial.rules.lattice import build_rule

        def lattice(truths: np.ndarray) -> np.ndarray:
            rule = build_rule(design, truths=truths)
            out = [run_batch(design, rule, IncrementTables(design, truths[i:i + CHUNK]))
                   .efficacy.sum(axis=1) for i in range(0, len(truths), CHUNK)]
            return np.concatenate(out) if out else np.zeros(0)

        return lattice
    engine = choose(design, "exact")

    def exact(truths: np.ndarray) -> np.ndarray:
        return engine.run(design, truths, estimate=False).efficacy.sum(axis=1)

    return exact


def exact_engine_applies(design: Design) -> bool:
    """Whether an exact engine gives Pr(success | truth) for ``design``."""
    try:
        choose(design, "exact")
    except InputError:
        return False
    return True


# -- the metrics from region integrals ---------------------------------------------------------
def metrics(null_success: Any, alt_success: Any, relevant_success: Any, prior_null: float,
            prior_alt: float, prior_relevant: float,
            prob_success: Any = None) -> dict[str, Any]:
    """The Bayesian operating characteristics from the region integrals (arrays
    broadcast: one value per candidate design in calibration)."""
    ns, as_, rs = (np.asarray(x, dtype=float) for x in (null_success, alt_success,
                                                        relevant_success))
    s = ns + as_ if prob_success is None else np.asarray(prob_success, dtype=float)
    af = prior_alt - as_
    with np.errstate(all="ignore"):
        out = {
            "prob_success": s,
            "average_type1_error": ns / prior_null if prior_null > 0 else ns * np.nan,
            "bayesian_power": rs / prior_relevant if prior_relevant > 0 else rs * np.nan,
            "prob_null_and_success": ns,
            "prob_alternative_and_failure": af,
            "prob_null_given_success": np.where(s > 0, ns / s, np.nan),
            "prob_alternative_given_failure": np.where(s < 1, af / (1 - s), np.nan),
            "prior_prob_null": np.full(np.shape(ns), prior_null),
            "prob_alternative_and_success": as_,
        }
    return out


def metrics_at(nodes: PriorNodes, p: np.ndarray, prob_success: Any = None) -> dict[str, Any]:
    """Metrics from Pr(success) at the nodes (``p``: nodes, or candidates x nodes)."""
    return metrics(p @ nodes.w_null, p @ nodes.w_alt, p @ nodes.w_relevant,
                   nodes.prior_null, nodes.prior_alt, nodes.prior_relevant, prob_success)


def _errors(values: dict[str, float], e_ns: float, e_as: float, e_rs: float,
            nodes: PriorNodes, e_s: float | None = None) -> dict[str, float]:
    """First-order numerical errors of each metric from those of the region integrals."""
    e_s = e_ns + e_as if e_s is None else e_s
    s = values["prob_success"]
    q, r = nodes.prior_null, nodes.prior_relevant

    def ratio(num: float, den: float, e_num: float, e_den: float) -> float:
        if not den > 0 or not math.isfinite(num / den):
            return math.nan
        return (e_num + abs(num / den) * e_den) / den

    return {
        "prob_success": e_s,
        "average_type1_error": e_ns / q if q > 0 else math.nan,
        "bayesian_power": e_rs / r if r > 0 else math.nan,
        "prob_null_and_success": e_ns,
        "prob_alternative_and_failure": e_as,
        "prob_null_given_success": ratio(values["prob_null_and_success"], s, e_ns, e_s),
        "prob_alternative_given_failure": ratio(values["prob_alternative_and_failure"],
                                                1 - s, e_as, e_s),
        "prior_prob_null": 0.0,
    }


# -- quadrature ----------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Quadrature:
    """The region integrals by quadrature: values, errors and the node set to reuse."""

    nodes: PriorNodes
    values: dict[str, float]
    errors: dict[str, float]


def quadrature(design: Design, delta: float = 0.0,
               success: Callable[[np.ndarray], np.ndarray] | None = None) -> Quadrature:
    """The metrics by quadrature of the exact OC curve (see module docstring)."""
    generating = design_prior_design(design)
    success = success or success_function(design)
    if on_effect(design) or not design.two_arm:
        previous = None
        for level in range(tanh_sinh.MAX_LEVEL + 1):
            nodes = one_dimensional_nodes(design, generating, cumulative_nodes(level), delta)
            p = success(nodes.truths)
            sums = np.array([p @ nodes.w_null, p @ nodes.w_alt, p @ nodes.w_relevant])
            if previous is not None and np.max(np.abs(sums - previous)) <= TOLERANCE:
                break
            previous = sums
        change = np.abs(sums - previous) if previous is not None else np.full(3, np.nan)
    else:
        previous = None
        for level in TENSOR_LEVELS:
            nodes = tensor_nodes(design, generating, level, delta)
            p = success(nodes.truths)
            sums = np.array([p @ nodes.w_null, p @ nodes.w_alt, p @ nodes.w_relevant])
            if previous is not None and np.max(np.abs(sums - previous)) <= TENSOR_TOLERANCE:
                break
            previous = sums
        change = np.abs(sums - previous)
    values = {k: float(v) for k, v in metrics(*sums, nodes.prior_null, nodes.prior_alt,
                                              nodes.prior_relevant).items()}
    errors = _errors(values, *map(float, change), nodes)
    return Quadrature(nodes, values, errors)


def cumulative_nodes(level: int) -> tanh_sinh.Nodes:
    """Every tanh-sinh node up to ``level``, with the weights of that level's step."""
    step = tanh_sinh.FIRST_STEP / 2**level
    k = np.arange(-np.floor(tanh_sinh.T_MAX / step), np.floor(tanh_sinh.T_MAX / step) + 1)
    return tanh_sinh.nodes(k * step, step)


CALIBRATION_LEVEL = -1
"""Two arms: the tanh-sinh level of the nodes every calibration candidate is evaluated
at (49 per arm and piece; agreed with finer levels to 1e-13 to 3e-10 in our trials, at
a quarter of the next level's true values)."""


def calibration_nodes(design: Design, delta: float = 0.0) -> PriorNodes:
    """The node set on which calibration evaluates every candidate: the one the base
    design's quadrature converged on (one dimension), or :data:`CALIBRATION_LEVEL` (two
    arms; the chosen design is then checked by the full quadrature)."""
    if on_effect(design) or not design.two_arm:
        return quadrature(design, delta).nodes
    return tensor_nodes(design, design_prior_design(design), CALIBRATION_LEVEL, delta)


# -- simulation ----------------------------------------------------------------------------------
CLASSES = ("null", "alternative", "relevant")


def simulate_split_batch(task: Any) -> dict[str, np.ndarray]:
    """One batch of studies under the design prior (the assurance's draws: same stream),
    tallied by the region of each study's truth (runs in a worker).

    Returns counts ``[studies, successes]`` for the null, the alternative and the
    relevant region (a subset of the alternative).
    """
    from octrial.simulation.prior_studies import draw_prior_batch

    design, delta = task.design, task.delta
    simulator, mean, data = draw_prior_batch(design, task.seed, task.index, task.size)
    effect = effect_of(design, mean)
    null = effect <= NULL_TOLERANCE  # as the scenarios' is_null
    masks = {"null": null, "alternative": ~null, "relevant": ~null & (effect >= delta)}
    out = {}
    for name, mask in masks.items():
        m = int(mask.sum())
        won = 0
        if m:
            part = tuple(None if a is None else a[mask] for a in data)
            won = int(simulator.run(part, m, False).efficacy.sum())
        out[name] = np.array([m, won], dtype=np.int64)
    return out


@dataclass(frozen=True, eq=False)
class SplitBatch:
    """One batch of :func:`simulate_split_batch` (picklable)."""

    design: Design
    seed: int
    index: int
    size: int
    delta: float


def simulated(design: Design, replicates: int, seed: int, delta: float = 0.0,
              execution: Execution | None = None) -> dict[str, Any]:
    """The metrics and their standard errors by simulation (see module docstring)."""
    from octrial.simulation.prior_studies import BATCH_SIZE

    batches = -(-replicates // BATCH_SIZE)
    tasks = [SplitBatch(design, seed, b, min(BATCH_SIZE, replicates - b * BATCH_SIZE), delta)
             for b in range(batches)]
    store = None
    if execution is not None:
        store = execution.store({
            "design_sha256": design.source.sha256, "design": repr(design),
            "bayesian_operating_characteristics": "simulation", "replicates": replicates,
            "seed": seed, "delta": delta, "batch_size": BATCH_SIZE, "octrial": __version__})
    results, _ = run_grid(simulate_split_batch, tasks, execution or Execution(), store,
                          unit="batches of Bayesian operating characteristics")
    counts = {name: sum(r[name] for r in results) for name in CLASSES}
    r_total = replicates
    n_null, s_null = (int(v) for v in counts["null"])
    n_alt, s_alt = (int(v) for v in counts["alternative"])
    n_rel, s_rel = (int(v) for v in counts["relevant"])
    won = s_null + s_alt
    values = {k: float(v) for k, v in metrics(
        s_null / r_total, s_alt / r_total, s_rel / r_total, n_null / r_total,
        n_alt / r_total, n_rel / r_total, won / r_total).items()}

    def se(p: float, m: int) -> float:
        return math.sqrt(p * (1 - p) / m) if m > 0 and math.isfinite(p) else math.nan

    ses = {
        "prob_success": se(values["prob_success"], r_total),
        "average_type1_error": se(values["average_type1_error"], n_null),
        "bayesian_power": se(values["bayesian_power"], n_rel),
        "prob_null_and_success": se(values["prob_null_and_success"], r_total),
        "prob_alternative_and_failure": se(values["prob_alternative_and_failure"], r_total),
        "prob_null_given_success": se(values["prob_null_given_success"], won),
        "prob_alternative_given_failure": se(values["prob_alternative_given_failure"],
                                             r_total - won),
        "prior_prob_null": se(values["prior_prob_null"], r_total),
    }
    return {"values": values, "se": ses,
            "counts": {"studies": r_total, "null": n_null, "null_successes": s_null,
                       "alternative": n_alt, "alternative_successes": s_alt,
                       "relevant": n_rel, "relevant_successes": s_rel}}


# -- the record ----------------------------------------------------------------------------------
def null_definition(design: Design) -> str:
    """The null region in words (boundary included)."""
    h = design.hypothesis
    if not design.two_arm:
        side = "at or below" if h.sign > 0 else "at or above"
        return (f"{design.family.parameter} of {design.arm_names[0]} {side} the benchmark "
                f"{h.benchmark:g}")
    word = {"difference": "difference", "ratio": "ratio", "odds-ratio": "odds ratio"}.get(
        h.comparison or "difference", h.comparison)
    side = "at or below" if h.sign > 0 else "at or above"
    return f"{word} ({design.arm_names[0]} vs {design.arm_names[1]}) {side} {h.threshold:g}"


def _strict(record: dict[str, Any]) -> dict[str, Any]:
    """Non-finite numbers (a conditional probability given an impossible event) as
    ``None``: run.json is strict JSON."""
    return {k: None if isinstance(v, float) and not math.isfinite(v) else v
            for k, v in record.items()}


def bayesian_record(design: Design, assurance: dict[str, Any] | None = None,
                    relevant_effect: float | None = None,
                    execution: Execution | None = None) -> dict[str, Any] | None:
    """The ``bayesian_operating_characteristics`` record of run.json.

    ``None`` without design priors; ``{'unavailable': reason}`` when neither quadrature
    nor simulation applies. ``assurance`` is the run's assurance record (its exact
    probability of success is kept; a simulation reuses its seed and studies).
    """
    if not has_design_prior(design):
        return None
    if relevant_effect is None:
        relevant_effect = design.hypothesis.relevant_effect
    delta = 0.0 if relevant_effect is None else float(relevant_effect)
    common: dict[str, Any] = {
        "null_region": null_definition(design) + " (the boundary counts as null)",
        "relevant_effect": relevant_effect,
        "power_region": ("the alternative region (effect beyond the null boundary)"
                         if relevant_effect is None else
                         f"the clinically relevant region, effect >= {relevant_effect:g} "
                         "beyond the null boundary"),
    }
    try:
        if exact_engine_applies(design):
            found = quadrature(design, delta)
            values, errors = dict(found.values), dict(found.errors)
            record: dict[str, Any] = {"method": "quadrature", **common,
                                      "uncertainty": "numerical error (_error)",
                                      "nodes": found.nodes.description}
            exact = (assurance or {}).get("probability")
            if assurance is not None and assurance.get("method") == "exact" and exact is not None:
                gap = abs(exact - values["prob_success"])
                record["method"] = "exact and quadrature"
                record["quadrature_total_gap"] = gap
                if gap > AGREEMENT:
                    record["warning"] = (f"quadrature total differs from the exact "
                                         f"probability of success by {gap:.2g}")
                values["prob_success"] = float(exact)
                values["prob_null_given_success"] = values["prob_null_and_success"] / exact \
                    if exact > 0 else math.nan
                values["prob_alternative_given_failure"] = (
                    values["prob_alternative_and_failure"] / (1 - exact) if exact < 1
                    else math.nan)
                errors["prob_success"] = 0.0
            out = {**record}
            for name in METRICS:
                out[name] = values[name]
                out[f"{name}_error"] = errors[name]
            out["prob_alternative_and_success"] = values["prob_alternative_and_success"]
            out["prior_prob_alternative"] = found.nodes.prior_alt
            out["prior_prob_relevant"] = found.nodes.prior_relevant
            return _strict(out)
        if assurance is None or not assurance.get("replicates"):
            from octrial.simulation.prior_studies import prior_simulation_unsupported

            reason = prior_simulation_unsupported(design) or "no simulated assurance"
            return {"unavailable": reason, **common}
        sim = simulated(design, int(assurance["replicates"]), int(assurance["seed"]), delta,
                        execution)
        out = {"method": "simulation", **common, "uncertainty": "Monte Carlo standard error "
               "(_se; ratios by the delta method)", "replicates": assurance["replicates"],
               "seed": assurance["seed"], "counts": sim["counts"]}
        for name in METRICS:
            out[name] = sim["values"][name]
            out[f"{name}_se"] = sim["se"][name]
        out["prob_alternative_and_success"] = sim["values"]["prob_alternative_and_success"]
        return _strict(out)
    except ValueError as exc:
        return {"unavailable": str(exc), **common}


def uncertainty(record: dict[str, Any], name: str) -> float:
    """The metric's standard error or numerical error from a record."""
    for suffix in ("_se", "_error"):
        if record.get(f"{name}{suffix}") is not None:
            return float(record[f"{name}{suffix}"])
    return math.nan


__all__ = ["METRICS", "PriorNodes", "bayesian_record", "calibration_nodes", "metrics",
           "metrics_at", "quadrature", "simulated", "success_function"]
