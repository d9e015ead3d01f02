"""``octrial decide`` for designs with several treatment arms.

Each check names what it is checked against:

* each arm's own decision, posterior and predictive probabilities: the two-arm (one-arm)
  ``decide`` on that arm's own design, ``design.pairs[j]`` (identity: the rule of a
  several-arm design is its arms' own rules);
* posterior probability of benefit, posterior means and intervals: ``scipy.stats.beta``
  and ``scipy.integrate.quad`` of ``beta.pdf_C(u) beta.sf_T(u + d)``;
* Pr(best): ``scipy.integrate.quad`` of ``f_j(u) prod_i F_i(u)`` and an independent
  Monte Carlo of 400,000 ``scipy.stats.beta`` / ``scipy.stats.gamma`` draws per arm
  (within 4 standard errors);
* dropping and selection: the rule written out here from the scipy Pr(best), in the
  simulation's order (docs/multi-arm.md; octrial/multiarm/kernel.py);
* next block of a response-adaptive design: hand computation of the allocation rule
  (docs/adaptive-allocation.md: control share, treatment shares proportional to
  Pr(best)^c, c = n / (2N) for the information form) from the scipy Pr(best);
* bad input exits 2 naming the option and the arm.
"""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import integrate, stats

from octrial.cli import main
from octrial.design.model import Source
from octrial.endpoints.binary import BetaMixture
from octrial.errors import SettingsError
from octrial.interim import decide
from octrial.interim.arms import DROPPED, LEFT_EARLIER, NOT_SELECTED, decide_arms
from octrial.interim.best import probability_best_at
from octrial.interim.rule import CONTINUE, FAILURE, STOP_EFFICACY, STOP_FUTILITY, SUCCESS
from octrial.multiarm import parse_multiarm
from tests.helpers import DESIGNS

DEMO = DESIGNS / "dose-ranging.toml"
DRAWS = 400_000
Z = 4.0


def _flat():
    return {"distribution": "beta", "a": 1, "b": 1}


def _data(arms=("low", "mid", "high"), control=True, n=(60, 120, 180), **changes):
    data = {
        "schema": 1, "name": "arms-decide", "title": "several arms (test)",
        "endpoint": {"type": "binary", "better": "higher"},
        "hypothesis": ({"comparison": "difference", "kind": "superiority", "margin": 0.0}
                       if control else {"benchmark": 0.2}),
        "arms": ({"control": {"prior": _flat()}} if control else {})
        | {a: {"prior": _flat()} for a in arms},
        "looks": {"n": list(n), "efficacy": [0.999] * (len(n) - 1) + [0.975],
                  "futility": [0.05] * (len(n) - 1) + ["none"]},
        "scenarios": ({"control": [0.2]} if control else {}) | {a: [0.3] for a in arms},
        "simulation": {"seed": 7, "replicates": 1000},
    }
    for dotted, value in changes.items():
        *parents, last = dotted.split("__")
        node = data
        for key in parents:
            node = node.setdefault(key, {})
        node[last] = value
    return data


def _design(**changes):
    return parse_multiarm(_data(**changes), Source("test.toml", "", ""))


def _pr_best_quad(a, b, higher=True):
    """Pr(arm j best) = int_0^1 f_j(u) prod_{i != j} F_i(u) du for Beta(a_i, b_i)
    posteriors, by scipy quad on the quantile scale v = F_j(u) (no singular density)."""
    dists = [stats.beta(ai, bi) for ai, bi in zip(a, b, strict=True)]
    out = []
    for j, dj in enumerate(dists):
        def integrand(v, dj=dj, j=j):
            u = dj.ppf(v)
            return np.prod([(d.cdf(u) if higher else d.sf(u))
                            for i, d in enumerate(dists) if i != j])
        out.append(integrate.quad(integrand, 0, 1, epsabs=1e-12, epsrel=1e-12, limit=200)[0])
    return np.array(out)


def _monte_carlo_best(samples, higher=True):
    """Share of draws in which each arm is the best, and its standard error."""
    draws = np.column_stack(samples)
    best = np.argmax(draws if higher else -draws, axis=1)
    p = np.bincount(best, minlength=draws.shape[1]) / draws.shape[0]
    return p, np.sqrt(p * (1 - p) / draws.shape[0])


