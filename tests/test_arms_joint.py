"""The joint exact engine (coupled arms: Pr(best) dropping, selection).

- Without coupling rules it must equal the control-path walk of engines/arms_exact.py,
  a different algorithm (joint lattice vs per-arm programmes on each control path):
  abs 1e-12.
- With dropping on Pr(best) and with selection of one arm: the several-arm simulation
  (octrial.multiarm.engine; the same decision and Pr(best) tables, so only sampling
  differs) within 4 SE (binomial SE at the exact value; for expected sizes the bound
  sd <= (largest - smallest size) / 2, Popoviciu 1935).
"""

from __future__ import annotations

import numpy as np
import pytest

from octrial.engines.arms_exact import evaluate_design
from octrial.engines.arms_joint import joint_exact
from octrial.multiarm.engine import simulate_design
from tests.test_arms_exact import THREE_DOSES, multiarm

SMALL = THREE_DOSES.replace("n = [24, 48, 72]", "n = [12, 24, 36]").replace(
    "[scenarios]", "[simulation]\nseed = 5\n[scenarios]")
REPLICATES = 100_000


def test_without_coupling_equals_the_control_path_walk():
    design = multiarm(SMALL)
    table, _ = evaluate_design(design)
    for i, row in enumerate(design.scenarios.values):
        found = joint_exact(design, row)
        for column, value in found.items():
            assert value == pytest.approx(table.loc[i, column], abs=1e-12), column


@pytest.mark.parametrize("extra", ["drop_if_best_below = 0.2",
                                   "drop_if_best_below = 0.1\n[selection]\nkeep = 1"])
def test_coupled_arms_against_simulation(extra):
    text = SMALL.replace("futility = 0.1", "futility = 0.1\n" + extra.split("\n")[0])
    if "keep" in extra:
        text = text.replace("[simulation]", "[selection]\nkeep = 1\n[simulation]")
    design = multiarm(text)
    simulated = simulate_design(design, replicates=REPLICATES)
    per_arm = np.array(design.looks.per_arm)
    spread = (per_arm[-1] - per_arm[0]).max() / 2.0
    total_spread = (design.looks.n[-1] - design.looks.n[0]) / 2.0
    dropped = 0.0
    for i, row in enumerate(design.scenarios.values):
        found = joint_exact(design, row)
        for column, value in found.items():
            if column.endswith("expected_n"):
                se = (total_spread if column == "expected_n" else spread) / np.sqrt(REPLICATES)
            else:
                se = np.sqrt(value * (1 - value) / REPLICATES)
            assert abs(simulated.loc[i, column] - value) <= 4 * se + 1e-12, column
        dropped += sum(v for c, v in found.items() if c.endswith("_drop"))
    assert dropped > 0.05  # the coupling rules act
