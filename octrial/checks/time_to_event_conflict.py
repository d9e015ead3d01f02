"""Prior-data conflict of a time-to-event arm that borrows from historical data.

Box's (1980) prior predictive check, on the arm's events given its time at risk: under a
gamma prior Gamma(a, b) on the hazard, the likelihood of d events in exposure E is
proportional to h^d exp(-h E), the Poisson form, so the prior predictive of d given E is
negative binomial with size a and success probability b / (b + E) (a mixture over a
gamma mixture's components). A study's p-value is the predictive probability of event
counts no more probable than the one seen (outcomes ordered by predictive probability,
as :mod:`octrial.checks.conflict` does for the other families; Evans & Moshonov 2006),
and conflict is declared when it is below :data:`octrial.checks.conflict.LEVEL`.

Per true hazard of the arm (each scenario's value, with the other arm at that scenario's
value), :data:`STUDIES` studies are simulated with the design's conduct
(:mod:`octrial.checks.time_to_event_data`), seeded by the design's ``simulation.seed``
(0 without one), and at every look the share of studies in conflict and, for a robust
mixture, the mean posterior weight of the vague component are reported. The arm's
events and exposure are summed over the hazard periods (borrowing is on one hazard).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy import special

from octrial.checks.conflict import LEVEL, _vague_components
from octrial.checks.time_to_event_data import simulate_studies
from octrial.design.model import Design
from octrial.endpoints.count import GammaMixture

STUDIES = 2000
"""Simulated studies per true value."""

STREAM = 7
"""Spawn key of the conflict's random stream under the design's seed."""

def events_p_values(prior: GammaMixture, events: np.ndarray,
                    exposure: np.ndarray) -> np.ndarray:
    """Box's prior predictive p-value of each study's ``events`` given its ``exposure``.

    Parameters
    ----------
    prior : GammaMixture
        The prior whose predictive judges the data (the informative prior).
    events, exposure : ndarray, shape (m,)

    Returns
    -------
    ndarray, shape (m,)
        sum of pmf(d' | E) over d' with pmf(d' | E) <= pmf(d | E).
    """
    events = np.asarray(events, dtype=float)
    exposure = np.asarray(exposure, dtype=float)
    w = np.asarray(prior.weights, dtype=float)
    a = np.asarray(prior.a, dtype=float)
    b = np.asarray(prior.b, dtype=float)
    # a support long enough for every study: mean + 40 sd of the widest component
    mean = a[None, :] * exposure[:, None] / b[None, :]
    sd = np.sqrt(mean * (1.0 + exposure[:, None] / b[None, :]))
    top = int(max(np.max(mean + 40.0 * sd), np.max(events))) + 2
    support = np.arange(top + 1, dtype=float)
    pmf = np.zeros((events.size, support.size))
    for c in range(w.size):
        log_p = np.log(b[c] / (b[c] + exposure))[:, None]
        q = (exposure / (b[c] + exposure))[:, None]
        pmf += w[c] * np.exp(special.gammaln(a[c] + support) - special.gammaln(a[c])
                             - special.gammaln(support + 1.0) + a[c] * log_p
                             + special.xlogy(support, q))
    seen = pmf[np.arange(events.size), events.astype(np.int64)]
    # near-ties within rounding count as equally probable, as in checks.conflict
    below = np.where(pmf <= seen[:, None] * (1 + 1e-9), pmf, 0.0).sum(axis=1)
    # the mass beyond the support (below 1e-12) is less probable than any count seen
    return np.minimum(below + np.clip(1.0 - pmf.sum(axis=1), 0.0, None), 1.0)


def event_conflict(design: Design, arm: int, informative: Design,
                   vague: Design) -> list[dict[str, Any]] | None:
    """Rows per true value of arm ``arm``: look<k>_conflict (and look<k>_vague_weight
    for a robust mixture), the shape :func:`octrial.checks.conflict.run_conflict`
    reports. ``None`` when the informative prior is not a gamma mixture."""
    prior = informative.arms[arm].prior
    if not isinstance(prior, GammaMixture):
        return None
    family = design.family
    borrowing = design.arms[arm].prior.borrowing
    n_vague = _vague_components(design, vague, arm)
    rows: dict[float, dict[str, Any]] = {}
    scenario_of: dict[float, tuple[float, ...]] = {}
    for values in design.scenarios.values:
        scenario_of.setdefault(float(values[arm]), tuple(float(v) for v in values))
    seed = design.simulation.seed or 0
    for i, truth in enumerate(sorted(scenario_of)):
        rng = np.random.Generator(np.random.PCG64(
            np.random.SeedSequence(seed, spawn_key=(STREAM, i))))
        hazards = np.asarray(scenario_of[truth], dtype=float)[:, None] * np.asarray(
            design.endpoint.relative_hazard, dtype=float)[None, :]
        data = simulate_studies(design, rng, np.broadcast_to(hazards, (STUDIES,
                                                                       *hazards.shape)))
        row: dict[str, Any] = {"true_value": truth, "drift": truth - borrowing.estimate}
        for k in range(design.looks.count):
            d, x = data.at(k, arm)
            p = events_p_values(prior, d.sum(axis=1), x.sum(axis=1))
            row[f"look{k + 1}_conflict"] = float(np.mean(p < LEVEL))
            if n_vague:
                weights, _, _ = family.posterior(design.arms[arm].prior,
                                                 d.sum(axis=1, keepdims=True),
                                                 x.sum(axis=1, keepdims=True))
                row[f"look{k + 1}_vague_weight"] = float(
                    np.mean(weights[:, -n_vague:].sum(axis=1)))
        rows[truth] = row
    return list(rows.values())
