"""The lattice dynamic programme against closed forms (scipy.stats).

* No stopping: the count reaching the final analysis after m1 + m2 subjects is
  Binomial(n, p) (sum of independent binomials with one p; scipy.stats.binom), for every
  step (matrix product, shifted sum over true values, slice sums).
* One interim stop at counts >= a: Pr(stop) = binom.sf(a - 1, n1, p); the final success
  probability (count >= s, not stopped) equals the direct double sum over the interim and
  second-stage counts with scipy.stats.binom (written here, not with the programme).
* State-dependent increments from a Beta(a, b) prior's predictive pmf: the count reaching
  the final analysis is beta-binomial(n, a, b) (scipy.stats.betabinom), the design
  prior's marginal, whatever the looks.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest
from scipy import stats

from octrial.engines.lattice_programme import (
    add_increment,
    add_increments,
    add_state_increment,
    run_programme,
)


@dataclass(frozen=True)
class Look:
    n: tuple[int, ...]
    efficacy: np.ndarray
    futility: np.ndarray
    uncertain: np.ndarray | None = None

    @property
    def shape(self) -> tuple[int, ...]:
        return self.efficacy.shape


def looks(sizes: list[int], first_efficacy: list[int | None]) -> list[Look]:
    """One-arm looks stopping for efficacy from count ``a`` on (None: never); at the last
    look every other point fails (as in the lattice rules)."""
    out = []
    for k, (n, a) in enumerate(zip(sizes, first_efficacy, strict=True)):
        efficacy = np.arange(n + 1) >= (n + 1 if a is None else a)
        last = k == len(sizes) - 1
        out.append(Look((n,), efficacy, ~efficacy if last else np.zeros(n + 1, dtype=bool)))
    return out


P = np.array([0.15, 0.4, 0.72])


def single_step(p: float):
    def step(dist, arm, before, after, size):
        return add_increment(dist, stats.binom.pmf(np.arange(after - before + 1),
                                                   after - before, p), arm, size)
    return step


def batch_step(dist, arm, before, after, size):
    m = after - before
    pmf = stats.binom.pmf(np.arange(m + 1)[None, :], m, P[:, None])
    return add_increments(dist, pmf, arm + 1, size)


def test_no_stopping_reaches_the_binomial() -> None:
    plan = looks([12, 30], [None, 31])
    batch = run_programme(plan, 1, batch_step, scenarios=P.size, keep_final=True)
    expected = stats.binom.pmf(np.arange(31)[None, :], 30, P[:, None])
    np.testing.assert_allclose(batch.reach, expected, rtol=0, atol=1e-15)
    for i, p in enumerate(P):
        one = run_programme(plan, 1, single_step(p), keep_final=True)
        np.testing.assert_allclose(one.reach, expected[i], rtol=0, atol=1e-15)


def test_interim_efficacy_stop_against_a_direct_sum() -> None:
    n1, n, a, s = 15, 40, 9, 17
    plan = looks([n1, n], [a, s])
    batch = run_programme(plan, 1, batch_step, scenarios=P.size)
    for i, p in enumerate(P):
        early = stats.binom.sf(a - 1, n1, p)
        g1 = np.arange(a)  # continuing interim counts
        late = np.sum(stats.binom.pmf(g1, n1, p) * stats.binom.sf(s - g1 - 1, n - n1, p))
        assert batch.efficacy[i, 0] == pytest.approx(early, abs=1e-14)
        assert batch.efficacy[i, 1] == pytest.approx(late, abs=1e-14)
        assert batch.efficacy[i].sum() + batch.futility[i].sum() == pytest.approx(1, abs=1e-14)
        one = run_programme(plan, 1, single_step(p))
        np.testing.assert_allclose(one.efficacy, batch.efficacy[i], rtol=0, atol=1e-15)


def test_predictive_increments_reach_the_beta_binomial() -> None:
    a, b = 2.5, 6.0

    def step(dist, arm, before, after, size):
        x = np.arange(dist.shape[arm])[:, None]
        m = after - before
        y = np.arange(m + 1)[None, :]
        # predictive pmf of the next m given x of `before`: beta-binomial with the update
        pmf = stats.betabinom.pmf(y, m, a + x, b + before - x)
        return add_state_increment(dist, pmf, arm, size)

    found = run_programme(looks([7, 19, 33], [None, None, 34]), 1, step, keep_final=True)
    expected = stats.betabinom.pmf(np.arange(34), 33, a, b)
    np.testing.assert_allclose(found.reach, expected, rtol=0, atol=1e-14)
