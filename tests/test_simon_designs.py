"""Simon (1989) two-stage designs, as count rules and as Bayesian posterior rules.

Reference: Simon R. Optimal two-stage designs for phase II clinical trials. Controlled
Clinical Trials 1989;10:1-10, Tables 1 and 2. The rows below are RECALLED FROM MEMORY of
that table (design r1/n1, r/n; PET0 to two decimals, EN0 to one decimal); the test checks
octrial's exact engine reproduces them, with the design's type I error <= alpha and power
>= 1 - beta as the table promises.

Each design stops for futility after stage 1 if responses <= r1 and declares success at
the end if responses > r.
"""

from __future__ import annotations

import pytest
from scipy import stats

from octrial.evaluation import compute
from tests.helpers import ONE_ARM, build

# p0, p1, alpha, beta, kind, r1, n1, r, n, PET0, EN0   (from memory, see module docstring)
SIMON = [
    (0.05, 0.25, 0.05, 0.20, "optimal", 0, 9, 2, 17, 0.63, 12.0),
    (0.05, 0.25, 0.05, 0.20, "minimax", 0, 12, 2, 16, 0.54, 13.8),
    (0.10, 0.30, 0.05, 0.20, "optimal", 1, 10, 5, 29, 0.74, 15.0),
    (0.10, 0.30, 0.05, 0.20, "minimax", 1, 15, 5, 25, 0.55, 19.5),
    (0.10, 0.30, 0.05, 0.10, "optimal", 2, 18, 6, 35, 0.73, 22.5),
    (0.10, 0.30, 0.05, 0.10, "minimax", 2, 22, 6, 33, 0.62, 26.2),
    (0.20, 0.40, 0.05, 0.20, "optimal", 3, 13, 12, 43, 0.75, 20.6),
    (0.20, 0.40, 0.05, 0.20, "minimax", 4, 18, 10, 33, 0.72, 22.3),
]


def count_design(p0, p1, r1, n1, r, n):
    return build(
        ONE_ARM, arms__treatment__prior=None, hypothesis__benchmark=p0,
        looks={"n": [n1, n], "futility_count": [r1, "none"], "efficacy_count": ["none", r + 1]},
        scenarios__treatment=[p0, p1],
    )


def between(n: int, x: int, p0: float) -> float:
    """A threshold strictly between Pr(p > p0 | x) and Pr(p > p0 | x + 1) under Beta(1, 1),
    so that 'posterior probability below it' means 'x or fewer responses'. scipy.stats.beta."""
    low = stats.beta.sf(p0, 1 + x, 1 + n - x)
    high = stats.beta.sf(p0, 2 + x, n - x)
    return (low + high) / 2


def bayesian_design(p0, p1, r1, n1, r, n):
    return build(
        ONE_ARM, hypothesis__benchmark=p0,
        looks={"n": [n1, n], "futility": [between(n1, r1, p0)],
               "efficacy": ["none", between(n, r, p0)]},
        scenarios__treatment=[p0, p1],
    )


@pytest.mark.parametrize("make", [count_design, bayesian_design], ids=["counts", "posterior"])
@pytest.mark.parametrize("row", SIMON, ids=[f"{r[0]}-{r[1]}-{r[3]}-{r[4]}" for r in SIMON])
def test_simon_two_stage(row, make) -> None:
    p0, p1, alpha, beta, _, r1, n1, r, n, pet0, en0 = row
    oc = compute(make(p0, p1, r1, n1, r, n)).oc
    null, alternative = oc.iloc[0], oc.iloc[1]
    assert round(null["prob_stop_futility"], 2) == pytest.approx(pet0)
    assert round(null["expected_n"], 1) == pytest.approx(en0)
    assert null["prob_success"] <= alpha
    assert alternative["prob_success"] >= 1 - beta
    assert bool(null["is_null"]) and not bool(alternative["is_null"])


def test_count_and_posterior_rules_agree_exactly() -> None:
    row = SIMON[2]
    p0, p1, r1, n1, r, n = row[0], row[1], *row[5:9]
    a = compute(count_design(p0, p1, r1, n1, r, n))
    b = compute(bayesian_design(p0, p1, r1, n1, r, n))
    assert a.oc["prob_success"].tolist() == pytest.approx(b.oc["prob_success"].tolist(),
                                                          abs=1e-15)
    assert a.boundaries["futility_bound"].tolist() == b.boundaries["futility_bound"].tolist()
    assert a.boundaries["efficacy_bound"].tolist() == b.boundaries["efficacy_bound"].tolist()
