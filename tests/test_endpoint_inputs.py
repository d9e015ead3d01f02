"""Design files for count and normal endpoints and borrowing priors: accepted forms and
a table of bad inputs with the key and words each message must contain."""

from __future__ import annotations

import pytest
from click.testing import CliRunner

from octrial.cli import main
from octrial.errors import DesignError, InputError
from octrial.evaluation import compute
from tests.helpers import ONE_ARM, TWO_ARM, build
from tests.test_count_maths import COUNT_ONE_ARM
from tests.test_normal_engine import ONE_ARM as NORMAL_ONE_ARM
from tests.test_normal_engine import TWO_ARM as NORMAL_TWO_ARM

POWER = {"method": "power", "a0": 0.5}


def without(table: dict, key: str) -> dict:
    return {k: v for k, v in table.items() if k != key}

BETA_BORROWING = {"distribution": "beta", "a": 1, "b": 1,
                  "historical": {"responses": 30, "n": 100}, "borrowing": POWER}
COUNT_TWO_ARM = {
    **COUNT_ONE_ARM, "hypothesis": {"comparison": "ratio", "margin": 0.2},
    "arms": {"treatment": COUNT_ONE_ARM["arms"]["treatment"],
             "control": COUNT_ONE_ARM["arms"]["treatment"]},
    "scenarios": {"control": [1.0], "ratio": [1.0]},
}
UNKNOWN_SD = {"type": "normal", "sd": "unknown", "true_sd": 2.0, "better": "higher"}
NIG = {"distribution": "normal-inverse-gamma", "mean": 0.0, "mean_n": 1.0, "shape": 2.0,
       "scale": 4.0}

