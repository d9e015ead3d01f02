"""``octrial run`` on designs with several treatment arms.

Outside checks: the exact several-arm engines (control-path walk, joint lattice) against
the simulation within 4 standard errors column by column (exact vs Monte Carlo; the
exact engines are themselves checked against path enumeration in test_arms_exact.py and
test_arms_joint.py); hashlib's SHA-256 of the design file and of the written files for
run.json; each arm's boundaries against ``octrial run`` on that arm's own two-arm design
file (the two-arm path, itself checked against scipy in test_exact_engine.py); the
identity that an arm leaves the study exactly once (per-arm look columns sum to 1).
"""

from __future__ import annotations

import hashlib
import json
import math
import random
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from octrial.arms_evaluation import compute_arms
from octrial.cli import main
from octrial.design.write import dumps
from octrial.errors import InputError
from octrial.execution import Execution
from octrial.execution.checkpoints import PARTIAL
from octrial.multiarm.engine import simulate_design
from octrial.multiarm.load import load_multiarm
from octrial.review.arms_verification import several_arms
from tests import fuzz_cases
from tests.helpers import DESIGNS
from tests.test_arms_exact import THREE_DOSES

REPLICATES = 40_000

SMALL = THREE_DOSES.replace("low = [0.3, 0.3]\nhigh = [0.3, 0.55]\n", """\
low = [0.3, 0.3, 0.45]
high = [0.3, 0.55, 0.6]
[simulation]
seed = 20261205
replicates = REPS
""")
"""Two doses and a shared control, three scenarios (global null, partial null, both
effective); REPS is replaced by the replicates."""

DROPPING = SMALL.replace("n = [24, 48, 72]", "n = [18, 36]").replace(
    "efficacy = [0.995, 0.99, 0.975]", "efficacy = [0.995, 0.975]").replace(
    "futility = 0.1", "futility = 0.1\ndrop_if_best_below = 0.15")

# Each column's name written out from docs/output-files.md (not from the code).
DOCUMENTED = (
    ["scenario", "true_control", "true_low", "true_high", "is_null", "prob_success",
     "prob_success_se", "fwer", "fwer_se", "prob_select_best", "selected_bias",
     "prob_stop_efficacy", "prob_stop_futility"]
    + [f"look{k}_stop_{w}" for k in (1, 2, 3) for w in ("efficacy", "futility")]
    + ["expected_n", "sd_n", "control_expected_n", "control_sd_n"]
    + [c for arm in ("low", "high") for c in (
        [f"{arm}_is_null", f"{arm}_prob_success", f"{arm}_prob_success_se",
         f"{arm}_expected_n", f"{arm}_sd_n"]
        + [f"{arm}_look{k}_{w}" for k in (1, 2, 3)
           for w in ("stop_efficacy", "stop_futility", "drop")])]
    + [c for arm in ("control", "low", "high") for c in (
        [f"{arm}_block{k}_share" for k in (1, 2, 3)] + [f"{arm}_look{k}_n" for k in (1, 2, 3)])]
)


@pytest.fixture
def runner() -> CliRunner:
    return CliRunner()


def design_file(folder: Path, text: str = SMALL, replicates: int = REPLICATES,
                name: str = "small.toml") -> Path:
    path = folder / name
    path.write_text(text.replace("REPS", str(replicates)))
    return path


def invoke(runner: CliRunner, *args: str, code: int = 0) -> str:
    result = runner.invoke(main, ["run", *args])
    assert result.exit_code == code, result.output
    return result.output


def read(folder: Path, name: str = "oc.csv") -> pd.DataFrame:
    return pd.read_csv(folder / name, float_precision="round_trip")


