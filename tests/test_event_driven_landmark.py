"""One-arm landmark decisions with several hazard periods in the patient-level kernel
(:func:`~octrial.simulation.event_driven_decisions.landmark_benefit`,
:func:`~octrial.simulation.event_driven_decisions.gamma_sum_cdf_at`) against scipy: quadrature of
the convolution of two gamma laws, Monte Carlo sums of scipy gamma draws for three
periods, double quadrature for a mixture shared by the periods, and the family's own
posterior probability (the Moschopoulos series of survival_maths, itself checked against
scipy in tests/test_time_to_event.py) study by study on simulated subjects."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest
from scipy import integrate, stats

from octrial.simulation import event_driven as ed
from octrial.simulation import event_driven_decisions as decisions
from tests.helpers import build

Z = 4.0


def _one(shapes: list[float], rates: list[float], x: float) -> float:
    return decisions.gamma_sum_cdf_at(x, np.array(shapes), np.array(rates))


@pytest.mark.parametrize(("shapes", "rates", "x"), [
    ([12.5, 4.5], [700.0, 90.0], 0.05),       # scales about 8 times apart
    ([40.5, 30.5], [2000.0, 1900.0], 0.036),  # close scales
    ([3.5, 60.5], [5000.0, 300.0], 0.22),     # a short first period
    ([200.5, 150.5], [9000.0, 2000.0], 0.1),  # many events
])
def test_sum_of_two_gammas_matches_quadrature(shapes: list[float], rates: list[float],
                                              x: float) -> None:
    """Pr(X_1 + X_2 <= x) = int f_1(u) F_2(x - u) du by scipy.integrate.quad with
    scipy.stats.gamma, to 1e-9."""
    g1 = stats.gamma(shapes[0], scale=1 / rates[0])
    g2 = stats.gamma(shapes[1], scale=1 / rates[1])
    want = integrate.quad(lambda u: g1.pdf(u) * g2.cdf(x - u), 0, x, epsabs=1e-13,
                          epsrel=1e-11, limit=500, points=[g1.mean()])[0]
    assert _one(shapes, rates, x) == pytest.approx(want, abs=1e-9)


def test_sum_of_three_gammas_matches_scipy_draws() -> None:
    """Three periods: the cdf at three points against 400,000 sums of scipy.stats.gamma
    draws, within 4 standard errors."""
    shapes, rates = [20.5, 8.5, 3.5], [900.0, 150.0, 40.0]
    rng = np.random.default_rng(5)
    total = sum(stats.gamma(a, scale=1 / r).rvs(400_000, random_state=rng)
                for a, r in zip(shapes, rates, strict=True))
    for q in (0.1, 0.5, 0.9):
        x = float(np.quantile(total, q))
        p = float(np.mean(total <= x))
        se = math.sqrt(p * (1 - p) / total.size)
        assert abs(_one(shapes, rates, x) - p) <= Z * se, q


def test_landmark_benefit_with_a_shared_mixture_matches_double_quadrature() -> None:
    """Two periods, a two-component gamma mixture shared by the periods: the kernel's
    Pr(Delta_1 h_1 + Delta_2 h_2 < limit | data) against prior x likelihood integrated
    over the region and over everything (scipy.integrate.dblquad), to 1e-7."""
    weights, a, b = (0.6, 0.4), (2.0, 0.5), (60.0, 5.0)
    d, e = (9.0, 4.0), (400.0, 150.0)
    overlap, limit = (6.0, 6.0), 0.3

    def joint(h2: float, h1: float) -> float:
        prior = sum(w * stats.gamma.pdf(h1, ai, scale=1 / bi)
                    * stats.gamma.pdf(h2, ai, scale=1 / bi)
                    for w, ai, bi in zip(weights, a, b, strict=True))
        return prior * h1 ** d[0] * math.exp(-h1 * e[0]) * h2 ** d[1] * math.exp(-h2 * e[1])

    top = 0.2
    inside = integrate.dblquad(joint, 0, limit / overlap[0], 0,
                               lambda h1: (limit - overlap[0] * h1) / overlap[1],
                               epsabs=0, epsrel=1e-10)[0]
    whole = integrate.dblquad(joint, 0, top, 0, top, epsabs=0, epsrel=1e-10)[0]
    log_w = np.log(np.array(weights))
    value = decisions.landmark_benefit(np.array(d), np.array(e), log_w,
                                np.array([a, a]), np.array([b, b]), np.array(overlap),
                                limit, True)
    assert value == pytest.approx(inside / whole, abs=1e-7)
    assert decisions.landmark_benefit(np.array(d), np.array(e), log_w, np.array([a, a]),
                               np.array([b, b]), np.array(overlap), limit,
                               False) == pytest.approx(1 - inside / whole, abs=1e-7)


ONE_ARM_PIECEWISE: dict[str, Any] = {
    "schema": 1, "name": "tte-one-arm-landmark",
    "endpoint": {"type": "time-to-event", "periods": [0, 6], "relative_hazard": [1, 0.6],
                 "benchmark_scale": "survival", "landmark": 12.0},
    "hypothesis": {"benchmark": 0.75},
    "arms": {"treatment": {"prior": {"distribution": "gamma-mixture", "components": [
        {"weight": 0.7, "shape": 1.0, "rate": 40.0},
        {"weight": 0.3, "shape": 0.5, "rate": 5.0}]}}},
    "conduct": {"enrolment_rate": 8.0, "max_enrolment": 240, "dropout_hazard": 0.01},
    "looks": {"events": [25, 50], "efficacy": [0.995, 0.975], "futility": 0.2},
    "scenarios": {"treatment": [0.0299, 0.02]},
    "simulation": {"replicates": 2000, "seed": 3},
}


def test_kernel_landmark_decisions_equal_the_family_on_the_same_subjects() -> None:
    """A one-arm design with two hazard periods and a survival benchmark at 12 months:
    the kernel's stops equal, study by study, a Python loop over the same subjects that
    decides with the family's posterior probability of landmark survival
    (:meth:`TimeToEventFamily.benefit_from`: the Moschopoulos series in scipy) and the
    stop rule's Python form; at least three kinds of ending occur."""
    from octrial.rules.stop import CONTINUE, EFFICACY, Rule

    design = build(ONE_ARM_PIECEWISE)
    assert design.family.simulation_unsupported(design) is None
    family = design.family
    rule = Rule.of(design.looks)
    studies = 300
    starts = np.asarray(design.endpoint.starts)
    endings = set()
    for truth in design.scenarios.values:
        sim = ed.EventDrivenSimulator(design, tuple(truth), 0.95)
        tally = sim.simulate(np.random.default_rng(8), studies)
        rng = np.random.default_rng(8)
        efficacy = np.zeros(2, dtype=int)
        futility = np.zeros(2, dtype=int)
        for _ in range(studies):
            subj = sim.subjects(rng)
            ends = subj["enrolled"] + subj["follow"]
            events = np.sort(ends[subj["seen"]])
            for k, target in enumerate(sim.targets):
                final = k == 1 or events.size < target
                tau = events[int(target) - 1] if events.size >= target else ends.max()
                d = np.zeros((1, 2))
                x = np.zeros((1, 2))
                ed.piece_statistics(subj["enrolled"], subj["follow"], subj["seen"],
                                    subj["arm"], tau, starts, d, x)
                b = float(family.benefit_from(design, (d,), (x,))[0])
                code = rule.decide(1 if final else k, b)
                if code == EFFICACY:
                    efficacy[k] += 1
                elif code != CONTINUE:
                    futility[k] += 1
                if code != CONTINUE:
                    endings.add((k, code))
                    break
        assert list(tally.efficacy) == list(efficacy), (truth, tally.efficacy, efficacy)
        assert list(tally.futility) == list(futility), (truth, tally.futility, futility)
    assert len(endings) >= 3, endings
