"""Assurance (O'Hagan, Stevens & Campbell 2005) against integration done another way.

For binary endpoints Pr(success | p) is a polynomial in p of degree at most N (a sum over
outcome paths of p^x (1 - p)^(n - x) terms), so Gauss-Jacobi quadrature with enough nodes
integrates it against a beta design prior exactly (Jacobi weight (1 - x)^(b - 1)
(1 + x)^(a - 1) on x = 2p - 1; nodes from scipy.special.roots_jacobi). That, adaptive
scipy.integrate.quad, and Monte Carlo averaging over draws from the design prior are the
references; Pr(success | p) at each node comes from the exact engine.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import integrate, special, stats

from octrial.cli import main
from octrial.design_prior import assurance
from octrial.engines.exact_lattice import ExactLatticeEngine
from octrial.engines.lattice_batch import IncrementTables, run_batch
from octrial.evaluation import compute
from octrial.rules.lattice import build_rule
from tests.helpers import ONE_ARM, TWO_ARM, build

BETA_37 = {"distribution": "beta", "a": 3, "b": 7}
MIXTURE = {"distribution": "beta-mixture", "components": [
    {"weight": 0.3, "a": 0.8, "b": 4.2}, {"weight": 0.7, "a": 6, "b": 9}]}


def gauss_jacobi(a: float, b: float, nodes: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes in p and weights integrating against Beta(a, b); exact for polynomials of
    degree < 2 * nodes (scipy.special.roots_jacobi)."""
    x, w = special.roots_jacobi(nodes, b - 1, a - 1)
    return (x + 1) / 2, w / w.sum()


def success(design, truths: np.ndarray) -> np.ndarray:
    return ExactLatticeEngine.run(design, truths).efficacy.sum(axis=1)


def jacobi_assurance(design, prior: dict) -> float:
    components = ([(1.0, prior["a"], prior["b"])] if prior["distribution"] == "beta" else
                  [(c["weight"], c["a"], c["b"]) for c in prior["components"]])
    total = 0.0
    for weight, a, b in components:
        p, w = gauss_jacobi(a, b, design.looks.n[-1] // 2 + 2)
        total += weight * w @ success(design, p[:, None])
    return total


@pytest.mark.parametrize("prior", [BETA_37, MIXTURE], ids=["beta", "mixture"])
@pytest.mark.parametrize("better", ["higher", "lower"])
def test_one_arm_exact_against_gauss_jacobi_and_quad(prior, better) -> None:
    design = build(ONE_ARM, endpoint__better=better, hypothesis__benchmark=0.3,
                   arms__treatment__design_prior=prior, looks__futility_predictive=0.15)
    exact = assurance(design)
    assert exact.method == "exact"
    assert exact.probability == pytest.approx(jacobi_assurance(design, prior), abs=1e-13)

    def density(p: float) -> float:
        if prior["distribution"] == "beta":
            return stats.beta.pdf(p, prior["a"], prior["b"])
        return sum(c["weight"] * stats.beta.pdf(p, c["a"], c["b"]) for c in prior["components"])

    quad = integrate.quad(lambda p: success(design, np.array([[p]]))[0] * density(p), 0, 1,
                          epsabs=1e-12, limit=200)[0]
    assert exact.probability == pytest.approx(quad, abs=1e-9)
    # stopping probabilities per look sum to one; expected N from them
    assert sum(exact.stop_efficacy) + sum(exact.stop_futility) == pytest.approx(1, abs=1e-13)
    assert exact.expected_n == pytest.approx(
        np.dot(np.add(exact.stop_efficacy, exact.stop_futility), design.looks.n), abs=1e-12)


def test_one_arm_exact_against_monte_carlo_averaging() -> None:
    """Mean of the exact Pr(success | p) over 40,000 draws of p from the design prior
    (numpy), within 5 standard errors; and the quadrature method (Gauss-Legendre over the
    components' quantiles) to its accuracy."""
    design = build(ONE_ARM, arms__treatment__design_prior=MIXTURE)
    rng = np.random.default_rng(20261201)
    draws = 40_000
    component = rng.random(draws) < 0.3
    p = np.where(component, rng.beta(0.8, 4.2, draws), rng.beta(6, 9, draws))
    result = run_batch(design, build_rule(design), IncrementTables(design, p[:, None]))
    values = result.efficacy.sum(axis=1)
    se = values.std(ddof=1) / np.sqrt(draws)
    exact = assurance(design).probability
    assert abs(exact - values.mean()) < 5 * se
    assert assurance(design, method="quadrature").probability == pytest.approx(exact, abs=1e-6)


def test_two_arm_exact_against_tensor_gauss_jacobi() -> None:
    design = build(TWO_ARM, looks__n=[16, 40], looks__efficacy=[0.99, 0.95],
                   arms__treatment__design_prior={"distribution": "beta", "a": 5, "b": 8},
                   arms__control__design_prior={"distribution": "beta", "a": 2.5, "b": 6.5})
    exact = assurance(design)
    pt, wt = gauss_jacobi(5, 8, 12)
    pc, wc = gauss_jacobi(2.5, 6.5, 12)
    truths = np.array([(t, c) for t in pt for c in pc])
    weights = np.array([a * b for a in wt for b in wc])
    assert exact.probability == pytest.approx(weights @ success(design, truths), abs=1e-12)
    claim = integrate.quad(lambda c: stats.beta.pdf(c, 2.5, 6.5) * stats.beta.sf(c, 5, 8),
                           0, 1, epsabs=1e-13)[0]
    assert exact.design_prior_probability_of_claim == pytest.approx(claim, abs=1e-10)


def test_no_design_prior_no_assurance() -> None:
    design = build(ONE_ARM)
    assert assurance(design) is None
    assert compute(design).info["assurance"] is None


def test_run_reports_assurance(tmp_path) -> None:
    data = ONE_ARM | {"arms": {"treatment": {"prior": {"distribution": "beta", "a": 1, "b": 1},
                                             "design_prior": BETA_37}}}
    design_file = tmp_path / "d.toml"
    from octrial.design.write import dumps
    design_file.write_text(dumps(data))
    result = CliRunner().invoke(main, ["run", str(design_file), "--out", str(tmp_path / "o")])
    assert result.exit_code == 0, result.output
    assert "Assurance (probability of success under the design prior)" in result.output
    record = json.loads((tmp_path / "o" / "run.json").read_text())
    expected = assurance(build(ONE_ARM, arms__treatment__design_prior=BETA_37))
    assert record["assurance"]["probability"] == pytest.approx(expected.probability, abs=1e-15)
    assert record["assurance"]["design_prior_probability_of_claim"] == pytest.approx(
        stats.beta.sf(0.2, 3, 7), abs=1e-12)
