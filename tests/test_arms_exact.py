"""The exact several-arm engine (fixed allocation) against references outside it.

- One treatment arm: the existing two-arm (and one-arm) exact engine, equal to rounding.
- Arms against a benchmark share nothing: the family-wise error under the global null is
  1 - prod(1 - alpha_j) and the number of successes is Poisson-binomial, with alpha_j from
  the one-arm exact engine (identity for independent events).
- A tiny shared-control study: brute-force enumeration of every data path with scipy's
  binomial pmf (independent of the engine's walk over control paths).
- A larger shared-control study: plain numpy Monte Carlo of whole studies, within 4
  standard errors (SE = sqrt(p (1 - p) / R); sd / sqrt(R) for sample sizes).
"""

from __future__ import annotations

import itertools
import tomllib

import numpy as np
import pytest
from scipy import stats

from octrial.calibration.arms import with_threshold
from octrial.design.model import Source
from octrial.engines.arms_exact import check_pairs, evaluate_design, run_arms, stopping_sd
from octrial.engines.exact_lattice import ExactLatticeEngine
from octrial.multiarm import parse_multiarm
from octrial.rules.lattice import build_rule
from tests.helpers import ONE_ARM, TWO_ARM, build

COUNT_TWO = {
    "schema": 1,
    "name": "count-two-arm",
    "endpoint": {"type": "count", "exposure": 0.5},
    "hypothesis": {"comparison": "ratio", "kind": "superiority", "margin": 0.0},
    "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1, "rate": 1}},
             "control": {"prior": {"distribution": "gamma", "shape": 1, "rate": 1}}},
    "looks": {"n": [6, 12], "efficacy": [0.95, 0.9], "futility": 0.2,
              "futility_predictive": 0.2},
    "scenarios": {"control": [1.0], "ratio": [1.0]},
}


def binary_pair(n: list[int], efficacy: list[float], futility: float = 0.1, **changes):
    return build(TWO_ARM, looks__n=n, looks__efficacy=efficacy, looks__futility=futility,
                 **changes)


def on_a_grid_point():
    """A grid posterior (logit-normal prior) whose final threshold is the posterior
    probability at one lattice point, so that point's decision is uncertain."""
    design = binary_pair([10, 20], [0.99, 0.95], hypothesis__comparison="odds-ratio",
                         arms__treatment__prior={"distribution": "logit-normal",
                                                 "logit_mean": -1.0, "logit_sd": 1.0})
    return with_threshold(design, float(build_rule(design).final.benefit[7, 3]))


@pytest.mark.parametrize("design, truths", [
    (binary_pair([12, 24, 36], [0.995, 0.99, 0.975]),
     np.array([[0.3, 0.3], [0.5, 0.3], [0.05, 0.6]])),
    (build(COUNT_TWO), np.array([[1.0, 1.0], [0.5, 1.0], [2.0, 1.5]])),
    (build(ONE_ARM), np.array([[0.2], [0.35]])),
    (on_a_grid_point(), np.array([[0.3, 0.3], [0.5, 0.3]])),
])
def test_one_arm_equals_existing_engine(design, truths):
    # reference: the project's two-arm / one-arm exact engine (lattice programme)
    reference = ExactLatticeEngine.run(design, truths, estimate=False)
    found = run_arms([design], truths)
    np.testing.assert_allclose(found.efficacy[:, 0], reference.efficacy, rtol=0, atol=1e-13)
    np.testing.assert_allclose(found.futility[:, 0], reference.futility, rtol=0, atol=1e-13)
    np.testing.assert_allclose(found.any_success, reference.efficacy.sum(axis=1), atol=1e-13)
    # posteriors on a grid: the same mass on points numerical error could change
    unsure = reference.info.get("max_uncertain_mass", 0.0)  # 0.031 for on_a_grid_point
    assert found.uncertain.max() == pytest.approx(unsure, rel=1e-9, abs=1e-15)
    # truncated counts: the same neglected mass, up to rounding (union bound per arm)
    lost = reference.info["max_neglected_mass"]
    assert found.neglected.max() == pytest.approx(lost, rel=1e-3, abs=1e-15)
    # expected subjects: sum over looks of Pr(reach look k) x the look's new subjects
    reach = 1.0 - np.cumsum(reference.efficacy + reference.futility, axis=1)[:, :-1]
    reach = np.hstack([np.ones((len(truths), 1)), reach])
    increments = np.diff(np.array([0, *(n[0] for n in design.looks.per_arm)]))
    np.testing.assert_allclose(found.expected_n[:, 0], reach @ increments, atol=1e-10)