@pytest.fixture(scope="module")
def runs(tmp_path_factory) -> dict[str, Path]:
    """The small design run exactly (method auto) and by simulation."""
    runner = CliRunner()
    folder = tmp_path_factory.mktemp("arms")
    design = design_file(folder)
    out = {"design": design, "exact": folder / "exact", "simulated": folder / "simulated"}
    invoke(runner, str(design), "--out", str(out["exact"]), "--quiet")
    invoke(runner, str(design), "--method", "monte-carlo", "--out", str(out["simulated"]),
           "--quiet")
    return out


def within_4_se(exact: pd.DataFrame, simulated: pd.DataFrame, replicates: int,
                sizes: dict[str, pd.Series]) -> int:
    """Assert every common probability column within 4 binomial SE of the exact value
    (equal when the exact value is 0 or 1), and each size column in ``sizes`` within 4
    sd / sqrt(R); return how many columns were compared."""
    checked = 0
    for column in exact.columns:
        if exact[column].isna().all():  # not computed by the exact engine
            continue
        if column in sizes:
            se = sizes[column].to_numpy(float) / math.sqrt(replicates)
        elif "_look" in column and column.endswith("_n"):
            raise AssertionError(f"{column}: a size column needs its sd in `sizes`")
        elif "prob" in column or "look" in column or column == "fwer":
            if column.endswith("_se") or column not in simulated:
                continue
            p = exact[column].to_numpy(float)
            se = np.sqrt(p * (1 - p) / replicates)
        else:
            continue
        diff = np.abs(exact[column].to_numpy(float) - simulated[column].to_numpy(float))
        assert np.all(diff <= 4 * se + 1e-12), (column, diff, se)
        checked += 1
    return checked


def look_size_sds(table: pd.DataFrame, arms: tuple[str, ...], per_look: int,
                  looks: int) -> dict[str, pd.Series]:
    """Bounds on the sd of each arm's cumulative size at look k: it lies in
    [per_look, k per_look], so its sd is at most per_look (k - 1) / 2 (Popoviciu's
    inequality on variances); at look 1 it is certain."""
    return {f"{arm}_look{k}_n": pd.Series(per_look * (k - 1) / 2, index=table.index)
            for arm in arms for k in range(1, looks + 1)}


def test_exact_and_simulation_agree_within_4_se(runs) -> None:
    exact, simulated = read(runs["exact"]), read(runs["simulated"])
    assert set(exact["method"]) == {"exact"} and set(simulated["method"]) == {"monte-carlo"}
    assert json.loads((runs["exact"] / "run.json").read_text())["engine"].startswith("exact")
    sizes = {"expected_n": simulated["sd_n"], "control_expected_n": exact["control_sd_n"],
             "low_expected_n": exact["low_sd_n"], "high_expected_n": exact["high_sd_n"]}
    sizes.update(look_size_sds(exact, ("control", "low", "high"), 8, 3))
    assert within_4_se(exact, simulated, REPLICATES, sizes) > 39


def test_simulated_run_gives_the_engine_numbers(runs) -> None:
    # the command runs the engine scenario by scenario: the same numbers as one call
    design = load_multiarm(runs["design"])
    library = simulate_design(design)
    written = read(runs["simulated"])
    for column in library.columns:
        assert np.array_equal(written[column].to_numpy(), library[column].to_numpy()), column


