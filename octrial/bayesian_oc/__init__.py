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
from octrial.bayesian_oc.metrics import METRICS, metrics, metrics_at, uncertainty
from octrial.bayesian_oc.nodes import (
    PriorNodes,
    boundary_value,
    cumulative_nodes,
    effect_of,
    one_dimensional_nodes,
    tensor_nodes,
)
from octrial.bayesian_oc.quadrature import (
    Quadrature,
    calibration_nodes,
    exact_engine_applies,
    quadrature,
    success_function,
)
from octrial.bayesian_oc.record import bayesian_record, null_definition
from octrial.bayesian_oc.simulation import simulated

__all__ = ["METRICS", "PriorNodes", "Quadrature", "bayesian_record", "boundary_value",
           "calibration_nodes", "cumulative_nodes", "effect_of", "exact_engine_applies",
           "metrics", "metrics_at", "null_definition", "one_dimensional_nodes", "quadrature",
           "simulated", "success_function", "tensor_nodes", "uncertainty"]