# -- each arm's own rule: identity with the two-arm decide ------------------------------
CASES = [
    # look, data: an arm below futility, a continuing one, one reaching efficacy
    (1, {"control": "5/15", "low": "0/15", "mid": "5/15", "high": "14/15"}),
    (2, {"control": "6/30", "low": "9/30", "mid": "12/30", "high": "14/30"}),
    (3, {"control": "9/45", "low": "15/45", "mid": "17/45", "high": "20/45"}),
    (1, {"control": "3/14", "low": "4/16", "mid": "5/15", "high": "6/15"}),  # unplanned
]


@pytest.mark.parametrize(("look", "values"), CASES)
def test_each_arms_decision_is_the_two_arm_decide_on_its_own_design(look, values):
    design = _design()
    data = [f"{arm}={v}" for arm, v in values.items()]
    result = decide_arms(design, look, data)
    for j, arm in enumerate(design.treatment_names):
        pair = decide(design.pairs[j], look,
                      [f"treatment={values[arm]}", f"control={values['control']}"])
        got = result.arms[j].own
        assert got.assessment.benefit == pair.assessment.benefit
        assert got.assessment.predictive == pair.assessment.predictive
        assert got.assessment.thresholds == pair.assessment.thresholds
        assert got.decision == pair.decision
        assert [s.mean for s in got.posterior] == [s.mean for s in pair.posterior]
        assert [(s.lower, s.upper) for s in got.posterior] == [
            (s.lower, s.upper) for s in pair.posterior]
        assert got.posterior[0].quantity == f"rate ({arm})"
        assert arm in got.statement and "treatment" not in got.statement


def test_the_cases_cover_every_own_decision():
    design = _design()
    seen = {a.own.decision for look, values in CASES
            for a in decide_arms(design, look, [f"{k}={v}" for k, v in values.items()]).arms}
    assert seen >= {CONTINUE, STOP_EFFICACY, STOP_FUTILITY, SUCCESS}


def test_against_a_benchmark_each_arm_is_the_one_arm_decide():
    design = _design(control=False)
    values = {"low": "4/20", "mid": "7/20", "high": "11/20"}
    result = decide_arms(design, 1, [f"{a}={v}" for a, v in values.items()])
    assert result.control is None
    for j, arm in enumerate(design.treatment_names):
        pair = decide(design.pairs[j], 1, [f"treatment={values[arm]}"])
        got = result.arms[j].own.assessment
        assert (got.benefit, got.predictive, got.thresholds, got.decision) == (
            pair.assessment.benefit, pair.assessment.predictive, pair.assessment.thresholds,
            pair.assessment.decision)
        # one arm against 0.2 with a Beta(1, 1) prior: B = Beta(1 + x, 1 + n - x) tail
        x, n = map(int, values[arm].split("/"))
        assert result.arms[j].own.assessment.benefit == pytest.approx(
            stats.beta.sf(0.2, 1 + x, 1 + n - x), abs=1e-12)


def test_posterior_numbers_against_scipy():
    design = _design()
    result = decide_arms(design, 2, ["control=6/30", "low=9/30", "mid=12/30", "high=14/30"])
    c = stats.beta(7, 25)
    for a in result.arms:
        x, n = a.observed.responses, a.observed.n
        t = stats.beta(1 + x, 1 + n - x)
        b = integrate.quad(lambda u, t=t: c.pdf(u) * t.sf(u), 0, 1, epsabs=1e-13)[0]
        assert a.own.assessment.benefit == pytest.approx(b, abs=1e-9)
        rate = a.own.posterior[0]
        assert rate.mean == pytest.approx((x + 1) / (n + 2), rel=1e-12)
        assert (rate.lower, rate.upper) == pytest.approx((t.ppf(0.025), t.ppf(0.975)), abs=1e-9)
    assert result.control_summary.mean == pytest.approx(7 / 32, rel=1e-12)


# -- Pr(best) ---------------------------------------------------------------------------
def test_pr_best_against_quadrature_and_monte_carlo():
    design = _design()
    values = {"control": "6/30", "low": "9/30", "mid": "12/30", "high": "14/30"}
    result = decide_arms(design, 2, [f"{a}={v}" for a, v in values.items()])
    got = np.array([a.pr_best for a in result.arms])
    xs = [9, 12, 14]
    want = _pr_best_quad([1 + x for x in xs], [1 + 30 - x for x in xs])
    assert got == pytest.approx(want, abs=1e-6)
    rng = np.random.default_rng(11)
    p, se = _monte_carlo_best([stats.beta.rvs(1 + x, 31 - x, size=DRAWS, random_state=rng)
                               for x in xs])
    assert np.all(np.abs(got - p) <= Z * se)