def test_columns_are_those_documented(runs) -> None:
    for label in ("exact", "simulated"):
        assert list(read(runs[label]).columns) == [*DOCUMENTED, "method", "replicates"]
    exact = read(runs["exact"])
    # what the exact engine does not compute is left empty, never made up
    assert exact[["prob_select_best", "selected_bias", "sd_n"]].isna().all().all()
    assert (exact[["prob_success_se", "fwer_se", "replicates"]] == 0).all().all()
    # identity: every arm leaves the study exactly once (its own rule, dropped, or the end)
    for arm in ("low", "high"):
        leave = [f"{arm}_look{k}_{w}" for k in (1, 2, 3)
                 for w in ("stop_efficacy", "stop_futility", "drop")]
        assert np.allclose(exact[leave].sum(axis=1), 1.0, atol=1e-12)
    assert list(exact["is_null"]) == [True, False, False]
    assert list(exact["low_is_null"]) == [True, True, False]
    # identity: the last look's cumulative size is the expected size (a study that ended
    # earlier counts with the subjects it reached)
    for arm in ("control", "low", "high"):
        for table in (exact, read(runs["simulated"])):
            assert np.allclose(table[f"{arm}_look3_n"], table[f"{arm}_expected_n"],
                               rtol=1e-12)
    # block shares need which arms are in together: simulation only, never made up
    shares = [f"{a}_block{k}_share" for a in ("control", "low", "high") for k in (1, 2, 3)]
    assert exact[shares].isna().all().all()
    simulated = read(runs["simulated"])
    # fixed allocation, 8 subjects per arm per look: block 1 is always a third each (hand)
    assert np.allclose(simulated[[f"{a}_block1_share" for a in ("control", "low", "high")]],
                       1 / 3, atol=1e-12)


def test_run_record_has_provenance_and_seals(runs) -> None:
    record = json.loads((runs["simulated"] / "run.json").read_text())
    text = runs["design"].read_bytes()
    assert record["design"]["sha256"] == hashlib.sha256(text).hexdigest()
    assert record["design"]["text"] == text.decode()
    assert record["seed"] == 20261205 and record["engine"] == "monte-carlo (several arms)"
    assert isinstance(record["command"], list) and record["command"]  # sys.argv, as run
    assert {"numpy", "scipy", "numba"} <= set(record["environment"]["libraries"])
    for name in ("oc.csv", "boundaries.csv"):
        digest = hashlib.sha256((runs["simulated"] / name).read_bytes()).hexdigest()
        assert record["file_sha256"][name] == digest
    worst = record["type1"]
    oc = read(runs["simulated"])
    assert worst["max_type1_error"] == oc.loc[oc["low_is_null"] | oc["high_is_null"],
                                              "fwer"].max()
    assert not (runs["simulated"] / PARTIAL).exists()


def test_each_arm_has_its_two_arm_boundaries(runs, runner, tmp_path) -> None:
    boundaries = read(runs["exact"], "boundaries.csv")
    assert list(boundaries["arm"].unique()) == ["low", "high"]
    # the arm's own rule: the two-arm design of that arm and the control, 12 + 12 per look
    pair = SMALL.replace("[arms.low]", "[arms.treatment]").replace(
        "[arms.high]\nprior = { distribution = \"beta\", a = 1, b = 1 }\n", "").replace(
        "n = [24, 48, 72]", "n = [16, 32, 48]")
    pair = pair[:pair.index("[scenarios]")] + (
        "[scenarios]\ncontrol = [0.3]\ntreatment = [0.3, 0.45]\n[simulation]\nseed = 1\n")
    path = tmp_path / "pair.toml"
    path.write_text(pair)
    invoke(runner, str(path), "--out", str(tmp_path / "pair"), "--quiet")
    two_arm = read(tmp_path / "pair", "boundaries.csv")
    for arm in ("low", "high"):
        mine = boundaries[boundaries["arm"] == arm].drop(columns="arm").reset_index(drop=True)
        pd.testing.assert_frame_equal(mine, two_arm, check_dtype=False)


def test_jobs_never_change_a_number(runs, runner, tmp_path) -> None:
    design = design_file(tmp_path, replicates=20_000)
    for jobs in ("1", "2"):
        invoke(runner, str(design), "--method", "monte-carlo", "--jobs", jobs, "--quiet",
               "--out", str(tmp_path / f"jobs{jobs}"))
    assert (tmp_path / "jobs1" / "oc.csv").read_bytes() == (
        tmp_path / "jobs2" / "oc.csv").read_bytes()


class Stop(Exception):
    pass


