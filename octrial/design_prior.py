"""Assurance: the probability of success averaged over a design prior.

O'Hagan, Stevens & Campbell (2005): with true values drawn from the design prior rather
than fixed, the unconditional probability that the study succeeds is

    assurance = ∫ Pr(success | theta) pi_design(theta) dtheta.

**Exact, on a count lattice.** Averaging over the design prior is the same as drawing each
look's new count from the design prior's *predictive* distribution given the counts so
far (the posterior under the design prior is updated as the data arrive). So the exact
dynamic programme runs with state-dependent increments: from count x after n subjects,
the next m subjects' count follows the design prior's predictive pmf at (n, x) (for a beta
design prior, a beta-binomial; for a beta mixture, a mixture of beta-binomials with
updated weights). Two arms are independent a priori, so the update separates by arm. No
quadrature and no simulation: exact to rounding.

**Quadrature, where an exact engine applies.** Over each mixture component's quantile
function, theta = Q(u), which turns ∫ f(theta) dPi(theta) into ∫_0^1 f(Q(u)) du, with the engine's
Pr(success | theta) at the nodes. One dimension (one arm, or a design prior on the two-arm
effect, as for normal endpoints with a known sd, whose operating characteristics depend on
the difference in means only): tanh-sinh quadrature in u (Takahasi & Mori 1974;
:mod:`octrial.numerics.tanh_sinh`), halving the step until two levels agree to 1e-10,
because f(Q(u)) has singular derivatives at u = 0 and 1 where Gauss-Legendre converges
only algebraically (64 nodes were 2e-6 off for a normal mixture). Two arms: a tensor
grid of Gauss-Legendre nodes.

**Simulation, otherwise** (a normal endpoint with unknown sd): every simulated study
draws its own true values from the design prior, then its data
(:mod:`octrial.simulation.prior_studies`), with ``simulation.replicates`` studies and the
design's seed; the result carries its Monte Carlo standard error. Its batches run
through the execution layer: in worker processes, with checkpoints and a progress bar
when the caller gives an :class:`~octrial.execution.Execution`.

The probability that the claim is true is reported beside it, under the analysis prior
(FDA 2010 guidance on Bayesian device trials asks for the prior probability of the claim)
and under the design prior.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from octrial._version import __version__
from octrial.design.model import Design
from octrial.endpoints.base import LatticeFamily
from octrial.engines import choose, engine_for
from octrial.engines.exact_lattice import ExactLatticeEngine
from octrial.engines.lattice_programme import add_state_increment, run_programme
from octrial.engines.monte_carlo import adjusted_se
from octrial.execution import Execution
from octrial.execution.checkpoints import kept_seed
from octrial.numerics import tanh_sinh
from octrial.rules.lattice import LatticeRule, build_rule
from octrial.simulation.prior_studies import (
    BATCH_SIZE,
    prior_simulation_unsupported,
    simulate_under_design_prior,
)

QUADRATURE_NODES = 64
"""Gauss-Legendre nodes per mixture component and arm for the quadrature method over two
arms' design priors."""

TANH_SINH_TOL = 1e-10
"""Change between successive tanh-sinh levels at which a one-dimensional assurance
integral stops."""

LOG_EDGE = -60.0
"""Tanh-sinh nodes closer than exp(-60) to 0 or 1 are left out (their quantiles may be
infinite or subnormal); the probability they carry is below 1e-25."""

REACH_TAIL = 1e-12
"""Design-prior upper quantile a truncated (count) lattice is sized to serve."""


@dataclass(frozen=True)
class Assurance:
    """Operating characteristics averaged over the design prior.

    Attributes
    ----------
    probability : float
        Probability of success (assurance).
    expected_n : float
        Expected total sample size.
    stop_efficacy, stop_futility : tuple of float
        Per look, as in ``oc.csv`` (at the last look: success and failure).
    method : str
        'exact' (predictive dynamic programme), 'quadrature' or 'simulation'.
    design_prior_probability_of_claim : float
        Pr(benefit beyond the benchmark or margin) under the design prior.
    probability_se, expected_n_se : float
        Monte Carlo standard errors (0 unless simulated).
    replicates : int
        Simulated studies (0 unless simulated).
    seed : int or None
        The simulation's seed.
    target_se : float or None
        The standard error the simulation was asked to reach (``--target-se``).
    target_met : bool or None
        Whether it was reached within the replicate cap.
    """

    probability: float
    expected_n: float
    stop_efficacy: tuple[float, ...]
    stop_futility: tuple[float, ...]
    method: str
    design_prior_probability_of_claim: float
    probability_se: float = 0.0
    expected_n_se: float = 0.0
    replicates: int = 0
    seed: int | None = None
    target_se: float | None = None
    target_met: bool | None = None

    def as_dict(self) -> dict[str, Any]:
        """For run.json and calibration.json."""
        return dataclasses.asdict(self)