@pytest.mark.parametrize("higher", [True, False])
def test_pr_best_with_priors_of_their_own_against_monte_carlo(higher):
    priors = [BetaMixture.single(1, 1), BetaMixture((0.6, 0.4), (6.0, 1.0), (14.0, 1.0)),
              BetaMixture.single(0.5, 0.5)]
    sizes, xs = [20, 25, 18], [6, 9, 0]
    got = probability_best_at(priors, sizes, xs, higher)
    rng = np.random.default_rng(3)
    samples = []
    for prior, n, x in zip(priors, sizes, xs, strict=True):
        w = np.array(prior.weights) * np.exp(
            [stats.betabinom.logpmf(x, n, a, b) for a, b in zip(prior.a, prior.b, strict=True)])
        comp = rng.choice(len(w), size=DRAWS, p=w / w.sum())
        a = np.array(prior.a)[comp] + x
        b = np.array(prior.b)[comp] + n - x
        samples.append(rng.beta(a, b))
    p, se = _monte_carlo_best(samples, higher)
    # the one Pr(best) (graded Gauss-Legendre, octrial.numerics.beta_best) is accurate to
    # about 1e-5 with shapes below 1 (docs/adaptive-allocation.md), so the sum is too
    assert got.sum() == pytest.approx(1.0, abs=2e-5)
    assert np.all(np.abs(got - p) <= Z * se + 1e-9), (got, p, se)


def test_count_pr_best_against_gamma_monte_carlo():
    from octrial.endpoints.count import GammaMixture

    priors = [GammaMixture.single(1.5, 1.0), GammaMixture.single(1.5, 1.0),
              GammaMixture((0.5, 0.5), (2.0, 0.5), (2.0, 0.5))]
    exposure, events = [30.0, 24.5, 28.0], [40, 22, 31]
    got = probability_best_at(priors, exposure, events, higher=False)
    rng = np.random.default_rng(5)
    samples = []
    for prior, t, x in zip(priors, exposure, events, strict=True):
        # gamma-Poisson: component weights prop. to w b^a Gamma(a + x) / (Gamma(a)(b + t)^(a + x))
        from scipy.special import gammaln
        a, b = np.array(prior.a), np.array(prior.b)
        logw = (np.log(prior.weights) + a * np.log(b) + gammaln(a + x) - gammaln(a)
                - (a + x) * np.log(b + t))
        w = np.exp(logw - logw.max())
        comp = rng.choice(len(w), size=DRAWS, p=w / w.sum())
        samples.append(stats.gamma.rvs(a[comp] + x, scale=1 / (b[comp] + t), random_state=rng))
    p, se = _monte_carlo_best(samples, higher=False)
    assert np.all(np.abs(got - p) <= Z * se + 1e-9), (got, p, se)


def test_pr_best_is_the_simulations_pr_best():
    # the several-arm simulation drops arms by the Pr(best) of its node tables
    # (multiarm.tables.MultiArmTables.best); decide must give the same number (identity)
    from octrial.multiarm.tables import build_tables

    design = _design(looks__drop_if_best_below=0.1)
    result = decide_arms(design, 2, ["control=6/30", "low=9/30", "mid=12/30", "high=14/30"])
    tables = build_tables(design)
    kernel = tables.best(1, np.array([9, 12, 14]), np.ones(3, np.bool_))
    assert [a.pr_best for a in result.arms] == pytest.approx(kernel, abs=1e-12)


# -- dropping and selection, in the simulation's order ----------------------------------
def test_drop_by_pr_best_among_the_arms_continuing():
    design = _design(looks__drop_if_best_below=0.1)
    values = {"control": "3/15", "low": "3/15", "mid": "5/15", "high": "9/15"}
    result = decide_arms(design, 1, [f"{a}={v}" for a, v in values.items()])
    xs = [3, 5, 9]
    pr = _pr_best_quad([1 + x for x in xs], [16 - x for x in xs])
    outcomes = [a.outcome for a in result.arms]
    assert all(a.own.decision == CONTINUE for a in result.arms)
    assert outcomes == [DROPPED if p < 0.1 else CONTINUE for p in pr]
    assert DROPPED in outcomes and CONTINUE in outcomes
    assert [a.pr_best_continuing for a in result.arms] == pytest.approx(pr, abs=1e-6)
    assert result.study == CONTINUE


