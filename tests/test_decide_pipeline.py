"""``octrial decide --pipeline``: subjects enrolled without an outcome at an interim look.

Each check names what it is checked against:

* the predictive probability of final success through the pipeline and the subjects
  still to enrol, and the probability that a stop for efficacy now is still a success
  once the pipeline reads out: brute-force enumeration written here of the pipeline's
  and the later subjects' response counts, each count's probability
  ``integral of scipy.stats.binom.pmf(y; m, p) x posterior(p) dp`` by
  ``scipy.integrate.quad`` (posterior ``scipy.stats.beta``), the final analysis's
  posterior probability by ``scipy.stats.beta.sf`` (one arm) or by quadrature of
  ``beta.pdf x beta.sf`` (two arms); for a count endpoint the same with
  ``scipy.stats.poisson`` and ``scipy.stats.gamma``;
* the identity (subjects exchangeable given the parameter; docs/methods.md, "Delayed
  outcomes"): the pipeline's predictive probability equals the one-stage predictive
  probability of the rule's tables that ``decide`` reports without a pipeline;
* the decision does not depend on the pipeline (identity: the rule uses the outcomes);
* bad input exits 2 naming ``--pipeline``.
"""

from __future__ import annotations

import functools
import json

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import integrate, stats

from octrial.cli import main
from octrial.errors import SettingsError
from octrial.interim import decide
from tests.helpers import DESIGNS, ONE_ARM, TWO_ARM, build

DELAYED = DESIGNS / "delayed-response.toml"
TOLERANCE = 1e-12
"""The stop rule's DECISION_TOLERANCE: a probability within it of a threshold reaches it."""


def _timed(base, *, lag, max_enrolment, analyse=True, **changes):
    conduct = {"arrivals": "even", "enrolment_rate": 4.0, "max_enrolment": max_enrolment,
               "outcome_lag": lag, "analyse_pipeline": analyse}
    return build(base, conduct=conduct, **changes)


@functools.cache
def _count_probability(y: int, m: int, a: float, b: float) -> float:
    """Pr(y responses among m | Beta(a, b) posterior): scipy binom integrated by quad."""
    return integrate.quad(lambda p: stats.binom.pmf(y, m, p) * stats.beta.pdf(p, a, b),
                          0, 1, epsabs=1e-14, epsrel=1e-12)[0]


def _one_arm_brute_force(a, b, x, n, pipeline, future, success):
    """(PP through pipeline then future, Pr(success at n + pipeline)) by enumeration."""
    pp = stop = 0.0
    for yp in range(pipeline + 1):
        w = _count_probability(yp, pipeline, a + x, b + n - x)
        stop += w * success(x + yp, n + pipeline)
        for yf in range(future + 1):
            wf = _count_probability(yf, future, a + x + yp, b + n + pipeline - x - yp)
            pp += w * wf * success(x + yp + yf, n + pipeline + future)
    return pp, stop


ONE_ARM_LAGGED = dict(
    looks={"n": [8, 16], "efficacy": [0.99, 0.9], "futility": 0.05},
    arms={"treatment": {"prior": {"distribution": "beta", "a": 2, "b": 3}}},
)


@pytest.mark.parametrize("x", [1, 3, 4, 6])
def test_one_arm_pipeline_against_binomial_enumeration(x):
    # rate 4 per month, lag 1: the 8th outcome at month 3, when 12 are enrolled (4 waiting)
    design = _timed(ONE_ARM, lag=1.0, max_enrolment=16, **ONE_ARM_LAGGED)
    result = decide(design, 1, [f"treatment={x}/8"], pipeline=["treatment=4"])
    reading = result.pipeline
    assert reading is not None and reading.planned_pipeline == {"treatment": 4}

    def success(s, n):  # final analysis: Pr(p > 0.2 | s of n) >= 0.9, Beta(2, 3) prior
        return stats.beta.sf(0.2, 2 + s, 3 + n - s) >= 0.9 - TOLERANCE

    pp, stop = _one_arm_brute_force(2, 3, x, 8, 4, 4, success)
    assert reading.predictive == pytest.approx(pp, abs=1e-9)
    assert reading.success_if_stopped == pytest.approx(stop, abs=1e-9)
    assert reading.final_threshold == 0.9
    # identity: the rule's one-stage predictive probability over all 8 subjects to come
    assert result.assessment.predictive == pytest.approx(reading.predictive, abs=1e-12)


