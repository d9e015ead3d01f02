"""Several treatment arms: reading, Pr(best), and the Monte Carlo engine against checks
from outside the project (closed forms, scipy, the two-arm exact engine, identities)."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest
from scipy import special, stats

import octrial
from octrial.design.model import Scenarios, Source
from octrial.errors import DesignError
from octrial.multiarm import parse_multiarm
from octrial.multiarm.engine import simulate_design
from octrial.numerics.beta_best import probability_best

DEMO = Path(__file__).parents[1] / "designs" / "dose-ranging.toml"


def flat():
    return {"distribution": "beta", "a": 1, "b": 1}


def design_data(arms=("low", "mid", "high"), control=True, n=(60, 120, 180), **looks):
    data = {
        "schema": 1, "name": "multi", "title": "several arms (test)",
        "endpoint": {"type": "binary", "better": "higher"},
        "hypothesis": ({"comparison": "difference", "kind": "superiority", "margin": 0.0}
                       if control else {"benchmark": 0.2}),
        "arms": ({"control": {"prior": flat()}} if control else {})
        | {a: {"prior": flat()} for a in arms},
        "looks": {"n": list(n), "efficacy": [0.999] * (len(n) - 1) + [0.975],
                  "futility": [0.05] * (len(n) - 1) + ["none"]} | looks,
        "scenarios": ({"control": [0.2, 0.2]} if control else {})
        | {a: [0.2, 0.2 + 0.1 * i] for i, a in enumerate(arms)},
        "simulation": {"seed": 7, "replicates": 20_000},
    }
    return data


def parse(data):
    return parse_multiarm(data, Source("test.toml", "", ""))


# -- reading ---------------------------------------------------------------------------

def test_reads_per_arm_sizes_and_pairs():
    d = parse(design_data())
    assert d.arm_names == ("control", "low", "mid", "high")
    assert d.looks.per_arm[0] == (15, 15, 15, 15)
    assert [p.looks.per_arm for p in d.pairs] == [((15, 15), (30, 30), (45, 45))] * 3


@pytest.mark.parametrize(("change", "key"), [
    (lambda d: d["arms"].pop("mid") and d["arms"].pop("high")
     and d["scenarios"].pop("mid") and d["scenarios"].pop("high"), "arms"),
    (lambda d: d["arms"].__setitem__("treatment", {"prior": flat()}), "arms.treatment"),
    (lambda d: d["scenarios"].__setitem__("low", [0.2]), "scenarios"),
    (lambda d: d["looks"].__setitem__("drop_if_best_below", [0.1, 0.1, 0.1]),
     "looks.drop_if_best_below"),
    (lambda d: d["arms"]["mid"]["prior"].__setitem__("a", -1), "arms.mid.prior.a"),
    (lambda d: d.__setitem__("selection", {"keep": 9}), "selection.keep"),
])
def test_bad_input_names_the_key(change, key):
    data = design_data()
    change(data)
    with pytest.raises(DesignError) as info:
        parse(data)
    assert any(p.key == key for p in info.value.problems), info.value


# -- Pr(best) --------------------------------------------------------------------------

def prob_best_beta(a, b):
    """The library's Pr(best) for Beta(a_j, b_j) posteriors (each arm's prior, no data)."""
    zeros = np.zeros(len(a), int)
    return probability_best(zeros, zeros,
                            priors=[(1.0, aj, bj) for aj, bj in zip(a, b, strict=True)])


def test_pr_best_two_arms_closed_form():
    # Pr(p_B > p_A) for Beta(aA, bA), Beta(aB, bB), integer aB:
    # sum_{i<aB} B(aA+i, bA+bB) / ((bB+i) B(1+i, bB) B(aA, bA))  (J. D. Cook, "Exact
    # calculation of beta inequalities", 2005; the formula recalled from memory)
    aA, bA, aB, bB = 8.0, 14.0, 12.0, 10.0
    i = np.arange(int(aB))
    closed = np.sum(np.exp(special.betaln(aA + i, bA + bB) - special.betaln(1 + i, bB)
                           - special.betaln(aA, bA)) / (bB + i))
    p = prob_best_beta(np.array([aA, aB]), np.array([bA, bB]))
    assert p[1] == pytest.approx(closed, abs=1e-9)
    assert p.sum() == pytest.approx(1.0, abs=1e-6)


def test_pr_best_four_arms_against_scipy_monte_carlo():
    # independent Monte Carlo from scipy.stats.beta draws; 4 SE
    a = np.array([3.0, 10.0, 14.0, 0.5])
    b = np.array([12.0, 20.0, 22.0, 3.0])
    rng = np.random.default_rng(1)
    draws = stats.beta(a, b).rvs(size=(400_000, 4), random_state=rng)
    freq = np.bincount(draws.argmax(axis=1), minlength=4) / len(draws)
    se = np.sqrt(freq * (1 - freq) / len(draws))
    p = prob_best_beta(a, b)
    assert np.all(np.abs(p - freq) <= 4 * se + 1e-6), (p, freq)


# -- the engine ------------------------------------------------------------------------

def two_arm_exact(pair, truth):
    design = dataclasses.replace(pair, scenarios=Scenarios(pair.scenarios.arms, (truth,)))
    return octrial.evaluate(design, method="exact").iloc[0]


def test_each_arm_alone_matches_the_two_arm_exact_engine():
    # without Pr(best) rules each arm follows its own two-arm design; its marginal
    # probability of success and expected size must equal the two-arm exact engine's
    # (Monte Carlo within 4 SE)
    d = parse(design_data())
    oc = simulate_design(d, replicates=40_000).iloc[1]
    for t, name in enumerate(d.treatment_names):
        exact = two_arm_exact(d.pairs[t], (oc[f"true_{name}"], oc["true_control"]))
        p = oc[f"{name}_prob_success"]
        assert abs(p - exact["prob_success"]) <= 4 * oc[f"{name}_prob_success_se"] + 1e-9
        for k in (1, 2):
            se = np.sqrt(exact[f"look{k}_stop_efficacy"] / 40_000) + 1e-4
            assert abs(oc[f"{name}_look{k}_stop_efficacy"]
                       - exact[f"look{k}_stop_efficacy"]) <= 4 * se


def test_one_treatment_arm_is_the_two_arm_design():
    # a several-arm design cut down to one treatment arm is the two-arm design: the same
    # random words and tables, so the two-arm Monte Carlo engine's numbers come out bit
    # for bit, and they agree with the two-arm exact engine within 4 SE
    d = parse(design_data())
    one = dataclasses.replace(
        d, treatments=d.treatments[:1], pairs=d.pairs[:1],
        looks=dataclasses.replace(d.looks, per_arm=tuple(r[:2] for r in d.looks.per_arm)),
        scenarios=Scenarios(("control", "low"), ((0.2, 0.35),)))
    oc = simulate_design(one, replicates=60_000).iloc[0]
    pair = dataclasses.replace(
        d.pairs[0], scenarios=Scenarios(d.pairs[0].scenarios.arms, ((0.35, 0.2),)),
        simulation=dataclasses.replace(d.pairs[0].simulation, replicates=60_000, seed=7))
    two = octrial.evaluate(pair, method="monte-carlo").iloc[0]
    for column in ("prob_success", "prob_success_se", "prob_stop_efficacy",
                   "prob_stop_futility", "look1_stop_efficacy", "look2_stop_futility",
                   "look3_stop_efficacy"):
        assert oc[column] == two[column], column
    # sizes: the same studies, summed per study here and per look there (rounding only)
    assert oc["expected_n"] == pytest.approx(two["expected_n"], rel=1e-12)
    assert oc["sd_n"] == pytest.approx(two["sd_n"], rel=1e-9)
    assert oc["low_prob_success"] == two["prob_success"]
    exact = two_arm_exact(d.pairs[0], (0.35, 0.2))
    assert abs(oc["prob_success"] - exact["prob_success"]) <= 4 * oc["prob_success_se"]


def test_fwer_of_independent_arms_is_one_minus_product():
    # no shared control: the arms are independent, so under the global null
    # FWER = 1 - prod(1 - alpha_j), alpha_j each arm's exact type I error (identity)
    arms = ("a1", "a2", "a3", "a4")
    data = design_data(arms=arms, control=False, n=(80, 160))
    data["scenarios"] = {a: [0.2] for a in arms}
    d = parse(data)
    alphas = [two_arm_exact(p, (0.2,))["prob_success"] for p in d.pairs]
    oc = simulate_design(d, replicates=100_000).iloc[0]
    expected = 1 - np.prod(1 - np.array(alphas))
    assert abs(oc["fwer"] - expected) <= 4 * oc["fwer_se"]
    assert oc["fwer"] == oc["prob_success"]


def test_fwer_with_shared_control_follows_the_dunnett_correlation():
    # one look, flat priors, large arms: Pr(p_j - p_c > 0 | data) >= 0.975 is close to
    # z_j > 1.96 with corr(z_i, z_j) = 1/2 under the global null (Dunnett 1955);
    # FWER = 1 - Phi_3(1.96, 1.96, 1.96; rho = 1/2) by scipy's multivariate normal CDF.
    # The normal approximation of a binomial at n = 400, p = 0.5 is allowed 0.006
    # (common practice, no source), 4 SE for the simulation.
    data = design_data(n=(1600,))
    data["looks"] = {"n": [1600], "efficacy": 0.975}
    data["scenarios"] = {a: [0.5] for a in ("control", "low", "mid", "high")}
    d = parse(data)
    oc = simulate_design(d, replicates=100_000).iloc[0]
    cov = np.full((3, 3), 0.5) + 0.5 * np.eye(3)
    dunnett = 1 - stats.multivariate_normal(np.zeros(3), cov).cdf(np.full(3, 1.959964))
    independent = 1 - 0.975**3
    assert abs(oc["fwer"] - dunnett) <= 4 * oc["fwer_se"] + 0.006
    # the shared control makes the tests positively correlated: FWER below independence
    assert oc["fwer"] < independent - 4 * oc["fwer_se"]


def test_same_seed_same_numbers_and_dropping_works():
    d = parse(design_data(drop_if_best_below=0.2))
    one = simulate_design(d, replicates=5_000)
    two = simulate_design(d, replicates=5_000)
    assert one.equals(two)
    row = one.iloc[1]
    # the worst arm (0.2 against 0.3 and 0.4) is dropped at look 1 far more often
    assert row["low_look1_drop"] > row["high_look1_drop"]
    assert row["low_expected_n"] < row["high_expected_n"]


def test_selection_keeps_at_most_keep_arms():
    data = design_data()
    data["selection"] = {"keep": 1}
    d = parse(data)
    row = simulate_design(d, replicates=5_000).iloc[1]
    # after look 1 one arm goes on: of the three arms' look-2 and later stops, the
    # dropped mass at look 1 is what the other two did not leave by their own rules
    left_by_rule = sum(row[f"{a}_look1_stop_efficacy"] + row[f"{a}_look1_stop_futility"]
                       for a in d.treatment_names)
    dropped = sum(row[f"{a}_look1_drop"] for a in d.treatment_names)
    assert dropped >= 2 - left_by_rule - 1e-9


def test_demo_design_runs():
    from octrial.multiarm import load_multiarm

    d = load_multiarm(DEMO)
    oc = simulate_design(d, replicates=2_000)
    assert len(oc) == 3 and oc["is_null"].tolist() == [True, False, False]
    # under the global null every success is a family-wise error
    assert oc["fwer"].iloc[0] == oc["prob_success"].iloc[0]


def reference_studies(d, words, truth_slots):
    """A plain-Python study loop over the same random words: decisions from each arm's
    two-arm rule (Rule-free: the posterior probability by scipy quadrature of the beta
    difference), Pr(best) by scipy.integrate.quad over scipy.stats.beta densities and
    CDFs. Returns per-arm successes, drops per look and subjects per slot."""
    from scipy import integrate

    from octrial.simulation.draws import DrawTables, draw

    T, K = len(d.treatments), d.looks.count
    per_arm = np.array(d.looks.per_arm)
    order = [1, 2, 3, 0]
    inc = np.diff(np.vstack([np.zeros(4, int), per_arm]), axis=0)[:, order]
    tables = DrawTables.from_pmfs([stats.binom.pmf(np.arange(m + 1), m, p)
                                   for k in range(K) for m, p in zip(inc[k], truth_slots,
                                                                     strict=True)])
    eff, fut = d.pairs[0].looks.efficacy, d.pairs[0].looks.futility
    success = np.zeros(T, int)
    dropped = np.zeros((T, K), int)
    n = np.zeros(4, int)

    def benefit(x_t, n_t, x_c, n_c):
        # Pr(p_t > p_c), flat priors: integral of f_t(p) F_c(p) dp (scipy quad)
        f = stats.beta(1 + x_t, 1 + n_t - x_t).pdf
        g = stats.beta(1 + x_c, 1 + n_c - x_c).cdf
        return integrate.quad(lambda p: f(p) * g(p), 0, 1, epsabs=1e-12)[0]

    def best(xs, ns, live):
        out = {}
        for j in live:
            f = stats.beta(1 + xs[j], 1 + ns[j] - xs[j]).pdf
            others = [stats.beta(1 + xs[i], 1 + ns[i] - xs[i]).cdf for i in live if i != j]
            out[j] = integrate.quad(lambda p, f=f, o=others: f(p) * np.prod([c(p) for c in o]),
                                    0, 1, epsabs=1e-12)[0]
        return out

    for r in range(words.shape[0]):
        x = np.zeros(4, int)
        live = list(range(T))
        for k in range(K):
            for a in range(4):
                y = draw(words[r, k, a], k * 4 + a, *tables.arrays())
                if a == 3 or a in live:
                    x[a] += y
                    n[a] += inc[k, a]
            for t in list(live):
                b = benefit(x[t], per_arm[k, 1 + t], x[3], per_arm[k, 0])
                if b >= eff[k]:
                    success[t] += 1
                    live.remove(t)
                elif k == K - 1 or (fut[k] is not None and b < fut[k]):
                    live.remove(t)
            if live and k < K - 1:
                probs = best(x, [*per_arm[k, 1:].tolist(), 0], live)
                for t in list(live):
                    if probs[t] < d.looks.drop_if_best_below[k]:
                        live.remove(t)
                        dropped[t, k] += 1
                while d.selection.keep and len(live) > d.selection.keep:
                    worst = min(live, key=lambda t: (probs[t], -t))
                    live.remove(worst)
                    dropped[worst, k] += 1
            if not live:
                break
    return success, dropped, n


def test_kernel_agrees_study_by_study_with_a_scipy_reference():
    # dropping by Pr(best) and selection of at most two arms: the kernel's tallies over
    # 100 studies equal a plain-Python loop on the same random words whose posterior
    # probabilities and Pr(best) come from scipy quadrature (decisions could differ only
    # within about 1e-6 of a threshold)
    data = design_data(drop_if_best_below=0.15)
    data["selection"] = {"keep": 2}
    d = parse(data)
    row = d.scenarios.values[1]
    reps = 100
    from octrial.engines.monte_carlo import batch_generator

    words = batch_generator(7, 1, 0).bit_generator.random_raw(reps * 12).reshape(reps, 3, 4)
    truth = np.array(row)[[1, 2, 3, 0]]
    success, dropped, n = reference_studies(d, words, truth)
    oc = simulate_design(d, replicates=reps).iloc[1]
    for t, name in enumerate(d.treatment_names):
        assert round(oc[f"{name}_prob_success"] * reps) == success[t], name
        for k in range(3):
            assert round(oc[f"{name}_look{k + 1}_drop"] * reps) == dropped[t, k], (name, k)
        assert round(oc[f"{name}_expected_n"] * reps) == n[t]
    assert round(oc["control_expected_n"] * reps) == n[3]
    assert dropped.sum() > 0


def test_partial_null_error_counts_only_null_arms_and_selection_is_biased_upwards():
    # partial null: only 'low' is null (0.2 = control), so a family-wise error is exactly
    # a success of 'low' (identity); and the selected arm's estimate is biased upwards
    # under the global null (selecting the largest estimate: Bauer, Koenig, Brannath &
    # Posch 2010, 'Selection and bias - two hostile brothers', Statistics in Medicine;
    # recalled from memory)
    data = design_data()
    data["scenarios"] = {"control": [0.2, 0.2], "low": [0.2, 0.2], "mid": [0.4, 0.2],
                         "high": [0.45, 0.2]}
    oc = simulate_design(parse(data), replicates=20_000)
    partial, null = oc.iloc[0], oc.iloc[1]
    assert partial["low_is_null"] and not partial["mid_is_null"]
    assert partial["fwer"] == partial["low_prob_success"]
    assert null["selected_bias"] > 0


def count_data():
    gamma = {"distribution": "gamma", "shape": 1.0, "rate": 1.0}
    return {
        "schema": 1, "name": "multi-count",
        "endpoint": {"type": "count", "exposure": 1.0, "better": "lower"},
        "hypothesis": {"comparison": "ratio", "kind": "superiority", "margin": 0.0},
        "arms": {a: {"prior": dict(gamma)} for a in ("control", "a", "b")},
        "looks": {"n": [60, 120], "efficacy": [0.995, 0.975], "futility": [0.05, "none"]},
        "scenarios": {"control": [1.5], "a": [1.5], "b": [1.0]},
        "simulation": {"seed": 3, "replicates": 20_000},
    }


def test_count_arms_match_the_two_arm_exact_engine():
    # counts through the family protocol (truncated lattices): each arm's marginal
    # success against the two-arm exact engine for that arm and the control, 4 SE
    d = parse(count_data())
    oc = simulate_design(d).iloc[0]
    for t, name in enumerate(d.treatment_names):
        exact = two_arm_exact(d.pairs[t], (oc[f"true_{name}"], oc["true_control"]))
        se = max(oc[f"{name}_prob_success_se"], 1e-4)
        assert abs(oc[f"{name}_prob_success"] - exact["prob_success"]) <= 4 * se, name


def test_count_one_treatment_arm_is_the_two_arm_design_bit_for_bit():
    d = parse(count_data())
    one = dataclasses.replace(
        d, treatments=d.treatments[1:], pairs=d.pairs[1:],
        looks=dataclasses.replace(d.looks, per_arm=tuple((r[0], r[2])
                                                         for r in d.looks.per_arm)),
        scenarios=Scenarios(("control", "b"), ((1.5, 1.0),)))
    oc = simulate_design(one).iloc[0]
    pair = dataclasses.replace(d.pairs[1], scenarios=Scenarios(d.pairs[1].scenarios.arms,
                                                               ((1.0, 1.5),)))
    two = octrial.evaluate(pair, method="monte-carlo").iloc[0]
    for column in ("prob_success", "prob_stop_efficacy", "prob_stop_futility",
                   "look1_stop_efficacy", "look2_stop_efficacy"):
        assert oc[column] == two[column], column


def test_a_scenario_is_simulated_the_same_whatever_follows_it():
    # scenario i, batch b has its own generator (the Monte Carlo engine's), so a row's
    # numbers do not depend on the other rows or on how the work is split
    data = design_data(drop_if_best_below=0.1)
    both = simulate_design(parse(data), replicates=60_000)
    data["scenarios"] = {k: v[:1] for k, v in data["scenarios"].items()}
    first = simulate_design(parse(data), replicates=60_000)
    assert first.iloc[0].equals(both.iloc[0])