def test_interrupted_simulation_resumes_per_scenario(tmp_path) -> None:
    design = load_multiarm(design_file(tmp_path, replicates=5_000))
    partial = tmp_path / PARTIAL
    first: list[int] = []

    def stop_after_one(index: int) -> None:
        first.append(index)
        raise Stop

    with pytest.raises(Stop):
        compute_arms(design, "monte-carlo", Execution(checkpoints=partial,
                                                      on_saved=stop_after_one))
    assert len(list(partial.glob("*/scenario-*.npz"))) == 1
    again: list[int] = []
    resumed = compute_arms(design, "monte-carlo",
                           Execution(checkpoints=partial, on_saved=again.append))
    assert sorted(again) == sorted({0, 1, 2} - set(first))  # only the missing scenarios
    assert resumed.info["scenarios_resumed"] == 1
    whole = compute_arms(design, "monte-carlo")
    pd.testing.assert_frame_equal(resumed.oc, whole.oc)


def test_joint_exact_engine_on_request_agrees_with_simulation(runner, tmp_path) -> None:
    design = design_file(tmp_path, DROPPING, replicates=REPLICATES)
    invoke(runner, str(design), "--method", "exact", "--out", str(tmp_path / "joint"),
           "--quiet")
    invoke(runner, str(design), "--out", str(tmp_path / "auto"), "--quiet")
    record = json.loads((tmp_path / "auto" / "run.json").read_text())
    assert record["engine"] == "monte-carlo (several arms)"  # auto: no joint lattice
    assert "Pr(best)" in record["exact_not_used"]
    joint, simulated = read(tmp_path / "joint"), read(tmp_path / "auto")
    assert json.loads((tmp_path / "joint" / "run.json").read_text())["engine"] == (
        "exact (several arms, joint lattice)")
    assert (joint[[f"{a}_look1_drop" for a in ("low", "high")]] > 0.01).all().all()
    sizes = {"expected_n": simulated["sd_n"],
             **look_size_sds(joint, ("control", "low", "high"), 6, 2)}
    assert within_4_se(joint, simulated, REPLICATES, sizes) > 20


@pytest.mark.parametrize("args, words", [
    (["--seed", "3"], "--seed applies only to simulation"),
    (["--jobs", "2"], "--jobs applies only to simulation"),
    (["--backend", "dask"], "--backend applies only to simulation"),
    (["--method", "monte-carlo", "--target-se", "0.01"], "--target-se does not apply"),
    (["--target-se", "0.01", "--max-replicates", "100"], "--target-se does not apply"),
])
def test_options_that_do_not_apply_exit_2(runner, tmp_path, args, words) -> None:
    design = design_file(tmp_path, replicates=1000)
    out = tmp_path / "out"
    output = invoke(runner, str(design), "--out", str(out), *args, code=2)
    assert words in output
    assert not out.exists()


@pytest.mark.parametrize("change, words", [
    (("low = [0.3, 0.3, 0.45]", "low = [0.3, 0.3]"), "scenarios"),
    (("futility = 0.1", "futility = 1.5"), "looks.futility"),
    (("[arms.high]", "[arms.treatment]"), "arms.treatment"),
    (("drop_if_best_below", "drop_if_best"), "drop_if_best"),
])
def test_bad_several_arm_files_exit_2(runner, tmp_path, change, words) -> None:
    text = DROPPING.replace(*change)
    design = design_file(tmp_path, text, replicates=1000)
    out = tmp_path / "out"
    output = invoke(runner, str(design), "--out", str(out), code=2)
    assert "error:" in output and words in output and str(design) in output
    assert not out.exists()


def test_exact_refused_for_a_design_no_exact_engine_serves(runner, tmp_path) -> None:
    text = DROPPING.replace('type = "binary"', 'type = "count"\nexposure = 1.0').replace(
        "comparison = \"difference\"", "comparison = \"ratio\"").replace(
        "beta\", a = 1, b = 1", "gamma\", shape = 1, rate = 1").replace(
        "control = 0.3", "control = 1.0").replace("low = [0.3, 0.3, 0.45]",
                                                  "low = [1.0, 1.0, 1.5]").replace(
        "high = [0.3, 0.55, 0.6]", "high = [1.0, 2.0, 2.0]")
    design = design_file(tmp_path, text, replicates=1000)
    output = invoke(runner, str(design), "--method", "exact", "--out", str(tmp_path / "o"),
                    code=2)
    assert "binary endpoints only" in output and "Pr(best)" in output


