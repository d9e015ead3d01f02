"""``octrial decide`` end to end for count and normal designs: per-subject data that fit
the model and data that clearly do not (invented data sets, drawn here with numpy), and
bad input (exit code 2 with file, row, column, expected and found)."""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from octrial.cli import main
from octrial.design.write import dumps
from tests.helpers import DESIGNS
from tests.test_decide_endpoints import UNKNOWN_ONE_ARM

EVENT_RATE = DESIGNS / "single-arm-event-rate.toml"
SCORE = DESIGNS / "two-arm-continuous-score.toml"


@pytest.fixture
def runner() -> CliRunner:
    return CliRunner()


def write_counts(path, counts: np.ndarray) -> str:
    path.write_text("# invented per-subject counts, one year of follow-up each\nevents\n"
                    + "".join(f"{int(v)}\n" for v in counts))
    return str(path)


def write_values(path, arms: dict[str, np.ndarray]) -> str:
    lines = [f"{arm},{float(v)!r}" for arm, values in arms.items() for v in values]
    path.write_text("arm,value\n" + "\n".join(lines) + "\n")
    return str(path)


def run_json(runner, design, look: int, data: list[str], subjects: str) -> dict:
    args = ["decide", str(design), "--look", str(look), "--subjects", subjects, "--json"]
    for entry in data:
        args += ["--data", entry]
    result = runner.invoke(main, args)
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout), result.stderr


def test_counts_that_fit_a_poisson_model(runner, tmp_path) -> None:
    counts = np.random.default_rng(20261201).poisson(1.2, 60)
    path = write_counts(tmp_path / "fit.csv", counts)
    record, err = run_json(runner, EVENT_RATE, 2, [f"treatment={counts.sum()}/60"], path)
    checks = {c["statistic"]: c for c in record["checks"]}
    assert set(checks) == {"zeros", "variance-to-mean ratio"}
    assert not any(c["flagged"] for c in checks.values())
    assert checks["zeros"]["observed"] == np.sum(counts == 0)
    assert all(c["verdict"].startswith("consistent with the model") for c in checks.values())
    assert "flag the data model" not in err


def test_zero_inflated_counts_are_flagged(runner, tmp_path) -> None:
    rng = np.random.default_rng(20261202)
    counts = np.where(rng.random(60) < 0.55, 0, rng.poisson(2.8, 60))  # many structural zeros
    path = write_counts(tmp_path / "zeros.csv", counts)
    record, err = run_json(runner, EVENT_RATE, 2, [f"treatment={counts.sum()}/60"], path)
    checks = {c["statistic"]: c for c in record["checks"]}
    assert checks["zeros"]["flagged"] and checks["variance-to-mean ratio"]["flagged"]
    assert "more zeros than a Poisson model produces" in checks["zeros"]["verdict"]
    assert "overdispersed" in checks["variance-to-mean ratio"]["verdict"]
    assert "flag the data model (zeros, variance-to-mean ratio)" in err
    text = runner.invoke(main, ["decide", str(EVENT_RATE), "--look", "2", "--data",
                                f"treatment={counts.sum()}/60", "--subjects", path])
    assert "check of the data model, zeros: more zeros than a Poisson model" in text.stdout


def test_normal_values_that_fit_the_known_sd_model(runner, tmp_path) -> None:
    rng = np.random.default_rng(20261203)
    arms = {"treatment": 43 + 12 * rng.standard_normal(60),
            "control": 40 + 12 * rng.standard_normal(60)}
    path = write_values(tmp_path / "fit.csv", arms)
    data = [f"{a}={float(v.mean())!r},{float(v.std(ddof=1))!r},60" for a, v in arms.items()]
    record, err = run_json(runner, SCORE, 1, data, path)
    assert len(record["checks"]) == 4           # spread and skewness per arm
    assert not any(c["flagged"] for c in record["checks"])
    assert err.count("warning") == 0


def test_skewed_normal_values_are_flagged(runner, tmp_path) -> None:
    rng = np.random.default_rng(20261204)
    # log-normal scores: strongly right-skewed, sd near the design's 12
    arms = {"treatment": 30 + np.exp(2.2 + 0.9 * rng.standard_normal(60)),
            "control": 28 + np.exp(2.2 + 0.9 * rng.standard_normal(60))}
    path = write_values(tmp_path / "skewed.csv", arms)
    data = [f"{a}={float(v.mean())!r},{float(v.std(ddof=1))!r},60" for a, v in arms.items()]
    record, err = run_json(runner, SCORE, 1, data, path)
    skew = [c for c in record["checks"] if c["statistic"] == "skewness"]
    assert all(c["flagged"] for c in skew)
    assert all("skewed to the right beyond what a normal model produces" in c["verdict"]
               for c in skew)
    assert "flag the data model (" in err and "skewness (control)" in err


