"""verify, calibrate and simulated assurance through the execution layer: the same
numbers for any --jobs, interrupted runs resumed to the same numbers with only the missing
work recomputed, no stale checkpoints reused, partial folders removed (the standard for
`octrial run`, tests/test_cli_simulation.py and tests/test_monte_carlo_engine.py).

The design has an unknown sd (no exact engine, so verify and calibrate simulate) and few
replicates, so that every test stays fast.
"""

from __future__ import annotations

import dataclasses
import json
import math
import tomllib

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from octrial.calibration import calibrate
from octrial.cli import main
from octrial.cli.common import SimulationOptions
from octrial.design.write import dumps
from octrial.design_prior import assurance
from octrial.engines import MonteCarloSettings
from octrial.execution import Execution
from octrial.execution.checkpoints import PARTIAL
from octrial.review import read_claims, verify
from octrial.simulation.prior_studies import simulate_under_design_prior
from tests.helpers import build, changed
from tests.test_normal_unknown_sd import ONE_ARM, nig

SIMULATION = {"replicates": 2000, "seed": 11}
DATA = changed(ONE_ARM, simulation=SIMULATION, scenarios__treatment=[0.0, 0.4, 0.8, 1.2])
CLAIMS = [{"true_treatment": t, "metric": m, "claimed": c, "replicates": 2000}
          for t, m, c in [(0.0, "prob_success", "0.02"), (0.4, "prob_success", "0.3"),
                          (0.8, "prob_success", "0.7"), (1.2, "expected_n", "30"),
                          (1.6, "prob_success", "0.95")]]
SCENARIOS = 5  # claimed scenarios: the design's four and 1.6


class Stop(KeyboardInterrupt):
    """Raised from a hook, as Ctrl-C would be."""


def stop_after(count: int, seen: list[int]):
    def hook(index: int) -> None:
        seen.append(index)
        if len(seen) == count:
            raise Stop

    return hook


@pytest.fixture
def runner() -> CliRunner:
    return CliRunner()


@pytest.fixture
def files(tmp_path):
    design = tmp_path / "unknown-sd.toml"
    design.write_text(dumps(DATA))
    claims = tmp_path / "claims.csv"
    pd.DataFrame(CLAIMS).to_csv(claims, index=False)
    return design, claims


def invoke(runner: CliRunner, *args: str, code: int = 0) -> None:
    result = runner.invoke(main, list(args))
    assert result.exit_code == code, result.output


# -- verify -----------------------------------------------------------------------------

def test_verify_gives_the_same_files_for_one_and_two_jobs(runner, files, tmp_path) -> None:
    design, claims = files
    tables = []
    for jobs in ("1", "2"):
        out = tmp_path / f"jobs{jobs}"
        invoke(runner, "verify", str(design), str(claims), "--out", str(out), "--quiet",
               "--replicates", "3000", "--jobs", jobs, code=1)  # some claims are off
        tables.append((out / "verify.csv").read_bytes())
        record = json.loads((out / "verify.json").read_text())
        assert record["seed"] == 11 and record["replicates"] == 3000
        assert not (out / PARTIAL).exists()
    assert tables[0] == tables[1]
    assert pd.read_csv(tmp_path / "jobs1" / "verify.csv")["recomputed_replicates"].eq(3000).all()


def recompute(claims_path, checkpoints=None, hook=None, **options):
    design = build(DATA)
    return verify(design, read_claims(claims_path, design), replicates=3000,
                  execution=Execution(checkpoints=checkpoints, on_saved=hook), **options)


def test_interrupted_verify_resumes_to_the_same_table(files, tmp_path) -> None:
    _, claims = files
    whole = recompute(claims).table
    partial = tmp_path / PARTIAL
    first: list[int] = []
    with pytest.raises(Stop):
        recompute(claims, partial, stop_after(2, first))
    assert len(list(partial.glob("*/scenario-*.npz"))) == 2
    again: list[int] = []
    resumed = recompute(claims, partial, again.append)
    assert sorted(again) == sorted(set(range(SCENARIOS)) - set(first))  # only the missing
    assert resumed.info["scenarios_resumed"] == 2
    pd.testing.assert_frame_equal(resumed.table, whole)


