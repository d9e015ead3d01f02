"""Sealed run folders (issue 12, item 1): every file a command writes is recorded by its
SHA-256, a report refuses (exit code 2, naming the file) a folder whose files are not what
their records sealed, and a folder is written all at once: a failure (a full disk, a
read-only file system, --out naming a file) leaves the old folder as it was, exits with
code 2 and a plain message, and leaves no temporary folder behind.

The reference for the hashes is hashlib's SHA-256 of the bytes on disk (FIPS 180-4),
computed here independently of octrial. The full disk is a real tmpfs mounted by the test
where the platform allows (root on Linux), and a simulated failure everywhere.
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import shutil
import subprocess
from pathlib import Path

import pytest
from click.testing import CliRunner

from octrial import run_folder
from octrial.cli import main
from octrial.errors import InputError
from octrial.execution.checkpoints import PARTIAL
from tests.helpers import DESIGNS

RESPONSE = DESIGNS / "single-arm-response.toml"
EVENTS = DESIGNS / "single-arm-event-rate.toml"
SMALL_CHECK = ("--simulations", "300", "--bins", "10", "--draws", "49", "--only",
               "prior-predictive,sensitivity", "--quiet")


def invoke(*args: object):
    return CliRunner().invoke(main, [str(a) for a in args])


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def snapshot(folder: Path) -> dict[str, bytes]:
    """Every file under ``folder`` with its bytes."""
    return {str(p.relative_to(folder)): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def leftovers(parent: Path) -> list[str]:
    return [p.name for p in parent.iterdir() if ".new-" in p.name or ".old-" in p.name]


@pytest.fixture(scope="module")
def sealed(tmp_path_factory) -> Path:
    """A folder with a run, its checks and its report, as reports/regenerate.sh makes."""
    folder = tmp_path_factory.mktemp("sealed") / "run"
    assert invoke("run", RESPONSE, "--out", folder, "--quiet").exit_code == 0
    result = invoke("check", RESPONSE, "--out", folder, *SMALL_CHECK)
    assert result.exit_code in (0, 1), result.output
    assert invoke("report", folder, "--quiet").exit_code == 0
    return folder


@pytest.fixture
def copy(sealed, tmp_path) -> Path:
    folder = tmp_path / "run"
    shutil.copytree(sealed, folder)
    return folder


def refused(folder: Path, *words: str) -> str:
    (folder / "report.html").unlink(missing_ok=True)
    result = invoke("report", folder, "--quiet")
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    for word in words:
        assert word in result.output, result.output
    assert not (folder / "report.html").exists()
    return result.output


# -- what is recorded --------------------------------------------------------------------
def test_run_json_records_the_sha256_of_each_file_it_wrote(sealed) -> None:
    record = json.loads((sealed / "run.json").read_text())
    assert record["file_sha256"] == {name: sha256(sealed / name)
                                     for name in ("oc.csv", "boundaries.csv")}
    assert record["design"]["sha256"] == sha256(RESPONSE)


def test_checks_json_records_the_sha256_of_each_file_it_wrote(sealed) -> None:
    record = json.loads((sealed / "checks.json").read_text())
    files = record["file_sha256"]
    assert "sensitivity.csv" in files and "prior-predictive.png" in files
    assert files == {name: sha256(sealed / name) for name in files}
    assert record["design"]["sha256"] == sha256(RESPONSE)


def test_the_sealed_folder_is_reported(copy) -> None:
    assert invoke("report", copy, "--quiet").exit_code == 0
    assert "prior-predictive" in (copy / "report.html").read_text()


# -- tampering ---------------------------------------------------------------------------
def test_an_edited_oc_csv_is_refused(copy) -> None:
    text = (copy / "oc.csv").read_text()
    (copy / "oc.csv").write_text(text.replace("0.0", "0.1", 1))
    refused(copy, "oc.csv", "changed after it was written")


def test_a_missing_file_is_refused(copy) -> None:
    (copy / "boundaries.csv").unlink()
    refused(copy, "boundaries.csv", "no such file")


def test_an_edited_check_figure_is_refused(copy) -> None:
    (copy / "prior-predictive.png").write_bytes(b"\x89PNG not the check's drawing")
    refused(copy, "prior-predictive.png", "SHA-256")


def test_checks_of_another_design_copied_in_are_refused(copy, tmp_path) -> None:
    other = tmp_path / "other"
    result = invoke("check", EVENTS, "--out", other, *SMALL_CHECK)
    assert result.exit_code in (0, 1), result.output
    for path in other.iterdir():
        if path.is_file():
            shutil.copy(path, copy / path.name)
    refused(copy, "checks.json", "another design")


def test_a_table_no_record_lists_is_refused(copy) -> None:
    (copy / "calibration.csv").write_text("candidate,type1_error\n1,0.04\n")
    refused(copy, "calibration.csv", "no record lists")


def test_a_calibration_of_another_design_is_refused(copy) -> None:
    table = "candidate,type1_error\n1,0.04\n"
    (copy / "calibration.csv").write_text(table)
    record = {"design": {"sha256": "0" * 64},
              "file_sha256": {"calibration.csv": hashlib.sha256(table.encode()).hexdigest()}}
    (copy / "calibration.json").write_text(json.dumps(record))
    refused(copy, "calibration.json", "another design")


def test_a_run_json_without_seal_is_refused(copy) -> None:
    record = json.loads((copy / "run.json").read_text())
    del record["file_sha256"]
    (copy / "run.json").write_text(json.dumps(record))
    refused(copy, "run.json: file_sha256")


# -- a new run replaces what is not about it ---------------------------------------------
def test_a_new_design_drops_checks_and_report_of_the_old_one(copy) -> None:
    (copy / "notes.txt").write_text("mine")
    (copy / PARTIAL / "other-run").mkdir(parents=True)
    (copy / PARTIAL / "other-run" / "scenario-000000.npz").write_bytes(b"kept")
    result = CliRunner().invoke(main, ["run", str(EVENTS), "--out", str(copy)])
    assert result.exit_code == 0, result.output
    names = {p.name for p in copy.iterdir()}
    assert not any(run_folder.is_check_file(n) for n in names)
    assert not names & set(run_folder.REPORT_FILES)
    assert "removed, as not about these results" in result.output
    assert (copy / "notes.txt").read_text() == "mine"
    assert (copy / PARTIAL / "other-run" / "scenario-000000.npz").read_bytes() == b"kept"
    assert invoke("report", copy, "--quiet").exit_code == 0
    assert leftovers(copy.parent) == []


def test_the_same_design_keeps_its_checks(copy) -> None:
    checks = (copy / "checks.json").read_bytes()
    assert invoke("run", RESPONSE, "--out", copy, "--quiet").exit_code == 0
    assert (copy / "checks.json").read_bytes() == checks
    assert not (copy / "report.html").exists()  # made from the earlier run
    assert invoke("report", copy, "--quiet").exit_code == 0


def test_a_calibration_goes_with_its_calibrated_design_only(tmp_path) -> None:
    folder = tmp_path / "run"
    result = invoke("calibrate", RESPONSE, "--alpha", "0.05", "--out", folder, "--quiet")
    assert result.exit_code == 0, result.output
    record = json.loads((folder / "calibration.json").read_text())
    calibrated = folder / "single-arm-response.calibrated.toml"
    assert record["file_sha256"] == {name: sha256(folder / name)
                                     for name in ("calibration.csv", calibrated.name)}
    assert invoke("run", calibrated, "--out", folder, "--quiet").exit_code == 0
    assert invoke("report", folder, "--quiet").exit_code == 0
    assert "calibration" in (folder / "report.html").read_text()
    assert invoke("run", EVENTS, "--out", folder, "--quiet").exit_code == 0
    names = {p.name for p in folder.iterdir()}
    assert not names & set(run_folder.CALIBRATION_FILES)
    assert calibrated.name in names  # a design file, kept
    assert invoke("report", folder, "--quiet").exit_code == 0


# -- failures leave the old folder as it was -----------------------------------------------
def assert_failed_cleanly(result, folder: Path, before: dict[str, bytes], *words: str) -> None:
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    assert result.exception is None or isinstance(result.exception, SystemExit)
    for word in words:
        assert word in result.output, result.output
    assert snapshot(folder) == before
    assert leftovers(folder.parent) == []


def test_a_simulated_full_disk_leaves_the_old_folder(copy, monkeypatch) -> None:
    before = snapshot(copy)
    real = run_folder._write_synced
    written: list[str] = []

    def filling(path, data):
        written.append(path.name)
        if len(written) == 2:  # boundaries.csv: the disk fills up
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(path))
        real(path, data)

    monkeypatch.setattr(run_folder, "_write_synced", filling)
    result = invoke("run", EVENTS, "--out", copy, "--quiet")
    assert_failed_cleanly(result, copy, before, "No space left on device",
                          "the folder was left as it was")


def test_a_failed_swap_puts_the_old_folder_back(copy, monkeypatch) -> None:
    before = snapshot(copy)
    real = os.rename

    def refusing(source, target):
        if ".new-" in str(source):
            raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(target))
        real(source, target)

    monkeypatch.setattr(run_folder.os, "rename", refusing)
    result = invoke("run", EVENTS, "--out", copy, "--quiet")
    assert_failed_cleanly(result, copy, before, "Read-only file system")


def test_a_read_only_folder_is_exit_2(copy, monkeypatch) -> None:
    before = snapshot(copy)

    def denied(*args, **kwargs):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES))

    monkeypatch.setattr(run_folder.tempfile, "mkdtemp", denied)
    result = invoke("run", EVENTS, "--out", copy, "--quiet")
    assert_failed_cleanly(result, copy, before, "Permission denied")


def test_out_naming_a_file_is_exit_2(tmp_path) -> None:
    target = tmp_path / "results"
    target.write_text("a file")
    result = invoke("run", RESPONSE, "--out", target, "--quiet")
    assert result.exit_code == 2 and "is a file" in result.output
    result = invoke("run", RESPONSE, "--out", target / "inside", "--quiet")
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output and "error:" in result.output
    assert target.read_text() == "a file"
    assert leftovers(tmp_path) == []


def test_library_refuses_a_file_in_the_folders_place(tmp_path) -> None:
    """The library call behind every command."""
    (tmp_path / "x").write_text("a file")
    with pytest.raises(InputError, match="a file of that name"):
        run_folder.write_folder(tmp_path / "x", {"a": "b"})
    assert (tmp_path / "x").read_text() == "a file" and leftovers(tmp_path) == []


@pytest.fixture
def tmpfs(tmp_path):
    """A 256 KiB tmpfs at tmp_path/disk (skipped where mounting is not allowed)."""
    disk = tmp_path / "disk"
    disk.mkdir()
    mounted = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=256k", "tmpfs", str(disk)],
                             capture_output=True, check=False)
    if mounted.returncode != 0:
        pytest.skip("cannot mount a tmpfs here: " + mounted.stderr.decode().strip())
    yield disk
    subprocess.run(["umount", "-l", str(disk)], check=False)


def fill(disk: Path) -> None:
    """Write a file until the disk is full."""
    with open(disk / "filler", "wb") as handle:
        try:
            while True:
                handle.write(b"\0" * 4096)
                handle.flush()
        except OSError as exc:
            assert exc.errno == errno.ENOSPC


def test_a_real_full_disk_leaves_the_old_folder(tmpfs) -> None:
    folder = tmpfs / "run"
    assert invoke("run", RESPONSE, "--out", folder, "--quiet").exit_code == 0
    before = snapshot(folder)
    try:
        fill(tmpfs)
    except OSError:
        pass
    result = invoke("run", EVENTS, "--out", folder, "--quiet")
    assert_failed_cleanly(result, folder, before, "No space left on device")
    # the old run, still sealed (the report itself is too big for this disk)
    result = invoke("report", folder, "--out", tmpfs.parent / "report.html", "--quiet")
    assert result.exit_code == 0, result.output
    result = invoke("report", folder, "--quiet")
    assert result.exit_code == 2 and "No space left on device" in result.output
    assert "Traceback" not in result.output


def test_a_real_read_only_file_system_is_exit_2(tmpfs) -> None:
    folder = tmpfs / "run"
    assert invoke("run", RESPONSE, "--out", folder, "--quiet").exit_code == 0
    before = snapshot(folder)
    remounted = subprocess.run(["mount", "-o", "remount,ro", str(tmpfs)], capture_output=True,
                               check=False)
    if remounted.returncode != 0:
        pytest.skip("cannot remount read-only: " + remounted.stderr.decode().strip())
    result = invoke("run", EVENTS, "--out", folder, "--quiet")
    assert_failed_cleanly(result, folder, before, "Read-only file system")


def test_the_working_folder_is_written_in_place(copy, monkeypatch) -> None:
    """Swapping the working folder would leave the shell in a deleted folder."""
    monkeypatch.chdir(copy)
    result = invoke("run", EVENTS, "--out", ".", "--quiet")
    assert result.exit_code == 0, result.output
    assert Path.cwd().exists() and Path.cwd() == copy.resolve()
    assert not any(run_folder.is_check_file(p.name) for p in copy.iterdir())
    assert invoke("report", ".", "--quiet").exit_code == 0
    assert leftovers(copy.parent) == []


def test_a_mount_point_is_written_in_place(tmpfs) -> None:
    """A mount point cannot be renamed: its files are replaced one by one, the sealing
    record last."""
    assert invoke("run", RESPONSE, "--out", tmpfs, "--quiet").exit_code == 0
    assert invoke("run", EVENTS, "--out", tmpfs, "--quiet").exit_code == 0
    record = json.loads((tmpfs / "run.json").read_text())
    assert record["design"]["sha256"] == sha256(EVENTS)
    result = invoke("report", tmpfs, "--out", tmpfs.parent / "report.html", "--quiet")
    assert result.exit_code == 0, result.output


# -- octrial boundaries into a run folder --------------------------------------------

def test_boundaries_into_the_run_folder_keep_its_seal(tmp_path: Path) -> None:
    # the same design's table is the run's, byte for byte: written again, the seal holds
    folder = tmp_path / "run"
    assert invoke("run", RESPONSE, "--out", folder, "--quiet").exit_code == 0
    sealed = json.loads((folder / "run.json").read_text())["file_sha256"]["boundaries.csv"]
    result = invoke("boundaries", RESPONSE, "--out", folder, "--quiet")
    assert result.exit_code == 0, result.output
    assert hashlib.sha256((folder / "boundaries.csv").read_bytes()).hexdigest() == sealed
    assert invoke("report", folder, "--quiet").exit_code == 0


def test_boundaries_that_would_break_a_seal_are_refused(tmp_path: Path) -> None:
    # another design's table in this run's folder: exit 2 naming the file, nothing written
    folder = tmp_path / "run"
    assert invoke("run", RESPONSE, "--out", folder, "--quiet").exit_code == 0
    before = {p.name: p.read_bytes() for p in folder.iterdir() if p.is_file()}
    result = invoke("boundaries", EVENTS, "--out", folder, "--quiet")
    assert result.exit_code == 2
    assert "boundaries.csv" in result.output and "run.json" in result.output
    assert "--out" in result.output
    assert {p.name: p.read_bytes() for p in folder.iterdir() if p.is_file()} == before
    assert invoke("report", folder, "--quiet").exit_code == 0