def test_an_arm_stopped_by_its_rule_leaves_the_comparison():
    # high reaches efficacy and leaves; low and mid are compared between themselves only
    # (the simulation's order): each is below 0.1 among all three, neither between the two
    design = _design(looks__drop_if_best_below=0.1)
    values = {"control": "1/15", "low": "3/15", "mid": "6/15", "high": "12/15"}
    result = decide_arms(design, 1, [f"{a}={v}" for a, v in values.items()])
    low, mid, high = result.arms
    assert high.outcome == STOP_EFFICACY and high.pr_best_continuing is None
    xs = [3, 6, 12]
    pr_all = _pr_best_quad([1 + x for x in xs], [16 - x for x in xs])
    assert [low.pr_best, mid.pr_best] == pytest.approx(pr_all[:2], abs=1e-6)
    assert max(pr_all[:2]) < 0.1
    pr_two = _pr_best_quad([4, 7], [13, 10])
    assert [low.pr_best_continuing, mid.pr_best_continuing] == pytest.approx(pr_two, abs=1e-6)
    assert min(pr_two) >= 0.1
    assert (low.outcome, mid.outcome) == (CONTINUE, CONTINUE)
    assert result.study == CONTINUE and "high succeeded" in result.study_reason


def test_selection_keeps_the_most_likely_best():
    design = _design(arms=("a", "b", "c", "d"), n=(100, 200), selection={"keep": 2})
    values = {"control": "4/20", "a": "6/20", "b": "9/20", "c": "8/20", "d": "5/20"}
    result = decide_arms(design, 1, [f"{k}={v}" for k, v in values.items()])
    xs = [6, 9, 8, 5]
    pr = _pr_best_quad([1 + x for x in xs], [21 - x for x in xs])
    kept = set(np.argsort(-pr)[:2])
    assert [a.outcome for a in result.arms] == [
        CONTINUE if j in kept else NOT_SELECTED for j in range(4)]
    assert result.study == CONTINUE


def test_final_look_success_and_failure():
    design = _design()
    win = decide_arms(design, 3, ["control=9/45", "low=10/45", "mid=12/45", "high=22/45"])
    assert [a.outcome for a in win.arms][-1] == SUCCESS and win.study == SUCCESS
    lose = decide_arms(design, 3, ["control=9/45", "low=10/45", "mid=11/45", "high=12/45"])
    assert {a.outcome for a in lose.arms} == {FAILURE} and lose.study == FAILURE


def test_stopped_arms_take_no_part():
    design = _design(looks__drop_if_best_below=0.1)
    result = decide_arms(design, 2, ["control=6/30", "mid=12/30", "high=14/30"],
                         stopped=["low"])
    low, mid, high = result.arms
    assert low.outcome == LEFT_EARLIER and low.own is None and low.pr_best is None
    pr = _pr_best_quad([13, 15], [19, 17])
    assert [mid.pr_best, high.pr_best] == pytest.approx(pr, abs=1e-6)


# -- next block of a response-adaptive design --------------------------------------------
def _adaptive(**allocation):
    return _design(allocation=allocation)


def test_next_block_power_form_by_hand():
    design = _adaptive(kind="power", power=1.0, control_share=0.25)
    values = {"control": "3/15", "low": "4/15", "mid": "6/15", "high": "8/15"}
    result = decide_arms(design, 1, [f"{a}={v}" for a, v in values.items()])
    pr = _pr_best_quad([5, 7, 9], [12, 10, 8])
    # hand: control 0.25; the rest, 0.75, in proportion to Pr(best)^1
    want = 0.75 * pr / pr.sum()
    assert result.control_allocation == pytest.approx(0.25, abs=1e-12)
    assert [a.allocation for a in result.arms] == pytest.approx(want, abs=1e-6)
    assert result.allocation["next_block"]["control"] == pytest.approx(0.25)