def test_verify_with_other_arguments_reuses_nothing(files, tmp_path) -> None:
    _, claims = files
    partial = tmp_path / PARTIAL
    with pytest.raises(Stop):
        recompute(claims, partial, stop_after(3, []))
    for options in ({"replicates": 3000, "seed": 12}, {"replicates": 2500},
                    {"target_se": 0.02}):
        design = build(DATA)
        result = verify(design, read_claims(claims, design),
                        execution=Execution(checkpoints=partial), **options)
        assert result.info["scenarios_resumed"] == 0, options
        fresh = verify(design, read_claims(claims, design), **options)
        pd.testing.assert_frame_equal(result.table, fresh.table)


def test_verify_draws_one_seed_and_keeps_it_for_the_resumed_run(files, tmp_path) -> None:
    _, claims = files
    unseeded = changed(DATA, simulation={"replicates": 2000})
    design = build(unseeded)
    partial = tmp_path / PARTIAL
    with pytest.raises(Stop):
        verify(design, read_claims(claims, design), replicates=3000,
               execution=Execution(checkpoints=partial, on_saved=stop_after(2, [])))
    resumed = verify(design, read_claims(claims, design), replicates=3000,
                     execution=Execution(checkpoints=partial))
    assert resumed.info["seed_drawn"] and resumed.info["scenarios_resumed"] == 2
    seeded = verify(design, read_claims(claims, design), replicates=3000,
                    seed=resumed.info["seed"])
    pd.testing.assert_frame_equal(resumed.table, seeded.table)


def test_verify_to_a_target_standard_error(runner, files, tmp_path) -> None:
    design, claims = files
    out = tmp_path / "target"
    invoke(runner, "verify", str(design), str(claims), "--out", str(out), "--quiet",
           "--target-se", "0.002", "--max-replicates", "200000", code=1)
    table = pd.read_csv(out / "verify.csv")
    probabilities = table["metric"] != "expected_n"
    assert (table.loc[probabilities, "recomputed_se"] <= 0.002).all()
    # batches of 50,000 until the target: one near 0 or 1, two near 0.5
    assert set(table["recomputed_replicates"]) == {50_000, 100_000}
    record = json.loads((out / "verify.json").read_text())
    assert record["target_se"] == 0.002 and record["replicates"] is None
    result = runner.invoke(main, ["verify", str(design), str(claims), "--out", str(out),
                                  "--replicates", "100", "--target-se", "0.02"])
    assert result.exit_code == 2 and "exclude each other" in result.output


# -- calibrate --------------------------------------------------------------------------

CALIBRATION = {"alpha": 0.05, "alternative": [0.8], "null_points": 3}
CALIBRATE_ARGS = ["--alpha", "0.05", "--alternative", "0.8", "--null-points", "3", "--quiet"]


def test_calibrate_gives_the_same_files_for_one_and_two_jobs(runner, files, tmp_path) -> None:
    design, _ = files
    texts = []
    for jobs in ("1", "2"):
        out = tmp_path / f"jobs{jobs}"
        invoke(runner, "calibrate", str(design), "--out", str(out), "--jobs", jobs,
               *CALIBRATE_ARGS)
        texts.append([(out / name).read_text() for name in
                      ("calibration.csv", "unknown-sd-one-arm.calibrated.toml")])
        record = json.loads((out / "calibration.json").read_text())
        assert record["simulation"]["seed"] == 11 and record["method"] == "monte-carlo"
        assert not (out / PARTIAL).exists()
    # the calibrated file's header comment has the time and the command (--jobs, --out)
    assert texts[0][0] == texts[1][0]
    assert tomllib.loads(texts[0][1]) == tomllib.loads(texts[1][1])


def counted_calibration(checkpoints, hook, **simulation):
    settings = MonteCarloSettings(**simulation) if simulation else None
    return calibrate(build(DATA), simulation=settings,
                     execution=Execution(checkpoints=checkpoints, on_saved=hook), **CALIBRATION)


