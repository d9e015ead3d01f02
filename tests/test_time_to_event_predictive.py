"""The time-to-event family's predictive probability of final success
(:meth:`~octrial.endpoints.time_to_event.TimeToEventFamily.predictive_from`,
:mod:`octrial.endpoints.survival_predictive`) and its use by ``decide`` and by the
generic study loop, against sources outside the project (named beside each check). The
kernel's versions are checked against a simulated continuation in
tests/test_event_driven_predictive.py; the one-arm design of the common family suite
runs tests/family_suite.py's continuation check on this family."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from scipy import integrate, special, stats

from octrial.endpoints import survival_predictive as sp
from octrial.rules.stop import EFFICACY, Rule
from tests.helpers import build

Z = 4.0

TWO_ARM_FIXED: dict[str, Any] = {
    "schema": 1, "name": "tte-two-arm-predictive",
    "endpoint": {"type": "time-to-event"},
    "hypothesis": {"comparison": "ratio", "margin": 0.0},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1, "rate": 10}},
             "control": {"prior": {"distribution": "gamma-mixture", "components": [
                 {"weight": 0.5, "shape": 3, "rate": 30},
                 {"weight": 0.5, "shape": 1, "rate": 10}]}}},
    "looks": {"n": [20, 40], "efficacy": [0.995, 0.975], "futility_predictive": [0.2]},
    "scenarios": {"control": [0.1], "ratio": [1.0, 0.5]},
}

ONE_ARM_CONDUCT: dict[str, Any] = {
    "schema": 1, "name": "tte-one-arm-predictive",
    "endpoint": {"type": "time-to-event"},
    "hypothesis": {"benchmark": 0.05},
    "arms": {"treatment": {"prior": {"distribution": "gamma-mixture", "components": [
        {"weight": 0.6, "shape": 2.0, "rate": 50.0},
        {"weight": 0.4, "shape": 0.5, "rate": 5.0}]}}},
    "conduct": {"enrolment_rate": 6.0, "max_enrolment": 200, "dropout_hazard": 0.01},
    "looks": {"events": [20, 40, 60], "efficacy": [0.999, 0.99, 0.975],
              "futility_predictive": [0.1, 0.1]},
    "scenarios": {"treatment": [0.05, 0.03]},
    "simulation": {"replicates": 4000, "seed": 3},
}


def test_compound_gamma_tail_matches_quadrature() -> None:
    """Pr(Y >= y) with Y | lambda ~ Gamma(m, lambda), lambda ~ Gamma(a, b): the beta
    form I_{b/(b+y)}(a, m) against scipy.integrate.quad of the gamma survival function
    (scipy.stats.gamma.sf) over the gamma density of lambda."""
    for a, b, m, y in ((3.5, 40.0, 12, 150.0), (0.5, 2.0, 1, 0.3), (41.0, 900.0, 80, 2500.0)):
        value = sp.exposure_tail(np.array([[1.0]]), np.array([[a]]), np.array([[b]]), m,
                                 np.array([y]))[0]
        want = integrate.quad(lambda lam, a=a, b=b, m=m, y=y: stats.gamma.pdf(
            lam, a, scale=1 / b) * stats.gamma.sf(y, m, scale=1 / lam), 0, np.inf,
            epsabs=0, epsrel=1e-11, limit=400)[0]
        assert value == pytest.approx(want, abs=1e-9), (a, b, m, y)


@pytest.mark.parametrize(("better", "states"), [
    ("lower", ((150.0, 120.0), (200.0, 180.0), (100.0, 160.0))),
    ("higher", ((120.0, 150.0), (180.0, 200.0), (160.0, 100.0))),
])
def test_two_arm_fixed_events_matches_scipy_continuation(
        better: str, states: tuple[tuple[float, float], ...]) -> None:
    """Two arms, no censoring (each arm's final events fixed), mixture prior on the
    control: the Gauss-Legendre integral against the simulated continuation (hazards
    from the posterior, each arm's remaining time on study Gamma(m, lambda) from
    scipy.stats.gamma, final success by the family's posterior probability and the stop
    rule; Lee & Liu 2008's definition) within 4 standard errors, at three interim
    states with the predictive probability between 0.0003 and 0.5, lower or higher
    hazards better."""
    design = build({**TWO_ARM_FIXED, "endpoint": {"type": "time-to-event",
                                                  "better": better}})
    family = design.family
    rule = Rule.of(design.looks)
    now, end = design.looks.per_arm[0], design.looks.per_arm[-1]
    rng = np.random.default_rng(3)
    draws = 200_000
    for x_t, x_c in states:
        value = float(family.predictive_at(design, (np.array([x_t]), np.array([x_c])),
                                           now)[0])
        hazards = []
        for arm, x, n in zip(design.arms, (x_t, x_c), now, strict=True):
            w, a, b = family.posterior(arm.prior, np.array([[n]]), np.array([[x]]))
            c = rng.choice(w.shape[1], size=draws, p=w[0])
            hazards.append(stats.gamma(a[0, c, 0], scale=1 / b[0, c, 0]).rvs(
                random_state=rng))
        future = [stats.gamma(e - n, scale=1 / lam).rvs(random_state=rng)
                  for e, n, lam in zip(end, now, hazards, strict=True)]
        final = family.benefit_at(design, (x_t + future[0], x_c + future[1]), end)
        p = float(np.mean(rule.decide_many(rule.last, final) == EFFICACY))
        se = math.sqrt(p * (1 - p) / draws)
        assert 0.0003 < p < 0.5
        assert abs(value - p) <= Z * se, (x_t, x_c, value, p, se)


def test_one_arm_higher_hazard_better_passes_the_family_suite_check() -> None:
    """The common suite's continuation check (tests/family_suite.py; Lee & Liu 2008)
    on a one-arm design where a higher hazard is better (final success is then an
    exposure below the bound)."""
    from tests import family_suite
    from tests.test_family_suite import SUITE_DESIGNS

    data = SUITE_DESIGNS["time-to-event"]
    design = build({**data, "endpoint": {"type": "time-to-event", "better": "higher"},
                    "hypothesis": {"benchmark": 0.08},
                    "scenarios": {"treatment": [0.08, 0.15]}})
    assert any(v is not None for v in design.looks.futility_predictive)
    family_suite.check_predictive_by_continuation(design.family, design)


def test_one_arm_decide_gives_the_closed_form_and_stops_for_futility() -> None:
    """``decide`` at an interim look of an event-driven one-arm design: the predictive
    probability equals the closed form written out here with scipy (final exposure bound
    t* by scipy.optimize.brentq on the mixture posterior's gamma cdf at the final
    events, then the mixture of beta-prime tails I_{b'/(b'+t*-x)}(a', D - d)), and a
    study far above the benchmark stops for futility on it."""
    from scipy import optimize

    from octrial.interim import decide

    design = build(ONE_ARM_CONDUCT)
    prior = design.arms[0].prior
    final, lam0, gamma = 60, 0.05, 0.975

    def posterior(d: float, x: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        a = np.array(prior.a) + d
        b = np.array(prior.b) + x
        log_w = (np.log(prior.weights) + np.array(prior.a) * np.log(prior.b)
                 + special.gammaln(a) - special.gammaln(prior.a) - a * np.log(b))
        return np.exp(log_w - special.logsumexp(log_w)), a, b

    def final_benefit(t: float) -> float:
        w, a, b = posterior(final, t)
        return float(np.sum(w * stats.gamma.cdf(lam0, a, scale=1 / b)))

    bound = optimize.brentq(lambda t: final_benefit(t) - gamma, 1.0, 1e6, xtol=1e-10)
    for d, x, stops in ((20, 420.0, False), (20, 260.0, True)):
        w, a, b = posterior(d, x)
        want = float(np.sum(w * special.betainc(a, final - d, b / (b + bound - x))))
        result = decide(design, 1, [f"treatment={d}/{x}"], level=0.95)
        assert result.assessment.predictive == pytest.approx(want, abs=1e-9)
        assert (result.assessment.decision == "stop for futility") == stops, (
            result.assessment)


def test_two_arm_event_driven_decide_uses_the_split_approximation() -> None:
    """``decide`` on a two-arm event-driven design (one gamma component per arm): the
    predictive probability is the split approximation in its closed form (the
    beta-binomial sum of :func:`survival_predictive.two_arm_split_single`), here against
    the approximation's definition simulated with scipy.stats draws (hazards from the
    posteriors, the treatment's share binomial, the control's future exposure gamma,
    final success by scipy.special.betainc at the final data), within 4 standard
    errors: a check of the closed form's derivation."""
    from octrial.interim import decide

    data = {
        "schema": 1, "name": "tte-two-arm-ed-predictive",
        "endpoint": {"type": "time-to-event"},
        "hypothesis": {"comparison": "ratio", "margin": 0.0},
        "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 0.5,
                                         "rate": 6}},
                 "control": {"prior": {"distribution": "gamma", "shape": 0.5, "rate": 6}}},
        "conduct": {"enrolment_rate": 8.0, "max_enrolment": 160, "dropout_hazard": 0.01},
        "looks": {"events": [30, 60, 90], "efficacy": [0.999, 0.99, 0.975],
                  "futility_predictive": [0.1, 0.1]},
        "scenarios": {"control": [0.058], "ratio": [1.0, 0.75]},
    }
    design = build(data)
    result = decide(design, 1, ["treatment=12/700", "control=18/640"], level=0.95)
    value = result.assessment.predictive
    rng = np.random.default_rng(4)
    draws = 400_000
    a_t, b_t, a_c, b_c, m = 12.5, 706.0, 18.5, 646.0, 60
    rho = b_t / b_c  # the ratio of the posterior rates
    lam_t = stats.gamma(a_t, scale=1 / b_t).rvs(draws, random_state=rng)
    lam_c = stats.gamma(a_c, scale=1 / b_c).rvs(draws, random_state=rng)
    rate = rho * lam_t + lam_c
    share = stats.binom(m, rho * lam_t / rate).rvs(random_state=rng)
    s = stats.gamma(m, scale=1 / rate).rvs(random_state=rng)
    k = (b_t + rho * s) / (b_c + s)
    p = float(np.mean(special.betainc(a_t + share, a_c + m - share, k / (1 + k)) >= 0.975))
    se = math.sqrt(p * (1 - p) / draws)
    # the mixture route (Monte Carlo) on the same state agrees too
    posts = tuple((np.array([[1.0]]), np.array([[a]]), np.array([[b]]))
                  for a, b in ((a_t, b_t), (a_c, b_c)))

    def final(d_t: Any, d_c: Any, t_t: Any, t_c: Any) -> Any:
        kk = (6 + t_t) / (6 + t_c)
        return special.betainc(0.5 + d_t, 0.5 + d_c, kk / (1 + kk))

    mc = sp.two_arm_split(posts, (12.0, 18.0), (700.0, 640.0), m, final, 0.975,
                          np.random.default_rng(8), draws)
    assert abs(mc - p) <= Z * math.sqrt(2) * se, (mc, p)
    assert 0.05 < p < 0.95
    assert abs(value - p) <= Z * se, (value, p, se)