def test_next_block_information_form_with_a_dropped_arm_by_hand():
    design = _design(allocation={"kind": "information", "control_share": 0.3},
                     looks__drop_if_best_below=0.1)
    values = {"control": "6/30", "low": "4/30", "mid": "10/30", "high": "12/30"}
    result = decide_arms(design, 2, [f"{a}={v}" for a, v in values.items()])
    xs = [4, 10, 12]
    pr_all = _pr_best_quad([1 + x for x in xs], [31 - x for x in xs])
    gone = [j for j in range(3) if pr_all[j] < 0.1]
    assert gone == [0]  # low is dropped
    assert result.arms[0].outcome == DROPPED and result.arms[0].allocation == 0.0
    # hand: Pr(best) among mid and high; c = n / (2 N) = 120 / (2 x 180); shares of 0.7
    pr = _pr_best_quad([11, 13], [21, 19])
    c = 120 / (2 * 180)
    weights = pr**c
    want = 0.7 * weights / weights.sum()
    assert [a.allocation for a in result.arms[1:]] == pytest.approx(want, abs=1e-6)
    assert result.control_allocation == pytest.approx(0.3)


def test_next_block_before_burn_in_is_the_fixed_ratio():
    design = _adaptive(kind="power", power=1.0, burn_in=100)
    result = decide_arms(design, 1, ["control=3/15", "low=4/15", "mid=6/15", "high=8/15"])
    # 60 enrolled < 100: the fixed ratio, equal weights over the four arms (hand)
    assert [result.control_allocation] + [a.allocation for a in result.arms] == \
        pytest.approx([0.25] * 4, abs=1e-12)


def test_next_block_before_burn_in_gives_the_control_its_share_as_simulated():
    # with a control share, the burn-in ratio is that share to the control and the rest
    # equal (hand: 0.3, then 0.7 / 3 each); the several-arm simulation enrols block 1 with
    # the same ratio (its <arm>_block1_share, every study enrolling block 1)
    from octrial.multiarm.engine import simulate_design

    design = _adaptive(kind="information", control_share=0.3, burn_in=100)
    design = dataclasses.replace(design, simulation=dataclasses.replace(
        design.simulation, seed=7, replicates=200))
    result = decide_arms(design, 1, ["control=3/15", "low=4/15", "mid=6/15", "high=8/15"])
    found = [result.control_allocation] + [a.allocation for a in result.arms]
    assert found == pytest.approx([0.3] + [0.7 / 3] * 3, abs=1e-12)
    simulated = simulate_design(design).iloc[0]
    assert [simulated[f"{a}_block1_share"] for a in design.arm_names] == pytest.approx(
        found, abs=1e-12)


def test_fixed_allocation_has_no_next_block():
    result = decide_arms(_design(), 1, ["control=3/15", "low=4/15", "mid=6/15", "high=8/15"])
    assert result.allocation is None and all(a.allocation is None for a in result.arms)


# -- command line ------------------------------------------------------------------------
def test_demo_text_and_json_agree():
    # the demo's look 1 is at 60 subjects: 15 per arm as each arm's own rule plans them
    args = ["decide", str(DEMO), "--look", "1", "--data", "control=4/15", "--data",
            "low=5/15", "--data", "middle=5/15", "--data", "high=8/15"]
    runner = CliRunner()
    text = runner.invoke(main, args)
    assert text.exit_code == 0, text.output
    record = json.loads(runner.invoke(main, [*args, "--json"]).stdout)
    assert record["several_arms"] is True
    assert [a["arm"] for a in record["arms"]] == ["low", "middle", "high"]
    for a in record["arms"]:
        assert f"{a['pr_best']:.4f}" in text.stdout
        assert f"{a['benefit']['probability']:.4f}" in text.stdout
        assert f"{a['arm']}: {a['outcome'].upper()}" in text.stdout
    assert f"study: {record['study']['decision'].upper()}" in text.stdout
    assert "Caution" in text.stderr


def test_adaptive_json_has_the_next_block():
    data = _data(allocation={"kind": "power", "power": 1.0, "control_share": 0.25})
    path = "adaptive.toml"
    from octrial.design.write import dumps
    runner = CliRunner()
    with runner.isolated_filesystem():
        with open(path, "w") as handle:
            handle.write(dumps(data))
        result = runner.invoke(main, ["decide", path, "--look", "1", "--json", "--data",
                                      "control=3/15", "--data", "low=4/15", "--data",
                                      "mid=6/15", "--data", "high=8/15"])
    assert result.exit_code == 0, result.output
    block = json.loads(result.stdout)["allocation"]["next_block"]
    assert sum(block.values()) == pytest.approx(1.0)
    assert block["control"] == pytest.approx(0.25)