def test_benchmark_arms_are_independent():
    # identity for independent events: FWER = 1 - prod(1 - alpha_j); the number of
    # successes is Poisson-binomial; alpha_j from the one-arm exact engine.
    pairs = [build(ONE_ARM),
             build(ONE_ARM, looks__efficacy=[0.995, 0.98, 0.9]),
             build(ONE_ARM, hypothesis__benchmark=0.25, looks__futility=0.1)]
    truths = np.array([[0.2, 0.2, 0.25], [0.2, 0.4, 0.25]])
    found = run_arms(pairs, truths)
    alpha = np.array([[ExactLatticeEngine.run(p, truths[i : i + 1, [j]], estimate=False)
                       .efficacy.sum() for j, p in enumerate(pairs)] for i in range(2)])
    np.testing.assert_allclose(found.success, alpha, atol=1e-13)
    np.testing.assert_allclose(found.family_wise[0], 1 - np.prod(1 - alpha[0]), atol=1e-13)
    # second row: arm 2 is not null, so the family is arms 1 and 3
    np.testing.assert_allclose(found.family_wise[1],
                               1 - (1 - alpha[1, 0]) * (1 - alpha[1, 2]), atol=1e-13)
    assert found.null.tolist() == [[True, True, True], [True, False, True]]
    # Pr(no arm succeeds) = prod(1 - alpha_j); Pr(all succeed) = prod(alpha_j)
    np.testing.assert_allclose(found.successes[:, 0], np.prod(1 - alpha, axis=1), atol=1e-13)
    np.testing.assert_allclose(found.successes[:, -1], np.prod(alpha, axis=1), atol=1e-13)
    assert np.all(found.expected_n[:, -1] == 0)


def _brute_force(pairs, truths):
    """Every data path of a shared-control study enumerated; the rule applied arm by arm."""
    rules = [build_rule(p) for p in pairs]
    looks = pairs[0].looks
    n_arms = len(pairs)
    per_look = [[looks.per_arm[k][i] - (looks.per_arm[k - 1][i] if k else 0)
                 for i in (0, 1)] for k in range(looks.count)]
    groups = n_arms + 1  # treatment arms, then the control
    ranges = [range(per_look[k][1 if g == n_arms else 0] + 1)
              for k in range(looks.count) for g in range(groups)]
    success = np.zeros(n_arms)
    family_wise = 0.0
    control_n = 0.0
    for path in itertools.product(*ranges):
        inc = np.array(path).reshape(looks.count, groups)
        prob = 1.0
        for k in range(looks.count):
            for g in range(groups):
                size = per_look[k][1 if g == n_arms else 0]
                prob *= stats.binom.pmf(inc[k, g], size, truths[g])
        counts = np.cumsum(inc, axis=0)
        alive = [True] * n_arms
        won = [False] * n_arms
        n_c = 0
        for k in range(looks.count):
            if not any(alive):
                break
            n_c = looks.per_arm[k][1]
            for j in range(n_arms):
                if alive[j]:
                    x, c = counts[k, j], counts[k, n_arms]
                    if rules[j].looks[k].efficacy[x, c]:
                        won[j], alive[j] = True, False
                    elif rules[j].looks[k].futility[x, c]:
                        alive[j] = False
        success += prob * np.array(won)
        null = [truths[j] <= truths[-1] for j in range(n_arms)]
        family_wise += prob * any(w and z for w, z in zip(won, null, strict=True))
        control_n += prob * n_c
    return success, family_wise, control_n


