"""Interim decisions: equal to the boundary tables everywhere; posterior numbers against
scipy closed forms and quadrature; warnings for unplanned sizes; bad input."""

from __future__ import annotations

import json
from dataclasses import replace

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import integrate, stats

from octrial.cli import main
from octrial.design.load import load_design
from octrial.endpoints import FAMILIES
from octrial.errors import InputError
from octrial.interim import assess, decide
from octrial.interim.observations import BINARY, COUNT, NORMAL, BinaryData, CountData, NormalData
from octrial.interim.rule import (
    CONTINUE,
    FAILURE,
    STOP_EFFICACY,
    STOP_FUTILITY,
    SUCCESS,
)
from octrial.rules.boundaries import boundary_table
from octrial.rules.lattice import build_rule
from tests.helpers import DESIGNS, ONE_ARM, TWO_ARM, build

SINGLE = DESIGNS / "single-arm-response.toml"
TWO = DESIGNS / "two-arm-randomised.toml"
MIXTURE = {"distribution": "beta-mixture",
           "components": [{"weight": 0.6, "a": 6, "b": 14}, {"weight": 0.4, "a": 1, "b": 1}]}

DESIGNS_FOR_TABLES = {
    "single-arm demo": lambda: load_design(SINGLE),
    "two-arm demo": lambda: load_design(TWO),
    "mixture prior, predictive futility": lambda: build(
        ONE_ARM, arms__treatment__prior=MIXTURE, looks__n=[12, 24, 36],
        looks__efficacy=[0.999, 0.99, 0.95], looks__futility=0.1,
        looks__futility_predictive=0.05),
    "lower is better, information-fraction thresholds": lambda: build(
        ONE_ARM, endpoint__better="lower", hypothesis__benchmark=0.4,
        looks__efficacy={"lambda": 0.2, "eta": 1.5}, looks__futility_predictive=0.1),
    "count rule": lambda: build(ONE_ARM, arms__treatment__prior=None,
                                looks={"n": [13, 43], "futility_count": [3, "none"],
                                       "efficacy_count": ["none", 12]}),
    "two arms, non-inferiority, predictive futility": lambda: build(
        TWO_ARM, hypothesis__kind="non-inferiority", hypothesis__margin=0.1,
        looks__futility_predictive=0.05),
    "two arms 2:1, lower is better, three looks": lambda: build(
        TWO_ARM, endpoint__better="lower", arms__treatment__allocation=2,
        looks={"n": [15, 30, 60], "efficacy": [0.999, 0.99, 0.97], "futility": 0.2,
               "futility_predictive": 0.05}),
}


def table_decision(row: dict, x: int, higher: bool, last: bool) -> str:
    """The decision a monitoring committee reads off one boundaries.csv row by hand."""
    def beyond(bound, upward: bool) -> bool:
        if bound is None:
            return False
        return x >= bound if upward else x <= bound
    if beyond(row["efficacy_bound"], higher):
        return SUCCESS if last else STOP_EFFICACY
    if beyond(row["futility_bound"], not higher):
        return FAILURE if last else STOP_FUTILITY
    assert not last, "at the last look every count is success or failure"
    return CONTINUE


@pytest.mark.parametrize("name", list(DESIGNS_FOR_TABLES))
def test_decision_equals_the_boundary_table_everywhere(name) -> None:
    design = DESIGNS_FOR_TABLES[name]()
    table = boundary_table(design, build_rule(design)).astype(object)
    table = table.where(table.notna(), None)
    higher = design.hypothesis.better == "higher"
    looks = design.looks
    checked = 0
    for k in range(looks.count):
        sizes = looks.per_arm[k]
        last = k == looks.count - 1
        rows = table[table["look"] == k + 1].to_dict("records")
        if design.two_arm:
            points = [(x_t, x_c) for x_c in range(sizes[1] + 1) for x_t in range(sizes[0] + 1)]
        else:
            points = [(x,) for x in range(sizes[0] + 1)]
        for point in points:
            row = rows[point[1]] if design.two_arm else rows[0]
            got = assess(design, k + 1, sizes, point).decision
            assert got == table_decision(row, point[0], higher, last), (k + 1, point)
            checked += 1
    assert checked == sum(int(np.prod([n + 1 for n in s])) for s in looks.per_arm)


