"""Normal endpoints with unknown sd (Monte Carlo only) against independent checks.

* Identity: under the reference prior p(mu, sigma^2) proportional to 1/sigma^2 (the
  normal-inverse-gamma limit k0 = 0, a0 = -1/2, b0 = 0) the posterior of mu is
  t_{n-1}(xbar, s^2 / n), so Pr(mu > mu0 | data) = 1 - p of the one-sided one-sample
  t-test (Gelman et al., Bayesian Data Analysis, 3rd ed., section 3.2); checked on
  subject-level data against ``scipy.stats.ttest_1samp``.
* Limit: with a variance prior concentrated at the true variance (shape 1e4) the design
  behaves as the known-sd design with the matching normal prior, whose exact operating
  characteristics come from the recursion (tests/test_normal_engine.py); every
  probability within 4 Monte Carlo SE, predictive futility included.
* The kernel against a plain numpy/scipy implementation (posteriors with
  ``scipy.stats.t``, two arms with ``scipy.integrate.quad``) on the same simulated data:
  identical decisions in every study.
* The data generator (increment means and chi-square sums of squares) against
  subject-level simulation: pooled mean and sum of squares at each look have the
  N(mu, sigma^2 / n) and sigma^2 chi^2_{n-1} distributions (Kolmogorov-Smirnov, scipy).
* The derived predictive probability against a plain simulation of the future data
  (sigma^2, mu, future mean and sum of squares drawn from the posterior predictive, the
  final posterior with ``scipy.stats.t``), within 4 SE, and against the same quadrature
  with 8 times the nodes.
* Assurance by simulation against the known-sd quadrature in the same variance limit.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import integrate, optimize, special, stats

from octrial.design_prior import assurance
from octrial.engines import MonteCarloSettings
from octrial.engines.monte_carlo import batch_generator
from octrial.evaluation import compute
from octrial.rules.lattice import DECISION_TOLERANCE
from octrial.simulation import normal_unknown as nu
from octrial.simulation.normal_unknown import UnknownSdSimulator
from octrial.simulation.special import student_t_pair
from tests.helpers import build

SD = 2.0
ONE_ARM = {
    "schema": 1,
    "name": "unknown-sd-one-arm",
    "endpoint": {"type": "normal", "sd": "unknown", "true_sd": SD, "better": "higher"},
    "hypothesis": {"benchmark": 0.0},
    "arms": {"treatment": {"prior": {"distribution": "normal-inverse-gamma", "mean": 0.0,
                                     "mean_n": 1.0, "shape": 2.0, "scale": 8.0}}},
    "looks": {"n": [20, 40, 60], "efficacy": [0.999, 0.99, 0.975], "futility": [0.05, 0.1]},
    "scenarios": {"treatment": [0.0, 0.4, 0.8]},
}
TWO_ARM = {
    "schema": 1,
    "name": "unknown-sd-two-arm",
    "endpoint": {"type": "normal", "sd": "unknown", "true_sd": SD, "better": "higher"},
    "hypothesis": {"comparison": "difference", "margin": 0.0},
    "arms": {"treatment": {"prior": {"distribution": "normal-inverse-gamma", "mean": 0.0,
                                     "mean_n": 1.0, "shape": 2.0, "scale": 8.0}},
             "control": {"prior": {"distribution": "normal-inverse-gamma", "mean": 0.5,
                                   "mean_n": 2.0, "shape": 3.0, "scale": 6.0}}},
    "looks": {"n": [40, 80], "efficacy": [0.995, 0.975], "futility": 0.1},
    "scenarios": {"control": [1.0], "effect": [0.0, 1.0]},
}
REPLICATES = 20_000


def nig(mean: float, mean_n: float, shape: float, scale: float) -> dict:
    return {"distribution": "normal-inverse-gamma", "mean": mean, "mean_n": mean_n,
            "shape": shape, "scale": scale}


def run_kernel(means: np.ndarray, squares: np.ndarray, n: list[int], prior: tuple,
               efficacy: list[float], sign: float = 1.0, benchmark: float = 0.0,
               truth: float = 0.0) -> tuple[np.ndarray, np.ndarray, int]:
    """One-arm kernel on given increment statistics (studies, looks): efficacy stops, the
    sums of the posterior mean's error powers and the covered count (95% intervals)."""
    looks = len(n)
    sizes = np.diff(np.array(n, dtype=float), prepend=0.0)
    stops_e, stops_f = np.zeros(looks, dtype=np.int64), np.zeros(looks, dtype=np.int64)
    none = np.full(looks, np.nan)
    sums = np.zeros(3)
    covered = nu.one_arm_studies(means, squares, sizes, np.array(n, dtype=float),
                                 np.array(prior, dtype=float), sign, benchmark,
                                 np.array(efficacy, dtype=float), none, none,
                                 np.zeros((looks, 6)), np.zeros((looks, 16)),
                                 np.zeros((looks, 16)), True, truth, 0.025,
                                 DECISION_TOLERANCE, stops_e, stops_f, sums)
    return stops_e, sums, int(covered)