def test_shared_control_against_enumeration():
    # reference: brute-force enumeration with scipy.stats.binom (4^6 data paths)
    pairs = [binary_pair([6, 12], [0.9, 0.8], futility=0.3),
             binary_pair([6, 12], [0.85, 0.8], futility=0.25)]
    truths = np.array([0.35, 0.5, 0.35])
    success, family_wise, control_n = _brute_force(pairs, truths)
    found = run_arms(pairs, truths[None, :])
    np.testing.assert_allclose(found.success[0], success, atol=1e-13)
    np.testing.assert_allclose(found.family_wise[0], family_wise, atol=1e-13)
    np.testing.assert_allclose(found.expected_n[0, -1], control_n, atol=1e-12)
    assert found.family_wise[0] > 0.01  # the check is not vacuous


def test_shared_control_against_monte_carlo():
    # reference: whole studies simulated with numpy's binomial generator; 4 SE
    pairs = [binary_pair([8, 16, 24], [0.99, 0.98, 0.95], futility=0.2),
             binary_pair([8, 16, 24], [0.99, 0.98, 0.95], futility=0.2),
             binary_pair([8, 16, 24], [0.995, 0.98, 0.9], futility=0.1)]
    truths = np.array([0.3, 0.3, 0.55, 0.3])
    found = run_arms(pairs, truths[None, :])
    rules = [build_rule(p) for p in pairs]
    rng = np.random.default_rng(20261205)
    reps, n_arms = 200_000, 3
    x = np.zeros((reps, n_arms + 1), dtype=int)
    alive = np.ones((reps, n_arms), dtype=bool)
    won = np.zeros((reps, n_arms), dtype=bool)
    n_used = np.zeros((reps, n_arms + 1))
    ended = np.full(reps, -1)
    for k in range(3):
        running = alive.any(axis=1)
        x += rng.binomial(4, truths, size=(reps, n_arms + 1))
        n_used[running, -1] += 4
        n_used[:, :-1] += 4 * alive
        for j in range(n_arms):
            table = rules[j].looks[k]
            eff = table.efficacy[x[:, j], x[:, -1]] & alive[:, j]
            fut = table.futility[x[:, j], x[:, -1]] & alive[:, j]
            won[:, j] |= eff
            alive[:, j] &= ~(eff | fut)
        ended[running & ~alive.any(axis=1)] = k
    p_hat = won.mean(axis=0)
    se = np.sqrt(p_hat * (1 - p_hat) / reps)
    # the study ends at look k (every arm stopped) with / without a successful arm
    for k in range(3):
        for outcome, success in ((found.study_efficacy, True), (found.study_futility, False)):
            q, e = ((ended == k) & (won.any(axis=1) == success)).mean(), outcome[0, k]
            assert abs(e - q) < 4 * np.sqrt(e * (1 - e) / reps)  # SE at the exact value
    assert np.all(np.abs(found.success[0] - p_hat) < 4 * se)
    fwer = (won[:, 0] | won[:, 1]).mean()
    assert abs(found.family_wise[0] - fwer) < 4 * np.sqrt(fwer * (1 - fwer) / reps)
    any_won = won.any(axis=1).mean()
    assert abs(found.any_success[0] - any_won) < 4 * np.sqrt(any_won * (1 - any_won) / reps)
    mean_n, sd_n = n_used.mean(axis=0), n_used.std(axis=0)
    assert np.all(np.abs(found.expected_n[0] - mean_n) < 4 * sd_n / np.sqrt(reps) + 1e-12)
    assert not found.null[0, 2] and found.null[0, :2].all()
    # variances of the sample sizes: SE of a sample variance sqrt((m4 - s^4) / R)
    exact_var = stopping_sd(pairs, found)[0] ** 2
    centred = n_used - mean_n
    var, m4 = (centred**2).mean(axis=0), (centred**4).mean(axis=0)
    assert np.all(np.abs(exact_var - var) < 4 * np.sqrt((m4 - var**2) / reps))