def test_one_arm_posterior_numbers_against_scipy() -> None:
    design = load_design(SINGLE)          # Beta(0.4, 1.6) prior, benchmark 0.2, N = 45
    a, b, p0, big_n = 0.4, 1.6, 0.2, 45
    final_bound = int(boundary_table(design, build_rule(design)).iloc[-1]["efficacy_bound"])
    for x, n, look in [(3, 15, 1), (9, 30, 2), (0, 15, 1), (30, 30, 2), (14, 45, 3)]:
        result = decide(design, look, [f"treatment={x}/{n}"], level=0.9)
        post = stats.beta(a + x, b + n - x)
        assert result.assessment.benefit == pytest.approx(post.sf(p0), rel=1e-12, abs=1e-15)
        (summary,) = result.posterior
        assert summary.mean == pytest.approx(post.mean(), rel=1e-12)
        assert summary.lower == pytest.approx(post.ppf(0.05), rel=1e-9, abs=1e-12)
        assert summary.upper == pytest.approx(post.ppf(0.95), rel=1e-9)
        if look == 3:
            assert result.assessment.predictive is None
            continue
        # Lee & Liu (2008): PP = Pr(Y >= s_N - x), Y ~ BetaBinomial(N - n, a', b')
        m = big_n - n
        expected = stats.betabinom.sf(final_bound - x - 1, m, a + x, b + n - x)
        assert result.assessment.predictive == pytest.approx(expected, rel=1e-10, abs=1e-14)


def mixture_cdf(weights, shapes, x, n):
    """Posterior CDF of a beta mixture with weights from quadrature (scipy only)."""
    def likelihood(a: float, b: float) -> float:
        return integrate.quad(lambda p: stats.beta.pdf(p, a, b) * p**x * (1 - p) ** (n - x),
                              0, 1, epsabs=0, epsrel=1e-12)[0]

    marginal = [w * likelihood(a, b) for w, (a, b) in zip(weights, shapes, strict=True)]
    post_w = np.array(marginal) / sum(marginal)
    comps = [stats.beta(a + x, b + n - x) for a, b in shapes]
    return lambda t: sum(w * c.cdf(t) for w, c in zip(post_w, comps, strict=True)), post_w, comps


def test_mixture_posterior_summaries_against_quadrature() -> None:
    design = DESIGNS_FOR_TABLES["mixture prior, predictive futility"]()
    x, n = 7, 24
    result = decide(design, 2, [f"treatment={x}/{n}"])
    cdf, weights, comps = mixture_cdf([0.6, 0.4], [(6, 14), (1, 1)], x, n)
    (summary,) = result.posterior
    mean = sum(w * c.mean() for w, c in zip(weights, comps, strict=True))
    assert summary.mean == pytest.approx(mean, rel=1e-10)
    assert cdf(summary.lower) == pytest.approx(0.025, abs=1e-9)
    assert cdf(summary.upper) == pytest.approx(0.975, abs=1e-9)
    assert result.assessment.benefit == pytest.approx(1 - cdf(0.2), abs=1e-10)


def test_two_arm_posterior_numbers_against_quadrature() -> None:
    design = load_design(TWO)             # Beta(1, 1) priors, difference > 0
    xt, nt, xc, nc = 21, 48, 14, 52
    result = decide(design, 1, [f"treatment={xt}/{nt}", f"control={xc}/{nc}"])
    t, c = stats.beta(1 + xt, 1 + nt - xt), stats.beta(1 + xc, 1 + nc - xc)

    def below(d: float) -> float:  # Pr(p_T - p_C <= d) = int f_C(u) F_T(u + d) du
        return integrate.quad(lambda u: c.pdf(u) * t.cdf(min(max(u + d, 0), 1)), 0, 1,
                              points=[max(0.0, -d), min(1.0, 1 - d)], epsabs=1e-13,
                              limit=200)[0]

    assert result.assessment.benefit == pytest.approx(1 - below(0.0), abs=1e-9)
    rate_t, rate_c, diff = result.posterior
    assert (rate_t.lower, rate_t.upper) == pytest.approx(t.ppf([0.025, 0.975]), rel=1e-9)
    assert (rate_c.lower, rate_c.upper) == pytest.approx(c.ppf([0.025, 0.975]), rel=1e-9)
    assert diff.mean == pytest.approx(t.mean() - c.mean(), rel=1e-12)
    assert below(diff.lower) == pytest.approx(0.025, abs=1e-8)
    assert below(diff.upper) == pytest.approx(0.975, abs=1e-8)