@pytest.mark.parametrize(("args", "words"), [
    (["--data", "control=8/30", "--data", "lwo=9/30", "--data", "middle=10/30",
      "--data", "high=16/30"], ["--data", "'lwo'", "did you mean 'low'"]),
    (["--data", "control=8/30", "--data", "middle=10/30", "--data", "high=16/30"],
     ["--data: low", "low=x/n", "--stopped"]),
    (["--data", "low=9/30", "--data", "middle=10/30", "--data", "high=16/30"],
     ["--data: control", "control=x/n"]),
    (["--data", "control=8/30", "--data", "low=9/300", "--data", "middle=10/30",
      "--data", "high=16/30"], ["--data: low", "maximum of 90", "300"]),
    (["--data", "control=8/30", "--data", "low=31/30", "--data", "middle=10/30",
      "--data", "high=16/30"], ["--data: low", "responses between 0"]),
    (["--data", "control=8/30", "--data", "middle=10/30", "--data", "high=16/30",
      "--stopped", "lo"], ["--stopped", "did you mean 'low'"]),
    (["--data", "control=8/30", "--stopped", "control"], ["--stopped", "treatment arm"]),
    (["--data", "control=8/30", "--stopped", "low", "--stopped", "middle", "--stopped",
      "high"], ["--stopped", "at least one treatment arm"]),
    (["--data", "control=8/30", "--data", "low=9/30", "--data", "middle=10/30",
      "--data", "high=16/30", "--pipeline", "low=3"], ["--pipeline", "one or two arms"]),
    (["--data", "control=8/30", "--data", "low=9/30", "--data", "middle=10/30",
      "--data", "high=16/30", "--subjects", "x.csv"], ["--subjects", "several"]),
    (["--look", "5", "--data", "control=8/30"], ["--look", "between 1 and 4"]),  # 4 looks
])
def test_bad_input_exits_2_naming_the_option(args, words):
    if "--look" not in args:
        args = ["--look", "1", *args]
    result = CliRunner().invoke(main, ["decide", str(DEMO), *args])
    assert result.exit_code == 2, result.output
    for w in words:
        assert w in result.stderr, result.stderr
    assert "Traceback" not in result.output


def test_stopped_on_a_two_arm_design_exits_2():
    result = CliRunner().invoke(main, ["decide", str(DESIGNS / "two-arm-randomised.toml"),
                                       "--look", "1", "--data", "treatment=6/20", "--data",
                                       "control=4/20", "--stopped", "treatment"])
    assert result.exit_code == 2
    assert "--stopped" in result.stderr and "several treatment arms" in result.stderr


def test_adaptive_design_needs_the_stopped_arms_data():
    design = _adaptive(kind="power", power=1.0)
    with pytest.raises(SettingsError) as caught:
        decide_arms(design, 2, ["control=6/30", "mid=12/30", "high=14/30"], stopped=["low"])
    assert caught.value.source == "data"
    assert any(p.key == "low" and "burn-in" in p.expected for p in caught.value.problems)
    # given, it counts towards n and takes no share of the next block
    result = decide_arms(design, 2, ["control=6/30", "low=3/15", "mid=12/30", "high=14/30"],
                         stopped=["low"])
    assert result.arms[0].allocation == 0.0
    assert sum(a.allocation for a in result.arms) + result.control_allocation == \
        pytest.approx(1.0)


def test_priors_without_pr_best_warn_and_refuse_dropping():
    # logit-normal priors: no closed-form Pr(best) here; decide says so and refuses a
    # dropping rule rather than guessing
    from octrial.errors import InputError

    data = _data(looks__drop_if_best_below=0.1)
    data["hypothesis"] = {"comparison": "odds-ratio", "kind": "superiority", "margin": 0.0}
    for arm in data["arms"].values():
        arm["prior"] = {"distribution": "logit-normal", "logit_mean": -1.0, "logit_sd": 1.5}
    values = ["control=3/15", "low=4/15", "mid=6/15", "high=8/15"]
    with pytest.raises(InputError) as caught:
        decide_arms(parse_multiarm(data, Source("test.toml", "", "")), 1, values)
    assert caught.value.problems[0].key == "looks.drop_if_best_below"
    data["looks"].pop("drop_if_best_below")
    result = decide_arms(parse_multiarm(data, Source("test.toml", "", "")), 1, values)
    assert all(a.pr_best is None for a in result.arms)
    assert any("Pr(best) needs" in w for w in result.warnings)