BENCHMARK = """\
schema = 1
name = "benchmark-arms"
title = "Three regimens against a benchmark rate (invented)"
[endpoint]
type = "binary"
better = "higher"
[hypothesis]
benchmark = 0.2
[arms.a]
prior = { distribution = "beta", a = 1, b = 1 }
[arms.b]
prior = { distribution = "beta", a = 1, b = 1 }
[arms.c]
prior = { distribution = "beta", a = 1, b = 1 }
[looks]
n = [30, 60]
efficacy = [0.99, 0.95]
futility = 0.1
[scenarios]
a = [0.2, 0.3]
b = [0.2, 0.35]
c = [0.2, 0.4]
[simulation]
seed = 5
replicates = REPS
"""


def test_arms_against_a_benchmark(runner, tmp_path) -> None:
    design = design_file(tmp_path, BENCHMARK, replicates=20_000)
    invoke(runner, str(design), "--out", str(tmp_path / "exact"), "--quiet")
    invoke(runner, str(design), "--method", "monte-carlo", "--out", str(tmp_path / "mc"),
           "--quiet")
    exact, simulated = read(tmp_path / "exact"), read(tmp_path / "mc")
    assert "control_expected_n" not in exact.columns  # no control, no control columns
    # identity for independent arms (no shared control): FWER = 1 - prod(1 - alpha_j)
    alphas = exact.loc[0, [f"{a}_prob_success" for a in "abc"]].to_numpy(float)
    assert exact.loc[0, "fwer"] == pytest.approx(1 - np.prod(1 - alphas), abs=1e-13)
    sizes = {"expected_n": simulated["sd_n"],
             **{f"{a}_expected_n": exact[f"{a}_sd_n"] for a in "abc"},
             **look_size_sds(exact, ("a", "b", "c"), 10, 2)}
    assert within_4_se(exact, simulated, 20_000, sizes) > 20


def test_drawn_seed_is_recorded_and_reproduces(runner, tmp_path) -> None:
    text = SMALL.replace("seed = 20261205\n", "")
    design = design_file(tmp_path, text, replicates=1000)
    invoke(runner, str(design), "--method", "monte-carlo", "--out", str(tmp_path / "a"),
           "--quiet")
    record = json.loads((tmp_path / "a" / "run.json").read_text())
    assert record["seed_drawn"] is True and isinstance(record["seed"], int)
    invoke(runner, str(design), "--method", "monte-carlo", "--seed", str(record["seed"]),
           "--out", str(tmp_path / "b"), "--quiet")
    assert (tmp_path / "a" / "oc.csv").read_bytes() == (tmp_path / "b" / "oc.csv").read_bytes()


def test_ctrl_c_says_how_to_resume(runner, tmp_path, monkeypatch) -> None:
    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr("octrial.cli.run_arms.compute_arms", interrupted)
    design = design_file(tmp_path, replicates=1000)
    output = invoke(runner, str(design), "--method", "monte-carlo", "--out",
                    str(tmp_path / "out"), code=130)
    assert "run the same command again to resume" in output
    assert not (tmp_path / "out" / "oc.csv").exists()


SEVERAL_ARM_DEMOS = [p for p in sorted(DESIGNS.glob("**/*.toml")) if several_arms(p)]


@pytest.mark.parametrize("path", SEVERAL_ARM_DEMOS, ids=lambda p: p.stem)
def test_several_arm_demos_load(path) -> None:
    design = load_multiarm(path)
    assert design.name == path.stem and len(design.scenarios.values) > 0
    assert len(design.source.sha256) == 64


