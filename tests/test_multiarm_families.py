"""Several treatment arms with normal (known and unknown sd) and time-to-event endpoints,
fixed allocation (octrial.multiarm.family_loop), against checks from outside the loop:
the two-arm engines, Dunnett's multivariate normal probability, the independence
identity, closed forms and scipy Monte Carlo for Pr(best), and a plain scipy study loop."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy import integrate, special, stats

import octrial
from octrial.arms_evaluation import SIMULATION, compute_arms
from octrial.design.model import Scenarios, Source
from octrial.engines.monte_carlo import batch_generator
from octrial.errors import SettingsError
from octrial.execution import Execution
from octrial.multiarm import parse_multiarm
from octrial.multiarm.continuous_best import ArmPosteriors, probability_best
from octrial.multiarm.engine import simulate_design


def normal_data(arms=("low", "mid", "high"), control=True, n=(80, 160, 240), sd=1.0,
                known=True, prior_sd=10.0, **looks):
    """A normal several-arm design (known sd: prior on the difference with the control;
    unknown sd: normal-inverse-gamma priors per arm)."""
    endpoint = ({"type": "normal", "sd": sd, "better": "higher"} if known else
                {"type": "normal", "sd": "unknown", "true_sd": sd, "better": "higher"})
    nig = {"distribution": "normal-inverse-gamma", "mean": 0.0, "mean_n": 0.01,
           "shape": 0.01, "scale": 0.01}
    own = ({"prior": nig} if not known else
           {} if control else
           {"prior": {"distribution": "normal", "mean": 0.0, "sd": prior_sd}})
    hypothesis: dict = ({"comparison": "difference", "kind": "superiority", "margin": 0.0}
                        if control else {"benchmark": 0.0})
    if known and control:
        hypothesis["prior"] = {"distribution": "normal", "mean": 0.0, "sd": prior_sd}
    return {
        "schema": 1, "name": "multi", "title": "several arms (test)",
        "endpoint": endpoint, "hypothesis": hypothesis,
        "arms": ({"control": dict(own)} if control else {}) | {a: dict(own) for a in arms},
        "looks": {"n": list(n), "efficacy": [0.999] * (len(n) - 1) + [0.975],
                  "futility": [0.05] * (len(n) - 1) + ["none"]} | looks,
        "scenarios": ({"control": [0.0, 0.0]} if control else {})
        | {a: [0.0, 0.15 * i] for i, a in enumerate(arms)},
        "simulation": {"seed": 11, "replicates": 20_000},
    }


def tte_data(arms=("low", "high"), n=(120, 240)):
    gamma = {"distribution": "gamma", "shape": 0.1, "rate": 2.0}
    return {
        "schema": 1, "name": "multi", "title": "several arms (test)",
        "endpoint": {"type": "time-to-event", "better": "lower"},
        "hypothesis": {"comparison": "ratio", "margin": 0.0},
        "arms": {"control": {"prior": gamma}} | {a: {"prior": gamma} for a in arms},
        "looks": {"n": list(n), "efficacy": [0.999, 0.975], "futility": [0.05, "none"]},
        "scenarios": {"control": [0.05, 0.05]} | {a: [0.05, 0.05 - 0.01 * (i + 1)]
                                                  for i, a in enumerate(arms)},
        "simulation": {"seed": 5, "replicates": 20_000},
    }


def parse(data):
    return parse_multiarm(data, Source("test.toml", "", ""))


def one_arm_version(d, truth):
    """The design cut down to its first treatment arm at ``truth`` (control, arm)."""
    names = (d.arm_names[0], d.arm_names[1])
    return dataclasses.replace(
        d, treatments=d.treatments[:1], pairs=d.pairs[:1],
        looks=dataclasses.replace(d.looks, per_arm=tuple(r[:2] for r in d.looks.per_arm)),
        scenarios=Scenarios(names, (truth,)))


def pair_at(pair, truth, replicates, seed):
    return dataclasses.replace(
        pair, scenarios=Scenarios(pair.scenarios.arms, (truth,)),
        simulation=dataclasses.replace(pair.simulation, replicates=replicates, seed=seed))


COMPARED = ("prob_success", "prob_stop_efficacy", "prob_stop_futility",
            "look1_stop_efficacy", "look1_stop_futility", "look2_stop_efficacy")


# -- one treatment arm is the two-arm design -------------------------------------------

@pytest.mark.parametrize("known", [True, False])
def test_one_normal_arm_is_the_two_arm_monte_carlo_and_exact(known):
    # source: the two-arm normal simulators (numba kernels of octrial.simulation.normal
    # and normal_unknown) draw the same increments from the same generator, so their
    # numbers come out here; known sd also against the exact recursion (4 SE)
    d = parse(normal_data(known=known))
    one = one_arm_version(d, (0.0, 0.2))
    oc = simulate_design(one, replicates=60_000).iloc[0]
    pair = pair_at(d.pairs[0], (0.2, 0.0), 60_000, 11)
    two = octrial.evaluate(pair, method="monte-carlo").iloc[0]
    for column in COMPARED:
        assert oc[column] == pytest.approx(two[column], abs=1e-12), column
    assert oc["expected_n"] == pytest.approx(two["expected_n"], rel=1e-12)
    assert oc["low_prob_success"] == oc["prob_success"]
    if known:
        exact = octrial.evaluate(pair, method="exact").iloc[0]
        assert abs(oc["prob_success"] - exact["prob_success"]) <= 4 * oc["prob_success_se"]
        assert abs(oc["look1_stop_futility"] - exact["look1_stop_futility"]) <= 4 * np.sqrt(
            exact["look1_stop_futility"] * (1 - exact["look1_stop_futility"]) / 60_000)


def test_one_time_to_event_arm_is_the_generic_study_loop():
    # source: the generic study loop (octrial.simulation.generic) draws each arm's total
    # time on study look by look for the running studies, as the several-arm loop does
    d = parse(tte_data())
    one = one_arm_version(d, (0.05, 0.035))
    oc = simulate_design(one, replicates=30_000).iloc[0]
    two = octrial.evaluate(pair_at(d.pairs[0], (0.035, 0.05), 30_000, 5),
                           method="monte-carlo").iloc[0]
    for column in COMPARED:
        assert oc[column] == pytest.approx(two[column], abs=1e-12), column
    assert oc["expected_n"] == pytest.approx(two["expected_n"], rel=1e-12)


# -- family-wise error -------------------------------------------------------------------

def test_fwer_with_shared_control_is_dunnett():
    # one look, flat prior on each difference, known sd: Pr(d_j > 0 | data) >= 0.975 is
    # exactly z_j >= 1.959964 with corr(z_i, z_j) = 1/2 for equal allocation (Dunnett
    # 1955); FWER = 1 - Phi_3(1.959964; rho = 1/2) by scipy's multivariate normal CDF
    data = normal_data(n=(400,))
    data["hypothesis"]["prior"] = {"distribution": "flat"}
    data["looks"] = {"n": [400], "efficacy": 0.975}
    data["scenarios"] = {a: [0.3] for a in ("control", "low", "mid", "high")}
    d = parse(data)
    oc = simulate_design(d, replicates=100_000).iloc[0]
    cov = np.full((3, 3), 0.5) + 0.5 * np.eye(3)
    dunnett = 1 - stats.multivariate_normal(np.zeros(3), cov).cdf(
        np.full(3, stats.norm.ppf(0.975)))
    assert abs(oc["fwer"] - dunnett) <= 4 * oc["fwer_se"]
    assert oc["fwer"] < 1 - 0.975**3 - 4 * oc["fwer_se"]  # below independence


def test_fwer_against_a_benchmark_is_one_minus_the_product():
    # no control: independent arms, FWER = 1 - prod(1 - alpha_j) (identity), alpha_j
    # each arm's type I error by the exact recursion of the one-arm normal design
    arms = ("a1", "a2", "a3")
    data = normal_data(arms=arms, control=False, n=(60, 120))
    data["scenarios"] = {a: [0.0] for a in arms}
    d = parse(data)
    alphas = [octrial.evaluate(pair_at(p, (0.0,), 1, 1), method="exact").iloc[0][
        "prob_success"] for p in d.pairs]
    oc = simulate_design(d, replicates=100_000).iloc[0]
    expected = 1 - np.prod(1 - np.array(alphas))
    assert abs(oc["fwer"] - expected) <= 4 * oc["fwer_se"]
    assert oc["fwer"] == oc["prob_success"]


# -- Pr(best) ----------------------------------------------------------------------------

def _posts(kind, firsts, seconds, df=None):
    return [ArmPosteriors.of(kind, np.ones(1), np.array([f]), np.array([s]),
                             None if df is None else np.array([df]))
            for f, s in zip(firsts, seconds, strict=True)]


@pytest.mark.parametrize(("low", "high", "tolerance"), [
    (1, 2, 1e-12), (2, 10, 1e-7), (10, 30, 1e-11), (30, 100, 1e-6), (100, 300, 5e-5),
    (300, 1000, 3e-4)])
def test_pr_best_of_two_normals_is_the_closed_form(low, high, tolerance):
    # closed form: Pr(X1 > X2) = Phi((m1 - m2) / sqrt(s1^2 + s2^2)); 2,000 random pairs
    # whose scale ratio lies in [low, high] (each band has its own quadrature rule)
    rng = np.random.default_rng(low)
    n = 2_000
    m1, m2 = rng.normal(size=n), rng.normal(size=n)
    s1 = np.exp(rng.uniform(-1, 1, n))
    s2 = s1 * np.exp(rng.uniform(np.log(low), np.log(high), n))
    s2 = np.where(rng.uniform(size=n) < 0.5, s2, s1 * s1 / s2)  # either arm the wider
    posts = [ArmPosteriors.of("normal", np.ones(n), m, s) for m, s in ((m1, s1), (m2, s2))]
    p = probability_best(posts, np.ones((n, 2), bool), True)
    expected = stats.norm.cdf((m1 - m2) / np.hypot(s1, s2))
    assert np.abs(p[:, 0] - expected).max() <= tolerance
    assert np.abs(p.sum(axis=1) - 1).max() <= tolerance


@pytest.mark.parametrize(("kind", "firsts", "seconds", "df", "higher"), [
    ("normal", (0.0, 0.1, 0.25, -0.1), (0.1, 0.2, 0.3, 0.05), None, True),
    ("t", (0.0, 0.1, 0.25, -0.1), (0.1, 0.2, 0.3, 0.05), 4.0, True),
    ("gamma", (20.0, 5.0, 40.0), (400.0, 80.0, 1000.0), None, False),
])
def test_pr_best_against_scipy_monte_carlo(kind, firsts, seconds, df, higher):
    # source: 400,000 draws from scipy's distributions; 4 SE of a proportion
    draws = 400_000
    rng = np.random.default_rng(2026)
    if kind == "gamma":
        x = np.column_stack([stats.gamma(a, scale=1 / b).rvs(draws, random_state=rng)
                             for a, b in zip(firsts, seconds, strict=True)])
    elif kind == "t":
        x = np.column_stack([stats.t(df, m, s).rvs(draws, random_state=rng)
                             for m, s in zip(firsts, seconds, strict=True)])
    else:
        x = np.column_stack([stats.norm(m, s).rvs(draws, random_state=rng)
                             for m, s in zip(firsts, seconds, strict=True)])
    best = np.argmax(x if higher else -x, axis=1)
    mc = np.bincount(best, minlength=len(firsts)) / draws
    p = probability_best(_posts(kind, firsts, seconds, df), np.ones((1, len(firsts)), bool),
                         higher)[0]
    assert p.sum() == pytest.approx(1.0, abs=1e-5)
    assert np.all(np.abs(p - mc) <= 4 * np.sqrt(mc * (1 - mc) / draws) + 1e-9)


def test_pr_best_of_two_gammas_is_the_closed_form():
    # closed form, lower is better: X_i ~ Gamma(a_i, rate b_i), G_i = b_i X_i ~
    # Gamma(a_i, 1), W = G1 / (G1 + G2) ~ Beta(a1, a2) and X1 < X2 iff
    # W < b1 / (b1 + b2) (the beta representation of a ratio of gammas); checked
    # against scipy quad of the density times the other's survival function
    a1, b1, a2, b2 = 12.0, 300.0, 7.0, 120.0
    closed = stats.beta(a1, a2).cdf(b1 / (b1 + b2))
    p = probability_best(_posts("gamma", (a1, a2), (b1, b2)), np.ones((1, 2), bool), False)
    assert p[0, 0] == pytest.approx(closed, abs=2e-6)
    quad = integrate.quad(lambda u: stats.gamma(a1, scale=1 / b1).pdf(u)
                          * stats.gamma(a2, scale=1 / b2).sf(u), 0, np.inf)[0]
    assert closed == pytest.approx(quad, abs=1e-8)


# -- dropping and selection study by study -----------------------------------------------

def reference_counts(d, truth_slots, reps, seed, keep, below):
    """A plain loop, study by study, with scipy: the known-sd design of
    :func:`normal_data` (prior N(0, 10^2) on each difference), its words drawn as the
    normal simulators draw them (standard normals, shape (studies, looks, slots))."""
    T, K = len(d.treatments), d.looks.count
    per = np.array(d.looks.per_arm)[:, np.r_[1:T + 1, 0]]
    inc = np.diff(per, axis=0, prepend=0)
    z = batch_generator(seed, 0, 0).standard_normal((reps, K, T + 1))
    sums = np.cumsum((np.asarray(truth_slots) + z / np.sqrt(inc)) * inc, axis=1)
    efficacy, futility = d.pairs[0].looks.efficacy, d.pairs[0].looks.futility
    counts = {"success": np.zeros(T, int), "drop": np.zeros((T, K), int),
              "efficacy": np.zeros((T, K), int)}

    def benefit(r, t, k):
        n_t, n_c = per[k, t], per[k, T]
        est = sums[r, k, t] / n_t - sums[r, k, T] / n_c
        info = 1 / (1 / n_t + 1 / n_c)
        precision = 1 / 100 + info
        return stats.norm.sf(0, info * est / precision, 1 / np.sqrt(precision))

    def best(r, k, live):
        means = [sums[r, k, t] / per[k, t] for t in range(T)]
        sds = [1 / np.sqrt(per[k, t]) for t in range(T)]
        out = np.zeros(T)
        for j in live:
            others = [i for i in live if i != j]
            def integrand(u, j=j, others=others):
                z = (u - means[j]) / sds[j]
                density = np.exp(-0.5 * z * z) / (sds[j] * np.sqrt(2 * np.pi))
                return density * np.prod([special.ndtr((u - means[i]) / sds[i])
                                          for i in others])
            out[j] = integrate.quad(integrand, means[j] - 12 * sds[j],
                                    means[j] + 12 * sds[j], epsabs=1e-11)[0]
        return out

    for r in range(reps):
        live = list(range(T))
        for k in range(K):
            for t in list(live):
                b = benefit(r, t, k)
                if b >= efficacy[k]:
                    counts["success"][t] += 1
                    counts["efficacy"][t, k] += 1
                    live.remove(t)
                elif k == K - 1 or (futility[k] is not None and b < futility[k]):
                    live.remove(t)
            if k < K - 1 and live:
                p = best(r, k, live)
                for t in list(live):
                    if below is not None and p[t] < below:
                        live.remove(t)
                        counts["drop"][t, k] += 1
                while keep and len(live) > keep:
                    worst = max((t for t in live), key=lambda t: (-p[t], t))
                    live.remove(worst)
                    counts["drop"][worst, k] += 1
            if not live:
                break
    return counts


@pytest.mark.parametrize(("keep", "below"), [(None, 0.15), (2, None), (1, 0.2)])
def test_dropping_and_selection_study_by_study(keep, below):
    # source: a plain per-study loop with scipy (norm.sf for the benefit, quad for
    # Pr(best)) on the same standard normals; counts must agree exactly
    reps = 200
    looks = {"drop_if_best_below": [below, below, "none"]} if below is not None else {}
    data = normal_data(**looks)
    if keep is not None:
        data["selection"] = {"keep": keep}
    data["scenarios"] = {"control": [0.0], "low": [0.1], "mid": [0.2], "high": [0.3]}
    d = parse(data)
    oc = simulate_design(d, replicates=reps, seed=17).iloc[0]
    ref = reference_counts(d, (0.1, 0.2, 0.3, 0.0), reps, 17, keep, below)
    for t, arm in enumerate(d.treatment_names):
        assert round(oc[f"{arm}_prob_success"] * reps) == ref["success"][t], arm
        for k in range(d.looks.count):
            assert round(oc[f"{arm}_look{k + 1}_drop"] * reps) == ref["drop"][t, k]
            assert round(oc[f"{arm}_look{k + 1}_stop_efficacy"] * reps) == ref[
                "efficacy"][t, k]
    assert ref["drop"].sum() > 0  # the rule acted


def test_time_to_event_dropping_runs_and_drops_the_worst():
    data = tte_data(arms=("low", "mid", "high"), n=(160, 320))
    data["scenarios"] = {"control": [0.05], "low": [0.05], "mid": [0.04], "high": [0.03]}
    data["looks"]["drop_if_best_below"] = [0.1, "none"]
    d = parse(data)
    oc = simulate_design(d, replicates=4_000).iloc[0]
    assert oc["low_look1_drop"] > oc["high_look1_drop"]
    assert oc["high_prob_success"] > oc["low_prob_success"]


def test_same_numbers_whatever_the_split():
    # one seed per scenario and batch: scenario 2 alone gives the numbers it gives
    # after scenario 1
    d = parse(normal_data(known=False, drop_if_best_below=0.1))
    both = simulate_design(d, replicates=1_000)
    alone = simulate_design(dataclasses.replace(
        d, scenarios=Scenarios(d.scenarios.arms, d.scenarios.values[:1])), replicates=1_000)
    pd_cols = [c for c in alone.columns if c != "scenario"]
    assert both.iloc[0][pd_cols].equals(alone.iloc[0][pd_cols])


def test_two_workers_give_the_numbers_of_one():
    # identity: one generator per scenario and batch, whatever the split of the work
    d = parse(tte_data())
    one = simulate_design(d, replicates=2_000)
    two = simulate_design(d, replicates=2_000, execution=Execution(jobs=2))
    assert one.equals(two)


def test_run_simulates_normal_designs_with_the_family_loop():
    # octrial run's engine choice: no exact several-arm engine for normal endpoints, so
    # simulation, whose numbers are simulate_design's (identity)
    d = parse(normal_data())
    d = dataclasses.replace(d, simulation=dataclasses.replace(d.simulation,
                                                              replicates=2_000))
    found = compute_arms(d)
    assert found.info["engine"] == SIMULATION
    direct = simulate_design(d)
    for column in ("prob_success", "fwer", "low_prob_success", "high_look1_stop_futility"):
        assert found.oc[column].tolist() == direct[column].tolist(), column


# -- bad input ---------------------------------------------------------------------------

@pytest.mark.parametrize(("change", "key"), [
    (lambda d: d.__setitem__("allocation", {"kind": "power"}), "allocation.kind"),
    (lambda d: d["looks"].__setitem__("futility_predictive", [0.05, 0.05, "none"]),
     "looks.futility_predictive"),
])
def test_unsupported_settings_are_refused_naming_the_key(change, key):
    data = normal_data()
    change(data)
    d = parse(data)
    with pytest.raises(SettingsError) as err:
        simulate_design(d, replicates=100)
    assert key in str(err.value)


def test_conduct_is_refused_naming_the_key():
    d = parse(tte_data())
    with_conduct = dataclasses.replace(d, pairs=tuple(
        dataclasses.replace(p, conduct=object()) for p in d.pairs))
    with pytest.raises(SettingsError) as err:
        simulate_design(with_conduct, replicates=100)
    assert "conduct" in str(err.value)
