"""Posterior probabilities at each study's own counts (random conduct, binary designs).

References: scipy.stats.beta (posterior tails and means of conjugate beta posteriors) and
scipy.integrate.quad for Pr(p_T - p_C > d) = integral of f_C(u) Pr(p_T > u + d) du over
the control's posterior; the decision tables of octrial.endpoints.binary (the values the
simulator used before) for the decisions.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
import pytest
from scipy import integrate, stats

from octrial.design.load import load_design
from octrial.endpoints.binary import BetaMixture, prob_difference_exceeds, update
from octrial.engines.monte_carlo import batch_generator
from octrial.simulation import counts_benefit
from octrial.simulation.calendar_studies import CalendarStudies
from octrial.simulation.counts_benefit import BetaCounts, serves

TWO_ARM = """
schema = 1
name = "calendar-counts"
[endpoint]
type = "binary"
better = "{better}"
[hypothesis]
comparison = "difference"
kind = "{kind}"
margin = {margin}
[arms.treatment]
allocation = 1
prior = {prior_t}
[arms.control]
allocation = 1
prior = {{ distribution = "beta", a = 1, b = 1 }}
[conduct]
arrivals = "poisson"
enrolment_rate = 8
max_enrolment = 120
outcome_lag = 3
dropout_proportion = 0.15
dropout_by = 3
analyse_pipeline = true
[looks]
n = [40, 80, 100]
efficacy = [0.99, 0.98, 0.95]
futility = 0.2
[scenarios]
control = [0.3]
effect = [0.0, 0.2]
[simulation]
method = "monte-carlo"
replicates = 4000
seed = 11
"""

ONE_ARM = """
schema = 1
name = "calendar-counts-one"
[endpoint]
type = "binary"
better = "higher"
[hypothesis]
benchmark = 0.3
[arms.treatment]
prior = { distribution = "beta", a = 0.5, b = 0.5 }
[conduct]
arrivals = "poisson"
enrolment_rate = 5
max_enrolment = 60
outcome_lag = 2
dropout_hazard = 0.05
[looks]
n = [20, 45]
efficacy = [0.99, 0.95]
futility = 0.1
[scenarios]
treatment = [0.3, 0.5]
[simulation]
method = "monte-carlo"
replicates = 4000
seed = 3
"""

MIXTURE = ('{ distribution = "beta-mixture", components = [{ weight = 0.7, a = 2, b = 5 }, '
           '{ weight = 0.3, a = 1, b = 1 }] }')


def parse_design(text: str) -> object:
    """The design of a TOML text (through a file, as users give it)."""
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "design.toml"
        path.write_text(text)
        return load_design(path)


def two_arm(better: str = "higher", margin: float = 0.0,
            prior_t: str = '{ distribution = "beta", a = 1, b = 1 }',
            kind: str = "superiority") -> object:
    return parse_design(TWO_ARM.format(better=better, margin=margin, prior_t=prior_t,
                                       kind=kind))


def _mixture_pdf(prior: BetaMixture, n: int, x: int):
    post = update(prior, n, np.array([x]))
    w, a, b = post.weights[0], post.a[0], post.b[0]
    parts = list(zip(w, a, b, strict=True))
    return (lambda u: sum(wj * stats.beta.pdf(u, aj, bj) for wj, aj, bj in parts),
            lambda u: sum(wj * stats.beta.sf(u, aj, bj) for wj, aj, bj in parts))


def quad_exceeds(first, second, d: float) -> float:
    """Pr(X - Y > d) = int f_Y(u) Pr(X > u + d) du (scipy quad)."""
    pdf_y, _ = second
    _, sf_x = first
    lo, hi = max(0.0, -d), min(1.0, 1.0 - d)
    value, _ = integrate.quad(lambda u: pdf_y(u) * sf_x(u + d), lo, hi, epsabs=1e-13,
                              epsrel=1e-12, limit=400)
    if d < 0:
        value += integrate.quad(pdf_y, 0.0, -d, epsabs=1e-13, limit=200)[0]
    return value


@pytest.mark.parametrize("better, margin, prior_t, kind", [
    ("higher", 0.0, '{ distribution = "beta", a = 1, b = 1 }', "superiority"),
    ("higher", 0.1, MIXTURE, "superiority"),
    ("lower", 0.05, '{ distribution = "beta", a = 0.5, b = 2 }', "non-inferiority"),
])
def test_two_arm_benefit_against_scipy_quad_and_the_tables(better, margin, prior_t, kind):
    design = two_arm(better, margin, prior_t, kind)
    assert serves(design)
    at = BetaCounts(design)
    n = np.array([[40, 37], [12, 30], [55, 55], [5, 1], [60, 59]])
    x_t = np.array([20, 3, 40, 5, 0])
    x_c = np.array([10, 15, 20, 0, 59])
    got = at.benefit((x_t.astype(float), x_c.astype(float)), n)
    prior_c = design.arms[1].prior
    for i in range(n.shape[0]):
        t = _mixture_pdf(design.arms[0].prior, n[i, 0], x_t[i])
        c = _mixture_pdf(prior_c, n[i, 1], x_c[i])
        shift = design.hypothesis.shift
        want = quad_exceeds(t, c, shift) if better == "higher" else quad_exceeds(c, t, shift)
        assert got[i] == pytest.approx(want, abs=1e-9)
        # the decision tables' value at the same counts (vectorised quadrature)
        post_t = update(design.arms[0].prior, int(n[i, 0]), np.arange(n[i, 0] + 1))
        post_c = update(prior_c, int(n[i, 1]), np.arange(n[i, 1] + 1))
        if better == "higher":
            table = prob_difference_exceeds(post_t, post_c, shift)[0]
        else:
            table = prob_difference_exceeds(post_c, post_t, shift)[0].T
        assert got[i] == pytest.approx(table[x_t[i], x_c[i]], abs=1e-10)


def test_one_arm_benefit_and_estimates_against_scipy_beta():
    design = parse_design(ONE_ARM)
    at = BetaCounts(design)
    n = np.array([[20], [45], [7]])
    x = np.array([9.0, 12.0, 0.0])
    benefit = at.benefit((x,), n)
    mean, cdf = at.estimate((x,), n, 0.4)
    for i in range(3):
        post = stats.beta(0.5 + x[i], 0.5 + n[i, 0] - x[i])
        assert benefit[i] == pytest.approx(post.sf(0.3), abs=1e-13)
        assert mean[i] == pytest.approx(post.mean(), abs=1e-14)
        assert cdf[i] == pytest.approx(post.cdf(0.4), abs=1e-13)


def test_two_arm_estimates_against_scipy():
    design = two_arm(prior_t=MIXTURE)
    at = BetaCounts(design)
    n = np.array([[30, 28]])
    x_t, x_c = np.array([14.0]), np.array([8.0])
    mean, cdf = at.estimate((x_t, x_c), n, 0.1)
    t = _mixture_pdf(design.arms[0].prior, 30, 14)
    c = _mixture_pdf(design.arms[1].prior, 28, 8)
    mean_t = integrate.quad(lambda u: u * t[0](u), 0, 1, epsabs=1e-13)[0]
    mean_c = stats.beta(1 + 8, 1 + 20).mean()
    assert mean[0] == pytest.approx(mean_t - mean_c, abs=1e-10)
    assert cdf[0] == pytest.approx(1.0 - quad_exceeds(t, c, 0.1), abs=1e-9)


@pytest.mark.parametrize("truth", [(0.3, 0.3), (0.5, 0.3)])
def test_same_decisions_as_the_tables(truth):
    """The simulator at each study's counts against the previous implementation (a
    two-arm table per distinct size), same random numbers: every per-look stop count is
    equal (a flip would need a probability within about 1e-11 of a threshold) and the
    estimation sums agree to rounding."""
    design = two_arm()
    fast = CalendarStudies(design, truth, 0.95)
    assert fast.at_counts is not None
    tables = CalendarStudies(design, truth, 0.95)
    tables.at_counts = None
    a = fast.simulate(batch_generator(7, 0, 0), 3000)
    b = tables.simulate(batch_generator(7, 0, 0), 3000)
    assert np.array_equal(a.efficacy, b.efficacy)
    assert np.array_equal(a.futility, b.futility)
    assert a.covered == b.covered
    np.testing.assert_allclose(a.error_sums, b.error_sums, rtol=1e-9, atol=1e-9)
    np.testing.assert_array_equal(a.calendar, b.calendar)


def test_memo_never_changes_a_number():
    """A batch simulated with an empty memo equals the same batch after other batches
    (and another scenario) filled it."""
    design = two_arm()
    counts_benefit._MEMOS.clear()
    alone = CalendarStudies(design, (0.5, 0.3), 0.95).simulate(batch_generator(5, 1, 3), 2000)
    other = CalendarStudies(design, (0.3, 0.3), 0.95)
    other.simulate(batch_generator(5, 0, 0), 2000)
    again = CalendarStudies(design, (0.5, 0.3), 0.95)
    again.simulate(batch_generator(5, 1, 0), 2000)
    after = again.simulate(batch_generator(5, 1, 3), 2000)
    assert np.array_equal(alone.efficacy, after.efficacy)
    assert np.array_equal(alone.futility, after.futility)
    assert np.array_equal(alone.error_sums, after.error_sums)
    assert np.array_equal(alone.calendar, after.calendar)


def test_deterministic_conduct_keeps_the_tables():
    """Even arrivals without dropout: one size per look, the tables stay (the committed
    demo reports are made that way)."""
    text = TWO_ARM.format(better="higher", margin=0.0, kind="superiority",
                          prior_t='{ distribution = "beta", a = 1, b = 1 }')
    text = text.replace('arrivals = "poisson"', 'arrivals = "even"').replace(
        "dropout_proportion = 0.15\ndropout_by = 3\n", "")
    design = parse_design(text)
    assert design.conduct.deterministic
    assert CalendarStudies(design, (0.3, 0.3), 0.95).at_counts is None


def test_grid_posteriors_keep_the_family_tables():
    """Odds-ratio comparisons are computed on the grid (no closed form here)."""
    text = TWO_ARM.format(better="higher", margin=0.0, kind="superiority",
                          prior_t='{ distribution = "beta", a = 1, b = 1 }')
    design = parse_design(text.replace('"difference"', '"odds-ratio"'))
    assert not serves(design)
    assert CalendarStudies(design, (0.3, 0.3), 0.95).at_counts is None
