"""Checkpoints that carry their identity (issue 12, item 2).

Every saved task records the run key, the task index, the design's SHA-256, the seed,
the scenario, the batch, the kernel and the octrial version, and its counts are checked
on loading. A checkpoint copied in from another run, one whose counts are beyond the
replicates, and a truncated one are each deleted with a warning and computed again: the
result equals an uninterrupted run bit for bit, which is the reference here (the resumed
numbers are compared with a clean run of the same seed, not with stored values).
"""

from __future__ import annotations

import io
import json
import shutil
import warnings
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

import octrial
from octrial.cli import main
from octrial.design.write import dumps
from octrial.engines import MonteCarloSettings
from octrial.engines.monte_carlo import ScenarioTask
from octrial.evaluation import compute
from octrial.execution import Execution
from octrial.execution.checkpoints import IDENTITY, PARTIAL, CheckpointWarning
from octrial.output import csv_text
from octrial.simulation.base import Tally, tally_problems
from tests.helpers import DESIGNS, build, changed
from tests.test_normal_unknown_sd import ONE_ARM, nig

DESIGN = DESIGNS / "single-arm-response.toml"
REPLICATES = 2000


class Stop(KeyboardInterrupt):
    """Raised from a hook, as Ctrl-C would be."""


def stop_after(count: int):
    seen: list[int] = []

    def hook(index: int) -> None:
        seen.append(index)
        if len(seen) == count:
            raise Stop

    return hook


def simulate(partial: Path | None, seed: int = 7, hook=None):
    design = octrial.load_design(DESIGN)
    return compute(design, "monte-carlo", MonteCarloSettings(replicates=REPLICATES, seed=seed),
                   Execution(checkpoints=partial, on_saved=hook))


def interrupted(partial: Path, seed: int = 7, after: int = 2) -> Path:
    """Run until ``after`` scenarios are saved; the run's checkpoint folder."""
    with pytest.raises(Stop):
        simulate(partial, seed, stop_after(after))
    (folder,) = [p for p in partial.iterdir() if p.is_dir()]
    return folder


def saved(folder: Path) -> list[Path]:
    return sorted(folder.glob("scenario-*.npz"))