def test_unknown_sd_outlier_is_flagged(runner, tmp_path) -> None:
    # 19 well-behaved values and one 12 sd away: far more skewed than normal samples of 20
    design_file = tmp_path / "unknown.toml"
    design_file.write_text(dumps(UNKNOWN_ONE_ARM))
    values = 0.5 + 1.5 * np.append(np.random.default_rng(20261205).standard_normal(19), 12.0)
    path = write_values(tmp_path / "outlier.csv", {"treatment": values})
    data = f"treatment={float(values.mean())!r},{float(values.std(ddof=1))!r},20"
    record, err = run_json(runner, design_file, 1, [data], path)
    checks = {c["statistic"]: c for c in record["checks"]}
    assert checks["skewness"]["flagged"]
    assert "skewed to the right" in checks["skewness"]["verdict"]
    assert "flag the data model (skewness" in err


def test_subject_totals_must_match_the_data(runner, tmp_path) -> None:
    path = write_counts(tmp_path / "c.csv", np.array([1, 0, 2, 3]))
    result = runner.invoke(main, ["decide", str(EVENT_RATE), "--look", "1", "--data",
                                  "treatment=7/30", "--subjects", path])
    assert result.exit_code == 2
    assert (f"--data: treatment: expected the data of the per-subject file {path} (6 events "
            "in exposure 4); got 7 events in exposure 30 (leave out --data to take the data "
            "from the file)") in result.stderr
    values = tmp_path / "v.csv"
    values.write_text("arm,value\ntreatment,1\ntreatment,2\ntreatment,3\ncontrol,1\n"
                      "control,2\ncontrol,4\n")
    result = runner.invoke(main, ["decide", str(SCORE), "--look", "1", "--data",
                                  "treatment=2,1,60", "--data", "control=2,1,60",
                                  "--subjects", str(values)])
    assert result.exit_code == 2
    assert (f"--data: treatment: expected the data of the per-subject file {values} (mean 2, "
            "sd 1, n = 3); got mean 2, sd 1, n = 60") in result.stderr
    assert "control: expected the data of the per-subject file" in result.stderr


# (design, arguments, words the message must contain)
BAD = [
    (EVENT_RATE, ["--data", "treatment=14-30"], "--data: treatment: expected events/exposure"),
    (EVENT_RATE, ["--data", "treatment=14/"], "got '14/'"),
    (EVENT_RATE, ["--data", "treatment=-3/30"], "like treatment=14/52.5"),
    (EVENT_RATE, ["--data", "treatment=3/-30"], "expected a positive, finite total exposure"),
    (EVENT_RATE, ["--data", "treatment=3/0"], "a positive, finite total exposure"),
    (EVENT_RATE, ["--data", "treatment=2.5/30"], "a whole number of events"),
    (EVENT_RATE, ["--look", "4", "--data", "treatment=3/30"],
     "--look: expected a look between 1 and 3; got 4"),
    (EVENT_RATE, ["--data", "treatment=30/95"],
     "expected at most the design's maximum of exposure 90 in the treatment arm; "
     "got exposure 95"),
    (EVENT_RATE, ["--data", "treatment=30/60"],
     "expected a total exposure below the one look 2 plans (60) for an analysis at look 1"),
    (SCORE, ["--data", "treatment=1,2", "--data", "control=1,2,60"],
     "treatment: expected mean,sd,n: two numbers and a whole number of subjects"),
    (SCORE, ["--data", "treatment=1,-2,60", "--data", "control=1,2,60"],
     "a finite mean and a standard deviation > 0"),
    (SCORE, ["--data", "treatment=1,0,60", "--data", "control=1,2,60"],
     "a standard deviation > 0, like treatment=1.8,2.4,40; got '1,0,60'"),
    (SCORE, ["--data", "treatment=1,2,1", "--data", "control=1,2,60"], "at least two subjects"),
    (SCORE, ["--data", "treatment=x,2,60", "--data", "control=1,2,60"], "got 'x,2,60'"),
    (SCORE, ["--data", "treatment=1,2,200", "--data", "control=1,2,60"],
     "treatment: expected at most the design's maximum of 180 subjects"),
    (SCORE, ["--data", "treatment=1,2,60"], "control: expected the control arm's data"),
]


