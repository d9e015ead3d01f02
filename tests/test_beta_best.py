"""Pr(best) for beta posteriors: the exact finite sums of the test reference
(tests/references/beta_best_exact.py) against outside references, and the library's one
Pr(best) (octrial.numerics.beta_best, graded Gauss-Legendre quadrature) against them.

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
from octrial.numerics.beta_best import probability_best
from tests.references.beta_best_exact import _cdf_terms, prob_best_exact, prob_best_mixture


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
                                    [(1, 1), (2, 1), (1, 2)],
                                    [(1, 121), (2, 120), (1, 300)],
                                    [(241, 1), (238, 4), (240, 2)]])
def test_pr_best_against_exact_sums(shapes):
    # the one Pr(best) of the library (octrial.numerics.beta_best: the several-arm
    # engines, adaptive allocation and the next block at an interim look) against the
    # exact rational sums; each arm's posterior is its prior (no data), so the shapes
    # are passed as per-arm priors. Posteriors piled against 0 or 1 are included (the
    # former uniform-grid sum erred there by up to 1e-2). Measured error at most 2e-7
    # for shapes >= 1 (tests/test_allocation.py), tolerance 1e-6.
    priors = [(1.0, float(a), float(b)) for a, b in shapes]
    zeros = np.zeros(len(shapes), int)
    np.testing.assert_allclose(probability_best(zeros, zeros, priors=priors),
                               prob_best_exact(shapes), atol=1e-6)


@pytest.mark.parametrize("first, second", [((3, 8), (5, 6)), ((1, 1), (9, 2)),
                                           ((1, 200), (2, 240))])
def test_pr_best_two_arms_against_the_closed_form(first, second):
    # two arms: Pr(p_A > p_B) by the closed form (Evan Miller 2015; recalled from memory)
    priors = [(1.0, float(a), float(b)) for a, b in (first, second)]
    got = probability_best(np.zeros(2, int), np.zeros(2, int), priors=priors)
    assert got[0] == pytest.approx(miller(*first, *second), abs=1e-6)