@pytest.mark.parametrize("better", ["higher", "lower"])
def test_reference_prior_single_look_is_the_one_sample_t_test(better: str) -> None:
    rng = np.random.default_rng(11)
    n, mu0, gamma = 25, 1.0, 0.95
    sign = 1.0 if better == "higher" else -1.0
    x = rng.normal(mu0 + 0.3 * sign, 1.7, (4000, n))  # truth mu0 + 0.3 sign
    mean = x.mean(axis=1)
    squares = ((x - mean[:, None]) ** 2).sum(axis=1)
    alternative = "greater" if better == "higher" else "less"
    p = stats.ttest_1samp(x, mu0, axis=1, alternative=alternative).pvalue
    reference = (mu0, 0.0, -0.5, 0.0)  # k0 = 0, a0 = -1/2, b0 = 0
    b = np.empty(len(x))
    for i in range(len(x)):
        m_n, k_n, a_n, b_n = nu.update(*reference, n, mean[i] * n, squares[i])
        b[i] = student_t_pair(sign * (m_n - mu0) / math.sqrt(b_n / (a_n * k_n)), 2 * a_n)[0]
    np.testing.assert_allclose(b, 1 - p, rtol=0, atol=1e-12)
    truth = mu0 + 0.3 * sign
    stops, sums, covered = run_kernel(mean[:, None], squares[:, None], [n], reference,
                                      [gamma], sign, mu0, truth)
    assert stops[0] == np.sum(p <= 1 - gamma) > 100
    # the 95% credible interval is the t confidence interval: the same studies cover
    half = stats.t.ppf(0.975, n - 1) * np.sqrt(squares / (n - 1) / n)
    assert covered == np.sum(np.abs(mean - truth) <= half)
    assert sums[0] == pytest.approx(np.sum(mean - truth), rel=1e-9)


def known_sd_twin(design_dict: dict, two_arm: bool) -> dict:
    """The known-sd design that an unknown-sd design approaches as its variance prior
    concentrates at the true variance (shape 1e4, scale 1e4 sd^2)."""
    out = {**design_dict, "endpoint": {"type": "normal", "sd": SD, "better": "higher"}}
    if two_arm:  # mean_n -> 0 on both arms: flat on the difference
        out["hypothesis"] = {**design_dict["hypothesis"], "prior": {"distribution": "flat"}}
        out["arms"] = {"treatment": {}, "control": {}}
    else:
        prior = design_dict["arms"]["treatment"]["prior"]
        out["arms"] = {"treatment": {"prior": {"distribution": "normal", "mean": prior["mean"],
                                               "sd": SD / math.sqrt(prior["mean_n"])}}}
    return out


@pytest.mark.parametrize("case", ["one arm, predictive futility", "two arms",
                                  "two arms, predictive futility"])
