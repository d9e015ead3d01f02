"""Allocation of subjects to arms: adaptive-allocation maths, Pr(best), the study loop.

External checks, each named beside its test:
* allocation shares against hand computation (the arithmetic is written out);
* binomial draws by inversion against scipy.stats.binom.ppf;
* Pr(best) against scipy's adaptive quadrature of the quantile-substituted integral,
  against an independent Monte Carlo from scipy.stats.beta draws, and for two arms
  against the closed-form finite sum for integer parameters;
* fixed allocation by complete randomisation against the binomial distribution of arm
  sizes and (by thinning) of responses, within 4 standard errors;
* the allocation sequence of simulated studies against an independent recomputation
  (scipy quadrature and the allocation rule written out).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, special, stats

from octrial.allocation import AllocationRule, next_allocation, probability_best
from octrial.allocation.kernel import best_now, binomial_inverse
from octrial.allocation.simulate import AdaptiveStudy, simulate, simulate_batch, summary
from octrial.errors import SettingsError

ALL = np.ones(4, bool)

# Each row: rule, Pr(best) (control first), active arms, enrolled, maximum, and the
# shares computed by hand (arithmetic in the comment).
HAND = [
    # c = 1, control 0.25: 0.75 x (0.6, 0.3, 0.1)
    (AllocationRule("power", 1.0, 0.25), [0, .6, .3, .1], ALL, 40, 120,
     [0.25, 0.45, 0.225, 0.075]),
    # c = 60 / (2 x 120) = 0.25; 0.9^.25 = 0.974004, 0.09^.25 = 0.547723,
    # 0.01^.25 = 0.316228, sum 1.837955; x 0.75 (equal control share 1/4); every share
    # above the floor 0.1
    (AllocationRule("information", minimum=0.1), [0, .9, .09, .01], ALL, 60, 120,
     [0.25, 0.75 * 0.974004 / 1.837955, 0.75 * 0.547723 / 1.837955,
      0.75 * 0.316228 / 1.837955]),
    # c = 2: 0.64, 0.0225, 0.0025 -> shares 0.959, 0.034, 0.004 of 0.75; the last two
    # are below the minimum 0.1 (0.1333 of 0.75), held there; the first takes the rest
    (AllocationRule("power", 2.0, minimum=0.1), [0, .8, .15, .05], ALL, 30, 90,
     [0.25, 0.55, 0.1, 0.1]),
    # no control, minimum 0.2: 0.7, 0.21, 0.09 -> the third is held at 0.2; 0.8 split
    # 0.7 : 0.21 gives 0.615, 0.185, so the second is held too; the first gets 0.6
    (AllocationRule("power", 1.0, minimum=0.2), [.7, .21, .09], np.ones(3, bool), 10, 90,
     [0.6, 0.2, 0.2]),
    # before the burn-in: the fixed ratio 2:1:1:1
    (AllocationRule("power", 1.0, burn_in=50, ratio=(2, 1, 1, 1)), [0, .9, .05, .05], ALL,
     40, 120, [0.4, 0.2, 0.2, 0.2]),
    # fixed ratio with arm 2 dropped: 2:1:1 over the rest
    (AllocationRule("fixed", ratio=(2, 1, 1, 1)), [0, .9, .05, .05],
     np.array([1, 1, 0, 1], bool), 40, 120, [0.5, 0.25, 0.0, 0.25]),
    # c = 0: equal treatment shares; arm 3 dropped, control 1/3 (two treatment arms)
    (AllocationRule("power", 0.0), [0, .9, .1, 0.0], np.array([1, 1, 1, 0], bool), 40,
     120, [1 / 3, 1 / 3, 1 / 3, 0.0]),
    # only the control left
    (AllocationRule("power", 1.0, 0.3), [0, .5, .5, 0], np.array([1, 0, 0, 0], bool), 40,
     120, [1.0, 0.0, 0.0, 0.0]),
    # before the burn-in with a stated control share 0.3 and arm 2 dropped: the control
    # keeps 0.3, the two treatment arms left split 0.7 equally (0.35 each)
    (AllocationRule("information", control_share=0.3, burn_in=120), [0, .5, .2, .3],
     np.array([1, 1, 0, 1], bool), 60, 360, [0.3, 0.35, 0.0, 0.35]),
]


@pytest.mark.parametrize("rule, best, active, enrolled, maximum, expected", HAND)
def test_shares_against_hand_computation(rule, best, active, enrolled, maximum,
                                         expected):
    control = len(best) == 4
    got = next_allocation(rule, np.array(best, float), active, control, enrolled, maximum)
    np.testing.assert_allclose(got, expected, atol=2e-6)
    assert got.sum() == pytest.approx(1.0)


def test_bad_rule_names_key_expected_and_got():
    rule = AllocationRule("square", power=-1, control_share=0.9, minimum=0.5)
    with pytest.raises(SettingsError) as caught:
        rule.check(3, True)
    text = str(caught.value)
    for piece in ("form", "'square'", "power", "minimum", "at most 0.0333333"):
        assert piece in text


@pytest.mark.parametrize("n", [0, 1, 7, 40, 200])
@pytest.mark.parametrize("p", [0.03, 0.3, 0.5, 0.77, 0.99])
def test_binomial_inversion_equals_scipy_ppf(n, p):
    # scipy.stats.binom.ppf is the inverse CDF; p > 0.5 is drawn as n - Binomial(n, 1-p)
    u = np.random.default_rng(5).random(400)
    q = 1 - p if p > 0.5 else p
    cdf = stats.binom.cdf(np.arange(n + 1), n, q)
    clear = np.min(np.abs(u[:, None] - cdf[None, :]), axis=1) > 1e-9
    ref = stats.binom.ppf(u, n, q)
    ref = n - ref if p > 0.5 else ref
    got = np.array([binomial_inverse(n, p, v) for v in u])
    np.testing.assert_array_equal(got[clear], ref[clear])


def _best_by_substitution(x, n, a0, b0):
    # Pr(j best) = int_0^1 prod_{i != j} F_i(Q_j(v)) dv (v = F_j(u); METHODS.md,
    # two arms), by scipy.integrate.quad: no singular density in the integrand
    a = [a0 + xi for xi in x]
    b = [b0 + ni - xi for xi, ni in zip(x, n, strict=True)]
    out = []
    for j in range(len(x)):
        def f(v, j=j):
            u = stats.beta.ppf(v, a[j], b[j])
            return np.prod([stats.beta.cdf(u, a[i], b[i]) for i in range(len(x)) if i != j])
        out.append(integrate.quad(f, 0, 1, limit=200, epsabs=1e-13)[0])
    return np.array(out)


BEST_CASES = [([0, 0, 0], [120, 120, 120]), ([0, 1, 3], [120, 60, 10]),
              ([120, 119, 110], [120, 120, 120]), ([0, 0], [1, 0]),
              ([30, 45, 60], [120, 120, 120]), ([5, 6, 7], [200, 200, 200]),
              ([0, 300, 150], [300, 300, 300]), ([2, 3, 4, 9], [150, 150, 150, 150])]


@pytest.mark.parametrize("x, n", BEST_CASES)
@pytest.mark.parametrize("a0, b0, tolerance", [(1, 1, 1e-6), (0.5, 0.5, 5e-5)])
def test_probability_best_against_adaptive_quadrature(x, n, a0, b0, tolerance):
    # tolerances measured (max 2e-7 with shapes >= 1, 1.2e-5 with Jeffreys' singular
    # densities), with a margin
    got = probability_best(np.array(x), np.array(n), (1, a0, b0))
    np.testing.assert_allclose(got, _best_by_substitution(x, n, a0, b0), atol=tolerance)


def test_probability_best_against_scipy_monte_carlo():
    # independent Monte Carlo: 400,000 draws per arm from scipy.stats.beta
    x, n, prior = np.array([4, 7, 9, 12]), np.array([20, 25, 30, 28]), (1, 0.5, 1.5)
    draws = np.stack([stats.beta.rvs(0.5 + xi, 1.5 + ni - xi, size=400_000,
                                     random_state=np.random.default_rng(11 + i))
                      for i, (xi, ni) in enumerate(zip(x, n, strict=True))])
    freq = np.bincount(np.argmax(draws, axis=0), minlength=4) / draws.shape[1]
    se = np.sqrt(freq * (1 - freq) / draws.shape[1])
    got = probability_best(x, n, prior)
    assert np.all(np.abs(got - freq) <= 4 * se)
    # lower is better: the same draws, argmin
    freq_low = np.bincount(np.argmin(draws, axis=0), minlength=4) / draws.shape[1]
    se_low = np.sqrt(freq_low * (1 - freq_low) / draws.shape[1])
    low = probability_best(x, n, prior, higher=False)
    assert np.all(np.abs(low - freq_low) <= 4 * se_low)


@pytest.mark.parametrize("xa, na, xb, nb", [(3, 10, 5, 10), (0, 20, 1, 20), (17, 40, 9, 25),
                                            (1, 2, 0, 0)])
def test_two_arms_against_closed_form(xa, na, xb, nb):
    # Pr(p_B > p_A) = sum_{i=0}^{aB-1} B(aA+i, bA+bB) / ((bB+i) B(1+i, bB) B(aA, bA))
    # for integer aB (E. Miller, "Formulas for Bayesian A/B testing", 2015; J. D. Cook,
    # "Exact calculation of beta inequalities", 2005); recalled from memory, and it
    # agrees with the quadrature reference above to 1e-12 in these cases
    a_a, b_a, a_b, b_b = 1 + xa, 1 + na - xa, 1 + xb, 1 + nb - xb
    i = np.arange(a_b)
    closed = np.sum(np.exp(special.betaln(a_a + i, b_a + b_b) - np.log(b_b + i)
                           - special.betaln(1 + i, b_b) - special.betaln(a_a, b_a)))
    got = probability_best(np.array([xa, xb]), np.array([na, nb]), (1, 1, 1))
    assert got[1] == pytest.approx(closed, abs=1e-9)
    assert got[0] == pytest.approx(1 - closed, abs=1e-9)


def test_mixture_of_equal_components_is_the_component():
    # identity: w Beta(a, b) + (1 - w) Beta(a, b) = Beta(a, b)
    x, n = np.array([2, 5, 3]), np.array([10, 12, 9])
    one = probability_best(x, n, (1, 2, 3))
    mix = probability_best(x, n, ([0.3, 0.7], [2, 2], [3, 3]))
    np.testing.assert_allclose(mix, one, atol=1e-14)


def test_table_kernel_equals_direct_quadrature():
    # the kernel's tables (support cut) against probability_best, one shared prior and
    # arms with priors of their own (each arm's posterior on its own table)
    from octrial.numerics.beta_best import BestTables

    prior = ([0.6, 0.4], [1.0, 4.0], [1.0, 2.0])
    other = (1.0, 0.5, 3.0)
    rng = np.random.default_rng(3)
    for priors in ([prior] * 4, [prior, other, prior, other]):
        tables = BestTables.build(priors, 40)
        for _ in range(20):
            n = rng.integers(0, 41, size=4)
            x = rng.integers(0, n + 1)
            out = np.zeros(4)
            best_now(tables.density, tables.worse, tables.support, tables.reach,
                     tables.weights, tables.which, tables.states, n, x, np.ones(4, bool),
                     0, np.zeros(4, np.int64), np.zeros(4, bool), out)
            np.testing.assert_allclose(out, _best_mixed(x, n, priors), atol=1e-9)


def _best_mixed(x, n, priors):
    # Pr(best) for arms with their own beta-mixture priors: scipy quad of
    # f_j prod F_i over [0, 1], the posteriors written out with scipy.stats.beta
    def post(xi, ni, prior):
        w, a, b = (np.atleast_1d(np.asarray(v, float)) for v in prior)
        lw = np.log(w / w.sum()) + special.betaln(a + xi, b + ni - xi) - special.betaln(a, b)
        pw = np.exp(lw - lw.max())
        return pw / pw.sum(), a + xi, b + ni - xi

    parts = [post(xi, ni, p) for xi, ni, p in zip(x, n, priors, strict=True)]
    pdf = [lambda u, q=q: np.sum(q[0] * stats.beta.pdf(u, q[1], q[2])) for q in parts]
    cdf = [lambda u, q=q: np.sum(q[0] * stats.beta.cdf(u, q[1], q[2])) for q in parts]
    out = []
    for j in range(len(x)):
        def f(u, j=j):
            return pdf[j](u) * np.prod([cdf[i](u) for i in range(len(x)) if i != j])
        out.append(integrate.quad(f, 0, 1, limit=400, epsabs=1e-12,
                                  points=[0.01, 0.1, 0.5, 0.9, 0.99])[0])
    return np.array(out)


def _allocation_by_hand(best, c, control_share, minimum):
    # the rule written out independently: sort the treatment weights, hold the smallest
    # at the minimum while their proportional share is below it
    room = 1 - control_share
    w = np.asarray(best, float) ** c
    order = np.argsort(w)
    held = np.zeros(w.size, bool)
    for k in range(w.size):
        free = ~held
        share = w[free] / w[free].sum() * (room - held.sum() * minimum)
        if share.min() >= minimum:
            break
        held[order[k]] = True
    out = np.where(held, minimum, 0.0)
    out[~held] = w[~held] / w[~held].sum() * (room - held.sum() * minimum)
    return np.concatenate([[control_share], out])


def test_allocation_sequence_against_recomputation():
    # every block's allocation in simulated studies, recomputed from the study's own
    # data with scipy quadrature for Pr(best) and the rule written out by hand
    looks = (24, 48, 72, 96)
    rule = AllocationRule("information", control_share=0.25, minimum=0.1)
    study = AdaptiveStudy(looks, rule)
    batch = simulate_batch(study, np.array([0.2, 0.25, 0.4, 0.5]), 4, seed=8,
                           scenario=0, batch=0)
    for r in range(4):
        np.testing.assert_allclose(batch.allocation[r, 0], 0.25)
        for k in range(1, len(looks)):
            n, x = batch.sizes[r, k - 1, 1:], batch.responses[r, k - 1, 1:]
            best = _best_by_substitution(list(x), list(n), 1, 1)
            expected = _allocation_by_hand(best, looks[k - 1] / (2 * looks[-1]), 0.25, 0.1)
            np.testing.assert_allclose(batch.allocation[r, k], expected, atol=1e-6)
        assert batch.sizes[r, -1].sum() == looks[-1]


def _within(sample, pmf, sigmas=4.0):
    values = np.arange(pmf.size)
    freq = np.bincount(sample, minlength=pmf.size)[:pmf.size] / sample.size
    se = np.sqrt(pmf * (1 - pmf) / sample.size)
    return np.all(np.abs(freq - pmf) <= sigmas * se + 1e-12), values


def test_fixed_allocation_against_binomial_distributions():
    # complete randomisation with fixed shares: the final size of arm j is
    # Binomial(N, share_j) and, by thinning, its responses Binomial(N, share_j p_j)
    looks, rates = (30, 60, 90), np.array([0.2, 0.3, 0.5, 0.65])
    study = AdaptiveStudy(looks, AllocationRule("fixed", ratio=(2, 1, 1, 1)))
    batch = simulate(study, rates, 40_000, seed=21, batch_size=10_000)
    share = np.array([0.4, 0.2, 0.2, 0.2])
    for j in range(4):
        ok, _ = _within(batch.sizes[:, -1, j], stats.binom.pmf(np.arange(91), 90, share[j]))
        assert ok
        ok, _ = _within(batch.responses[:, -1, j],
                        stats.binom.pmf(np.arange(91), 90, share[j] * rates[j]))
        assert ok
        ok, _ = _within(batch.sizes[:, 0, j], stats.binom.pmf(np.arange(31), 30, share[j]))
        assert ok


def test_one_treatment_arm_adaptive_equals_fixed():
    # identity: with one treatment arm Pr(best) = 1, so adaptive allocation with control
    # share s is the fixed ratio s : 1 - s, draw for draw
    looks, rates = (20, 40, 60), np.array([0.3, 0.5])
    adaptive = simulate(AdaptiveStudy(looks, AllocationRule("power", 3.0, 1 / 3)), rates,
                        2000, seed=4)
    fixed = simulate(AdaptiveStudy(looks, AllocationRule("fixed", ratio=(1, 2))), rates,
                     2000, seed=4)
    np.testing.assert_array_equal(adaptive.sizes, fixed.sizes)
    np.testing.assert_array_equal(adaptive.responses, fixed.responses)


def test_same_numbers_whatever_the_order_of_batches():
    # each batch is seeded by (seed, scenario, batch): running the batches in any order
    # (as workers would) gives the same arrays as one run
    looks, rates = (30, 60, 90), np.array([0.2, 0.2, 0.35, 0.5])
    study = AdaptiveStudy(looks, AllocationRule("information", minimum=0.05),
                          drop_below=0.05)
    whole = simulate(study, rates, 3000, seed=99, scenario=2, batch_size=1000)
    parts = {b: simulate_batch(study, rates, 1000, 99, 2, b) for b in (2, 0, 1)}
    joined = np.concatenate([parts[b].sizes for b in range(3)])
    np.testing.assert_array_equal(whole.sizes, joined)
    again = simulate(study, rates, 3000, seed=99, scenario=2, batch_size=1000)
    np.testing.assert_array_equal(whole.responses, again.responses)
    other = simulate(study, rates, 3000, seed=100, scenario=2, batch_size=1000)
    assert not np.array_equal(whole.responses, other.responses)


def test_dropped_arms_enrol_no_more_and_the_leader_stays():
    looks, rates = (40, 80, 120), np.array([0.2, 0.15, 0.2, 0.6])
    study = AdaptiveStudy(looks, AllocationRule("power", 1.0), drop_below=0.1)
    batch = simulate(study, rates, 3000, seed=6)
    for r in range(3000):
        for j in range(1, 4):
            k = batch.dropped[r, j]
            if k >= 0:
                assert np.all(batch.sizes[r, k:, j] == batch.sizes[r, k, j])
                assert np.all(batch.allocation[r, k + 1:, j] == 0)
        assert np.any(batch.dropped[r, 1:] < 0)
    table = summary(study, batch, rates)
    assert table.loc[1, "look1_dropped"] > table.loc[3, "look1_dropped"]
    assert table["expected_n"].sum() == pytest.approx(120)
    # the table's drop probabilities are the per-study flags, counted (identity)
    assert table.loc[2, "look2_dropped"] == np.mean(batch.dropped[:, 2] == 1)


def test_study_settings_are_checked():
    with pytest.raises(SettingsError) as caught:
        AdaptiveStudy((30, 20), AllocationRule(), drop_below=0.6).check(4)
    assert "looks" in str(caught.value) and "drop_below" in str(caught.value)


def test_two_workers_give_the_numbers_of_one():
    # run_grid with joblib workers and a local Dask cluster: each scenario seeded by
    # (seed, scenario, batch)
    from octrial.allocation.decisions import ArmRule
    from octrial.allocation.simulate import simulate_grid
    from octrial.execution import Execution

    # with each arm's own rule too: each worker's memo differs, never the numbers
    study = AdaptiveStudy((30, 60, 90), AllocationRule("information", minimum=0.05),
                          drop_below=0.05,
                          arm_rule=ArmRule((0.999, 0.99, 0.97), (0.05, 0.1, np.nan)))
    grid = [(0.2, 0.2, 0.2, 0.2), (0.2, 0.25, 0.35, 0.5)]
    one = simulate_grid(study, grid, 2000, seed=17, batch_size=700)
    two = simulate_grid(study, grid, 2000, seed=17, execution=Execution(jobs=2),
                        batch_size=700)
    assert one.equals(two)
    assert one.loc[one.scenario == 2, "expected_n"].sum() < 90
    pytest.importorskip("dask.distributed")
    dask = simulate_grid(study, grid, 2000, seed=17,
                         execution=Execution(jobs=2, backend="dask"), batch_size=700)
    assert one.equals(dask)


def test_next_block_for_a_fixed_data_set_by_hand():
    # control and three doses, 20 subjects each, Beta(1, 1): posterior means
    # (x + 1) / 22; Pr(best) by scipy quadrature; allocation c = 1, control 0.25
    from octrial.allocation.interim import next_block

    rule = AllocationRule("power", 1.0, control_share=0.25)
    table = next_block(rule, [3, 4, 6, 10], [20, 20, 20, 20], maximum=160)
    best = _best_by_substitution([4, 6, 10], [20, 20, 20], 1, 1)
    np.testing.assert_allclose(table["posterior_mean"], np.array([4, 5, 7, 11]) / 22,
                               rtol=1e-12)
    np.testing.assert_allclose(table["pr_best"][1:], best, atol=1e-6)
    np.testing.assert_allclose(table["allocation"], np.concatenate([[0.25], 0.75 * best]),
                               atol=1e-6)
    assert np.isnan(table["pr_best"][0])
    with pytest.raises(SettingsError, match="responses"):
        next_block(rule, [3, 25, 6, 10], [20, 20, 20, 20])


@pytest.mark.parametrize("block, probs, expected", [
    # 10 x (0.4, 0.2, 0.2, 0.2) = 4, 2, 2, 2 exactly
    (10, [0.4, 0.2, 0.2, 0.2], [4, 2, 2, 2]),
    # 7 x (0.25, 0.25, 0.25, 0.25) = 1.75 each: one each left over, 3 to the first
    # three arms (ties to the earlier arm)
    (7, [0.25] * 4, [2, 2, 2, 1]),
    # 20 x (0.25, 0.45, 0.225, 0.075) = 5, 9, 4.5, 1.5: floors sum to 19, one left;
    # arms 3 and 4 tie at 0.5, so arm 3 gets it
    (20, [0.25, 0.45, 0.225, 0.075], [5, 9, 5, 1]),
    # 9 x (1/3, 2/3, 0) = 3, 6
    (9, [1 / 3, 2 / 3, 0.0], [3, 6, 0]),
])
def test_rounded_split_by_hand(block, probs, expected):
    from octrial.allocation.kernel import split_rounded

    out = np.zeros(len(probs), np.int64)
    split_rounded(block, np.array(probs), out)
    np.testing.assert_array_equal(out, expected)


def test_rounded_fixed_allocation_gives_the_planned_sizes():
    # deterministic allocation, ratio 2:1:1:1, looks 30 / 60 / 90: every study has
    # 12, 6, 6, 6 subjects per arm per block (planned sizes, by hand), and the responses
    # are then Binomial(planned size, p) (scipy.stats.binom, 4 SE)
    rates = np.array([0.2, 0.3, 0.5, 0.65])
    study = AdaptiveStudy((30, 60, 90), AllocationRule("fixed", ratio=(2, 1, 1, 1)),
                          assignment="rounded")
    batch = simulate(study, rates, 20_000, seed=5)
    planned = np.array([[12, 6, 6, 6], [24, 12, 12, 12], [36, 18, 18, 18]])
    assert np.all(batch.sizes == planned[None])
    for j in range(4):
        ok, _ = _within(batch.responses[:, -1, j],
                        stats.binom.pmf(np.arange(planned[-1, j] + 1), planned[-1, j],
                                        rates[j]))
        assert ok


def test_tables_too_large_are_refused_before_allocation():
    # 1,200 subjects at the last interim look: 721,801 states x 644 numbers x 8 bytes
    # = 3.5 GiB > 1 GiB
    study = AdaptiveStudy((600, 1200, 1500), AllocationRule("power"))
    assert study.table_bytes(4) == 721_801 * 644 * 8
    with pytest.raises(SettingsError, match="GiB"):
        study.check(4)
    AdaptiveStudy((120, 240, 360), AllocationRule("power")).check(4)


def _miller(a_t, b_t, a_c, b_c):
    # Pr(p_t > p_c) for Beta(a_t, b_t), Beta(a_c, b_c), integer a_t: the two-arm closed
    # form above (E. Miller 2015; recalled from memory, checked against quadrature there)
    i = np.arange(a_t)
    return float(np.sum(np.exp(special.betaln(a_c + i, b_c + b_t) - np.log(b_t + i)
                               - special.betaln(1 + i, b_t) - special.betaln(a_c, b_c))))


def _exact_two_arm(rates, per_look, efficacy, futility):
    # exact operating characteristics of a two-arm design (treatment, control; Beta(1, 1)
    # priors, margin 0) by enumeration of the binomial increments (scipy.stats.binom)
    p_t, p_c = rates
    mass = {(0, 0): 1.0}
    n_prev = 0
    stops = np.zeros((2, len(per_look)))
    for k, n in enumerate(per_look):
        step = n - n_prev
        inc_t = stats.binom.pmf(np.arange(step + 1), step, p_t)
        inc_c = stats.binom.pmf(np.arange(step + 1), step, p_c)
        new: dict[tuple[int, int], float] = {}
        for (xt, xc), m in mass.items():
            for dt in range(step + 1):
                for dc in range(step + 1):
                    key = (xt + dt, xc + dc)
                    new[key] = new.get(key, 0.0) + m * inc_t[dt] * inc_c[dc]
        mass = {}
        final = k == len(per_look) - 1
        for (xt, xc), m in new.items():
            b = _miller(1 + xt, 1 + n - xt, 1 + xc, 1 + n - xc)
            if not np.isnan(efficacy[k]) and b >= efficacy[k]:
                stops[0, k] += m
            elif final or (not np.isnan(futility[k]) and b < futility[k]):
                stops[1, k] += m
            else:
                mass[(xt, xc)] = m
        n_prev = n
    return stops


@pytest.mark.parametrize("rates", [(0.3, 0.3), (0.55, 0.3)])
def test_one_arm_against_control_with_decisions_equals_exact_enumeration(rates):
    # one treatment arm and a control, 1:1 rounded (deterministic) allocation: the
    # kernel's per-look efficacy and futility stops against the exact two-arm
    # probabilities (enumeration with the closed-form Pr(p_t > p_c)), within 4 SE
    from octrial.allocation.decisions import ArmRule

    efficacy, futility = (0.995, 0.99, 0.95), (0.1, 0.2, np.nan)
    rule = ArmRule(efficacy, futility)
    study = AdaptiveStudy((10, 20, 30), AllocationRule("fixed"), assignment="rounded",
                          arm_rule=rule)
    batch = simulate(study, np.array([rates[1], rates[0]]), 40_000, seed=12)
    exact = _exact_two_arm(rates, (5, 10, 15), efficacy, futility)
    for code in (1, 2):
        for k in range(3):
            got = np.mean((batch.outcome[:, 1] == code) & (batch.dropped[:, 1] == k))
            p = exact[code - 1, k]
            assert abs(got - p) <= 4 * np.sqrt(p * (1 - p) / 40_000) + 1e-12
    assert np.all(batch.outcome[:, 1] > 0)


def test_independent_arms_against_a_benchmark_multiply():
    # three arms against a benchmark (no control), fixed rounded allocation: the arms
    # are independent, so Pr(no arm succeeds) = prod(1 - Pr(arm succeeds)) (identity),
    # each arm's Pr(success) against the exact one-arm value (scipy.stats.binom,
    # scipy.stats.beta), within 4 SE
    from octrial.allocation.decisions import ArmRule

    rule = ArmRule((0.99, 0.95), (np.nan, np.nan), versus_control=False, benchmark=0.3)
    study = AdaptiveStudy((30, 60), AllocationRule("fixed"), control=False,
                          assignment="rounded", arm_rule=rule)
    rates = np.array([0.3, 0.3, 0.45])
    batch = simulate(study, rates, 40_000, seed=13)
    success = batch.outcome == 1
    summed = summary(study, batch, rates)
    np.testing.assert_array_equal(summed["is_null"], [True, True, False])
    assert summed.loc[0, "study_fwer"] == np.mean(success[:, :2].any(axis=1))
    assert summed.loc[0, "study_prob_success"] == np.mean(success.any(axis=1))
    running = batch.allocation[:, 1, :].sum(axis=1) > 0
    assert summed.loc[2, "allocation_block2"] == pytest.approx(
        batch.allocation[running, 1, 2].mean(), rel=1e-12)
    for j, p in enumerate(rates):
        # per arm 10 then 20 subjects; success at look 1 if sf(0.3) >= 0.99, else at
        # look 2 if >= 0.95
        b1 = stats.beta.sf(0.3, 1 + np.arange(11), 1 + 10 - np.arange(11))
        first = b1 >= 0.99
        total = stats.binom.pmf(np.arange(11), 10, p)[first].sum()
        for x1 in np.flatnonzero(~first):
            x2 = x1 + np.arange(11)
            b2 = stats.beta.sf(0.3, 1 + x2, 1 + 20 - x2)
            total += stats.binom.pmf(x1, 10, p) * stats.binom.pmf(np.arange(11), 10, p)[
                b2 >= 0.95].sum()
        assert abs(success[:, j].mean() - total) <= 4 * np.sqrt(total * (1 - total) / 40_000)
    none = 1 - success.any(axis=1).mean()
    product = np.prod(1 - success.mean(axis=0))
    assert abs(none - product) <= 4 * np.sqrt(product * (1 - product) / 40_000)


BENEFIT_CASES = [
    # (a_x, b_x, a_y, b_y): flat-prior posteriors, Jeffreys' on one side (shapes below
    # 1 with a whole a on the other), all-or-none responses, large arms
    (1, 1, 1, 1), (4, 17, 9, 12), (31, 90, 12, 109), (1, 300, 2, 299), (300, 1, 299, 2),
    (1.5, 20.5, 3, 19), (0.5, 40.5, 1, 40), (151, 151, 160, 142), (1, 1000, 1, 1000),
    (7, 2.5, 0.5, 9.5),
]


@pytest.mark.parametrize("ax, bx, ay, by", BENEFIT_CASES)
def test_benefit_by_finite_sum_against_quadrature(ax, bx, ay, by):
    # Pr(p_X > p_Y) by the finite sum (each arm's rule at the sizes reached, one-component
    # priors, no margin) against scipy.integrate.quad of F_Y(Q_X(v)) over v (METHODS.md,
    # two arms: the quantile substitution removes singular densities) and against the
    # decision tables' tanh-sinh quadrature (octrial.simulation.beta_difference)
    from octrial.allocation.decisions import QUADRATURE_TOLERANCE, beta_exceeds, nodes
    from octrial.simulation.beta_difference import prob_difference_exceeds

    got = beta_exceeds(float(ax), float(bx), float(ay), float(by))
    reference = integrate.quad(lambda v: stats.beta.cdf(stats.beta.ppf(v, ax, bx), ay, by),
                               0, 1, limit=400, epsabs=1e-14)[0]
    assert got == pytest.approx(reference, abs=1e-9)
    one = np.ones(1)
    tanh_sinh = prob_difference_exceeds(one, np.array([ax], float), np.array([bx], float),
                                        one, np.array([ay], float), np.array([by], float),
                                        0.0, *nodes(), QUADRATURE_TOLERANCE)
    assert got == pytest.approx(tanh_sinh, abs=1e-12)


def test_benefit_by_finite_sum_needs_a_whole_shape():
    from octrial.allocation.decisions import beta_exceeds

    assert np.isnan(beta_exceeds(0.5, 3.5, 1.5, 2.5))