def test_unplanned_size_moves_the_boundaries_and_warns() -> None:
    design = load_design(SINGLE)          # looks 15, 30, 45
    result = decide(design, 2, ["treatment=11/28"])
    # The rule at n = 28 is the rule of a design whose second look is at 28 (computed
    # independently from that design's own boundary table).
    moved = build_moved(load_design(SINGLE), [15, 28, 45])
    row = boundary_table(moved, build_rule(moved)).iloc[1]
    assert result.assessment.boundaries["efficacy"] == f"{row['efficacy_rule']} responses"
    assert result.assessment.boundaries["futility"] == f"{row['futility_rule']} responses"
    (warning,) = result.warnings
    assert "differs from the one planned at look 2 (30)" in warning
    assert "17 subjects still to come" in warning and "approximately" in warning
    final = int(boundary_table(design, build_rule(design)).iloc[-1]["efficacy_bound"])
    a, b = 0.4 + 11, 1.6 + 17
    assert result.assessment.predictive == pytest.approx(
        stats.betabinom.sf(final - 11 - 1, 17, a, b), rel=1e-10)
    assert decide(design, 2, ["treatment=11/30"]).warnings == ()


def build_moved(design, n):
    looks = replace(design.looks, n=tuple(n), per_arm=tuple((v,) for v in n))
    return replace(design, looks=looks)


def test_information_fraction_thresholds_follow_the_observed_size() -> None:
    design = DESIGNS_FOR_TABLES["lower is better, information-fraction thresholds"]()
    result = decide(design, 1, ["treatment=2/8"])      # planned 10 of 30
    # 1 - lambda t^eta at t = 8 / 30 (Zhou, Lee & Yuan 2017 shape)
    assert result.assessment.thresholds.efficacy == pytest.approx(1 - 0.2 * (8 / 30) ** 1.5)
    assert "t = 8/30 = 0.267" in result.warnings[0]
    planned = decide(design, 1, ["treatment=2/10"])
    assert planned.assessment.thresholds.efficacy == pytest.approx(design.looks.efficacy[0])


def test_count_rule_without_prior_decides_from_counts() -> None:
    design = DESIGNS_FOR_TABLES["count rule"]()
    stop = decide(design, 1, ["treatment=3/13"])
    assert stop.decision == STOP_FUTILITY and stop.posterior == ()
    assert stop.assessment.benefit is None and "no analysis prior" in stop.warnings[0]
    assert decide(design, 2, ["treatment=12/43"]).decision == SUCCESS
    assert decide(design, 2, ["treatment=11/43"]).decision == FAILURE


@pytest.fixture
def runner() -> CliRunner:
    return CliRunner()


def test_cli_text_and_json_agree(runner) -> None:
    args = ["decide", str(TWO), "--look", "1", "--data", "treatment=30/50", "--data",
            "control=15/50"]
    text = runner.invoke(main, args)
    assert text.exit_code == 0, text.output
    assert "decision: STOP FOR EFFICACY" in text.output
    assert "difference in rates (treatment - control)" in text.output
    as_json = runner.invoke(main, [*args, "--json", "--level", "0.9"])
    record = json.loads(as_json.stdout)
    assert record["decision"] == STOP_EFFICACY and record["look"] == 1
    assert record["data"]["control"] == {"responses": 15, "n": 50}
    assert record["posterior"]["level"] == 0.9 and len(record["posterior"]["summaries"]) == 3
    assert record["remaining_n"] == {"treatment": 50, "control": 50}
    assert 0 < record["predictive_probability_of_success"] <= 1
    assert "regulat" in record["caution"]