def test_known_variance_limit_equals_the_known_sd_exact_engine(case: str) -> None:
    shape = 1e4
    if case.startswith("two arms"):
        shape = 2e3  # nu ~ 4000: t and normal differ by less than 1e-4 here
        unknown = {**TWO_ARM, "arms": {arm: {"prior": nig(0.0, 1e-6, shape, shape * SD**2)}
                                       for arm in ("treatment", "control")}}
        if case.endswith("predictive futility"):
            unknown["looks"] = {**TWO_ARM["looks"], "futility_predictive": 0.3}
        reps = 4000
    else:
        unknown = {**ONE_ARM, "arms": {"treatment": {"prior": nig(0.3, 2.0, shape,
                                                                  shape * SD**2)}},
                   "looks": {**ONE_ARM["looks"], "futility_predictive": [0.1, 0.2]}}
        reps = REPLICATES
    exact = compute(build(known_sd_twin(unknown, case.startswith("two arms")))).oc
    mc = compute(build(unknown), "monte-carlo", MonteCarloSettings(replicates=reps,
                                                                  seed=7)).oc
    columns = [c for c in exact.columns if c.startswith(("prob_", "look"))
               and not c.endswith("_se")]
    for column in columns:
        p = exact[column].to_numpy()
        se = np.sqrt(p * (1 - p) / reps)
        z = (mc[column].to_numpy() - p) / np.where(se > 0, se, 1.0)
        assert (np.abs(z) <= 4).all(), (column, z)


def pooled(means: np.ndarray, squares: np.ndarray, sizes: np.ndarray) -> tuple:
    """Cumulative (total, sum of squares, n) per look from increments (studies, looks):
    numpy, by the textbook decomposition of the sum of squares about the pooled mean."""
    n = np.cumsum(sizes)
    total = np.cumsum(sizes * means, axis=1)
    within = np.cumsum(squares, axis=1)
    # sum over increments of m_i (mean_i - pooled mean)^2 = sum m_i mean_i^2 - total^2 / n
    between = np.cumsum(sizes * means**2, axis=1) - total**2 / n
    return total, within + between, n


def test_one_arm_kernel_equals_a_plain_scipy_simulation_of_the_same_data() -> None:
    design = build(ONE_ARM)
    looks = design.looks
    simulator = UnknownSdSimulator(design, (0.4,), 0.95)
    reps = 20_000
    means, squares = (a[:, :, 0] for a in simulator.draw(batch_generator(3, 0, 0), reps))
    total, ss, n = pooled(means, squares, simulator.sizes[:, 0])
    m0, k0, a0, b0 = 0.0, 1.0, 2.0, 8.0
    k, a = k0 + n, a0 + n / 2
    xbar = total / n
    b = b0 + ss / 2 + k0 * n * (xbar - m0) ** 2 / (2 * k)
    posterior = stats.t(2 * a, (k0 * m0 + total) / k, np.sqrt(b / (a * k)))
    benefit = posterior.sf(0.0)
    efficacy = benefit >= np.array([0.999, 0.99, 0.975]) - DECISION_TOLERANCE
    futility = benefit < np.array([0.05, 0.1, np.nan]) - DECISION_TOLERANCE
    futility[:, -1] = ~efficacy[:, -1]
    stop = efficacy | futility
    first = np.argmax(stop, axis=1)
    expected_eff = np.bincount(first[efficacy[np.arange(reps), first]], minlength=3)
    expected_fut = np.bincount(first[~efficacy[np.arange(reps), first]], minlength=3)
    tally = simulator.run((means[:, :, None], squares[:, :, None]), reps, False)
    np.testing.assert_array_equal(tally.efficacy, expected_eff)
    np.testing.assert_array_equal(tally.futility, expected_fut)
    assert looks.count == 3 and 0 < tally.efficacy.sum() < reps


def t_density(u: float, dof: float, loc: float, scale: float) -> float:
    z = (u - loc) / scale
    return math.exp(special.gammaln((dof + 1) / 2) - special.gammaln(dof / 2)
                    - 0.5 * math.log(dof * math.pi) - (dof + 1) / 2 * math.log1p(z * z / dof)
                    ) / scale


