"""The batched dynamic programme against the per-scenario exact engine (itself checked
against path enumeration in test_exact_engine.py)."""

from __future__ import annotations

import numpy as np
import pytest

from octrial.engines.exact_lattice import stopping_probabilities
from octrial.engines.lattice_batch import IncrementTables, run_batch
from octrial.rules.lattice import LatticeCache, build_rule
from tests.helpers import ONE_ARM, TWO_ARM, build

DESIGNS = {
    "one-arm-predictive": build(ONE_ARM, looks__n=[7, 19, 33], looks__futility_predictive=0.2),
    "one-arm-lower": build(ONE_ARM, endpoint__better="lower", looks__n=[3, 50],
                           looks__efficacy=[0.9, 0.95], looks__futility=[0.2]),
    "two-arm": build(TWO_ARM, looks__n=[20, 60], looks__futility_predictive=0.1),
    "two-arm-2to1": build(TWO_ARM, looks__n=[30, 60], arms__treatment__allocation=2),
}


@pytest.mark.parametrize("name", DESIGNS)
def test_batch_equals_engine(name) -> None:
    design = DESIGNS[name]
    rng = np.random.default_rng(7)
    truths = rng.uniform(0.02, 0.98, size=(9, len(design.arms)))
    rule = build_rule(design)
    batch = run_batch(design, rule, IncrementTables(design, truths), keep_final=True)
    for i, truth in enumerate(truths):
        eff, fut, _ = stopping_probabilities(design, rule, tuple(truth))
        np.testing.assert_allclose(batch.efficacy[i], eff, atol=1e-14)
        np.testing.assert_allclose(batch.futility[i], fut, atol=1e-14)
        # the mass reaching the final analysis is what the final look splits
        assert batch.reach[i].sum() == pytest.approx(eff[-1] + fut[-1], abs=1e-14)


def test_shared_cache_gives_the_same_rule() -> None:
    cache = LatticeCache()
    for n in ([10, 20, 30], [15, 30], [10, 30]):
        design = build(ONE_ARM, looks__n=n, looks__efficacy=0.95, looks__futility_predictive=0.1)
        a, b = build_rule(design), build_rule(design, cache)
        for x, y in zip(a.looks, b.looks, strict=True):
            assert np.array_equal(x.efficacy, y.efficacy)
            assert np.array_equal(x.futility, y.futility)
            assert np.array_equal(x.benefit, y.benefit)