def test_count_shared_control_against_monte_carlo():
    # reference: whole studies simulated with numpy's Poisson generator (exposure 0.5 per
    # subject, 6 subjects per arm per look); 4 SE
    pairs = [build(COUNT_TWO), build(COUNT_TWO, looks__futility=0.3)]
    truths = np.array([1.0, 0.5, 1.0])  # arm 1 null (ratio 1), arm 2 halves the rate
    found = run_arms(pairs, truths[None, :])
    rules = [build_rule(p, truths=np.array([[t, 1.0] for t in truths[:2]])) for p in pairs]
    rng = np.random.default_rng(51)
    reps = 200_000
    x = np.zeros((reps, 3), dtype=int)
    alive = np.ones((reps, 2), dtype=bool)
    won = np.zeros((reps, 2), dtype=bool)
    for k in range(2):
        x += rng.poisson(truths * 0.5 * 3, size=(reps, 3))
        for j in range(2):
            table = rules[j].looks[k]
            xs = np.minimum(x[:, j], table.shape[0] - 1)
            xc = np.minimum(x[:, -1], table.shape[1] - 1)
            eff = table.efficacy[xs, xc] & alive[:, j]
            fut = table.futility[xs, xc] & alive[:, j]
            won[:, j] |= eff
            alive[:, j] &= ~(eff | fut)
    p_hat = won.mean(axis=0)
    assert np.all(np.abs(found.success[0] - p_hat) < 4 * np.sqrt(p_hat * (1 - p_hat) / reps))
    assert found.neglected[0] < 1e-9
    # only arm 1 is null: the family-wise error is its success, up to the neglected mass
    assert found.family_wise[0] == pytest.approx(found.success[0, 0], abs=found.neglected[0])


def test_inconsistent_arms_are_refused():
    with pytest.raises(ValueError, match="same number of arms"):
        check_pairs([build(ONE_ARM), binary_pair([20, 40], [0.99, 0.975])])
    with pytest.raises(ValueError, match="same sample size"):
        check_pairs([binary_pair([20, 40], [0.99, 0.975]),
                     binary_pair([20, 30], [0.99, 0.975])])
    with pytest.raises(ValueError, match="columns"):
        run_arms([binary_pair([20, 40], [0.99, 0.975])], np.array([[0.3, 0.3, 0.3]]))


THREE_DOSES = """
schema = 1
name = "three-doses"
title = "Two doses and placebo (invented)"
[endpoint]
type = "binary"
better = "higher"
[hypothesis]
comparison = "difference"
kind = "superiority"
margin = 0.0
[arms.control]
prior = { distribution = "beta", a = 1, b = 1 }
[arms.low]
prior = { distribution = "beta", a = 1, b = 1 }
[arms.high]
prior = { distribution = "beta", a = 1, b = 1 }
[looks]
n = [24, 48, 72]
efficacy = [0.995, 0.99, 0.975]
futility = 0.1
[scenarios]
control = 0.3
low = [0.3, 0.3]
high = [0.3, 0.55]
"""


def multiarm(text: str):
    return parse_multiarm(tomllib.loads(text), Source("three.toml", "", text))


def test_design_file_evaluation():
    # the design read from a file gives each arm's own design; with the arms' columns
    # reordered the table is run_arms' (and the arm with the same truth as another
    # arm has the same per-arm numbers: a symmetry of the design)
    design = multiarm(THREE_DOSES)
    table, outcome = evaluate_design(design)
    assert list(table.columns[:3]) == ["true_control", "true_low", "true_high"]
    assert np.array_equal(outcome.success[:, 1], table["high_prob_success"])
    assert table.loc[0, "low_prob_success"] == pytest.approx(
        table.loc[0, "high_prob_success"], abs=1e-15)
    assert table.loc[1, "low_prob_success"] == pytest.approx(
        table.loc[0, "low_prob_success"], abs=1e-15)
    assert table.loc[1, "fwer"] == pytest.approx(
        table.loc[1, "low_prob_success"], abs=1e-15)
    dropping = multiarm(THREE_DOSES.replace("futility = 0.1",
                                            "futility = 0.1\ndrop_if_best_below = 0.1"))
    with pytest.raises(ValueError, match="Pr\\(best\\)"):
        evaluate_design(dropping)