def test_pipeline_other_than_planned_warns_and_is_used():
    design = _timed(ONE_ARM, lag=1.0, max_enrolment=16, **ONE_ARM_LAGGED)
    result = decide(design, 1, ["treatment=3/8"], pipeline=["treatment=2"])

    def success(s, n):
        return stats.beta.sf(0.2, 2 + s, 3 + n - s) >= 0.9 - TOLERANCE

    pp, stop = _one_arm_brute_force(2, 3, 3, 8, 2, 6, success)
    assert result.pipeline.predictive == pytest.approx(pp, abs=1e-9)
    assert result.pipeline.success_if_stopped == pytest.approx(stop, abs=1e-9)
    assert any("differs from the one the design's timing expects" in w for w in result.warnings)


def _two_arm_benefit(xt, nt, xc, nc):
    """Pr(p_T - p_C > 0) with Beta(1, 1) priors: quad of beta.pdf_C(u) beta.sf_T(u)."""
    return integrate.quad(lambda u: stats.beta.pdf(u, 1 + xc, 1 + nc - xc)
                          * stats.beta.sf(u, 1 + xt, 1 + nt - xt), 0, 1,
                          epsabs=1e-13, epsrel=1e-12)[0]


@pytest.mark.parametrize(("xt", "xc"), [(3, 1), (2, 2), (4, 0)])
def test_two_arm_pipeline_against_binomial_enumeration(xt, xc):
    # 1:1, 8 then 16 outcomes; lag 1 at rate 4: 2 + 2 waiting at look 1, 4 + 4 to enrol
    design = _timed(TWO_ARM, lag=1.0, max_enrolment=16,
                    looks={"n": [8, 16], "efficacy": [0.99, 0.9], "futility": 0.05},
                    scenarios={"control": [0.3], "effect": [0.0]})
    result = decide(design, 1, [f"treatment={xt}/4", f"control={xc}/4"],
                    pipeline=["treatment=2", "control=2"])
    reading = result.pipeline

    @functools.cache
    def success(st, sc, n):
        return _two_arm_benefit(st, n, sc, n) >= 0.9 - TOLERANCE

    pp = stop = 0.0
    for ypt in range(3):
        wt = _count_probability(ypt, 2, 1 + xt, 1 + 4 - xt)
        for ypc in range(3):
            wc = _count_probability(ypc, 2, 1 + xc, 1 + 4 - xc)
            stop += wt * wc * success(xt + ypt, xc + ypc, 6)
            for yft in range(3):
                vt = _count_probability(yft, 2, 1 + xt + ypt, 1 + 6 - xt - ypt)
                for yfc in range(3):
                    vc = _count_probability(yfc, 2, 1 + xc + ypc, 1 + 6 - xc - ypc)
                    pp += wt * wc * vt * vc * success(xt + ypt + yft, xc + ypc + yfc, 8)
    assert reading.predictive == pytest.approx(pp, abs=1e-9)
    assert reading.success_if_stopped == pytest.approx(stop, abs=1e-9)
    assert result.assessment.predictive == pytest.approx(reading.predictive, abs=1e-12)


@pytest.mark.parametrize("exposure", [8.0, 7.5])
def test_count_pipeline_against_poisson_enumeration(exposure):
    # events per subject-month, lower is better: Pr(rate < 1.5) >= 0.9 at the end; an
    # exposure of 7.5 subjects is read on a lattice of half subjects (docs/methods.md)
    data = {**ONE_ARM, "endpoint": {"type": "count", "exposure": 1.0, "better": "lower"},
            "hypothesis": {"benchmark": 1.5},
            "arms": {"treatment": {"prior": {"distribution": "gamma", "shape": 1.5,
                                             "rate": 1.0}}},
            "scenarios": {"treatment": [1.0, 1.5]}}
    design = _timed(data, lag=1.0, max_enrolment=16,
                    looks={"n": [8, 16], "efficacy": [0.999, 0.9], "futility": 0.05})
    x = 9
    result = decide(design, 1, [f"treatment={x}/{exposure:g}"], pipeline=["treatment=4"])

    def integrated(pmf, shape, rate):  # a Poisson probability over the gamma posterior
        return integrate.quad(lambda lam: pmf(lam) * stats.gamma.pdf(lam, shape, scale=1 / rate),
                              0, np.inf, epsabs=1e-14, epsrel=1e-12)[0]

    def success(s, total):
        return stats.gamma.cdf(1.5, 1.5 + s, scale=1 / (1.0 + total)) >= 0.9 - TOLERANCE

    # the final posterior probability falls with the events, so success at exposure 16 is
    # "total events <= c": found by scanning, then the later subjects' sum over yf <= c is
    # scipy's Poisson CDF (exposure 16 - exposure - 4 still to come)
    c = max(s for s in range(200) if success(s, 16))
    later = 16 - exposure - 4
    pp = stop = 0.0
    for yp in range(40):  # 4 pipeline subjects at a posterior mean rate near 1.2
        w = integrated(lambda lam, y=yp: stats.poisson.pmf(y, 4 * lam), 1.5 + x, 1.0 + exposure)
        stop += w * success(x + yp, exposure + 4)
        left = c - x - yp
        if left >= 0:
            pp += w * integrated(lambda lam, k=left: stats.poisson.cdf(k, later * lam),
                                 1.5 + x + yp, 1.0 + exposure + 4)
    assert result.pipeline.predictive == pytest.approx(pp, abs=1e-8)
    assert result.pipeline.success_if_stopped == pytest.approx(stop, abs=1e-8)
    assert result.assessment.predictive == pytest.approx(pp, abs=1e-8)
    assert result.pipeline.enrolled == {"treatment": exposure + 4}