def test_interrupted_calibration_resumes_every_finished_evaluation(tmp_path) -> None:
    simulated: list[int] = []
    whole = counted_calibration(tmp_path / "whole", simulated.append)
    total = len(simulated)  # scenario simulations of an uninterrupted calibration
    assert total == 2 * whole.summary["evaluations"]  # the benchmark and the alternative
    partial = tmp_path / PARTIAL
    first: list[int] = []
    with pytest.raises(Stop):  # in the middle of the eighth candidate
        counted_calibration(partial, stop_after(15, first))
    again: list[int] = []
    resumed = counted_calibration(partial, again.append)
    assert len(again) == total - 15
    assert resumed.summary["simulation"]["scenarios_resumed"] == 15
    pd.testing.assert_frame_equal(resumed.candidates, whole.candidates)
    assert resumed.summary["chosen"] == whole.summary["chosen"]
    assert resumed.summary["type1_error"] == whole.summary["type1_error"]


def test_calibration_with_other_settings_reuses_nothing(tmp_path) -> None:
    partial = tmp_path / PARTIAL
    with pytest.raises(Stop):
        counted_calibration(partial, stop_after(15, []))
    for simulation in ({"seed": 12}, {"replicates": 2500}):
        again: list[int] = []
        result = counted_calibration(partial, again.append, **simulation)
        assert result.summary["simulation"]["scenarios_resumed"] == 0
        assert len(again) == 2 * result.summary["evaluations"]
        fresh = calibrate(build(DATA), simulation=MonteCarloSettings(**simulation),
                          **CALIBRATION)
        pd.testing.assert_frame_equal(result.candidates, fresh.candidates)


def test_calibration_draws_one_seed_and_keeps_it_for_the_resumed_run(tmp_path) -> None:
    design = build(changed(DATA, simulation={"replicates": 2000}))
    partial = tmp_path / PARTIAL
    with pytest.raises(Stop):
        calibrate(design, execution=Execution(checkpoints=partial,
                                              on_saved=stop_after(5, [])), **CALIBRATION)
    resumed = calibrate(design, execution=Execution(checkpoints=partial), **CALIBRATION)
    simulation = resumed.summary["simulation"]
    assert simulation["seed_drawn"] and simulation["scenarios_resumed"] == 5
    seeded = calibrate(design, simulation=MonteCarloSettings(seed=simulation["seed"]),
                       **CALIBRATION)
    pd.testing.assert_frame_equal(resumed.candidates, seeded.candidates)


def test_calibration_to_a_target_fixes_one_number_of_studies_for_every_candidate() -> None:
    result = calibrate(build(DATA), simulation=MonteCarloSettings(target_se=0.02),
                       **CALIBRATION)
    assert result.summary["simulation"]["replicates"] == math.ceil(0.25 / 0.02**2) == 625
    assert result.summary["simulation"]["target_se"] == 0.02
    se = result.candidates[["type1_error_se", "power_se"]].to_numpy()
    assert (se <= 0.02).all()
    capped = calibrate(build(DATA), simulation=MonteCarloSettings(target_se=0.02,
                                                                  max_replicates=500),
                       **CALIBRATION)
    assert capped.summary["simulation"]["replicates"] == 500


# -- commands: Ctrl-C, and partial folders of other runs --------------------------------