def assurance_record(design: Design, rule: LatticeRule | None = None,
                     settings: Any = None,
                     execution: Execution | None = None) -> dict[str, Any] | None:
    """Assurance as a record for run.json and calibration.json: ``None`` without design
    priors, ``{'unavailable': reason}`` when the family offers no way to integrate."""
    try:
        found = assurance(design, rule, settings=settings, execution=execution)
    except ValueError as exc:
        return {"unavailable": str(exc)}
    return None if found is None else found.as_dict()


def on_effect(design: Design) -> bool:
    """Whether the design's priors are on the two-arm effect (``hypothesis.prior``; normal
    endpoints with a known sd) rather than on each arm."""
    return design.family.prior_on_effect(design.endpoint, design.two_arm)


def has_design_prior(design: Design) -> bool:
    """Whether every prior the analysis uses has a design prior beside it."""
    if on_effect(design):
        return design.hypothesis.design_prior is not None
    return all(arm.design_prior is not None for arm in design.arms)


def design_prior_design(design: Design) -> Design:
    """The design with each design prior in place of its analysis prior."""
    if on_effect(design):
        h = design.hypothesis
        return dataclasses.replace(design, hypothesis=dataclasses.replace(
            h, prior=h.design_prior))
    arms = tuple(dataclasses.replace(arm, prior=arm.design_prior) for arm in design.arms)
    return dataclasses.replace(design, arms=arms)


def assurance(
    design: Design, rule: LatticeRule | None = None, method: str = "auto",
    settings: Any = None, execution: Execution | None = None,
) -> Assurance | None:
    """Assurance of ``design`` under its design priors (see module docstring).

    Parameters
    ----------
    design : Design
    rule : LatticeRule, optional
        The design's lattice rule, when already built.
    method : {'auto', 'exact', 'quadrature', 'simulation'}
        'auto' uses the exact method on a count lattice, quadrature where an exact engine
        gives Pr(success | truth), and simulation otherwise.
    settings : MonteCarloSettings, optional
        Simulation only: replicates and seed (default: the design's ``[simulation]``;
        a seed is drawn and recorded when neither gives one).
    execution : Execution, optional
        Simulation only: workers, checkpoints and progress (never changes a number).

    Returns
    -------
    Assurance or None
        ``None`` when some arm has no design prior.
    """
    if not has_design_prior(design):
        return None
    family = design.family
    generating = design_prior_design(design)
    claim = float(family.prior_probability_of_claim(generating))
    exact = engine_for(design, "exact")
    lattice = exact is ExactLatticeEngine
    if method == "exact" or (method == "auto" and lattice):
        if not lattice:
            raise ValueError(f"no exact assurance for {family.name} endpoints")
        reach = _reach(design)
        if rule is None or (reach is not None and not rule.covers(reach)):
            rule = build_rule(design, truths=reach)
        eff, fut = _predictive_programme(design, generating, rule)
        method_used = "exact"
    elif method == "simulation" or (method == "auto" and exact is None):
        return _simulated(design, settings, claim, execution)
    else:
        eff, fut = _quadrature(design, generating)
        method_used = "quadrature"
    n = np.asarray(design.looks.n, dtype=float)
    return Assurance(float(eff.sum()), float((eff + fut) @ n), tuple(map(float, eff)),
                     tuple(map(float, fut)), method_used, claim)


def _simulated(design: Design, settings: Any, claim: float,
               execution: Execution | None) -> Assurance:
    reason = prior_simulation_unsupported(design)
    if reason is not None:
        raise ValueError(f"no assurance by simulation: {reason}")
    simulation = design.simulation
    target = getattr(settings, "target_se", None)
    if target is None:
        replicates = getattr(settings, "replicates", None) or simulation.replicates
        size = {"replicates": replicates}
    else:
        replicates = settings.max_replicates
        size = {"target_se": target, "max_replicates": replicates}
    seed = getattr(settings, "seed", None)
    seed = simulation.seed if seed is None else seed
    store = None
    if execution is not None:
        store = execution.store({
            "design_sha256": design.source.sha256, "design": repr(design),
            "assurance": "simulation", **size,
            "seed": "drawn" if seed is None else seed, "batch_size": BATCH_SIZE,
            "octrial": __version__})
    seed, _ = kept_seed(store, seed)
    tally = simulate_under_design_prior(design, replicates, seed, execution=execution,
                                        store=store, target_se=target)
    replicates = tally.replicates
    eff, fut = tally.efficacy / replicates, tally.futility / replicates
    n = np.asarray(design.looks.n, dtype=float)
    stop = eff + fut
    expected_n = float(stop @ n)
    sd_n = math.sqrt(max(float(stop @ n**2) - expected_n**2, 0.0))
    p = float(eff.sum())
    met = None if target is None else bool(adjusted_se(tally) <= target)
    return Assurance(p, expected_n, tuple(map(float, eff)), tuple(map(float, fut)),
                     "simulation", claim, math.sqrt(p * (1 - p) / replicates),
                     sd_n / math.sqrt(replicates), int(replicates), int(seed), target, met)