def test_two_arm_kernel_equals_a_plain_scipy_simulation_of_the_same_data() -> None:
    # Behrens-Fisher probability per study by scipy.integrate.quad of the control t
    # density (closed form) times the treatment t survival function (scipy's stdtr).
    design = build(TWO_ARM)
    simulator = UnknownSdSimulator(design, (1.8, 1.0), 0.95)
    reps = 250
    means, squares = simulator.draw(batch_generator(5, 0, 0), reps)
    priors = [(0.0, 1.0, 2.0, 8.0), (0.5, 2.0, 3.0, 6.0)]
    posts = []
    for j in range(2):
        total, ss, n = pooled(means[:, :, j], squares[:, :, j], simulator.sizes[:, j])
        m0, k0, a0, b0 = priors[j]
        k, a = k0 + n, a0 + n / 2
        b = b0 + ss / 2 + k0 * n * (total / n - m0) ** 2 / (2 * k)
        posts.append(((k0 * m0 + total) / k, np.sqrt(b / (a * k)), 2 * a))
    eff_count, fut_count = np.zeros(2, dtype=int), np.zeros(2, dtype=int)
    for r in range(reps):
        for look, (eff_at, fut_at) in enumerate([(0.995, 0.1), (0.975, None)]):
            (mt, st, dt), (mc, sc, dc) = ((p[0][r, look], p[1][r, look], p[2][look])
                                          for p in posts)
            value = integrate.quad(lambda u, mt=mt, st=st, dt=dt, mc=mc, sc=sc, dc=dc:
                                   t_density(u, dc, mc, sc) * special.stdtr(dt, (mt - u) / st),
                                   -np.inf, np.inf, epsabs=1e-13, limit=200)[0]
            if value >= eff_at - DECISION_TOLERANCE:
                eff_count[look] += 1
                break
            if fut_at is None or value < fut_at - DECISION_TOLERANCE:
                fut_count[look] += 1
                break
    tally = simulator.run((means, squares), reps, False)
    np.testing.assert_array_equal(tally.efficacy, eff_count)
    np.testing.assert_array_equal(tally.futility, fut_count)
    assert 0 < eff_count.sum() < reps


def test_sufficient_statistics_have_the_subject_level_distribution() -> None:
    # At each look the pooled mean is N(mu, sigma^2 / n) and the pooled sum of squares
    # sigma^2 chi^2_{n - 1}, independent (Cochran's theorem); Kolmogorov-Smirnov tests
    # (scipy) at p >= 0.001, and the correlation of the two near 0.
    design = build(ONE_ARM, looks={"n": [3, 10, 11, 40], "efficacy": 0.975})
    simulator = UnknownSdSimulator(design, (0.7,), 0.95)
    means, squares = (a[:, :, 0] for a in simulator.draw(batch_generator(9, 0, 0), 40_000))
    total, ss, n = pooled(means, squares, simulator.sizes[:, 0])
    for k, size in enumerate(n):
        mean = total[:, k] / size
        assert stats.kstest(mean, stats.norm(0.7, SD / math.sqrt(size)).cdf).pvalue >= 1e-3
        assert stats.kstest(ss[:, k] / SD**2, stats.chi2(size - 1).cdf).pvalue >= 1e-3
        assert abs(np.corrcoef(mean, ss[:, k])[0, 1]) < 4 / math.sqrt(40_000)


STATES = [
    # (prior m0, k0, a0, b0), n now, N, final threshold, better, xbar, sd of data so far
    ((0.0, 1.0, 2.0, 8.0), 20, 60, 0.975, "higher", 0.5, 2.0),
    ((0.0, 1.0, 2.0, 8.0), 40, 60, 0.975, "higher", 0.3, 2.5),
    ((1.0, 5.0, 3.0, 3.0), 10, 100, 0.99, "lower", 0.6, 1.0),
    ((0.0, 0.1, 0.5, 1.0), 5, 12, 0.95, "higher", 0.8, 1.5),
    ((0.0, 1.0, 2.0, 8.0), 58, 60, 0.975, "higher", 0.6, 2.0),   # quadratic opens downward
    ((0.0, 1.0, 2.0, 8.0), 59, 60, 0.975, "higher", 0.55, 2.0),  # one subject to come
    ((0.0, 1.0, 2.0, 8.0), 20, 60, 0.4, "higher", -0.1, 2.0),    # threshold below 1/2
]


def predictive_inputs(state):
    """The kernel's inputs at a state: PP's constants, nodes and weights come from
    :func:`predictive_rules` on a two-look design (interim at n, final at N)."""
    (m0, k0, a0, b0), n, big_n, gamma, better, xbar, s = state
    design = build(ONE_ARM, endpoint__better=better, arms__treatment__prior=nig(m0, k0, a0, b0),
                   looks={"n": [n, big_n], "efficacy": ["none", gamma],
                          "futility_predictive": 0.1})
    constants, nodes, weights = nu.predictive_rules(design)
    sign = 1.0 if better == "higher" else -1.0
    m_n, k_n, a_n, b_n = nu.update(m0, k0, a0, b0, n, xbar * n, (n - 1) * s**2)
    return (sign * (m_n - 0.0), b_n, constants[0], nodes[0], weights[0]), (m_n, k_n, a_n,
                                                                           big_n - n, sign)