@pytest.mark.parametrize("path", SEVERAL_ARM_DEMOS, ids=lambda p: p.stem)
def test_workflow_checks_refuse_several_arm_designs_plainly(runner, tmp_path, path) -> None:
    # `octrial check` has no several-arm checks yet: exit 2 naming the file and `arms`
    # (PRODUCT.md: bad input names file and key), nothing written, no traceback
    result = runner.invoke(main, ["check", str(path), "--out", str(tmp_path / "c")])
    assert result.exit_code == 2, result.output
    assert f"{path}: arms: expected one treatment arm" in result.output
    assert "Traceback" not in result.output and not (tmp_path / "c").exists()


@pytest.mark.parametrize("start", [SMALL, DROPPING], ids=["exact", "simulated"])
def test_mutated_several_arm_files_exit_0_or_2(runner, tmp_path, start) -> None:
    # a seeded sample of every key replaced by extreme and wrong-type values (the
    # replacements of tests/fuzz_cases.py): exit 0 or 2, no traceback, nothing on exit 2
    base = tomllib.loads(start.replace("REPS", "300"))
    cases = [(path, value) for path in fuzz_cases.key_paths(base)
             for value in fuzz_cases.VALUES if not (isinstance(value, list)
                                                    and len(value) > 100)]
    for i, (path, value) in enumerate(random.Random(16).sample(cases, 30)):
        design = tmp_path / f"case{i}.toml"
        design.write_text(dumps(fuzz_cases.replaced(base, path, value)))
        out = tmp_path / f"out{i}"
        result = runner.invoke(main, ["run", str(design), "--out", str(out), "--quiet"])
        where = (path, value, result.output)
        assert result.exit_code in (0, 2), where
        assert result.exception is None or isinstance(result.exception, SystemExit), where
        assert result.exit_code == 0 or not out.exists(), where


ADAPTIVE = SMALL.replace("[scenarios]", '[allocation]\nkind = "power"\n[scenarios]')
"""SMALL with response-adaptive allocation (power form)."""


def test_adaptive_designs_run_per_scenario_with_jobs_and_resume(runner, tmp_path) -> None:
    # response-adaptive allocation goes through the same per-scenario engine as fixed:
    # the numbers of one library call, whatever --jobs, and an interrupted run resumes
    path = design_file(tmp_path, ADAPTIVE, replicates=2000)
    design = load_multiarm(path)
    with pytest.raises(InputError, match="adaptive"):
        compute_arms(design, "exact")
    for jobs in ("1", "2"):
        invoke(runner, str(path), "--jobs", jobs, "--quiet", "--out",
               str(tmp_path / f"jobs{jobs}"))
    assert (tmp_path / "jobs1" / "oc.csv").read_bytes() == (
        tmp_path / "jobs2" / "oc.csv").read_bytes()
    written = read(tmp_path / "jobs1")
    assert list(written.columns) == [*DOCUMENTED, "method", "replicates"]
    library = simulate_design(design)
    for column in library.columns:
        assert np.array_equal(written[column].to_numpy(), library[column].to_numpy()), column
    # power allocation moves the doses' shares away from the fixed third after look 1
    # under scenario 3 (both doses effective, high better)
    assert written.loc[2, "high_block2_share"] > written.loc[2, "high_block1_share"]
    partial = tmp_path / PARTIAL
    with pytest.raises(Stop):
        compute_arms(design, "monte-carlo", Execution(checkpoints=partial,
                                                      on_saved=_stop_after_one))
    resumed = compute_arms(design, "auto", Execution(checkpoints=partial))
    assert resumed.info["scenarios_resumed"] == 1
    assert resumed.info["engine"] == "monte-carlo (several arms)"
    pd.testing.assert_frame_equal(resumed.oc, compute_arms(design).oc)


def _stop_after_one(index: int) -> None:
    raise Stop