def test_decision_does_not_depend_on_the_pipeline_and_without_analysis_no_stop_probability():
    design = _timed(ONE_ARM, lag=1.0, max_enrolment=16, analyse=False, **ONE_ARM_LAGGED)
    plain = decide(design, 1, ["treatment=4/8"])
    waiting = decide(design, 1, ["treatment=4/8"], pipeline=["treatment=4"])
    assert plain.assessment == waiting.assessment
    assert waiting.pipeline.success_if_stopped is None
    assert waiting.pipeline.predictive == pytest.approx(plain.assessment.predictive, abs=1e-12)


def test_demo_design_text_and_json():
    args = ["decide", str(DELAYED), "--look", "1", "--data", "treatment=26/40",
            "--data", "control=16/40", "--pipeline", "treatment=24", "--pipeline", "control=24"]
    runner = CliRunner()
    text = runner.invoke(main, args)
    assert text.exit_code == 0, text.output
    record = json.loads(runner.invoke(main, [*args, "--json"]).stdout)
    reading = record["pipeline"]
    assert reading["pipeline"] == {"treatment": 24, "control": 24}
    assert reading["enrolled"] == {"treatment": 64, "control": 64}
    assert reading["planned_pipeline"] == {"treatment": 24, "control": 24}
    assert f"{reading['predictive']:.4f}" in text.stdout
    assert f"{reading['success_if_stopped']:.4f}" in text.stdout
    assert reading["predictive"] == pytest.approx(
        record["predictive_probability_of_success"], abs=1e-12)


@pytest.mark.parametrize(("design", "look", "data", "pipeline", "words"), [
    (DESIGNS / "two-arm-randomised.toml", 1, ["treatment=6/20", "control=4/20"],
     ["treatment=3", "control=3"], ["--pipeline", "outcome_lag", "no [conduct] table"]),
    (DELAYED, 1, ["treatment=26/40", "control=16/40"], ["treatment=24", "contro=24"],
     ["--pipeline", "did you mean 'control'"]),
    (DELAYED, 1, ["treatment=26/40", "control=16/40"], ["treatment=24"],
     ["--pipeline: control", "control=N"]),
    (DELAYED, 1, ["treatment=26/40", "control=16/40"], ["treatment=41", "control=24"],
     ["--pipeline: treatment", "maximum of 80", "less the 40 with an outcome (40)", "41"]),
    (DELAYED, 1, ["treatment=26/40", "control=16/40"], ["treatment=-1", "control=24"],
     ["--pipeline: treatment", "whole number"]),
    (DELAYED, 2, ["treatment=46/80", "control=36/80"], ["treatment=0", "control=0"],
     ["--pipeline", "an interim look", "final analysis"]),
])
def test_bad_pipeline_exits_2_naming_the_option(design, look, data, pipeline, words):
    args = ["decide", str(design), "--look", str(look)]
    for d in data:
        args += ["--data", d]
    for p in pipeline:
        args += ["--pipeline", p]
    result = CliRunner().invoke(main, args)
    assert result.exit_code == 2
    for w in words:
        assert w in result.stderr, result.stderr
    assert "Traceback" not in result.output


def test_library_error_names_the_setting():
    design = build(TWO_ARM)
    with pytest.raises(SettingsError) as caught:
        decide(design, 1, ["treatment=6/10", "control=4/10"], pipeline=["treatment=1"])
    assert caught.value.source == "pipeline"