@pytest.mark.parametrize("state", STATES)
def test_predictive_probability_against_simulated_future_data(state, monkeypatch) -> None:
    inputs, (m_n, k_n, a_n, m, sign) = predictive_inputs(state)
    value = nu.predictive(*inputs)
    b_n = inputs[1]
    # plain simulation: sigma^2 | data, mu | sigma^2, then the m future subjects
    rng = np.random.default_rng(21)
    draws = 400_000
    gamma = state[3]
    sigma2 = b_n / rng.standard_gamma(a_n, draws)
    mu = m_n + np.sqrt(sigma2 / k_n) * rng.standard_normal(draws)
    future_mean = mu + np.sqrt(sigma2 / m) * rng.standard_normal(draws)
    future_ss = sigma2 * rng.chisquare(m - 1, draws) if m > 1 else np.zeros(draws)
    k_end, m_end = k_n + m, m_n + m / (k_n + m) * (future_mean - m_n)
    b_end = b_n + future_ss / 2 + k_n * m / (2 * k_end) * (future_mean - m_n) ** 2
    a_end = a_n + m / 2
    final = stats.t.cdf(sign * (m_end - 0.0) / np.sqrt(b_end / (a_end * k_end)), 2 * a_end)
    simulated = np.mean(final >= gamma - DECISION_TOLERANCE)
    se = math.sqrt(max(simulated * (1 - simulated), 1e-6) / draws)
    assert abs(value - simulated) <= 4 * se, (value, simulated, se)
    monkeypatch.setattr(nu, "PREDICTIVE_NODES", 8 * nu.PREDICTIVE_NODES)
    fine = nu.predictive(*predictive_inputs(state)[0])
    assert value == pytest.approx(fine, abs=1e-7)


def test_predictive_futility_is_monotone_in_the_threshold() -> None:
    # Same seed, stricter predictive threshold: never fewer futility stops per look and
    # never more successes (common random numbers).
    results = []
    for threshold in (0.05, 0.1, 0.2, 0.4):
        design = build(ONE_ARM, looks__futility_predictive=[threshold, threshold])
        oc = compute(design, "monte-carlo", MonteCarloSettings(replicates=3000, seed=2)).oc
        results.append(oc[["prob_success", "prob_stop_futility"]].to_numpy())
    for before, after in itertools.pairwise(results):
        assert (after[:, 0] <= before[:, 0]).all() and (after[:, 1] >= before[:, 1]).all()
    assert (results[-1][:, 1] > results[0][:, 1]).all()


def test_power_prior_with_weight_zero_is_the_initial_prior() -> None:
    # Identity: a0 = 0 borrows nothing, so the same seed gives the same numbers.
    borrowing = {**ONE_ARM["arms"]["treatment"]["prior"],
                 "historical": {"mean": 3.0, "sd": 1.0, "n": 50},
                 "borrowing": {"method": "power", "a0": 0.0}}
    plain = compute(build(ONE_ARM), "monte-carlo", MonteCarloSettings(replicates=2000,
                                                                       seed=4)).oc
    with_zero = compute(build(ONE_ARM, arms__treatment__prior=borrowing), "monte-carlo",
                        MonteCarloSettings(replicates=2000, seed=4)).oc
    columns = [c for c in plain.columns if c.startswith(("prob_", "look", "bias", "rmse"))]
    np.testing.assert_array_equal(plain[columns].to_numpy(), with_zero[columns].to_numpy())