@pytest.mark.parametrize("command", ["verify", "calibrate"])
def test_command_interrupted_by_ctrl_c_resumes_to_the_same_files(runner, files, tmp_path,
                                                                 monkeypatch, command) -> None:
    design, claims = files
    args = ([command, str(design), str(claims), "--replicates", "3000"] if command == "verify"
            else [command, str(design), *CALIBRATE_ARGS])
    code = 1 if command == "verify" else 0
    whole, out = tmp_path / "whole", tmp_path / "out"
    invoke(runner, *args, "--out", str(whole), code=code)
    plain = SimulationOptions.execution

    def interrupting(self, folder):  # Ctrl-C after three scenarios
        return dataclasses.replace(plain(self, folder), on_saved=stop_after(3, []))

    monkeypatch.setattr(SimulationOptions, "execution", interrupting)
    result = runner.invoke(main, [*args, "--out", str(out)])
    assert result.exit_code == 130
    assert "run the same command again to resume" in result.output
    assert len(list((out / PARTIAL).rglob("scenario-*.npz"))) == 3
    assert not list(out.glob("*.csv")) and not list(out.glob("*.json"))
    monkeypatch.setattr(SimulationOptions, "execution", plain)
    invoke(runner, *args, "--out", str(out), code=code)
    assert not (out / PARTIAL).exists()
    name = f"{command}.json" if command == "verify" else "calibration.json"
    record = json.loads((out / name).read_text())
    resumed = record["scenarios_resumed"] if command == "verify" else (
        record["simulation"]["scenarios_resumed"])
    assert resumed == 3
    table = f"{command}.csv" if command == "verify" else "calibration.csv"
    assert (out / table).read_bytes() == (whole / table).read_bytes()


def test_a_finished_command_leaves_other_unfinished_runs_alone(runner, files, tmp_path) -> None:
    design, claims = files
    out = tmp_path / "out"
    with pytest.raises(Stop):
        recompute(claims, out / PARTIAL, stop_after(2, []), seed=11)
    invoke(runner, "calibrate", str(design), "--out", str(out), *CALIBRATE_ARGS)
    assert len(list((out / PARTIAL).glob("*/scenario-*.npz"))) == 2  # verify's, kept
    resumed = recompute(claims, out / PARTIAL, seed=11)
    assert resumed.info["scenarios_resumed"] == 2


def test_infeasible_calibration_leaves_nothing_behind(runner, files, tmp_path) -> None:
    design, _ = files
    out = tmp_path / "out"
    result = runner.invoke(main, ["calibrate", str(design), "--out", str(out), "--alpha",
                                  "0.05", "--alternative", "0.8", "--power", "0.999"])
    assert result.exit_code == 2 and "--power" in result.output
    assert not (out / PARTIAL).exists() and not list(out.glob("*.csv"))


# -- assurance by simulation -----------------------------------------------------------

PRIOR = changed(DATA, arms__treatment__design_prior=nig(0.8, 10.0, 10.0, 36.0))


def test_simulated_assurance_in_batches_is_the_same_for_any_jobs_and_after_resuming(
        tmp_path) -> None:
    design = build(PRIOR)
    whole = simulate_under_design_prior(design, 4000, seed=5, batch_size=1000)
    two = simulate_under_design_prior(design, 4000, seed=5, batch_size=1000,
                                      execution=Execution(jobs=2))
    partial = Execution(checkpoints=tmp_path / PARTIAL, on_saved=stop_after(2, []))
    store = partial.store({"test": "assurance"})
    with pytest.raises(Stop):
        simulate_under_design_prior(design, 4000, seed=5, batch_size=1000,
                                    execution=partial, store=store)
    again: list[int] = []
    resumed = simulate_under_design_prior(
        design, 4000, seed=5, batch_size=1000, store=store,
        execution=Execution(checkpoints=tmp_path / PARTIAL, on_saved=again.append))
    assert len(again) == 2
    for tally in (two, resumed):
        assert tally.replicates == whole.replicates == 4000
        np.testing.assert_array_equal(tally.efficacy, whole.efficacy)
        np.testing.assert_array_equal(tally.futility, whole.futility)


def test_simulated_assurance_resumes_with_its_drawn_seed(tmp_path) -> None:
    design = build(changed(PRIOR, simulation={"replicates": 2000}))
    execution = Execution(checkpoints=tmp_path / PARTIAL)
    first = assurance(design, execution=execution)
    again = assurance(design, execution=Execution(checkpoints=tmp_path / PARTIAL))
    assert first.method == "simulation" and first.seed == again.seed
    assert first == again
    execution.remove_checkpoints()
    assert not (tmp_path / PARTIAL).exists()