def _predictive_programme(
    design: Design, generating: Design, rule: LatticeRule,
) -> tuple[np.ndarray, np.ndarray]:
    family: LatticeFamily = design.family

    def step(dist: np.ndarray, arm: int, before: int, after: int, size: int) -> np.ndarray:
        # the design prior's predictive pmf from every count so far, with increments up
        # to the lattice's size (counts are not bounded by subjects)
        post = family.posterior(generating, arm, before, np.arange(dist.shape[arm]))
        pmf = family.predictive_pmf(generating, post, after - before, size)
        return add_state_increment(dist, pmf, arm, size)

    found = run_programme(rule.looks, len(design.arms), step, track_uncertain=False)
    return found.efficacy, found.futility


def _reach(design: Design) -> np.ndarray | None:
    """For a truncated lattice: true values up to the design priors' 1 - 1e-12 quantiles,
    so that the lattice serves (nearly) every value the design prior generates."""
    family = design.family
    if not getattr(family, "truncates", False):
        return None
    tops = []
    for arm in design.arms:
        components = family.prior_components(arm.design_prior)
        if components is None:
            return None
        tops.append(max(float(dist.isf(REACH_TAIL)) for _, dist in components))
    return np.array([tops])


def _nodes(family: Any, prior: Any) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes over each mixture component's quantile function, with
    weights."""
    u, w = np.polynomial.legendre.leggauss(QUADRATURE_NODES)
    u, w = 0.5 * (u + 1.0), 0.5 * w
    components = family.prior_components(prior)
    if components is None:
        raise ValueError(f"{family.name} design priors have no quantile functions for "
                         "quadrature")
    return (np.concatenate([dist.ppf(u) for _, dist in components]),
            np.concatenate([weight * w for weight, _ in components]))


def _quadrature(design: Design, generating: Design) -> tuple[np.ndarray, np.ndarray]:
    family = design.family
    engine = choose(design)
    if on_effect(design) or len(design.arms) == 1:
        prior = (generating.hypothesis.prior if on_effect(design)
                 else generating.arms[0].prior)
        components = family.prior_components(prior)
        if components is None:
            raise ValueError(f"{family.name} design priors have no quantile functions for "
                             "quadrature")

        def truths_at(theta: np.ndarray) -> np.ndarray:
            if not on_effect(design):
                return theta[:, None]
            # the operating characteristics depend on the effect only: the control at
            # the design's first scenario, the treatment at control + effect
            control = design.scenarios.values[0][1]
            return np.column_stack([control + theta, np.full(theta.size, control)])

        def partial_sum(nodes: tanh_sinh.Nodes) -> np.ndarray:
            keep = (nodes.log_u > LOG_EDGE) & (nodes.log_1mu > LOG_EDGE)
            u, v = nodes.u[keep], nodes.one_minus_u[keep]
            w = np.exp(nodes.log_w[keep])
            total = np.zeros((2, design.looks.count))
            for weight, dist in components:
                theta = np.where(u < 0.5, dist.ppf(u), dist.isf(v))
                outcome = engine.run(design, truths_at(theta), estimate=False)
                total += weight * np.stack([w @ outcome.efficacy, w @ outcome.futility])
            return total

        found = tanh_sinh.integrate(partial_sum, tol=TANH_SINH_TOL)
        return found.value[0], found.value[1]
    per_arm = [_nodes(family, arm.prior) for arm in generating.arms]
    truths = np.array(list(itertools.product(*(nodes for nodes, _ in per_arm))))
    weights = np.prod(np.array(list(itertools.product(*(wt for _, wt in per_arm)))), axis=1)
    outcome = engine.run(design, truths, estimate=False)
    return weights @ outcome.efficacy, weights @ outcome.futility