def test_assurance_by_simulation_approaches_the_known_sd_quadrature() -> None:
    # Design prior NIG(mean 0.6, mean_n SD^2 / 0.3^2, shape 1e4, scale 1e4 SD^2): mu is
    # N(0.6, 0.3^2) and sigma is SD (to 1%); the known-sd twin's assurance comes from
    # Gauss-Legendre quadrature over the exact engine (tests/test_assurance.py).
    shape = 1e4
    analysis = nig(0.0, 1.0, shape, shape * SD**2)
    design_prior = nig(0.6, SD**2 / 0.3**2, shape, shape * SD**2)
    unknown = {**ONE_ARM, "arms": {"treatment": {"prior": analysis,
                                                 "design_prior": design_prior}},
               "simulation": {"replicates": REPLICATES, "seed": 8}}
    twin = known_sd_twin(unknown, False)
    twin["arms"]["treatment"]["design_prior"] = {"distribution": "normal", "mean": 0.6,
                                                 "sd": 0.3}
    simulated = assurance(build(unknown))
    quadrature = assurance(build(twin))
    assert simulated.method == "simulation" and quadrature.method == "quadrature"
    assert simulated.replicates == REPLICATES and simulated.seed == 8
    assert abs(simulated.probability - quadrature.probability) <= 4 * simulated.probability_se
    assert abs(simulated.expected_n - quadrature.expected_n) <= 4 * simulated.expected_n_se
    assert simulated.probability_se == pytest.approx(math.sqrt(
        simulated.probability * (1 - simulated.probability) / REPLICATES))


def test_kernel_maths_equal_the_scipy_reference_of_octrial_decide() -> None:
    # octrial/endpoints/unknown_sd.py (used by `octrial decide`) was derived separately
    # (its one-arm PP integrates over the final mean with an inner incomplete beta; the
    # kernel's over a beta variable of the future spread with an inner t probability) and
    # uses scipy throughout. Both must give the same B, two-arm B and PP.
    from octrial.endpoints import unknown_sd as reference
    from octrial.simulation import student_t

    rng = np.random.default_rng(17)
    dofs = [2 * (2.0 + n / 2) for n in (10, 40)] + [2 * (3.0 + n / 2) for n in (10, 40)]
    packed = student_t.rules(dofs)
    for _ in range(40):
        n = int(rng.choice([10, 40]))
        xbar, s = rng.normal(0.3, 1.0), float(np.exp(rng.normal(0.5, 0.4)))
        post = reference.update(0.0, 1.0, 2.0, 8.0, n=n, ybar=xbar, sd=s)
        m_n, k_n, a_n, b_n = nu.update(0.0, 1.0, 2.0, 8.0, n, xbar * n, (n - 1) * s**2)
        scale = math.sqrt(b_n / (a_n * k_n))
        assert student_t_pair((m_n - 0.1) / scale, 2 * a_n)[0] == pytest.approx(
            reference.benefit_one_arm(post, 0.1), abs=1e-12)
        other = reference.update(0.5, 2.0, 3.0, 6.0, n=n, ybar=xbar - 0.4, sd=s * 1.3)
        rx, ry = (0 if n == 10 else 1), (2 if n == 10 else 3)
        value = student_t.prob_difference_exceeds(
            post.mean, post.t_scale, post.df, rx, other.mean, other.t_scale, other.df, ry,
            0.2, *packed)
        assert value == pytest.approx(reference.benefit_two_arms(post, other, 0.2), abs=1e-11)
    for state in STATES:
        (m0, k0, a0, b0), n, big_n, gamma, better, xbar, s = state
        inputs, _ = predictive_inputs(state)
        sign = 1.0 if better == "higher" else -1.0
        post = reference.update(sign * m0, k0, a0, b0, n=n, ybar=sign * xbar, sd=s)
        expected = reference.predictive_one_arm(post, big_n - n, 0.0,
                                                gamma - DECISION_TOLERANCE)
        assert nu.predictive(*inputs) == pytest.approx(expected, abs=1e-7), state


def test_quantile_table_against_quadrature() -> None:
    # Source: the gamma quantile of cos(t) T_x - sin(t) T_y by scipy.optimize.brentq on
    # scipy.integrate.quad of f_y(y) F_x((w + sin(t) y) / cos(t)) (scipy.stats.t), which
    # shares nothing with the Behrens-Fisher rule behind the table.
    nu_x, nu_y, gamma = 9.0, 25.0, 0.975 - DECISION_TOLERANCE
    table = nu.quantile_table(nu_x, nu_y, gamma)
    theta_grid = np.linspace(0, math.pi / 2, table.size)
    for theta in (0.0, 0.013, 0.4, 0.7854, 1.2, 1.55, math.pi / 2):
        c, s = math.cos(theta), math.sin(theta)

        def cdf(w: float, c: float = c, s: float = s) -> float:
            if s == 0:
                return stats.t.cdf(w / c, nu_x)
            if c < 1e-12:
                return stats.t.sf(-w / s, nu_y)
            return integrate.quad(lambda y: stats.t.pdf(y, nu_y)
                                  * stats.t.cdf((w + s * y) / c, nu_x),
                                  -np.inf, np.inf, epsabs=1e-14, epsrel=1e-13)[0]
        expected = optimize.brentq(lambda w: cdf(w) - gamma, -20, 20, xtol=1e-13)
        assert np.interp(theta, theta_grid, table) == pytest.approx(expected, abs=1e-8)


