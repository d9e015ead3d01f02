"""Bayesian operating characteristics under the design prior against sources outside octrial.

* The law of total probability: Pr(success) = Pr(null and success) + Pr(alternative and
  success), to numerical precision (identity).
* Bayes' theorem by the tower property: when the analysis prior equals the design prior,
  E[Pr(null | data) | success] = Pr(null | success) (identity; checked exactly by
  enumeration for a binary design, by scipy quadrature for a known-sd normal design, and
  within Monte Carlo error by a plain numpy/scipy simulation for an unknown sd).
* Closed form for a single-look known-sd normal design with a normal design prior: the
  true mean and the sample mean are bivariate normal and success is "sample mean >= c",
  so every joint probability is a bivariate normal probability
  (scipy.stats.multivariate_normal).
* An independent quadrature (scipy.integrate.quad) of the binary OC curve, computed here by
  brute-force sums over binomial outcome paths, against a beta design prior.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import integrate, stats

from octrial.bayesian_oc import METRICS, bayesian_record
from octrial.design_prior import assurance_record
from octrial.evaluation import compute
from tests.check_designs import NORMAL_ONE, UNKNOWN_ONE
from tests.helpers import ONE_ARM, TWO_ARM, build

BETA_37 = {"distribution": "beta", "a": 3, "b": 7}
MIXTURE = {"distribution": "beta-mixture", "components": [
    {"weight": 0.3, "a": 0.8, "b": 4.2}, {"weight": 0.7, "a": 6, "b": 9}]}


def record_of(design, relevant_effect=None):
    return bayesian_record(design, assurance_record(design), relevant_effect)


# -- binary: brute force over outcome paths --------------------------------------------------
def path_success(design, p: float) -> float:
    """Pr(success | p) of a one-arm binary design by enumerating the counts at every look
    (binomial increments, scipy only) with the posterior Pr(rate better than benchmark) from
    scipy.stats.beta; efficacy first, then futility, as PRODUCT.md states the rule."""
    prior = design.arms[0].prior
    a, b = prior.a[0], prior.b[0]
    b0 = design.hypothesis.benchmark
    looks = design.looks
    sizes = np.diff([0, *looks.n])
    total = 0.0
    for path in itertools.product(*(range(m + 1) for m in sizes)):
        prob = math.prod(stats.binom.pmf(x, m, p) for x, m in zip(path, sizes, strict=True))
        x = 0
        for k, (inc, n) in enumerate(zip(path, looks.n, strict=True)):
            x += inc
            post = stats.beta(a + x, b + n - x)
            benefit = post.sf(b0) if design.hypothesis.better == "higher" else post.cdf(b0)
            if benefit >= looks.efficacy[k]:
                total += prob
                break
            fut = looks.futility[k] if k < looks.count - 1 else None
            if fut is not None and benefit < fut:
                break
    return total


SMALL = dict(looks__n=[6, 12], looks__efficacy=[0.99, 0.9], looks__futility=0.1,
             hypothesis__benchmark=0.3)


@pytest.mark.parametrize("better", ["higher", "lower"])
def test_binary_against_quad_of_brute_force_oc_curve(better) -> None:
    design = build(ONE_ARM, **SMALL, endpoint__better=better,
                   arms__treatment__design_prior=BETA_37)
    rec = record_of(design)
    assert rec["method"] == "exact and quadrature"
    dens = stats.beta(3, 7).pdf
    b0 = 0.3
    null = (0, b0) if better == "higher" else (b0, 1)
    alt = (b0, 1) if better == "higher" else (0, b0)

    def piece(lo, hi):
        return integrate.quad(lambda p: path_success(design, p) * dens(p), lo, hi,
                              epsabs=1e-13, epsrel=1e-12, limit=200)[0]

    ns, as_ = piece(*null), piece(*alt)
    q = stats.beta(3, 7).cdf(b0) if better == "higher" else stats.beta(3, 7).sf(b0)
    assert rec["prob_null_and_success"] == pytest.approx(ns, abs=1e-10)
    assert rec["prob_alternative_and_success"] == pytest.approx(as_, abs=1e-10)
    assert rec["prior_prob_null"] == pytest.approx(q, abs=1e-12)
    assert rec["average_type1_error"] == pytest.approx(ns / q, abs=1e-9)
    assert rec["bayesian_power"] == pytest.approx(as_ / (1 - q), abs=1e-9)
    assert rec["prob_null_given_success"] == pytest.approx(ns / (ns + as_), abs=1e-9)
    assert rec["prob_alternative_and_failure"] == pytest.approx(1 - q - as_, abs=1e-10)
    assert rec["prob_alternative_given_failure"] == pytest.approx(
        (1 - q - as_) / (1 - ns - as_), abs=1e-9)
    # every metric carries its numerical error, small here
    for name in METRICS:
        assert 0 <= rec[f"{name}_error"] < 1e-8


@pytest.mark.parametrize("prior", [BETA_37, MIXTURE], ids=["beta", "mixture"])
def test_law_of_total_probability_binary(prior) -> None:
    # Identity: Pr(S) = Pr(N and S) + Pr(A and S); Pr(S) is the exact predictive programme
    for design in (build(ONE_ARM, arms__treatment__design_prior=prior,
                         looks__futility_predictive=0.1),
                   build(TWO_ARM, arms__treatment__design_prior=prior,
                         arms__control__design_prior={"distribution": "beta", "a": 2.5,
                                                      "b": 6.5})):
        rec = record_of(design)
        total = rec["prob_null_and_success"] + rec["prob_alternative_and_success"]
        assert rec["prob_success"] == pytest.approx(total, abs=1e-9)
        assert rec["prior_prob_null"] + rec["prior_prob_alternative"] == pytest.approx(
            1, abs=1e-10)
        assert "warning" not in rec


def test_two_arm_prior_mass_of_the_null_against_quad() -> None:
    # Pr(p_T - p_C <= d) = int f_C(c) F_T(c + d) dc (scipy quad), superiority margin d
    design = build(TWO_ARM, hypothesis__margin=0.05, arms__treatment__design_prior=BETA_37,
                   arms__control__design_prior={"distribution": "beta", "a": 2.5, "b": 6.5})
    rec = record_of(design)
    t, c = stats.beta(3, 7), stats.beta(2.5, 6.5)
    q = integrate.quad(lambda u: c.pdf(u) * t.cdf(min(u + 0.05, 1.0)), 0, 1,
                       points=[0.95], epsabs=1e-13)[0]
    assert rec["prior_prob_null"] == pytest.approx(q, abs=1e-10)


def test_binary_identity_posterior_null_given_success() -> None:
    # Identity (tower property): analysis prior = design prior = Beta(2, 5), one look:
    # Pr(null | success) = sum_{x in S} m(x) Pr(p <= p0 | x) / sum_{x in S} m(x), with m
    # the beta-binomial marginal (scipy.stats.betabinom)
    prior = {"distribution": "beta", "a": 2, "b": 5}
    n, p0, gamma = 25, 0.2, 0.9
    design = build(ONE_ARM, looks__n=[n], looks__efficacy=[gamma], looks__futility=None,
                   hypothesis__benchmark=p0, arms__treatment__prior=prior,
                   arms__treatment__design_prior=prior)
    rec = record_of(design)
    x = np.arange(n + 1)
    m = stats.betabinom.pmf(x, n, 2, 5)
    post_null = stats.beta.cdf(p0, 2 + x, 5 + n - x)
    success = 1 - post_null >= gamma
    expected = (m[success] @ post_null[success]) / m[success].sum()
    assert rec["prob_null_given_success"] == pytest.approx(expected, abs=1e-10)
    failure = ~success
    assert rec["prob_alternative_given_failure"] == pytest.approx(
        (m[failure] @ (1 - post_null[failure])) / m[failure].sum(), abs=1e-10)


# -- normal, known sd: closed forms ----------------------------------------------------------
def normal_single_look(m_a, s_a, m_d, s_d, n=40, sd=2.0, b=0.0, gamma=0.975):
    design = build(NORMAL_ONE, looks__n=[n], looks__efficacy=[gamma],
                   endpoint__sd=sd, hypothesis__benchmark=b,
                   arms__treatment__prior={"distribution": "normal", "mean": m_a, "sd": s_a},
                   arms__treatment__design_prior={"distribution": "normal", "mean": m_d,
                                                  "sd": s_d})
    # success iff posterior mean >= b + z_gamma / sqrt(P), P the posterior precision
    precision = 1 / s_a**2 + n / sd**2
    mean_bound = b + stats.norm.ppf(gamma) / math.sqrt(precision)
    c = (mean_bound * precision - m_a / s_a**2) * sd**2 / n
    return design, c


@pytest.mark.parametrize("design_prior", [(0.4, 0.5), (0.1, 0.3)])
def test_normal_single_look_against_bivariate_normal_closed_form(design_prior) -> None:
    m_d, s_d = design_prior
    sd, n, b = 2.0, 40, 0.0
    design, c = normal_single_look(0.2, 0.5, m_d, s_d)
    rec = record_of(design)
    assert rec["method"] == "quadrature"
    # (theta, xbar) ~ N((m, m), [[s^2, s^2], [s^2, s^2 + sd^2 / n]])
    cov = [[s_d**2, s_d**2], [s_d**2, s_d**2 + sd**2 / n]]
    joint = stats.multivariate_normal([m_d, m_d], cov)
    q = stats.norm.cdf(b, m_d, s_d)
    success = stats.norm.sf(c, m_d, math.sqrt(cov[1][1]))
    null_and_fail = joint.cdf([b, c])
    null_and_success = q - null_and_fail
    alt_and_fail = stats.norm.cdf(c, m_d, math.sqrt(cov[1][1])) - null_and_fail
    tol = 1e-7  # scipy's bivariate normal CDF (Genz) is accurate to about 1e-8
    assert rec["prior_prob_null"] == pytest.approx(q, abs=1e-12)
    assert rec["prob_success"] == pytest.approx(success, abs=1e-9)
    assert rec["prob_null_and_success"] == pytest.approx(null_and_success, abs=tol)
    assert rec["prob_alternative_and_failure"] == pytest.approx(alt_and_fail, abs=tol)
    assert rec["average_type1_error"] == pytest.approx(null_and_success / q, abs=tol / q)
    assert rec["bayesian_power"] == pytest.approx((success - null_and_success) / (1 - q),
                                                  abs=tol)
    assert rec["prob_null_given_success"] == pytest.approx(null_and_success / success,
                                                           abs=tol / success)
    assert rec["prob_alternative_given_failure"] == pytest.approx(
        alt_and_fail / (1 - success), abs=tol)
    total = rec["prob_null_and_success"] + rec["prob_alternative_and_success"]
    assert rec["prob_success"] == pytest.approx(total, abs=1e-9)


def test_normal_relevant_region_closed_form() -> None:
    # Bayesian power over effect >= delta: Pr(theta >= delta, xbar >= c) / Pr(theta >= delta)
    sd, n, delta, m_d, s_d = 2.0, 40, 0.3, 0.4, 0.5
    design, c = normal_single_look(0.2, 0.5, m_d, s_d)
    rec = record_of(design, relevant_effect=delta)
    cov = [[s_d**2, s_d**2], [s_d**2, s_d**2 + sd**2 / n]]
    joint = stats.multivariate_normal([m_d, m_d], cov)
    v = math.sqrt(cov[1][1])
    both = 1 - stats.norm.cdf(delta, m_d, s_d) - stats.norm.cdf(c, m_d, v) + joint.cdf([delta, c])
    assert rec["bayesian_power"] == pytest.approx(both / stats.norm.sf(delta, m_d, s_d),
                                                  abs=1e-7)
    assert rec["relevant_effect"] == delta
    # the same from the design file's hypothesis.relevant_effect
    keyed = build(NORMAL_ONE, looks__n=[n], looks__efficacy=[0.975], endpoint__sd=sd,
                  hypothesis__relevant_effect=delta,
                  arms__treatment__prior={"distribution": "normal", "mean": 0.2, "sd": 0.5},
                  arms__treatment__design_prior={"distribution": "normal", "mean": m_d,
                                                 "sd": s_d})
    assert record_of(keyed)["bayesian_power"] == rec["bayesian_power"]


def test_relevant_effect_key_rejects_a_negative_value() -> None:
    from octrial.errors import InputError

    with pytest.raises(InputError) as caught:
        build(ONE_ARM, hypothesis__relevant_effect=-0.1)
    assert "hypothesis.relevant_effect" in str(caught.value)


def test_normal_identity_posterior_null_given_success() -> None:
    # Identity: analysis prior = design prior = N(0.2, 0.5^2): E[Pr(theta <= 0 | xbar) |
    # xbar >= c] by scipy quad over the marginal N(0.2, 0.25 + sd^2 / n) of xbar
    sd, n, m, s = 2.0, 40, 0.2, 0.5
    design, c = normal_single_look(m, s, m, s)
    rec = record_of(design)
    precision = 1 / s**2 + n / sd**2
    marginal = stats.norm(m, math.sqrt(s**2 + sd**2 / n))

    def post_null(x: float) -> float:
        mean = (m / s**2 + n * x / sd**2) / precision
        return stats.norm.cdf(0.0, mean, 1 / math.sqrt(precision))

    num = integrate.quad(lambda x: marginal.pdf(x) * post_null(x), c, np.inf,
                         epsabs=1e-14)[0]
    assert rec["prob_null_given_success"] == pytest.approx(num / marginal.sf(c), rel=1e-7)


def test_two_arm_effect_prior_total_probability() -> None:
    from tests.check_designs import NORMAL_TWO
    design = build(NORMAL_TWO, hypothesis__design_prior={"distribution": "normal-mixture",
                                                         "components": [
        {"weight": 0.6, "mean": -3.0, "sd": 2.0}, {"weight": 0.4, "mean": 0.0, "sd": 1.0}]})
    rec = record_of(design)
    # lower is better: the null is difference >= 0; its prior mass in closed form
    q = 0.6 * stats.norm.sf(0, -3, 2) + 0.4 * stats.norm.sf(0, 0, 1)
    assert rec["prior_prob_null"] == pytest.approx(q, abs=1e-12)
    total = rec["prob_null_and_success"] + rec["prob_alternative_and_success"]
    assert rec["prob_success"] == pytest.approx(total, abs=1e-9)


# -- simulation ------------------------------------------------------------------------------
def unknown_single_look(replicates: int = 40_000):
    nig = {"distribution": "normal-inverse-gamma", "mean": 10.5, "mean_n": 2.0,
           "shape": 4.0, "scale": 12.0}
    return build(UNKNOWN_ONE, looks__n=[15], looks__efficacy=[0.95],
                 arms__treatment__prior=nig, arms__treatment__design_prior=nig,
                 simulation__replicates=replicates, simulation__seed=11)


def test_simulation_identity_within_monte_carlo_error() -> None:
    # Identity E[Pr(null | data) | success] = Pr(null | success), analysis = design prior:
    # the left side from an independent numpy/scipy simulation (NIG draws, Student t
    # posterior), the right side octrial's simulation tallied by region; within 4 SE.
    design = unknown_single_look()
    rec = record_of(design)
    assert rec["method"] == "simulation"
    counts = rec["counts"]
    assert counts["null_successes"] + counts["alternative_successes"] == round(
        rec["prob_success"] * counts["studies"])
    total = rec["prob_null_and_success"] + rec["prob_alternative_and_success"]
    assert rec["prob_success"] == pytest.approx(total, abs=1e-12)
    rng = np.random.default_rng(2026)
    r, n, m0, k0, a0, b0, bench = 200_000, 15, 10.5, 2.0, 4.0, 12.0, 10.0
    var = b0 / rng.gamma(a0, size=r)
    mu = m0 + np.sqrt(var / k0) * rng.standard_normal(r)
    xbar = mu + np.sqrt(var / n) * rng.standard_normal(r)
    ss = var * rng.chisquare(n - 1, size=r)
    kn, an = k0 + n, a0 + n / 2
    mn = (k0 * m0 + n * xbar) / kn
    bn = b0 + 0.5 * ss + k0 * n * (xbar - m0) ** 2 / (2 * kn)
    post_null = stats.t.cdf(bench, 2 * an, mn, np.sqrt(bn / (an * kn)))
    won = 1 - post_null >= 0.95
    expected = post_null[won].mean()
    se_ref = post_null[won].std() / math.sqrt(won.sum())
    se = math.hypot(rec["prob_null_given_success_se"], se_ref)
    assert abs(rec["prob_null_given_success"] - expected) < 4 * se
    # and the plain simulation's own frequency of a true null among successes
    direct = (mu[won] <= bench).mean()
    assert abs(rec["prob_null_given_success"] - direct) < 4 * math.hypot(
        rec["prob_null_given_success_se"], math.sqrt(direct * (1 - direct) / won.sum()))


def test_run_json_carries_the_record(tmp_path) -> None:
    design = build(ONE_ARM, arms__treatment__design_prior=BETA_37)
    info = compute(design).info
    rec = info["bayesian_operating_characteristics"]
    for name in METRICS:
        assert name in rec and f"{name}_error" in rec
    assert rec["prob_success"] == info["assurance"]["probability"]
    assert compute(build(ONE_ARM)).info["bayesian_operating_characteristics"] is None


def test_report_section_shows_each_metric_with_its_error() -> None:
    from types import SimpleNamespace

    from octrial.reporting.tables import BAYESIAN_WORDS, bayesian_oc_table

    design = build(ONE_ARM, arms__treatment__design_prior=BETA_37)
    rec = compute(design).info["bayesian_operating_characteristics"]
    table = bayesian_oc_table(SimpleNamespace(record={
        "bayesian_operating_characteristics": rec}))
    assert [r.cells[1].value for r in table.rows] == [rec[k] for k, _, _ in BAYESIAN_WORDS]
    assert [r.cells[2].value for r in table.rows] == [rec[f"{k}_error"]
                                                      for k, _, _ in BAYESIAN_WORDS]
    assert bayesian_oc_table(SimpleNamespace(record={})) is None


# -- verify: claims about the whole design ---------------------------------------------------
def write_claims(path, rows: list[str], arms=("treatment",)) -> str:
    header = ",".join([*(f"true_{a}" for a in arms), "metric", "claimed", "replicates",
                       "se", "note"])
    path.write_text("\n".join([header, *rows]) + "\n")
    return str(path)


def test_verify_design_level_claims(tmp_path) -> None:
    # octrial's own numbers, written to 4 decimals, are consistent; a number moved by
    # 0.01 (far beyond rounding and numerical error) is flagged; Holm over all claims
    from octrial.review.claims import read_claims
    from octrial.review.verification import verify

    design = build(ONE_ARM, arms__treatment__design_prior=BETA_37)
    rec = record_of(design)
    rows = [f",{name},{rec[name]:.4f},,," for name in METRICS]
    rows.append(f",prob_null_given_success,{rec['prob_null_given_success'] + 0.01:.4f},,,")
    rows.append("0.2,prob_success,0.5,,,")
    claims = read_claims(write_claims(tmp_path / "c.csv", rows), design)
    found = verify(design, claims)
    table = found.table
    assert list(table["verdict"][: len(METRICS)]) == ["consistent"] * len(METRICS)
    assert list(table["verdict"][len(METRICS):]) == ["discrepant", "discrepant"]
    assert found.info["claims_total"] == len(METRICS) + 2
    assert table["line"].is_monotonic_increasing


def test_verify_simulated_design_level_claim_within_its_se(tmp_path) -> None:
    from octrial.review.claims import read_claims
    from octrial.review.verification import verify

    design = unknown_single_look(20_000)
    rec = record_of(design)
    value, se = rec["prob_null_given_success"], rec["prob_null_given_success_se"]
    rows = [f",prob_null_given_success,{value:.5f},20000,{se:.6f},",
            f",prob_null_given_success,{value + 12 * se:.5f},20000,{se:.6f},"]
    claims = read_claims(write_claims(tmp_path / "c.csv", rows), design)
    found = verify(design, claims, replicates=40_000, seed=3)
    assert found.table["recomputed_se"].gt(0).all()
    assert list(found.table["verdict"]) == ["consistent", "discrepant"]


@pytest.mark.parametrize("design_prior, row, words", [
    (None, ",prob_null_given_success,0.01,,,", "design prior"),
    (BETA_37, "0.2,average_type1_error,0.01,,,", "empty true values"),
])
def test_bad_design_level_claims(tmp_path, design_prior, row, words) -> None:
    from octrial.errors import InputError
    from octrial.review.claims import read_claims

    design = build(ONE_ARM, **({} if design_prior is None else
                               {"arms__treatment__design_prior": design_prior}))
    with pytest.raises(InputError) as caught:
        read_claims(write_claims(tmp_path / "c.csv", [row]), design)
    assert words in str(caught.value)


# -- check: sensitivity to the design prior --------------------------------------------------
@pytest.mark.parametrize("better", ["higher", "lower"])
def test_design_prior_sensitivity_moves_the_moments_as_documented(better) -> None:
    # the variants' moments against scipy.stats.beta mean and sd; "as stated" is the run's
    from octrial.checks.design_prior_sensitivity import run_design_prior_sensitivity

    design = build(ONE_ARM, endpoint__better=better, arms__treatment__design_prior=BETA_37)
    entry = run_design_prior_sensitivity(design, seed=1)
    rows = {r["variant"]: r for r in entry["rows"]}
    stated = record_of(design)
    for name in METRICS:
        assert rows["as stated"][name] == stated[name]
    m, s = stats.beta(3, 7).mean(), stats.beta(3, 7).std()
    toward = 1 if better == "higher" else -1
    for name, mean, sd in (("sceptical", m - toward * s, s), ("optimistic", m + toward * s, s),
                           ("vaguer", m, 2 * s)):
        a, b = (float(v) for v in rows[name]["design_prior"].removeprefix("Beta(")
                .rstrip(")").split(","))
        # describe() rounds to 6 significant digits
        assert stats.beta(a, b).mean() == pytest.approx(mean, rel=1e-5)
        assert stats.beta(a, b).std() == pytest.approx(sd, rel=1e-4)
    # a design prior moved toward the null lowers the assurance of a monotone rule
    assert rows["sceptical"]["prob_success"] < rows["as stated"]["prob_success"] < rows[
        "optimistic"]["prob_success"]


def test_design_prior_sensitivity_not_applicable_without_design_prior() -> None:
    from octrial.checks.design_prior_sensitivity import run_design_prior_sensitivity

    assert "not_applicable" in run_design_prior_sensitivity(build(ONE_ARM))


def test_report_table_of_the_design_prior_sensitivity() -> None:
    from types import SimpleNamespace

    from octrial.checks.design_prior_sensitivity import run_design_prior_sensitivity
    from octrial.reporting.tables import BAYESIAN_WORDS, design_prior_sensitivity_table

    design = build(ONE_ARM, arms__treatment__design_prior=BETA_37)
    entry = run_design_prior_sensitivity(design)
    table = design_prior_sensitivity_table(SimpleNamespace(checks={
        "design_prior_sensitivity": entry}))
    assert [r.cells[0].text for r in table.rows] == [r["variant"] for r in entry["rows"]]
    for row, source in zip(table.rows, entry["rows"], strict=True):
        assert [c.value for c in row.cells[2:]] == [source[k] for k, _, _ in BAYESIAN_WORDS]
    assert design_prior_sensitivity_table(SimpleNamespace(checks=None)) is None


def test_simulated_record_is_the_same_for_one_or_two_workers(tmp_path) -> None:
    # reproducibility (one seed in, the same numbers out whatever --jobs): 3 batches
    from octrial.bayesian_oc import simulated
    from octrial.execution import Execution

    design = unknown_single_look()
    one = simulated(design, 120_000, 5)
    two = simulated(design, 120_000, 5, execution=Execution(jobs=2,
                                                            checkpoints=tmp_path / "p"))
    assert one == two
    assert one["counts"]["studies"] == 120_000


def test_undefined_conditional_probability_is_null_in_strict_json() -> None:
    # a rule that never succeeds (30 of 30 responses give Pr(rate > 0.999) = 1 - 0.999^31
    # < 0.99): Pr(null | success) is undefined (0 / 0)
    import json

    design = build(ONE_ARM, arms__treatment__design_prior=BETA_37,
                   hypothesis__benchmark=0.999)
    rec = record_of(design)
    assert rec["prob_success"] == pytest.approx(0, abs=1e-15)
    assert rec["prob_null_given_success"] is None
    json.dumps(rec, allow_nan=False)