# (base design, changes, the key the message must name, words it must contain)
BAD = [
    (NORMAL_ONE_ARM, {"looks": {"n": [100], "efficacy_count": [60]}}, "looks.efficacy_count",
     "an endpoint whose data are counts"),
    (COUNT_ONE_ARM, {"endpoint__exposure": -1.0}, "endpoint.exposure", "exposure per subject > 0"),
    (COUNT_ONE_ARM, {"endpoint__exposure": 0}, "endpoint.exposure", "> 0"),
    (COUNT_ONE_ARM, {"endpoint__model": "negative-binomial"}, "endpoint.dispersion",
     "known dispersion"),
    (COUNT_ONE_ARM, {"endpoint__dispersion": 0.5}, "endpoint.dispersion",
     "no dispersion for Poisson"),
    (COUNT_ONE_ARM, {"endpoint__model": "negbin"}, "endpoint.model",
     "'negative-binomial'"),
    (COUNT_ONE_ARM, {"hypothesis__benchmark": 0.0}, "hypothesis.benchmark", "a rate > 0"),
    (COUNT_ONE_ARM, {"scenarios__treatment": [1.0, -0.5]}, "scenarios.treatment[2]",
     "a rate > 0"),
    (COUNT_ONE_ARM, {"arms__treatment__prior": {"distribution": "gamma", "shape": 1}},
     "arms.treatment.prior.rate", "missing"),
    (COUNT_ONE_ARM, {"arms__treatment__prior": {"distribution": "log-normal",
                                                "log_mean": 0, "log_sd": 0}},
     "arms.treatment.prior.log_sd", "> 0"),
    (COUNT_ONE_ARM, {"arms__treatment__prior": {
        **COUNT_ONE_ARM["arms"]["treatment"]["prior"], "historical": {"events": 5},
        "borrowing": POWER}}, "arms.treatment.prior.historical.exposure", "missing"),
    (COUNT_ONE_ARM, {"arms__treatment__prior": {
        **COUNT_ONE_ARM["arms"]["treatment"]["prior"],
        "historical": {"events": 5, "exposure": -2.0}, "borrowing": POWER}},
     "arms.treatment.prior.historical.exposure", "> 0"),
    (COUNT_ONE_ARM, {"endpoint__model": "negative-binomial", "endpoint__dispersion": 0.5,
                     "arms__treatment__prior": {
                         **COUNT_ONE_ARM["arms"]["treatment"]["prior"],
                         "historical": {"events": 5, "exposure": 4.0}, "borrowing": POWER}},
     "arms.treatment.prior.borrowing", "model = 'poisson' only"),
    (COUNT_TWO_ARM, {"hypothesis__margin": 1.2}, "hypothesis.margin",
     "the ratio it implies must stay above 0"),
    (COUNT_TWO_ARM, {"hypothesis__comparison": "difference"}, "hypothesis.comparison",
     "'ratio'"),
    (COUNT_TWO_ARM, {"scenarios": {"control": [1.0], "effect": [0.1]}}, "scenarios.effect",
     "one of the keys control, treatment, ratio"),
    (NORMAL_ONE_ARM, {"endpoint__sd": 0}, "endpoint.sd", "a standard deviation > 0"),
    (NORMAL_ONE_ARM, {"endpoint__sd": -2.0}, "endpoint.sd", "> 0 or 'unknown'"),
    (NORMAL_ONE_ARM, {"endpoint__sd": None}, "endpoint.sd", "missing"),
    (NORMAL_ONE_ARM, {"endpoint__better": None}, "endpoint.better", "missing"),
    (NORMAL_ONE_ARM, {"arms__treatment__prior": {"distribution": "normal", "mean": 0,
                                                 "sd": 0}},
     "arms.treatment.prior.sd", "a standard deviation > 0"),
    (NORMAL_ONE_ARM, {"arms__treatment__prior": NIG}, "arms.treatment.prior.distribution",
     "the sd is known"),
    (NORMAL_ONE_ARM, {"endpoint": UNKNOWN_SD}, "arms.treatment.prior.distribution",
     "'normal-inverse-gamma' (the sd is unknown)"),
    (NORMAL_ONE_ARM, {"endpoint": without(UNKNOWN_SD, "true_sd"),
                      "arms__treatment__prior": NIG}, "endpoint.true_sd", "missing"),
    (NORMAL_ONE_ARM, {"endpoint__true_sd": 3.0}, "endpoint.true_sd", "no true_sd"),
    (NORMAL_ONE_ARM, {"arms__treatment__design_prior": {"distribution": "flat"}},
     "arms.treatment.design_prior.distribution", "a proper distribution"),
    (NORMAL_ONE_ARM, {"arms__treatment__prior": {
        "distribution": "flat", "historical": {"mean": 1, "sd": 1, "n": 10},
        "borrowing": {"method": "robust-mixture", "vague_weight": 0.2}}},
     "arms.treatment.prior.borrowing", "a proper initial prior"),
    (NORMAL_ONE_ARM, {"arms__treatment__prior": {
        "distribution": "normal", "mean": 0, "sd": 1, "historical": {"mean": 1, "sd": 0,
                                                                    "n": 10},
        "borrowing": POWER}}, "arms.treatment.prior.historical.sd", "> 0"),
    (NORMAL_TWO_ARM, {"arms__control__prior": {"distribution": "flat"}},
     "arms.control.prior", "write it as hypothesis.prior"),
    (NORMAL_TWO_ARM, {"hypothesis__prior": None}, "hypothesis.prior",
     "prior on the treatment effect"),
    (NORMAL_TWO_ARM, {"hypothesis__prior": {"distribution": "normal", "mean": 0, "sd": 1,
                                            "historical": {"mean": 1, "sd": 1, "n": 10},
                                            "borrowing": POWER}},
     "hypothesis.prior.borrowing", "a one-arm design"),
    (NORMAL_TWO_ARM, {"hypothesis__margin": -1.0}, "hypothesis.margin", "a margin >= 0"),
    (ONE_ARM, {"arms__treatment__prior": {**BETA_BORROWING, "borrowing": {
        "method": "power", "a0": 1.5}}}, "arms.treatment.prior.borrowing.a0",
     "a weight a0 in [0, 1]"),
    (ONE_ARM, {"arms__treatment__prior": {**BETA_BORROWING, "borrowing": {
        "method": "power", "a0": -0.1}}}, "arms.treatment.prior.borrowing.a0", "[0, 1]"),
    (ONE_ARM, {"arms__treatment__prior": without(BETA_BORROWING, "historical")},
     "arms.treatment.prior.historical", "historical data ({ responses, n }) for the "
                                        "borrowing prior"),
    (ONE_ARM, {"arms__treatment__prior": without(BETA_BORROWING, "borrowing")},
     "arms.treatment.prior.borrowing", "a borrowing method"),
    (ONE_ARM, {"arms__treatment__prior": {**BETA_BORROWING, "historical": {
        "responses": 30, "n": 20}}}, "arms.treatment.prior.historical.responses",
     "at most n (20)"),
    (ONE_ARM, {"arms__treatment__prior": {**BETA_BORROWING, "borrowing": {
        "method": "robust-mixture"}}}, "arms.treatment.prior.borrowing.vague_weight",
     "missing"),
    (ONE_ARM, {"arms__treatment__prior": {**BETA_BORROWING, "borrowing": {
        "method": "robust-mixture", "vague_weight": 1.2}}},
     "arms.treatment.prior.borrowing.vague_weight", "a weight in [0, 1]"),
    (ONE_ARM, {"arms__treatment__prior": {**BETA_BORROWING, "borrowing": {
        "method": "pwer", "a0": 0.5}}}, "arms.treatment.prior.borrowing.method",
     "did you mean 'power'"),
    (ONE_ARM, {"arms__treatment__prior": {"distribution": "logit-normal", "logit_mean": 0,
                                          "logit_sd": 1, "historical": {"responses": 3,
                                                                        "n": 10},
                                          "borrowing": POWER}},
     "arms.treatment.prior.borrowing", "a beta or beta-mixture initial prior"),
    (TWO_ARM, {"arms__treatment__prior": {"distribution": "logit-normal", "logit_mean": 0,
                                          "logit_sd": 1}}, "hypothesis.comparison",
     "'odds-ratio'"),
    (ONE_ARM, {"simulation": {"grid_points": 50}}, "simulation.grid_points", "from 101"),
]


