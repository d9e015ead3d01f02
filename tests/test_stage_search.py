"""Optimal and minimax stage searches.

* Two stages: the search recovers Simon's (1989) published optimal and minimax designs
  (Controlled Clinical Trials 10:1-10, Tables 1-2; rows RECALLED FROM MEMORY, the same rows
  as test_simon_designs.py), for count rules and for posterior-probability rules under a
  Beta(1, 1) prior. The search ranges reach well beyond each published N, so the published
  design must win against every other design in the range.
* Three stages: the search's optimum against an exhaustive reference written here with
  scipy.stats.binom only (every futility pair and final bound at the same looks).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy import stats

from octrial.calibration import calibrate
from octrial.evaluation import compute
from octrial.rules.boundaries import boundary_table
from octrial.rules.lattice import build_rule
from tests.helpers import ONE_ARM, build
from tests.test_simon_designs import SIMON

WIDTH = 12
"""The search range is the published N +- WIDTH."""


def start_design(p0: float, p1: float):
    # An arbitrary starting design: the search replaces its looks and thresholds.
    return build(ONE_ARM, hypothesis__benchmark=p0,
                 looks={"n": [10, 20], "efficacy": ["none", 0.95], "futility": [0.1]},
                 scenarios__treatment=[p0, p1])


def found(result) -> tuple[int, int, int, int]:
    """(r1, n1, r, n) of the searched design, read from its boundary table."""
    design = result.design
    table = boundary_table(design, build_rule(design))
    return (int(table["futility_bound"].iloc[0]), design.looks.n[0],
            int(table["efficacy_bound"].iloc[-1]) - 1, design.looks.n[-1])


@pytest.mark.parametrize("rule", ["counts", "posterior"])
@pytest.mark.parametrize("row", SIMON, ids=[f"{r[0]}-{r[1]}-{r[3]}-{r[4]}" for r in SIMON])
def test_search_recovers_simon(row, rule) -> None:
    p0, p1, alpha, beta, kind, r1, n1, r, n, pet0, en0 = row
    result = calibrate(start_design(p0, p1), alpha=alpha, power=1 - beta, alternative=[p1],
                       search=kind, rule=rule, n_range=f"{max(3, n - WIDTH)}:{n + WIDTH}",
                       null_points=10)
    assert found(result) == (r1, n1, r, n)
    assert round(result.summary["expected_n_null"], 1) == pytest.approx(en0)
    # the written design, read back and run by the exact engine, keeps the promises
    oc = compute(result.design).oc
    assert oc.iloc[0]["prob_success"] <= alpha and oc.iloc[1]["prob_success"] >= 1 - beta
    assert round(oc.iloc[0]["prob_stop_futility"], 2) == pytest.approx(pet0)
    if rule == "counts":
        assert result.design.looks.uses_counts
    else:
        assert not result.design.looks.uses_counts and result.design.looks.futility[0] > 0


def reference_three_stage(sizes, p0, p1, alpha, power):
    """Exhaustive: every r1 <= r2 and the least stringent final bound meeting alpha."""
    n1, n2, n3 = sizes
    m2, m3 = n2 - n1, n3 - n2
    best = None

    def success(p, r1, r2):
        # Pr(g1 > r1, g2 > r2, g3 >= s) for every s, by explicit sums over the increments
        out = np.zeros(n3 + 2)
        stop = np.zeros(2)
        for g1 in range(n1 + 1):
            w1 = stats.binom.pmf(g1, n1, p)
            if g1 <= r1:
                stop[0] += w1
                continue
            for y2 in range(m2 + 1):
                w2 = w1 * stats.binom.pmf(y2, m2, p)
                g2 = g1 + y2
                if g2 <= r2:
                    stop[1] += w2
                    continue
                for y3 in range(m3 + 1):
                    out[: g2 + y3 + 1] += w2 * stats.binom.pmf(y3, m3, p)
        return out, stop

    for r1 in range(n1):
        for r2 in range(r1, n2):
            s0, stop0 = success(p0, r1, r2)
            s1, _ = success(p1, r1, r2)
            feasible = [s for s in range(r2 + 2, n3 + 1) if s0[s] <= alpha]
            if not feasible:
                continue
            s = feasible[0]
            if s1[s] < power:
                continue
            en0 = n1 * stop0[0] + n2 * stop0[1] + n3 * (1 - stop0.sum())
            if best is None or en0 < best[0] - 1e-12:
                best = (en0, r1, r2, s)
    return best


def test_three_stage_search_against_exhaustive_reference() -> None:
    p0, p1, alpha, power = 0.1, 0.35, 0.1, 0.8
    design = build(ONE_ARM, hypothesis__benchmark=p0,
                   looks={"n": [6, 12, 18], "efficacy": ["none", "none", 0.95],
                          "futility": [0.1, 0.1]}, scenarios__treatment=[p0, p1])
    result = calibrate(design, alpha=alpha, power=power, alternative=[p1], search="optimal",
                       rule="counts", n_range="18:18", null_points=5)
    en0, r1, r2, s = reference_three_stage((6, 12, 18), p0, p1, alpha, power)
    looks = result.design.looks
    assert looks.n == (6, 12, 18)
    assert looks.futility_count[:2] == (r1, r2) and looks.efficacy_count[-1] == s
    assert result.summary["expected_n_null"] == pytest.approx(en0, abs=1e-12)


def test_three_stage_posterior_search_uses_one_futility_threshold() -> None:
    p0, p1 = 0.2, 0.45
    design = build(ONE_ARM, hypothesis__benchmark=p0,
                   looks={"n": [10, 20, 30], "efficacy": ["none", "none", 0.95],
                          "futility": 0.1}, scenarios__treatment=[p0, p1])
    result = calibrate(design, alpha=0.05, power=0.8, alternative=[p1], search="minimax",
                       n_range="20:40", null_points=5)
    looks = result.design.looks
    assert len(set(f for f in looks.futility if f is not None)) == 1
    rows = result.candidates[result.candidates["step"] == "search"]
    passing = rows[rows["passes"]]
    assert looks.n[-1] == passing["n"].min()
    smallest = passing[passing["n"] == looks.n[-1]]
    assert result.summary["expected_n_null"] == pytest.approx(smallest["expected_n_null"].min())


def test_every_two_stage_candidate_row_matches_the_engine() -> None:
    """Rows of the search log, re-evaluated one by one through the exact engine."""
    design = start_design(0.1, 0.3)
    result = calibrate(design, alpha=0.05, power=0.8, alternative=[0.3], search="optimal",
                       rule="counts", n_range="24:30", null_points=5)
    rows = result.candidates[result.candidates["step"] == "search"]
    for _, row in itertools.islice(rows.iterrows(), 0, None, 7):
        n = [int(v) for v in row["looks_n"].split()]
        fut = [int(row["futility_count"].split()[0])]
        final = int(row["efficacy_count"].split()[-1])
        check = build(ONE_ARM, arms__treatment__prior=None, hypothesis__benchmark=0.1,
                      looks={"n": n, "futility_count": [*fut, "none"],
                             "efficacy_count": ["none", final]},
                      scenarios__treatment=[0.1, 0.3])
        oc = compute(check).oc
        assert row["type1_error"] == pytest.approx(oc.iloc[0]["prob_success"], abs=1e-13)
        assert row["power"] == pytest.approx(oc.iloc[1]["prob_success"], abs=1e-13)
        assert row["expected_n_null"] == pytest.approx(oc.iloc[0]["expected_n"], abs=1e-12)