@pytest.mark.parametrize(("changes", "word"), [
    ({"looks": {"time": [6.0, 12.0, 24.0], "efficacy": [0.999, 0.99, 0.975],
                "futility_predictive": [0.1, 0.1]}}, "calendar"),
    ({"endpoint": {"type": "time-to-event", "periods": [0, 6], "relative_hazard": [1, 0.6],
                   "landmark": 12.0},
      "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1, "rate": 40}}}},
     "one hazard period"),
])
def test_predictive_futility_is_refused_where_unavailable(tmp_path: Path,
                                                          changes: dict[str, Any],
                                                          word: str) -> None:
    """Predictive futility needs looks at event counts (the final analysis at a fixed
    number of events) and, with gamma priors, one hazard period: ``octrial run`` on a
    design with calendar-time looks or two periods exits 2, naming
    looks.futility_predictive, and writes nothing."""
    from click.testing import CliRunner

    from octrial.cli import main
    from octrial.design.write import dumps

    data = {**ONE_ARM_CONDUCT, **changes}
    reason = build(data).family.simulation_unsupported(build(data))
    assert reason is not None and word in reason
    path = tmp_path / "calendar.toml"
    path.write_text(dumps(data))
    out = tmp_path / "out"
    result = CliRunner().invoke(main, ["run", str(path), "--out", str(out)])
    assert result.exit_code == 2, result.output
    assert "looks.futility_predictive" in result.output
    assert not out.exists() or not any(out.iterdir())


def test_committee_table_futility_bound_includes_predictive_futility() -> None:
    """One arm, one period: the boundary table's futility bound per interim look is the
    more demanding of the posterior and predictive bounds on the exposure; at it the
    predictive probability equals its threshold (the closed form above, 1e-8), and
    ``decide`` just below it stops for futility and just above it continues (the table
    and the decision agree)."""
    from octrial.interim import decide

    design = build({**ONE_ARM_CONDUCT, "looks": {**ONE_ARM_CONDUCT["looks"],
                                                 "futility": [0.02, 0.02]}})
    family = design.family
    table = family.boundary_table(design)
    for k in (0, 1):
        events, bound = int(table["events"].iloc[k]), float(table["futility_bound"].iloc[k])
        pp = family.predictive_from(design, (np.array([[events]]),),
                                    (np.array([[bound]]),))[0]
        assert pp == pytest.approx(0.1, abs=1e-8)
        for factor, stops in ((0.999, True), (1.001, False)):
            result = decide(design, k + 1, [f"treatment={events}/{bound * factor}"],
                            level=0.95)
            assert (result.assessment.decision == "stop for futility") == stops, (k, factor)
