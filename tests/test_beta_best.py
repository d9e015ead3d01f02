"""Exact Pr(best) for beta posteriors by finite sums, against outside references.

- The polynomial form of the beta CDF against scipy.special.betainc.
- Two arms: the closed form of Pr(p_B > p_A) for integer shapes (Evan Miller, "Formulas for
  Bayesian A/B testing", 2015; recalled from memory) and the project's two-arm quadrature
  (octrial.endpoints.binary.prob_difference_exceeds at d = 0).
- Four arms: an independent Monte Carlo from scipy.stats.beta draws, within 4 SE.
- The probabilities over arms sum to 1 (ties have probability 0).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import special, stats

from octrial.endpoints.binary import BetaMixture, prob_difference_exceeds, update
from octrial.numerics.beta_best import _cdf_terms, prob_best_exact, prob_best_mixture


@pytest.mark.parametrize("a, b", [(1, 1), (3, 7), (12, 2), (20, 25)])
def test_cdf_polynomial_against_scipy(a, b):
    u = np.linspace(0.01, 0.99, 25)
    poly = sum(c * u**m * (1 - u) ** r for (m, r), c in _cdf_terms(a, b).items())
    np.testing.assert_allclose(poly, special.betainc(a, b, u), rtol=1e-11, atol=1e-14)


def miller(a_b: int, b_b: int, a_a: int, b_a: int) -> float:
    """Pr(p_B > p_A), Evan Miller (2015), in logs of beta functions."""
    i = np.arange(a_b)
    terms = np.exp(special.betaln(a_a + i, b_a + b_b) - np.log(b_b + i)
                   - special.betaln(1 + i, b_b) - special.betaln(a_a, b_a))
    return float(terms.sum())


@pytest.mark.parametrize("first, second", [((3, 8), (5, 6)), ((1, 1), (9, 2)),
                                           ((14, 17), (11, 20)), ((2, 30), (1, 31))])
def test_two_arms_against_closed_forms(first, second):
    best = prob_best_exact([first, second])
    assert best[0] == pytest.approx(miller(*first, *second), abs=1e-13)
    prior = BetaMixture.single(1, 1)
    p1 = update(prior, first[0] + first[1] - 2, np.array([first[0] - 1]))
    p2 = update(prior, second[0] + second[1] - 2, np.array([second[0] - 1]))
    quadrature, _ = prob_difference_exceeds(p1, p2, 0.0)
    assert best[0] == pytest.approx(quadrature[0, 0], abs=1e-10)
    assert sum(best) == pytest.approx(1.0, abs=1e-14)


def test_four_arms_against_monte_carlo():
    shapes = [(4, 9), (6, 7), (7, 6), (3, 10)]
    best = np.array(prob_best_exact(shapes))
    rng = np.random.default_rng(16)
    reps = 400_000
    draws = np.column_stack([stats.beta.rvs(a, b, size=reps, random_state=rng)
                             for a, b in shapes])
    frequency = np.bincount(draws.argmax(axis=1), minlength=4) / reps
    se = np.sqrt(best * (1 - best) / reps)
    assert np.all(np.abs(frequency - best) < 4 * se)
    assert best.sum() == pytest.approx(1.0, abs=1e-14)
    assert best.argmax() == 2


def test_mixture_is_weighted_sum_and_symmetric():
    # identical arms are exchangeable: each is best with probability 1/K
    mix = prob_best_mixture([[0.3, 0.7]] * 3, [[(2, 5), (6, 3)]] * 3)
    np.testing.assert_allclose(mix, [1 / 3] * 3, atol=1e-14)
    with pytest.raises(ValueError, match="integer"):
        prob_best_exact([(1.5, 2), (1, 1)])


@pytest.mark.parametrize("shapes", [[(4, 9), (6, 7), (7, 6), (3, 10)],
                                    [(31, 92), (40, 83), (35, 88)],
                                    [(1, 1), (2, 1), (1, 2)]])
def test_several_arm_pr_best_against_exact_sums(shapes):
    # the Pr(best) the several-arm dropping rule uses (octrial.multiarm.best, a sum over
    # CDF cells) against the exact rational sums. Measured errors on its default 1024
    # cells: 9e-7 (four arms, n = 11), 1.1e-5 (n = 121), 2.4e-5 (n = 241), falling 16-fold
    # on 4096 cells (second order in the cell width); the tolerance is set from these.
    from octrial.multiarm.best import prob_best_beta

    a = np.array([s[0] for s in shapes], dtype=float)
    b = np.array([s[1] for s in shapes], dtype=float)
    np.testing.assert_allclose(prob_best_beta(a, b), prob_best_exact(shapes), atol=3e-5)
    np.testing.assert_allclose(prob_best_beta(a, b, 4096), prob_best_exact(shapes), atol=2e-6)