@pytest.mark.parametrize(("design", "args", "words"), BAD,
                         ids=[f"{d.stem} {' '.join(a)}" for d, a, _ in BAD])
def test_bad_input_exits_2(runner, design, args, words) -> None:
    if "--look" not in args:
        args = ["--look", "1", *args]
    result = runner.invoke(main, ["decide", str(design), *args])
    assert result.exit_code == 2, result.output
    assert words in result.stderr
    assert result.stdout == ""


@pytest.mark.parametrize(("text", "words"), [
    ("events,exposure\n1,1\n\n,1\n2,1\n", "line 4, column events: expected a whole number "
                                          ">= 0; got an empty field"),
    ("events\n1\ntwo\n3\n", "line 3, column events: expected a whole number >= 0; got 'two'"),
    ("events,exposure\n1,1\n2\n3,1\n", "line 3: expected 2 fields (as in the header); got 1"),
    ("events,exposure\n1,1\n2,-1\n3,1\n", "line 3, column exposure: expected a positive "
                                          "exposure; got '-1'"),
])
def test_bad_subject_files_exit_2(runner, tmp_path, text, words) -> None:
    path = tmp_path / "bad.csv"
    path.write_text(text)
    result = runner.invoke(main, ["decide", str(EVENT_RATE), "--look", "1", "--data",
                                  "treatment=6/30", "--subjects", str(path)])
    assert result.exit_code == 2, result.output
    assert f"{path}: {words}" in result.stderr
    assert result.stdout == ""


def test_normal_subject_file_with_a_missing_value(runner, tmp_path) -> None:
    path = tmp_path / "bad.csv"
    path.write_text("arm,value\ntreatment,1.5\ntreatment,\ncontrol,nan\ncontrol,2\n")
    result = runner.invoke(main, ["decide", str(SCORE), "--look", "1", "--data",
                                  "treatment=2,1,60", "--data", "control=2,1,60",
                                  "--subjects", str(path)])
    assert result.exit_code == 2
    assert f"{path}: line 3, column value: expected a finite number; got an empty field" in (
        result.stderr)
    assert "line 4, column value: expected a finite number; got 'nan'" in result.stderr


def test_negative_binomial_needs_whole_subjects_and_rounding_is_reported(runner,
                                                                         tmp_path) -> None:
    import tomllib
    data = tomllib.loads(EVENT_RATE.read_text())
    data["endpoint"].update(model="negative-binomial", dispersion=0.5)
    path = tmp_path / "nb.toml"
    path.write_text(dumps(data))
    result = runner.invoke(main, ["decide", str(path), "--look", "1", "--data",
                                  "treatment=30/29.5"])
    assert result.exit_code == 2
    assert ("--data: treatment: expected a whole number of subjects' exposure (a multiple "
            "of 1: the negative binomial model depends on the number of subjects); got "
            "29.5") in result.stderr
    rounded = runner.invoke(main, ["decide", str(EVENT_RATE), "--look", "1", "--data",
                                   "treatment=30/29.0001234"])
    assert rounded.exit_code == 0, rounded.output
    assert "Exposures were rounded to a multiple of" in rounded.stderr


def test_a_simulated_predictive_probability_near_its_threshold_warns() -> None:
    from octrial.interim.decision import _near_threshold
    from octrial.interim.rule import Assessment, Thresholds

    near = Assessment(0.7, 0.052, Thresholds(efficacy=0.99, futility_predictive=0.05),
                      "continue", "", {}, 0.001)
    assert "within 3 standard errors of the futility threshold 0.05" in _near_threshold(near)
    far = Assessment(0.7, 0.06, Thresholds(efficacy=0.99, futility_predictive=0.05),
                     "continue", "", {}, 0.001)
    assert _near_threshold(far) == ""
    exact = Assessment(0.7, 0.05, Thresholds(efficacy=0.99, futility_predictive=0.05),
                       "continue", "", {}, None)
    assert _near_threshold(exact) == ""


# -- the data derived from the per-subject file (issue 12) ------------------------------

SINGLE = DESIGNS / "single-arm-response.toml"
BORROWED = DESIGNS / "borrowed-control-response.toml"