TWO_ARM_STATES = [
    # (better, allocation, looks n (total), data per arm (mean, sd) at look 1, gamma)
    ("higher", 1, [40, 80], ((1.2, 2.1), (0.6, 1.8)), 0.975),
    ("lower", 1, [40, 80], ((0.1, 1.9), (0.9, 2.4)), 0.95),
    ("higher", 2, [30, 33], ((1.6, 2.0), (0.4, 2.2)), 0.975),  # 2 and 1 subjects to come
]


@pytest.mark.parametrize("state", TWO_ARM_STATES)
def test_two_arm_predictive_against_the_reference_of_octrial_decide(state) -> None:
    # Source: octrial/endpoints/unknown_sd.py predictive_two_arms, the scipy Monte Carlo
    # of `octrial decide` (checked against brute-force simulation of future subjects in
    # tests/test_unknown_sd.py), 400,000 draws; the kernel's quasi-Monte Carlo rule within
    # 4 of its standard errors plus 3e-3, and within 3e-3 of the same rule with 16 times
    # the points.
    from octrial.endpoints import unknown_sd as reference

    better, allocation, looks, data, gamma = state
    design = build(TWO_ARM, endpoint__better=better, arms__treatment__allocation=allocation,
                   looks={"n": looks, "efficacy": [0.999, gamma], "futility_predictive": 0.1})
    constants, points, table = nu.two_arm_predictive_rules(design)
    sign = 1.0 if better == "higher" else -1.0
    order = (0, 1) if sign > 0 else (1, 0)
    posts, benefit_posts, means, bs = [], [], [], []
    for j, arm in enumerate(("treatment", "control")):
        prior = TWO_ARM["arms"][arm]["prior"]
        n = design.looks.per_arm[0][j]
        xbar, s = data[j]
        m_n, _, _, b_n = nu.update(prior["mean"], prior["mean_n"], prior["shape"],
                                   prior["scale"], n, xbar * n, (n - 1) * s**2)
        posts.append((m_n, b_n))
        benefit_posts.append(reference.update(sign * prior["mean"], prior["mean_n"],
                                              prior["shape"], prior["scale"], n=n,
                                              ybar=sign * xbar, sd=s))
    for j in order:
        means.append(posts[j][0])
        bs.append(posts[j][1])
    means, bs = np.array(means), np.array(bs)
    value = nu.two_arm_predictive(means, bs, 0.0, constants[0], points[0], table)
    fine = nu.two_arm_predictive(means, bs, 0.0, *(
        part[0] if part.ndim > 1 else part
        for part in nu.two_arm_predictive_rules(design, 16 * nu.PREDICTIVE_POINTS)))
    future = tuple(design.looks.per_arm[1][j] - design.looks.per_arm[0][j] for j in (0, 1))
    expected, se = reference.predictive_two_arms(*benefit_posts, future, 0.0,
                                                 gamma - DECISION_TOLERANCE, seed=5,
                                                 draws=400_000)
    assert 0.02 < expected < 0.98  # a state where the futility decision is not obvious
    assert abs(value - fine) <= 3e-3
    assert abs(value - expected) <= 4 * se + 3e-3, (value, expected, se)