def resumed_equals_clean(partial: Path, seed: int = 7) -> tuple[int, list[str]]:
    """Resume; assert oc.csv equals a clean run's as text. Returns scenarios resumed and
    the checkpoint warnings."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        resumed = simulate(partial, seed)
    clean = simulate(None, seed)
    assert csv_text(resumed.oc) == csv_text(clean.oc)
    notes = [str(w.message) for w in caught if issubclass(w.category, CheckpointWarning)]
    return resumed.info["scenarios_resumed"], notes


def rewrite(path: Path, **changes: np.ndarray) -> None:
    """Save ``path`` again with some arrays changed, keeping its identity."""
    with np.load(path) as data:
        arrays = {name: data[name] for name in data.files}
    arrays.update(changes)
    buffer = io.BytesIO()
    np.savez(buffer, **arrays)
    path.write_bytes(buffer.getvalue())


def test_every_checkpoint_records_its_identity(tmp_path) -> None:
    folder = interrupted(tmp_path / PARTIAL)
    design = octrial.load_design(DESIGN)
    for path in saved(folder):
        with np.load(path) as data:
            identity = json.loads(str(data[IDENTITY]))
        index = int(path.stem.split("-")[1])
        assert identity == {"key": folder.name, "task": index, "scenario": index,
                            "batch": "all", "design_sha256": design.source.sha256,
                            "seed": 7, "kernel": "table", "octrial": octrial.__version__}


def test_resumed_run_uses_its_own_checkpoints_without_warning(tmp_path) -> None:
    interrupted(tmp_path / PARTIAL)
    resumed, notes = resumed_equals_clean(tmp_path / PARTIAL)
    assert resumed == 2 and notes == []


def test_a_foreign_checkpoint_copied_in_is_discarded(tmp_path) -> None:
    ours = interrupted(tmp_path / PARTIAL, seed=7, after=2)
    other = interrupted(tmp_path / "other" / PARTIAL, seed=8, after=4)
    # the other run's scenario 3 (index 2) where ours has none, and over our index 0
    shutil.copy(other / "scenario-000002.npz", ours / "scenario-000002.npz")
    shutil.copy(other / "scenario-000000.npz", ours / "scenario-000000.npz")
    resumed, notes = resumed_equals_clean(tmp_path / PARTIAL, seed=7)
    assert resumed == 1  # only our own index 1
    assert len(notes) == 2 and all("another run's" in n for n in notes)
    assert all("seed 8 (expected 7)" in n for n in notes)


def test_counts_beyond_the_replicates_are_discarded(tmp_path) -> None:
    folder = interrupted(tmp_path / PARTIAL)
    first = saved(folder)[0]
    with np.load(first) as data:
        efficacy = data["efficacy"].copy()
    efficacy[0] += REPLICATES + 1
    rewrite(first, efficacy=efficacy)
    resumed, notes = resumed_equals_clean(tmp_path / PARTIAL)
    assert resumed == 1
    assert len(notes) == 1 and "counts out of range" in notes[0]


def test_a_truncated_checkpoint_is_discarded(tmp_path) -> None:
    folder = interrupted(tmp_path / PARTIAL)
    first = saved(folder)[0]
    first.write_bytes(first.read_bytes()[: first.stat().st_size // 2])
    resumed, notes = resumed_equals_clean(tmp_path / PARTIAL)
    assert resumed == 1
    assert len(notes) == 1 and "unreadable" in notes[0]


def test_a_checkpoint_without_identity_is_discarded(tmp_path) -> None:
    folder = interrupted(tmp_path / PARTIAL)
    first = saved(folder)[0]
    with np.load(first) as data:
        arrays = {name: data[name] for name in data.files if name != IDENTITY}
    buffer = io.BytesIO()
    np.savez(buffer, **arrays)  # as octrial wrote them before identities
    first.write_bytes(buffer.getvalue())
    resumed, notes = resumed_equals_clean(tmp_path / PARTIAL)
    assert resumed == 1 and "no identity" in notes[0]


def test_a_corrupt_drawn_seed_is_drawn_again(tmp_path) -> None:
    design = build(changed(json.loads(json.dumps(ONE_ARM)),
                           simulation={"replicates": 500}))
    partial = tmp_path / PARTIAL
    with pytest.raises(Stop):
        compute(design, "monte-carlo", MonteCarloSettings(),
                Execution(checkpoints=partial, on_saved=stop_after(1)))
    (seed_file,) = partial.glob("*/seed.json")
    saved = json.loads(seed_file.read_text())
    assert saved["key"] == seed_file.parent.name
    seed_file.write_text(json.dumps({**saved, "seed": -3}))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = compute(design, "monte-carlo", MonteCarloSettings(),
                         Execution(checkpoints=partial))
    notes = [str(w.message) for w in caught if issubclass(w.category, CheckpointWarning)]
    assert any("not a seed" in n and "a new seed drawn" in n for n in notes)
    # the saved scenario was simulated with the old seed: not merged with the new one
    assert any("another run's" in n for n in notes)
    assert result.info["scenarios_resumed"] == 0
    assert 0 <= result.info["seed"] < 2**63


def test_a_drawn_seed_of_another_run_is_not_used(tmp_path) -> None:
    design = build(changed(ONE_ARM, simulation={"replicates": 500}))
    partial = tmp_path / PARTIAL
    with pytest.raises(Stop):
        compute(design, "monte-carlo", MonteCarloSettings(),
                Execution(checkpoints=partial, on_saved=stop_after(1)))
    (seed_file,) = partial.glob("*/seed.json")
    seed_file.write_text(json.dumps({"seed": 12345, "key": "0" * 24}))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = compute(design, "monte-carlo", MonteCarloSettings(),
                         Execution(checkpoints=partial))
    notes = [str(w.message) for w in caught if issubclass(w.category, CheckpointWarning)]
    assert any("seed.json" in n and "another run's" in n for n in notes)
    assert result.info["seed"] != 12345


def test_octrial_run_warns_plainly_and_writes_the_clean_numbers(tmp_path) -> None:
    data = changed(json.loads(json.dumps(ONE_ARM)), simulation={"replicates": 1000, "seed": 3},
                   scenarios__treatment=[0.0, 0.5, 1.0])
    design = tmp_path / "d.toml"
    design.write_text(dumps(data))
    other = tmp_path / "other.toml"
    other.write_text(dumps(changed(data, simulation={"replicates": 1000, "seed": 4})))
    runner = CliRunner()
    clean = runner.invoke(main, ["run", str(design), "--out", str(tmp_path / "clean"),
                                 "--quiet"])
    assert clean.exit_code == 0, clean.output
    # an interrupted run of the other design leaves its checkpoints; copy one into ours
    partial = tmp_path / "out" / PARTIAL
    with pytest.raises(Stop):
        compute(octrial.load_design(other), "monte-carlo", None,
                Execution(checkpoints=tmp_path / "x", on_saved=stop_after(1)))
    (foreign,) = (tmp_path / "x").glob("*/scenario-*.npz")
    with pytest.raises(Stop):
        compute(octrial.load_design(design), "monte-carlo", None,
                Execution(checkpoints=partial, on_saved=stop_after(1)))
    (ours,) = [p for p in partial.iterdir() if p.is_dir()]
    shutil.copy(foreign, ours / "scenario-000002.npz")
    result = runner.invoke(main, ["run", str(design), "--out", str(tmp_path / "out"),
                                  "--quiet"])
    assert result.exit_code == 0, result.output
    assert "warning: checkpoint" in result.output and "another run's" in result.output
    assert "Traceback" not in result.output
    assert ((tmp_path / "out" / "oc.csv").read_bytes()
            == (tmp_path / "clean" / "oc.csv").read_bytes())
    assert json.loads((tmp_path / "out" / "run.json").read_text())["scenarios_resumed"] == 1


def test_simulated_assurance_batches_are_checked_too(tmp_path) -> None:
    from octrial.simulation.prior_studies import simulate_under_design_prior

    design = build(changed(ONE_ARM, arms__treatment__design_prior=nig(0.8, 10.0, 10.0, 36.0)))
    whole = simulate_under_design_prior(design, 3000, seed=5, batch_size=1000)
    execution = Execution(checkpoints=tmp_path / PARTIAL, on_saved=stop_after(2))
    store = execution.store({"test": "assurance"})
    with pytest.raises(Stop):
        simulate_under_design_prior(design, 3000, seed=5, batch_size=1000,
                                    execution=execution, store=store)
    first = saved(store.folder)[0]
    with np.load(first) as data:
        futility = data["futility"].copy()
    futility[-1] += 1  # one study too many
    rewrite(first, futility=futility)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        again = simulate_under_design_prior(design, 3000, seed=5, batch_size=1000,
                                            execution=Execution(), store=store)
    assert any(issubclass(w.category, CheckpointWarning) for w in caught)
    np.testing.assert_array_equal(again.efficacy, whole.efficacy)
    np.testing.assert_array_equal(again.futility, whole.futility)


# -- the range check itself ---------------------------------------------------------------
GOOD = Tally(100, np.array([10, 20, 30]), np.array([5, 5, 30]),
             np.array([0.1, 0.2, 0.3]), 90, 0).to_arrays()


def test_a_genuine_tally_passes() -> None:
    assert tally_problems(GOOD, 3, 100) == []
    assert tally_problems(GOOD, 3, at_most=100) == []


@pytest.mark.parametrize(("change", "words"), [
    ({"replicates": np.array(99)}, "99 studies"),
    ({"efficacy": np.array([10, 20])}, "efficacy of shape"),
    ({"efficacy": np.array([10.0, 20.0, 30.0])}, "not whole numbers"),
    ({"efficacy": np.array([-1, 31, 30])}, "outside 0 to 100"),
    ({"futility": np.array([5, 5, 29])}, "99 studies ending"),
    ({"covered": np.array(101)}, "covered outside"),
    ({"clipped": np.array(-1)}, "clipped outside"),
    ({"error_sums": np.array([0.1, np.nan, 0.3])}, "not finite"),
    ({"error_sums": np.array([0.1, -0.2, 0.3])}, "negative sums of squares"),
])
def test_each_defect_is_named(change, words) -> None:
    wrong = tally_problems({**GOOD, **change}, 3, 100)
    assert any(words in w for w in wrong), wrong


def test_missing_arrays_are_named() -> None:
    arrays = {k: v for k, v in GOOD.items() if k != "futility"}
    assert tally_problems(arrays, 3, 100) == ["no futility"]


def test_beyond_the_cap_is_named() -> None:
    assert tally_problems(GOOD, 3, at_most=50) == ["100 studies (expected 1 to 50)"]


def test_a_target_run_checkpoint_without_target_met_is_named() -> None:
    """Under a target standard error a saved scenario must say whether the target was
    met; a missing ``target_met`` was once let through (np.shape(None) == (), found by
    mypy), and the run then failed on the missing key (KeyError) instead of recomputing."""
    design = octrial.load_design(DESIGN)
    count = design.looks.count
    efficacy, futility = np.zeros(count, dtype=np.int64), np.zeros(count, dtype=np.int64)
    efficacy[-1], futility[-1] = 60, 40
    arrays = Tally(100, efficacy, futility).to_arrays()
    settings = MonteCarloSettings(seed=1, target_se=0.01, max_replicates=1000,
                                  batch_size=100)
    task = ScenarioTask(0, (0.3,), design, None, None, settings)
    assert task.problems({**arrays, "target_met": np.array(False)}) == []
    assert task.problems(arrays) == ["no target_met"]



def test_checkpoints_that_cannot_be_saved_do_not_stop_the_run(tmp_path) -> None:
    """A folder that cannot be written: the simulation runs without checkpoints (one
    warning), and the results that cannot be written either end in exit code 2."""
    design = tmp_path / "d.toml"
    design.write_text(dumps(changed(ONE_ARM, simulation={"replicates": 500, "seed": 3})))
    blocker = tmp_path / "file"
    blocker.write_text("a file")
    result = CliRunner().invoke(main, ["run", str(design), "--out", str(blocker / "out"),
                                       "--quiet"])
    assert result.exit_code == 2, result.output
    assert result.output.count("cannot save checkpoints") == 1
    assert "Traceback" not in result.output and "error:" in result.output
    assert blocker.read_text() == "a file"


def test_bayesian_region_counts_are_range_checked() -> None:
    """A batch of the simulated Bayesian operating characteristics: its own counts pass,
    and counts that cannot come from the batch (more successes than studies, regions that
    do not add up to the batch, the relevant region outside the alternative) are named.
    Reference: the batch's definition (null and alternative partition its studies)."""
    from octrial.bayesian_oc.simulation import SplitBatch, simulate_split_batch

    design = octrial.load_design(DESIGNS / "single-arm-mean-change.toml")
    task = SplitBatch(design, seed=11, index=0, size=400, delta=0.0)
    arrays = simulate_split_batch(task)
    assert task.problems(arrays) == []
    assert task.identity()["design_sha256"] == design.source.sha256
    too_many = {**arrays, "null": np.array([arrays["null"][0], arrays["null"][0] + 1])}
    assert task.problems(too_many)
    short = {**arrays, "alternative": arrays["alternative"] - np.array([1, 0])}
    assert any("add up" in p for p in task.problems(short))
    outside = {**arrays, "relevant": np.array([arrays["alternative"][0] + 1, 0])}
    assert task.problems(outside)
    assert task.problems({k: v for k, v in arrays.items() if k != "null"})