def decide_json(runner, design, look: int, *args: str) -> dict:
    result = runner.invoke(main, ["decide", str(design), "--look", str(look), "--json", *args])
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout)


def same_decision(a: dict, b: dict) -> None:
    for key in ("data", "benefit", "predictive_probability_of_success", "posterior",
                "decision", "boundaries_at_observed_n"):
        assert a[key] == b[key], key


def test_count_data_derived_from_the_subjects(runner, tmp_path) -> None:
    """Events/exposure per arm are the file's sums (numpy), and the decision is the one
    --data with those totals gives."""
    rng = np.random.default_rng(20261206)
    counts, times = rng.poisson(1.1, 40), rng.choice([0.5, 1.0], 40)
    path = tmp_path / "counts.csv"
    path.write_text("subject,events,exposure\n" + "".join(
        f"S{i:03d},{c},{t}\n" for i, (c, t) in enumerate(zip(counts, times, strict=True))))
    derived = decide_json(runner, EVENT_RATE, 1, "--subjects", str(path))
    assert derived["data"] == {"treatment": {"events": int(counts.sum()),
                                             "exposure": float(times.sum())}}
    typed = decide_json(runner, EVENT_RATE, 1, "--subjects", str(path), "--data",
                        f"treatment={counts.sum()}/{times.sum():g}")
    same_decision(derived, typed)
    assert derived["checks"] == typed["checks"] and len(derived["checks"]) == 2


def test_normal_data_derived_from_the_subjects(runner, tmp_path) -> None:
    """mean, sd (divisor n - 1) and n per arm by numpy; with the same numbers typed in
    --data (to 12 significant digits) the decision is the same."""
    rng = np.random.default_rng(20261207)
    arms = {"treatment": 43 + 12 * rng.standard_normal(60),
            "control": 40 + 12 * rng.standard_normal(60)}
    path = write_values(tmp_path / "scores.csv", arms)
    derived = decide_json(runner, SCORE, 1, "--subjects", str(path))
    for arm, v in arms.items():
        got = derived["data"][arm]
        assert got["n"] == 60
        assert got["mean"] == pytest.approx(float(np.mean(v)), rel=1e-14)
        assert got["sd"] == pytest.approx(float(np.std(v, ddof=1)), rel=1e-14)
    typed = [f"{a}={np.mean(v):.12g},{np.std(v, ddof=1):.12g},60" for a, v in arms.items()]
    typed = ["--data", typed[0], "--data", *typed[1:]]
    both = decide_json(runner, SCORE, 1, "--subjects", str(path), *typed)
    assert both["benefit"]["probability"] == pytest.approx(derived["benefit"]["probability"],
                                                           abs=1e-9)
    assert both["decision"] == derived["decision"]


def test_binary_data_derived_from_responses_with_an_id_column(runner, tmp_path) -> None:
    """Binary subjects: a response column of 0/1 gives x/n; an id column is accepted."""
    responses = [1, 0, 0, 1, 1, 0, 0, 0, 1, 0, 1, 1, 0, 0, 1]
    path = tmp_path / "responses.csv"
    path.write_text("# invented\nid,response\n" + "".join(
        f"P{i},{r}\n" for i, r in enumerate(responses)))
    derived = decide_json(runner, SINGLE, 1, "--subjects", str(path))
    typed = decide_json(runner, SINGLE, 1, "--data", f"treatment={sum(responses)}/15")
    assert derived["data"] == {"treatment": {"responses": 7, "n": 15}}
    same_decision(derived, typed)
    assert derived["checks"] == []
    two = tmp_path / "two.csv"
    two.write_text("arm,subject,response\n" + "".join(
        f"{arm},{arm[0]}{i},{(i * 7 + j) % 3 == 0:d}\n"
        for j, arm in enumerate(("treatment", "control")) for i in range(45)))
    record = decide_json(runner, BORROWED, 1, "--subjects", str(two))
    assert record["data"] == {"treatment": {"responses": 15, "n": 45},
                              "control": {"responses": 15, "n": 45}}