@pytest.mark.parametrize("base, changes, key, words", BAD, ids=[b[2] for b in BAD])
def test_bad_input(base, changes, key, words) -> None:
    with pytest.raises(DesignError) as info:
        build(base, **changes)
    message = str(info.value)
    assert f"test.toml: {key}: expected" in message, message
    assert words in message, message


def test_accepted_forms() -> None:
    nb = build(COUNT_ONE_ARM, endpoint={"type": "count", "model": "negative-binomial",
                                        "dispersion": 0.4})
    assert nb.endpoint.exposure == 1.0 and nb.hypothesis.better == "lower"
    ratio = build(COUNT_TWO_ARM, scenarios={"control": [0.5, 1.0], "ratio": [0.8, 1.0]})
    assert ratio.scenarios.values == ((0.4, 0.5), (0.5, 0.5), (0.8, 1.0), (1.0, 1.0))
    odds = build(TWO_ARM, hypothesis__comparison="odds-ratio",
                 scenarios={"control": [0.5], "odds_ratio": [3.0]})
    assert odds.scenarios.values == ((0.75, 0.5),)
    two = build(NORMAL_TWO_ARM)
    assert two.hypothesis.prior is not None and two.arms[0].prior is None
    unknown = build(NORMAL_ONE_ARM, endpoint=UNKNOWN_SD, arms__treatment__prior=NIG)
    assert unknown.endpoint.sd is None and unknown.endpoint.true_sd == 2.0
    nig = build(NORMAL_ONE_ARM, endpoint=UNKNOWN_SD, arms__treatment__prior={
        **NIG, "historical": {"mean": 1.0, "sd": 2.0, "n": 10}, "borrowing": POWER})
    prior = nig.arms[0].prior  # conjugate power-prior update of the NIG
    assert (prior.mean_n, prior.shape) == (6.0, 4.5) and prior.mean == pytest.approx(5 / 6)


def test_unknown_sd_is_simulated_and_exact_is_refused_clearly(tmp_path) -> None:
    design = build(NORMAL_ONE_ARM, endpoint=UNKNOWN_SD, arms__treatment__prior=NIG)
    with pytest.raises(InputError, match="needs the Monte Carlo engine"):
        compute(design, "exact")
    path = tmp_path / "unknown.toml"
    path.write_text(UNKNOWN_TOML)
    runner = CliRunner()
    result = runner.invoke(main, ["run", str(path), "--out", str(tmp_path / "out"),
                                  "--method", "exact"])
    assert result.exit_code == 2
    assert "simulation.method" in result.output and "Monte Carlo engine" in result.output
    assert not (tmp_path / "out").exists()
    result = runner.invoke(main, ["run", str(path), "--out", str(tmp_path / "auto")])
    assert result.exit_code == 0, result.output
    assert "monte-carlo" in (tmp_path / "auto" / "oc.csv").read_text()


def test_two_arm_unknown_sd_predictive_futility_is_simulated() -> None:
    # (Once refused; its predictive rule is checked in tests/test_normal_unknown_sd.py.)
    design = build(NORMAL_ONE_ARM, endpoint=UNKNOWN_SD, arms={
        "treatment": {"prior": NIG}, "control": {"prior": NIG}},
        hypothesis={"comparison": "difference", "margin": 0.0},
        looks={"n": [40, 80], "efficacy": [0.99, 0.975], "futility_predictive": 0.1},
        scenarios={"control": [0.0], "effect": [0.0]}, simulation__replicates=2000)
    oc = compute(design).oc
    assert (oc["method"] == "monte-carlo").all()
    assert oc["look1_stop_futility"].iloc[0] > 0.2  # no other futility rule at look 1


UNKNOWN_TOML = """
schema = 1
name = "unknown-sd"
[endpoint]
type = "normal"
sd = "unknown"
true_sd = 2.0
better = "higher"
[hypothesis]
benchmark = 0.0
[arms.treatment.prior]
distribution = "normal-inverse-gamma"
mean = 0.0
mean_n = 1.0
shape = 2.0
scale = 4.0
[looks]
n = [50]
efficacy = 0.975
[scenarios]
treatment = [0.0, 0.5]
"""


def test_count_rule_on_events_may_exceed_the_number_of_subjects() -> None:
    # Identity: one look, lower is better, success iff events <= a, events ~ Poisson(n e
    # rate); so P(success) is the Poisson CDF (scipy.stats.poisson).
    from scipy import stats

    design = build(COUNT_ONE_ARM, endpoint__better="lower", arms__treatment__prior=None,
                   looks={"n": [40], "efficacy_count": [25]},
                   scenarios__treatment=[0.9, 1.5, 2.0])
    oc = compute(design).oc
    expected = stats.poisson.cdf(25, 40 * 0.5 * oc["true_treatment"])
    assert oc["prob_success"].to_numpy() == pytest.approx(expected, abs=1e-12)
    # 25 events among 40 subjects is fine; a responder count above n would not be.
    with pytest.raises(DesignError, match="between 0 and the look's n"):
        build(ONE_ARM, looks={"n": [10, 20], "efficacy_count": ["none", 25]})
