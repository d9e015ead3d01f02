"""Test reference: Pr(arm j has the highest rate) for independent beta posteriors,
exactly, by finite sums (the library's Pr(best) is octrial.numerics.beta_best, by
quadrature; this independent computation is what it is checked against).

For integer shapes the beta CDF is a binomial tail (Abramowitz & Stegun 26.5.24 with
6.6.4; recalled from memory), a polynomial in u and 1 - u:

    I_u(a, b) = sum_{m=a}^{a+b-1} C(a+b-1, m) u^m (1-u)^(a+b-1-m),

so Pr(p_j > p_i for every i != j) = int_0^1 f_j(u) prod_{i != j} I_u(a_i, b_i) du is a
finite sum of beta functions B(a_j + M, b_j + R) over the terms u^M (1-u)^R of the
product. The sums run in exact rational arithmetic (no cancellation), so the result is
exact to the last bit of the final conversion to float; the cost grows with the product
of the b_i, so this is a reference for checks (small data), not an engine.

Mixture posteriors: Pr(best) is the weighted sum over one component per arm.
"""

from __future__ import annotations

import itertools
from collections.abc import Sequence
from fractions import Fraction
from math import comb, factorial

__all__ = ["prob_best_exact", "prob_best_mixture"]


def _beta(p: int, q: int) -> Fraction:
    """B(p, q) = (p-1)! (q-1)! / (p+q-1)! for positive integers."""
    return Fraction(factorial(p - 1) * factorial(q - 1), factorial(p + q - 1))


def _cdf_terms(a: int, b: int) -> dict[tuple[int, int], int]:
    n = a + b - 1
    return {(m, n - m): comb(n, m) for m in range(a, n + 1)}


def prob_best_exact(shapes: Sequence[tuple[int, int]]) -> list[float]:
    """Pr(each arm's rate is the highest) for independent Beta(a_i, b_i), integer shapes.

    Examples
    --------
    >>> prob_best_exact([(1, 1), (1, 1), (1, 1)])
    [0.3333333333333333, 0.3333333333333333, 0.3333333333333333]
    >>> prob_best_exact([(2, 1), (1, 1)])  # Pr(U^(1/2) > V) = 2/3
    [0.6666666666666666, 0.3333333333333333]
    """
    for a, b in shapes:
        if int(a) != a or int(b) != b or a < 1 or b < 1:
            raise ValueError(f"integer shapes >= 1 are needed; got ({a}, {b})")
    shapes = [(int(a), int(b)) for a, b in shapes]
    out = []
    for j, (a_j, b_j) in enumerate(shapes):
        product: dict[tuple[int, int], int] = {(0, 0): 1}
        for i, (a_i, b_i) in enumerate(shapes):
            if i == j:
                continue
            terms = _cdf_terms(a_i, b_i)
            new: dict[tuple[int, int], int] = {}
            for (m1, r1), c1 in product.items():
                for (m2, r2), c2 in terms.items():
                    key = (m1 + m2, r1 + r2)
                    new[key] = new.get(key, 0) + c1 * c2
            product = new
        total = sum((c * _beta(a_j + m, b_j + r) for (m, r), c in product.items()),
                    Fraction(0))
        out.append(float(total / _beta(a_j, b_j)))
    return out


def prob_best_mixture(weights: Sequence[Sequence[float]],
                      shapes: Sequence[Sequence[tuple[int, int]]]) -> list[float]:
    """:func:`prob_best_exact` for beta-mixture posteriors: ``weights[i]`` and
    ``shapes[i]`` are arm i's component weights and (a, b) pairs."""
    out = [0.0] * len(shapes)
    for combo in itertools.product(*(range(len(w)) for w in weights)):
        w = 1.0
        for i, c in enumerate(combo):
            w *= weights[i][c]
        best = prob_best_exact([shapes[i][c] for i, c in enumerate(combo)])
        out = [o + w * p for o, p in zip(out, best, strict=True)]
    return out
