"""Interim decisions for count and normal endpoints: equal to the boundary tables at every
lattice point (counts) and at and on either side of every bound (normal, known sd);
posterior and predictive numbers against scipy closed forms and quadrature."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, special, stats

from octrial.design.load import load_design
from octrial.endpoints import unknown_sd
from octrial.interim import decide, parse_data, rule_at
from octrial.interim.rule import CONTINUE, FAILURE, STOP_EFFICACY, STOP_FUTILITY, SUCCESS
from octrial.rules.boundaries import boundary_table
from octrial.rules.lattice import build_rule
from octrial.rules.normal import build_normal_rule
from tests.helpers import DESIGNS, build
from tests.test_decide import table_decision

EVENT_RATE = DESIGNS / "single-arm-event-rate.toml"
SCORE = DESIGNS / "two-arm-continuous-score.toml"

COUNT_TWO_ARM = {
    "schema": 1,
    "name": "count-two-arm",
    "endpoint": {"type": "count", "exposure": 0.5, "better": "lower"},
    "hypothesis": {"comparison": "ratio", "kind": "superiority", "margin": 0.2},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 2, "rate": 2}},
             "control": {"prior": {"distribution": "gamma", "shape": 1.5, "rate": 1}}},
    "looks": {"n": [30, 60], "efficacy": [0.995, 0.95], "futility": 0.2,
              "futility_predictive": 0.1},
    "scenarios": {"control": [1.5], "ratio": [1.0, 0.6]},
}
NORMAL_ONE_ARM = {
    "schema": 1,
    "name": "normal-one-arm",
    "endpoint": {"type": "normal", "sd": 3.0, "better": "lower"},
    "hypothesis": {"benchmark": 10.0},
    "arms": {"treatment": {"prior": {"distribution": "normal-mixture", "components": [
        {"weight": 0.7, "mean": 10.0, "sd": 1.0}, {"weight": 0.3, "mean": 8.0, "sd": 4.0}]}}},
    "looks": {"n": [20, 40, 60], "efficacy": [0.999, 0.99, 0.975], "futility": 0.1,
              "futility_predictive": 0.05},
    "scenarios": {"treatment": [10.0, 9.0]},
}
UNKNOWN_ONE_ARM = {
    "schema": 1,
    "name": "unknown-sd-one-arm",
    "endpoint": {"type": "normal", "sd": "unknown", "true_sd": 2.0, "better": "higher"},
    "hypothesis": {"benchmark": 0.0},
    "arms": {"treatment": {"prior": {"distribution": "normal-inverse-gamma", "mean": 0.0,
                                     "mean_n": 1.0, "shape": 2.0, "scale": 4.0}}},
    "looks": {"n": [20, 45], "efficacy": [0.999, 0.975], "futility_predictive": 0.1},
    "scenarios": {"treatment": [0.0, 1.0]},
}
NIG = {"distribution": "normal-inverse-gamma", "mean": 40.0, "mean_n": 2.0, "shape": 3.0,
       "scale": 300.0}
UNKNOWN_TWO_ARM = {
    "schema": 1,
    "name": "unknown-sd-two-arm",
    "endpoint": {"type": "normal", "sd": "unknown", "true_sd": 12.0, "better": "higher"},
    "hypothesis": {"comparison": "difference", "kind": "superiority", "margin": 0.0},
    "arms": {"treatment": {"prior": NIG}, "control": {"prior": NIG}},
    "looks": {"n": [60, 120], "efficacy": [0.999, 0.975], "futility_predictive": 0.2},
    "scenarios": {"control": [40.0], "effect": [0.0, 5.0]},
}


def decision_of(design, look: int, data: list[str]):
    """The rule's verdict through the path ``octrial decide`` takes (frame, checks,
    assessment), without the summaries."""
    return rule_at(design, look, parse_data(design, data))[1]


def object_table(design):
    table = boundary_table(design, build_rule(design)).astype(object)
    return table.where(table.notna(), None)


# -- counts ---------------------------------------------------------------------------

def test_count_demo_decision_equals_the_table_at_every_lattice_point() -> None:
    design = load_design(EVENT_RATE)
    rule = build_rule(design)
    table = object_table(design)
    e = design.endpoint.exposure
    checked = 0
    for k, look in enumerate(rule.looks):
        row = table[table["look"] == k + 1].to_dict("records")[0]
        last = k == len(rule.looks) - 1
        # every lattice point, and a few counts beyond the truncated lattice
        for x in [*range(look.shape[0]), look.shape[0] + 5, 3 * look.shape[0]]:
            got = decision_of(design, k + 1, [f"treatment={x}/{look.n[0] * e:g}"])
            assert got.decision == table_decision(row, x, False, last), (k + 1, x)
            checked += 1
    assert checked == sum(t.shape[0] + 2 for t in rule.looks)


def test_two_arm_count_decision_equals_the_table_at_every_lattice_point() -> None:
    design = build(COUNT_TWO_ARM)
    rule = build_rule(design)
    table = object_table(design)
    e = design.endpoint.exposure
    for k, look in enumerate(rule.looks):
        rows = table[table["look"] == k + 1].to_dict("records")
        last = k == len(rule.looks) - 1
        n_t, n_c = look.n
        for x_c in range(look.shape[1]):
            for x_t in range(look.shape[0]):
                got = decision_of(design, k + 1, [f"treatment={x_t}/{n_t * e:g}",
                                                  f"control={x_c}/{n_c * e:g}"])
                assert got.decision == table_decision(rows[x_c], x_t, False, last), (
                    k + 1, x_t, x_c)


def test_count_posterior_numbers_against_scipy() -> None:
    # Gamma(1.5, 1) prior, benchmark 1.5 (lower is better), exposure 1, N = 90.
    design = load_design(EVENT_RATE)
    final = int(boundary_table(design, build_rule(design)).iloc[-1]["efficacy_bound"])
    for x, t, look in [(30, 30, 1), (70, 52.5, 2), (40, 60, 2), (0, 30, 1), (120, 90, 3),
                       (400, 30, 1)]:
        result = decide(design, look, [f"treatment={x}/{t}"], level=0.9)
        post = stats.gamma(1.5 + x, scale=1 / (1 + t))
        assert result.assessment.benefit == pytest.approx(post.cdf(1.5), rel=1e-12,
                                                          abs=1e-300)
        (summary,) = result.posterior
        assert summary.mean == pytest.approx(post.mean(), rel=1e-13)
        assert (summary.lower, summary.upper) == pytest.approx(post.ppf([0.05, 0.95]),
                                                               rel=1e-10)
        if look == 3:
            assert result.assessment.predictive is None
            continue
        # future events in exposure 90 - t: negative binomial with size 1.5 + x and
        # success probability (1 + t) / (1 + 90); success iff the total is <= the bound
        future = stats.nbinom(1.5 + x, (1 + t) / (1 + 90.0))
        assert result.assessment.predictive == pytest.approx(future.cdf(final - x),
                                                             rel=1e-10, abs=1e-14)


def test_fractional_exposure_is_the_rule_at_that_exposure() -> None:
    # Exposure 52.5 is not a whole number of subjects: the rule at that exposure is the
    # boundary table of a design whose second look has 52.5 subject-years (written in
    # half-years: n = 105 subjects of exposure 0.5, the final look 180).
    design = load_design(EVENT_RATE)
    result = decide(design, 2, ["treatment=60/52.5"])
    halves = build({**_toml(design), "endpoint": {"type": "count", "exposure": 0.5,
                                                  "better": "lower"},
                    "looks": {"n": [60, 105, 180], "efficacy": ["none", 0.995, 0.975],
                              "futility": 0.05, "futility_predictive": 0.05}})
    row = boundary_table(halves, build_rule(halves)).iloc[1]
    assert result.assessment.boundaries == {"efficacy": f"{row['efficacy_rule']} events",
                                            "futility": f"{row['futility_rule']} events"}
    assert "exposure (52.5) differs from the one planned at look 2 (60)" in result.warnings[0]
    assert "exposure 37.5 still to come" in result.warnings[0]
    record = result.as_dict()
    assert record["remaining_exposure"] == {"treatment": 37.5}
    assert record["remaining_n"] == {"treatment": 37.5}


def _toml(design) -> dict:
    import tomllib
    return tomllib.loads(design.source.text)


def test_two_arm_count_numbers_against_quadrature() -> None:
    design = build(COUNT_TWO_ARM)     # ratio < 0.8 claimed; exposure 0.5 per subject
    xt, xc, nt, nc = 9, 22, 20, 20
    result = decide(design, 1, [f"treatment={xt}/{nt * 0.5:g}",
                                f"control={xc}/{nc * 0.5:g}"])
    t = stats.gamma(2 + xt, scale=1 / (2 + nt * 0.5))
    c = stats.gamma(1.5 + xc, scale=1 / (1 + nc * 0.5))

    def below(r: float) -> float:      # Pr(lambda_T / lambda_C < r) = int f_C(u) F_T(r u) du
        return integrate.quad(lambda u: c.pdf(u) * t.cdf(r * u), 0, np.inf, epsabs=1e-14,
                              epsrel=1e-12, limit=200)[0]

    assert result.assessment.benefit == pytest.approx(below(0.8), abs=1e-10)
    rate_t, rate_c, ratio = result.posterior
    assert (rate_t.lower, rate_t.upper) == pytest.approx(t.ppf([0.025, 0.975]), rel=1e-10)
    assert rate_c.mean == pytest.approx(c.mean(), rel=1e-13)
    # E[lambda_T / lambda_C] = E[lambda_T] E[1 / lambda_C] (independent posteriors)
    inverse = integrate.quad(lambda u: c.pdf(u) / u, 0, np.inf, epsrel=1e-12)[0]
    assert ratio.mean == pytest.approx(t.mean() * inverse, rel=1e-9)
    assert below(ratio.lower) == pytest.approx(0.025, abs=1e-9)
    assert below(ratio.upper) == pytest.approx(0.975, abs=1e-9)


def test_count_grid_prior_summaries_against_quadrature() -> None:
    # A normal prior on the log rate has no conjugate form: posterior summaries come from
    # the grid, checked against scipy quad of prior x Poisson likelihood.
    design = build({
        "schema": 1, "name": "log-normal-count",
        "endpoint": {"type": "count", "exposure": 1.0, "better": "lower"},
        "hypothesis": {"benchmark": 1.5},
        "arms": {"treatment": {"prior": {"distribution": "log-normal", "log_mean": 0.3,
                                         "log_sd": 0.8}}},
        "looks": {"n": [30, 60], "efficacy": [0.995, 0.975], "futility_predictive": 0.05},
        "scenarios": {"treatment": [1.0, 1.5]}})
    result = decide(design, 1, ["treatment=35/30"])

    def density(lam: float) -> float:
        return stats.lognorm.pdf(lam, 0.8, scale=math.exp(0.3)) * stats.poisson.pmf(35, 30 * lam)

    total = integrate.quad(density, 0, 20, points=[1.2], epsabs=0, epsrel=1e-12)[0]

    def cdf(r: float) -> float:
        return integrate.quad(density, 0, r, epsabs=0, epsrel=1e-12)[0] / total

    (summary,) = result.posterior
    mean = integrate.quad(lambda v: v * density(v), 0, 20, points=[1.2], epsrel=1e-12)[0]
    assert summary.mean == pytest.approx(mean / total, rel=1e-7)
    assert cdf(summary.lower) == pytest.approx(0.025, abs=1e-6)
    assert cdf(summary.upper) == pytest.approx(0.975, abs=1e-6)
    assert result.assessment.benefit == pytest.approx(cdf(1.5), abs=1e-7)


# -- normal, known sd ------------------------------------------------------------------

def expected_by_table(row, value: float, sign: int, last: bool) -> str:
    """The decision a committee reads off one normal boundaries.csv row (bounds on the
    estimate; efficacy checked first)."""
    e, f = row["efficacy_bound"], row["futility_bound"]
    if not math.isnan(e) and sign * value >= sign * e:
        return SUCCESS if last else STOP_EFFICACY
    if last:
        return FAILURE
    if not math.isnan(f) and sign * value < sign * f:
        return STOP_FUTILITY
    return CONTINUE


def either_side(bound: float) -> list[float]:
    step = 1e-9 * max(1.0, abs(bound))
    return [bound, bound - step, bound + step]


@pytest.mark.parametrize("case", ["continuous-score demo", "one arm, mixture, lower better"])
def test_normal_decision_equals_the_table_at_and_beside_every_bound(case: str) -> None:
    if case == "continuous-score demo":
        design = load_design(SCORE)
    else:
        design = build(NORMAL_ONE_ARM)
    table = build_normal_rule(design).boundary_table(design)
    sign = design.hypothesis.sign
    sd = design.endpoint.sd
    checked = 0
    for row in table.to_dict("records"):
        last = row["look"] == table["look"].max()
        bounds = [row["efficacy_bound"], row["futility_bound"]]
        for value in [v for b in bounds if not math.isnan(b) for v in either_side(b)]:
            if design.two_arm:
                # control mean 0: the difference in sample means is exactly `value`
                data = [f"treatment={value!r},{sd},{row['n_treatment']}",
                        f"control=0,{sd},{row['n_control']}"]
            else:
                data = [f"treatment={value!r},{sd},{row['n']}"]
            got = decision_of(design, row["look"], data).decision
            assert got == expected_by_table(row, value, sign, last), (row["look"], value)
            checked += 1
    assert checked >= 3 * len(table)


def test_normal_known_sd_numbers_against_scipy() -> None:
    # Demo: N(0, 6^2) prior on the difference, sd 12, 1:1, looks 120/240/360 in total.
    design = load_design(SCORE)
    table = build_normal_rule(design).boundary_table(design)
    mt, mc, n = 43.1, 40.2, 60
    result = decide(design, 1, [f"treatment={mt},11.5,{n}", f"control={mc},12.4,{n}"],
                    level=0.9)
    info = 1 / (144 * (2 / n))
    precision = 1 / 36 + info
    mean = info * (mt - mc) / precision
    post = stats.norm(mean, 1 / math.sqrt(precision))
    assert result.assessment.benefit == pytest.approx(post.sf(0.0), rel=1e-12)
    (summary,) = result.posterior
    assert summary.mean == pytest.approx(mean, rel=1e-12)
    assert (summary.lower, summary.upper) == pytest.approx(post.ppf([0.05, 0.95]), rel=1e-10)
    # PP: the final score S_K = I_K x (difference) must reach the final bound u; given
    # theta the score's increment is N(theta D, D); integrate over the posterior (quad).
    info_end = 1 / (144 * (2 / 180))
    u = table.iloc[-1]["efficacy_bound"] * info_end
    d = info_end - info
    score = info * (mt - mc)
    expected = integrate.quad(lambda th: post.pdf(th) * stats.norm.sf(u, score + th * d,
                                                                        math.sqrt(d)),
                              -np.inf, np.inf, epsabs=1e-14)[0]
    assert result.assessment.predictive == pytest.approx(expected, abs=1e-10)


def test_normal_predictive_at_the_futility_bound_is_the_tables() -> None:
    # The boundary table's predictive_at_futility_bound is the exact engine's own
    # computation (rules.normal.predictive at the bound).
    design = load_design(SCORE)
    table = build_normal_rule(design).boundary_table(design)
    for row in table.iloc[:-1].to_dict("records"):
        f = row["futility_bound"]
        result = decide(design, row["look"], [f"treatment={f!r},12,{row['n_treatment']}",
                                              f"control=0,12,{row['n_control']}"])
        assert result.assessment.predictive == pytest.approx(
            row["predictive_at_futility_bound"], abs=1e-9)
        assert result.assessment.predictive == pytest.approx(0.05, abs=1e-9)


def test_known_sd_far_from_observed_sd_warns() -> None:
    design = load_design(SCORE)
    result = decide(design, 1, ["treatment=43,30,60", "control=40,12.5,60"])
    (warning,) = result.warnings
    assert "treatment sample sd (30) is larger than the design's known sd (12)" in warning
    assert "too narrow" in warning


# -- normal, unknown sd ----------------------------------------------------------------

def test_unknown_sd_one_arm_against_student_t() -> None:
    design = build(UNKNOWN_ONE_ARM)
    n, ybar, s = 20, 1.1, 1.9
    result = decide(design, 1, [f"treatment={ybar},{s},{n}"], level=0.9)
    k, a = 1 + n, 2 + n / 2
    m = n * ybar / k
    b = 4 + (n - 1) * s**2 / 2 + n * ybar**2 / (2 * k)
    t = stats.t(2 * a, m, math.sqrt(b / (a * k)))
    assert result.assessment.benefit == pytest.approx(t.sf(0.0), rel=1e-12)
    mean, sd = result.posterior
    assert mean.mean == pytest.approx(m, rel=1e-13)
    assert (mean.lower, mean.upper) == pytest.approx(t.ppf([0.05, 0.95]), rel=1e-10)
    # sigma = sqrt(sigma^2), sigma^2 ~ InvGamma(a, b): quantiles and mean (quad)
    s2 = stats.invgamma(a, scale=b)
    assert (sd.lower, sd.upper) == pytest.approx(np.sqrt(s2.ppf([0.05, 0.95])), rel=1e-10)
    e_sigma = integrate.quad(lambda v: math.sqrt(v) * s2.pdf(v), 0, np.inf, epsrel=1e-12)[0]
    assert sd.mean == pytest.approx(e_sigma, rel=1e-9)
    post = unknown_sd.StudentPosterior(m, k, a, b)
    assert result.assessment.predictive == pytest.approx(
        unknown_sd.predictive_one_arm(post, 25, 0.0, 0.975 - 1e-12), abs=1e-14)
    # the decision follows the probabilities: efficacy needs B >= 0.999
    strong = decide(design, 1, ["treatment=2.5,1.9,20"])
    assert strong.assessment.benefit >= 0.999 and strong.decision == STOP_EFFICACY
    weak = decide(design, 1, ["treatment=-1.0,1.9,20"])
    assert weak.assessment.predictive < 0.1 and weak.decision == STOP_FUTILITY
    assert decide(design, 2, ["treatment=0.9,1.9,45"]).decision == SUCCESS
    assert decide(design, 2, ["treatment=0.5,1.9,45"]).decision == FAILURE


def test_unknown_sd_lower_better_mirrors_higher() -> None:
    higher = build(UNKNOWN_ONE_ARM, hypothesis__benchmark=0.3)
    lower = build(UNKNOWN_ONE_ARM, endpoint__better="lower", hypothesis__benchmark=-0.3)
    up = decide(higher, 1, ["treatment=0.9,1.5,20"])
    down = decide(lower, 1, ["treatment=-0.9,1.5,20"])
    assert down.assessment.benefit == pytest.approx(up.assessment.benefit, rel=1e-13)
    assert down.assessment.predictive == pytest.approx(up.assessment.predictive, rel=1e-12)


def test_unknown_sd_two_arms_against_quadrature() -> None:
    design = build(UNKNOWN_TWO_ARM)
    data = {"treatment": (44.0, 11.0, 30), "control": (40.5, 13.0, 30)}
    result = decide(design, 1, [f"{a}={m},{s},{n}" for a, (m, s, n) in data.items()])
    posts = {a: unknown_sd.update(40.0, 2.0, 3.0, 300.0, n=n, ybar=m, sd=s)
             for a, (m, s, n) in data.items()}
    t, c = posts["treatment"].distribution(), posts["control"].distribution()

    def above(d: float) -> float:
        return integrate.quad(lambda u: c.pdf(u) * t.sf(u + d), -np.inf, np.inf,
                              epsabs=1e-14, limit=400)[0]

    assert result.assessment.benefit == pytest.approx(above(0.0), abs=1e-10)
    *_, diff = result.posterior
    assert diff.mean == pytest.approx(posts["treatment"].mean - posts["control"].mean)
    assert above(diff.lower) == pytest.approx(0.975, abs=1e-9)
    assert above(diff.upper) == pytest.approx(0.025, abs=1e-9)
    se = result.assessment.predictive_se
    assert 0 < se < 0.003 and 0 < result.assessment.predictive < 1
    assert result.as_dict()["predictive_probability_se"] == se



# -- binary endpoints with logit-normal priors (grid posteriors) ----------------------

def _logit_normal_posterior(mean: float, sd: float, x: int, n: int):
    """Posterior density of the rate under a logit-normal prior, by scipy.integrate.quad
    (normalised), and its CDF (the reference for the grid summaries)."""
    from scipy import integrate, stats

    def density(p: float) -> float:
        return (stats.norm.pdf(special.logit(p), mean, sd) / (p * (1 - p))
                * stats.binom.pmf(x, n, p))

    total = integrate.quad(density, 0, 1, limit=400, epsabs=1e-300)[0]

    def cdf(p: float) -> float:
        return integrate.quad(density, 0, p, limit=400, epsabs=1e-300)[0] / total

    mean_rate = integrate.quad(lambda p: p * density(p), 0, 1, limit=400,
                               epsabs=1e-300)[0] / total
    return density, total, cdf, mean_rate


def test_logit_normal_one_arm_summaries_against_quadrature() -> None:
    # Source: scipy.integrate.quad of the logit-normal prior x binomial likelihood; the
    # credible limits must have the stated tail masses under that posterior.
    from tests.helpers import ONE_ARM, build

    prior = {"distribution": "logit-normal", "logit_mean": -1.2, "logit_sd": 0.8}
    design = build(ONE_ARM, looks__n=[20, 40], looks__efficacy=[0.99, 0.95],
                   hypothesis__benchmark=0.25, arms__treatment__prior=prior)
    result = decide(design, 1, ["treatment=9/20"], level=0.9)
    (summary,) = result.as_dict()["posterior"]["summaries"]
    _, _, cdf, mean_rate = _logit_normal_posterior(-1.2, 0.8, 9, 20)
    assert summary["mean"] == pytest.approx(mean_rate, abs=1e-7)
    assert cdf(summary["lower"]) == pytest.approx(0.05, abs=1e-7)
    assert cdf(summary["upper"]) == pytest.approx(0.95, abs=1e-7)


def test_logit_normal_two_arm_summaries_against_quadrature() -> None:
    # Source: scipy.integrate.quad over the control rate of its posterior density times
    # the treatment posterior's CDF at the rate giving the odds ratio of the bound, each
    # posterior from quad of logit-normal prior x binomial likelihood. (Two-arm
    # logit-normal designs are compared on the odds-ratio scale only.)
    from scipy import integrate

    from tests.helpers import TWO_ARM, build

    priors = {"treatment": {"prior": {"distribution": "logit-normal", "logit_mean": -0.5,
                                      "logit_sd": 1.0}},
              "control": {"prior": {"distribution": "logit-normal", "logit_mean": -1.0,
                                    "logit_sd": 0.7}}}
    design = build(TWO_ARM, arms=priors, hypothesis__comparison="odds-ratio",
                   scenarios={"control": [0.3], "odds_ratio": [1.0, 2.0]},
                   looks__n=[60, 120], looks__efficacy=[0.99, 0.95])
    result = decide(design, 1, ["treatment=9/20", "control=5/20"], level=0.9)
    summaries = result.as_dict()["posterior"]["summaries"]
    assert len(summaries) == 3
    _, _, cdf_t, mean_t = _logit_normal_posterior(-0.5, 1.0, 9, 20)
    f_c, z_c, _, mean_c = _logit_normal_posterior(-1.0, 0.7, 5, 20)
    assert summaries[0]["mean"] == pytest.approx(mean_t, abs=1e-7)
    assert summaries[1]["mean"] == pytest.approx(mean_c, abs=1e-7)

    def joint_cdf(bound: float) -> float:
        def rate_t(c: float) -> float:
            odds = bound * c / (1 - c)
            return odds / (1 + odds)
        return integrate.quad(lambda c: f_c(c) / z_c * cdf_t(rate_t(c)), 0, 1,
                              limit=200)[0]

    effect = summaries[2]
    assert joint_cdf(effect["lower"]) == pytest.approx(0.05, abs=2e-6)
    assert joint_cdf(effect["upper"]) == pytest.approx(0.95, abs=2e-6)