def test_cli_final_look_and_warning_on_stderr(runner) -> None:
    result = runner.invoke(main, ["decide", str(SINGLE), "--look", "3", "--data",
                                  "treatment=14/44"])
    assert result.exit_code == 0
    assert "decision: SUCCESS" in result.stdout
    assert "warning: The observed sample size (44)" in result.stderr


# (arguments, words the message must contain)
BAD = [
    (["--look", "0", "--data", "treatment=3/15"], "--look: expected a look between 1 and 3"),
    (["--look", "4", "--data", "treatment=3/15"], "got 4"),
    (["--look", "1", "--data", "treatment=3-15"], "treatment: expected responses/subjects"),
    (["--look", "1", "--data", "treatment=3/"], "got '3/'"),
    (["--look", "1", "--data", "treatment=a/15"], "like treatment=12/30"),
    (["--look", "1", "--data", "treatment=3/0"], "at least one subject"),
    (["--look", "1", "--data", "3/15"], "expected ARM=x/n"),
    (["--look", "1", "--data", "treatmnt=3/15"], "did you mean 'treatment'?"),
    (["--look", "1", "--data", "treatment=3/15", "--data", "treatment=4/15"], "each arm once"),
    (["--look", "1", "--data", "treatment=16/15"], "responses between 0 and the number of"),
    (["--look", "1", "--data", "treatment=3/30"],
     "a total sample size below the one look 2 plans (30)"),
    (["--look", "3", "--data", "treatment=3/46"], "at most the design's maximum of 45"),
    (["--look", "1", "--data", "treatment=3/15", "--level", "1.2"], "--level: expected"),
    (["--look", "1", "--data", "treatment=3/15", "--subjects", "no-such-file.csv"],
     "no-such-file.csv: expected an existing per-subject data file (CSV); got no such file"),
]


@pytest.mark.parametrize(("args", "words"), BAD, ids=[" ".join(a) for a, _ in BAD])
def test_bad_input_exits_2(runner, args, words) -> None:
    result = runner.invoke(main, ["decide", str(SINGLE), *args])
    assert result.exit_code == 2, result.output
    assert words in result.stderr
    assert result.stdout == ""


def test_two_arm_missing_arm_is_named() -> None:
    with pytest.raises(InputError, match="control: expected the control arm's data"):
        decide(load_design(TWO), 1, ["treatment=3/50"])


def test_data_syntax_of_every_endpoint() -> None:
    syntax = {name: family.interim().syntax for name, family in FAMILIES.items()}
    assert syntax["binary"] is BINARY and syntax["count"] is COUNT and syntax["normal"] is NORMAL
    assert syntax["binary"].parse(" 12 / 30 ") == BinaryData(12, 30)
    assert syntax["count"].parse("14/52.5") == CountData(14, 52.5)
    assert syntax["normal"].parse("-1.5,2.25e0,40") == NormalData(-1.5, 2.25, 40)
    for endpoint, text in [("count", "14/0"), ("count", "1.5/3"), ("normal", "1,-2,10"),
                           ("normal", "1,2"), ("normal", "1,2,0"), ("binary", "1/2/3")]:
        with pytest.raises(ValueError):
            syntax[endpoint].parse(text)


def test_help_carries_the_caution(runner) -> None:
    for command in ("decide", "verify"):
        assert "regulatory" in runner.invoke(main, [command, "--help"]).output


def test_library_errors_name_settings_and_the_command_line_its_options() -> None:
    """The library knows nothing of the command line (issue 13): ``decide`` names its own
    keyword arguments; ``octrial decide`` names its options for the same mistakes."""
    from octrial.errors import SettingsError
    from octrial.interim.decision import decide

    design = load_design(SINGLE)
    for kwargs, setting in (({"look": 0, "data": ["treatment=3/15"]}, "look"),
                            ({"look": 1, "data": ["treatment=3-15"]}, "data"),
                            ({"look": 1, "data": []}, "data")):
        with pytest.raises(SettingsError) as caught:
            decide(design, **kwargs)
        assert caught.value.source == setting
        assert "--" not in str(caught.value)
    result = CliRunner().invoke(main, ["decide", str(SINGLE), "--look", "1"])
    assert result.exit_code == 2
    assert "--data: " in result.output and "--subjects" in result.output