def test_assurance_by_simulation_meets_a_target_standard_error() -> None:
    # Batches until sqrt(p (1 - p) / R) <= target (common practice); the batches are the
    # fixed-size run's, so the result equals a fixed run of as many studies, and it is
    # the first number of batches that meets the target (one batch fewer does not).
    from octrial.engines.monte_carlo import adjusted_se
    from octrial.simulation.prior_studies import simulate_under_design_prior

    design = build({**ONE_ARM, "arms": {"treatment": {
        "prior": nig(0.0, 1.0, 2.0, 8.0), "design_prior": nig(0.4, 4.0, 20.0, 80.0)}}})
    batch, target = 500, 0.012
    found = simulate_under_design_prior(design, 40_000, 3, batch_size=batch,
                                        target_se=target)
    r = found.replicates
    p = found.efficacy.sum() / r
    assert r % batch == 0 and r < 40_000
    assert math.sqrt(p * (1 - p) / r) <= target
    fixed = simulate_under_design_prior(design, r, 3, batch_size=batch)
    np.testing.assert_array_equal(found.efficacy, fixed.efficacy)
    fewer = simulate_under_design_prior(design, r - batch, 3, batch_size=batch)
    assert adjusted_se(fewer) > target
    capped = simulate_under_design_prior(design, 1500, 3, batch_size=batch, target_se=1e-4)
    assert capped.replicates == 1500


def test_boundary_table_agrees_with_octrial_decide_at_every_bound() -> None:
    # octrial decide computes B and PP with scipy (octrial/endpoints/unknown_sd.py, its
    # PP by quadrature); just inside and outside every bound of the table its decision
    # must change as the table says. Lower is better here, with posterior and predictive
    # futility, so both kinds of bound and the mirrored direction are exercised.
    from octrial.interim.decision import decide
    from octrial.interim.rule import CONTINUE, FAILURE, STOP_EFFICACY, STOP_FUTILITY, SUCCESS
    from octrial.rules.unknown_sd import boundary_table

    design = build(ONE_ARM, endpoint__better="lower", hypothesis__benchmark=1.0,
                   looks={"n": [20, 40, 60], "efficacy": [0.999, 0.99, 0.975],
                          "futility": [0.05, 0.1], "futility_predictive": [0.1, 0.2]})
    table = boundary_table(design, (1.5, 2.0, 3.0))
    assert len(table) == 9
    last = table["look"].max()
    for row in table.itertuples():
        step = 1e-4 * row.sample_sd / math.sqrt(row.n)
        final = row.look == last

        def decision(mean: float, row=row) -> str:
            found = decide(design, int(row.look), [f"treatment={mean!r},{row.sample_sd},"
                                                   f"{row.n}"])
            return found.assessment.decision

        stop, fail = (SUCCESS, FAILURE) if final else (STOP_EFFICACY, STOP_FUTILITY)
        # lower is better: efficacy below its bound, futility above its bound
        assert row.efficacy_rule.startswith("mean <="), row.efficacy_rule
        assert decision(row.efficacy_bound - step) == stop
        assert decision(row.efficacy_bound + step) == (fail if final else CONTINUE)
        assert row.futility_rule.startswith("mean >"), row.futility_rule
        assert decision(row.futility_bound + step) == fail
        if not final:
            assert decision(row.futility_bound - step) == CONTINUE


def test_boundaries_command_with_an_unknown_sd(tmp_path) -> None:
    import pandas as pd
    from click.testing import CliRunner

    from octrial.cli import main
    from tests.helpers import DESIGNS

    demo = str(DESIGNS / "single-arm-mean-change.toml")
    runner = CliRunner()
    result = runner.invoke(main, ["boundaries", demo, "--out", str(tmp_path), "--sd", "8,10"])
    assert result.exit_code == 0, result.output
    assert "sample sd 8: success if mean >= " in result.output
    table = pd.read_csv(tmp_path / "boundaries.csv")
    assert sorted(set(table["sample_sd"])) == [8.0, 10.0]
    # the run writes the table at the default sds (true_sd x 0.5 ... 2)
    result = runner.invoke(main, ["run", demo, "--out", str(tmp_path / "run"), "--quiet"])
    assert result.exit_code == 0, result.output
    assert len(pd.read_csv(tmp_path / "run" / "boundaries.csv")) == 3 * 6
    bad = [[demo, "--sd", "8,x"], [demo, "--sd", "-1"],
           [str(DESIGNS / "two-arm-continuous-score.toml"), "--sd", "3"]]
    for arguments in bad:
        result = runner.invoke(main, ["boundaries", *arguments, "--out", str(tmp_path / "x")])
        assert result.exit_code == 2 and "--sd" in result.output, result.output
    two_arm = build(TWO_ARM)
    with pytest.raises(Exception, match="use octrial decide"):
        two_arm.family.boundary_table(two_arm)
    assert not (tmp_path / "x").exists()