@pytest.mark.parametrize(("design", "text", "data", "words"), [
    # binary: x differs
    (SINGLE, "response\n1\n0\n1\n", ["treatment=3/3"],
     "--data: treatment: expected the data of the per-subject file {path} (2/3 responses); "
     "got 3/3 responses (leave out --data to take the data from the file)"),
    # count: same events, exposure differs beyond rounding
    (EVENT_RATE, "events,exposure\n1,1\n0,1\n2,1.25\n", ["treatment=3/3.5"],
     "--data: treatment: expected the data of the per-subject file {path} (3 events in "
     "exposure 3.25); got 3 events in exposure 3.5"),
    # normal: a mean 0.1 sd away (beyond rounding)
    (SCORE, "arm,value\ntreatment,1\ntreatment,2\ntreatment,3\ncontrol,1\ncontrol,2\n"
     "control,3\n", ["treatment=2.1,1,3", "control=2,1,3"],
     "--data: treatment: expected the data of the per-subject file {path} (mean 2, sd 1, "
     "n = 3); got mean 2.1, sd 1, n = 3"),
])
def test_data_and_subjects_that_disagree_exit_2(runner, tmp_path, design, text, data,
                                                words) -> None:
    """Issue 12: --data and --subjects both given and disagreeing is an error naming both
    values (it used to be a warning, the decision taken on --data)."""
    path = tmp_path / "subjects.csv"
    path.write_text(text)
    args = ["decide", str(design), "--look", "1", "--subjects", str(path)]
    for entry in data:
        args += ["--data", entry]
    result = runner.invoke(main, args)
    assert result.exit_code == 2, result.output
    assert words.format(path=path) in result.stderr
    assert result.stdout == ""


@pytest.mark.parametrize(("text", "words"), [
    ("id,events\nA,1\nB,0\nA,2\n",
     "line 4, column id: expected each subject once; got 'A' (also on line 2)"),
    ("id,events\nA,1\n,0\nC,2\n", "line 3, column id: expected a subject identifier; got "
                                      "an empty field"),
    ("id,subject,events\nA,1,1\nB,2,0\nC,3,2\n",
     "line 1 (header): expected at most one subject identifier column (id or subject); "
     "got both"),
])
def test_identifier_column_problems_exit_2(runner, tmp_path, text, words) -> None:
    path = tmp_path / "ids.csv"
    path.write_text(text)
    result = runner.invoke(main, ["decide", str(EVENT_RATE), "--look", "1", "--subjects",
                                  str(path)])
    assert result.exit_code == 2, result.output
    assert f"{path}: {words}" in result.stderr


def test_neither_data_nor_subjects_exits_2(runner) -> None:
    result = runner.invoke(main, ["decide", str(EVENT_RATE), "--look", "1"])
    assert result.exit_code == 2
    assert ("--data: expected the data so far: --data ARM=events/exposure for each arm "
            "(treatment), or a per-subject file (--subjects); got neither") in result.stderr


def test_binary_responses_must_be_0_or_1(runner, tmp_path) -> None:
    path = tmp_path / "r.csv"
    path.write_text("response\n1\n2\n")
    result = runner.invoke(main, ["decide", str(SINGLE), "--look", "1", "--subjects",
                                  str(path)])
    assert result.exit_code == 2
    assert f"{path}: line 3, column response: expected a whole number from 0 to 1; got '2'" \
        in result.stderr


def test_equal_normal_values_have_no_sample_sd(runner, tmp_path) -> None:
    path = write_values(tmp_path / "flat.csv", {"treatment": np.full(5, 2.0),
                                                "control": np.array([1.0, 2.0, 3.0])})
    result = runner.invoke(main, ["decide", str(SCORE), "--look", "1", "--subjects",
                                  str(path)])
    assert result.exit_code == 2
    assert (f"{path}: treatment: expected values that are not all equal (a sample sd > 0); "
            "got 5 equal values") in result.stderr


def test_negative_binomial_subjects_give_the_data_and_say_no_check_ran(runner,
                                                                      tmp_path) -> None:
    import tomllib
    data = tomllib.loads(EVENT_RATE.read_text())
    data["endpoint"].update(model="negative-binomial", dispersion=0.5)
    design = tmp_path / "nb.toml"
    design.write_text(dumps(data))
    counts = np.array([0, 2, 1, 0, 3, 1, 0, 0, 2, 1])
    path = write_counts(tmp_path / "nb.csv", counts)
    record, err = run_json(runner, design, 1, [], path)
    assert record["data"]["treatment"] == {"events": 10, "exposure": 10.0}
    assert record["checks"] == []
    assert "No posterior predictive check of the data model for a negative binomial" in err
