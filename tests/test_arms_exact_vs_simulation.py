"""The several-arm Monte Carlo engine (octrial.multiarm.engine) against the exact
several-arm engine (octrial.engines.arms_exact), fixed allocation: every common column
of oc.csv within 4 standard errors (binomial SE at the exact value; sd / sqrt(R) for
expected sizes, with the exact per-arm sd and the simulated total sd).

The exact engine is itself checked against enumeration, numpy Monte Carlo and the
two-arm engine in tests/test_arms_exact.py.
"""

from __future__ import annotations

import numpy as np
import pytest

from octrial.engines.arms_exact import evaluate_design
from octrial.multiarm.engine import simulate_design
from tests.test_arms_exact import THREE_DOSES, multiarm

REPLICATES = 60_000


COUNT_ARMS = """
schema = 1
name = "count-arms"
title = "Two regimens and a control, event counts (invented)"
[endpoint]
type = "count"
exposure = 0.5
better = "lower"
[hypothesis]
comparison = "ratio"
kind = "superiority"
margin = 0.0
[arms.control]
prior = { distribution = "gamma", shape = 1, rate = 1 }
[arms.first]
prior = { distribution = "gamma", shape = 1, rate = 1 }
[arms.second]
prior = { distribution = "gamma", shape = 1, rate = 1 }
[looks]
n = [12, 24]
efficacy = [0.99, 0.95]
futility = 0.2
[scenarios]
control = 1.0
first = [1.0, 0.5]
second = [1.0, 1.0]
"""


@pytest.mark.parametrize("text", [THREE_DOSES, COUNT_ARMS], ids=["binary", "count"])
def test_simulation_within_4_se_of_exact(text):
    design = multiarm(text.replace("[scenarios]", "[simulation]\nseed = 16\n[scenarios]"))
    exact, _ = evaluate_design(design)
    simulated = simulate_design(design, replicates=REPLICATES)
    common = [c for c in exact.columns if c in simulated.columns
              and not c.startswith("true_") and c != "method"]
    assert len(common) > 20  # study-level, control and every per-arm column
    checked = 0
    for column in common:
        e = exact[column].to_numpy()
        s = simulated[column].to_numpy()
        if column.endswith("_is_null"):
            assert np.array_equal(e.astype(bool), s.astype(bool)), column
            continue
        if column.endswith("expected_n"):
            sd_column = "sd_n" if column == "expected_n" else column[:-len("expected_n")] + "sd_n"
            sd = (simulated if column == "expected_n" else exact)[sd_column].to_numpy()
            se = sd / np.sqrt(REPLICATES)
        else:
            se = np.sqrt(e * (1 - e) / REPLICATES)
        assert np.all(np.abs(s - e) <= 4 * se + 1e-12), (column, e, s, se)
        checked += 1
    assert checked > 20
