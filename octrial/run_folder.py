"""Sealed run folders: every command's files written all at once, with their SHA-256.

A run folder (``octrial run``, then ``octrial check``, ``octrial calibrate`` and
``octrial report`` into the same folder) must never show numbers that did not come from
one run. Two measures (docs/output-files.md, "Sealed run folders"):

* **Seals.** Each record a command writes holds the SHA-256 of every other file it wrote
  (``file_sha256``: ``run.json`` for ``oc.csv`` and ``boundaries.csv``, ``checks.json``
  for its CSVs and figures, ``calibration.json`` for its tables and calibrated design) and
  the design's SHA-256. :func:`check_sealed` re-hashes them before a report is made; a file
  edited, missing, unrecorded or belonging to another design is refused (exit code 2).
* **All-at-once writes.** :func:`write_folder` builds the new folder as a temporary sibling
  (same parent, so the same file system): the new files, plus hard links to what the old
  folder keeps, then swaps it into place with two renames and deletes the old folder.
  Any failure (a full disk, a read-only folder, ``--out`` naming a file) deletes the
  temporary folder, leaves the old one as it was and becomes an :class:`InputError`
  (exit code 2) with a plain message. A mount point or the working folder cannot be
  renamed away; it is written file by file, the sealing record last.

A seal guards against accidents (a hand-edited table, a file copied in from another run,
a half-finished write), not against someone who rewrites the hashes too.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

from octrial.errors import InputError, Problem, show, single
from octrial.output import json_text, write_atomic

SEAL = "file_sha256"
"""The key of a record (run.json, checks.json, calibration.json) holding its files' hashes."""

RUN_FILES = ("oc.csv", "boundaries.csv", "run.json")
"""What ``octrial run`` writes; a new run replaces all three (a stale boundaries.csv of an
earlier design is never left beside new results)."""

REPORT_FILES = ("report.html", "report.pdf", "report-tables")
"""A report made from the folder's earlier contents: removed whenever a command changes
what the report would show, so that no report of older results sits beside new ones."""

CHECK_FILES = ("checks.json", "sbc.csv", "sensitivity.csv", "prior-predictive.png",
               "sensitivity.png", "tail-accuracy.png", "design-prior-sensitivity.csv")
"""What ``octrial check`` writes (besides ``sbc-*.png``)."""

CALIBRATION_FILES = ("calibration.json", "calibration.csv", "sizing.csv")
"""What ``octrial calibrate`` writes that a report shows (besides ``<name>.calibrated.toml``,
a design file kept as it is)."""


def digest(data: str | bytes) -> str:
    """The SHA-256 (hex) of ``data`` as it is written (text in UTF-8)."""
    return hashlib.sha256(data.encode("utf-8") if isinstance(data, str) else data).hexdigest()


def file_digest(path: Path) -> str:
    """The SHA-256 (hex) of a file's bytes."""
    sha = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            sha.update(block)
    return sha.hexdigest()


def seal(files: Mapping[str, str | bytes]) -> dict[str, str]:
    """The ``file_sha256`` record of ``files`` (name -> contents), in their order."""
    return {name: digest(data) for name, data in files.items()}


def is_check_file(name: str) -> bool:
    """Whether ``name`` is a file ``octrial check`` writes."""
    return name in CHECK_FILES or (name.startswith("sbc-") and name.endswith(".png"))


# -- writing ------------------------------------------------------------------------------
@dataclass(frozen=True)
class FolderWrite:
    """What :func:`write_folder` did.

    Attributes
    ----------
    written : list of Path
        The new files, in the order given.
    removed : list of str
        Names of the old folder's entries that were not carried over.
    """

    written: list[Path]
    removed: list[str]


def write_folder(
    folder: str | Path, files: Mapping[str, str | bytes],
    drop: Callable[[str], bool] | None = None,
) -> FolderWrite:
    """Write ``files`` (name -> contents) into ``folder`` all at once.

    Everything in the old folder is kept (hard-linked, or copied where links are not
    possible) except the entries named in ``files`` and those for which ``drop(name)``
    is true; then the new folder replaces the old one (see module docstring).

    Raises
    ------
    InputError
        When the folder cannot be written; the old folder is left as it was and no
        temporary folder remains.
    """
    shown = Path(folder)  # as the user gave it, for messages
    folder = Path(os.path.abspath(folder))
    if folder.is_symlink():
        folder = folder.resolve()  # replace the folder the link points to, keep the link
    drop = drop or (lambda name: False)
    if folder.exists() and not folder.is_dir():
        raise _unwritable(shown, "a file of that name")
    if folder.is_dir() and not _movable(folder):
        done = _write_in_place(folder, files, drop, shown)
        return FolderWrite([shown / name for name in files], done.removed)
    temp: Path | None = None
    try:
        folder.parent.mkdir(parents=True, exist_ok=True)
        temp = Path(tempfile.mkdtemp(prefix=f".{folder.name}.new-", dir=folder.parent))
        removed = []
        if folder.is_dir():
            for entry in sorted(os.scandir(folder), key=lambda e: e.name):
                if entry.name in files:
                    continue
                if drop(entry.name):
                    removed.append(entry.name)
                    continue
                _carry(Path(entry.path), temp / entry.name)
        for name, data in files.items():
            _write_synced(temp / name, data)
        os.chmod(temp, _mode_of(folder))
        _swap(temp, folder)
    except OSError as exc:
        if temp is not None:
            shutil.rmtree(temp, ignore_errors=True)
        raise _unwritable(shown, exc.strerror or type(exc).__name__) from None
    except BaseException:
        if temp is not None:
            shutil.rmtree(temp, ignore_errors=True)
        raise
    return FolderWrite([shown / name for name in files], removed)


def _movable(folder: Path) -> bool:
    """Whether ``folder`` can be renamed away: not a mount point, and neither the working
    folder nor one that contains it (a shell there would be left in a deleted folder)."""
    if os.path.ismount(folder):
        return False
    here = Path.cwd().resolve()
    target = folder.resolve()
    return target != here and target not in here.parents


def _write_in_place(folder: Path, files: Mapping[str, str | bytes],
                    drop: Callable[[str], bool], shown: Path) -> FolderWrite:
    """For a folder that cannot be swapped: each file written atomically, in the order
    given (every command gives its sealing record last, so a folder left half-written is
    refused by the report), then the dropped entries deleted."""
    written = []
    try:
        for name, data in files.items():
            written.append(write_atomic(folder / name, data))
        removed = sorted(e.name for e in os.scandir(folder)
                         if e.name not in files and drop(e.name))
        for name in removed:
            path = folder / name
            if path.is_dir() and not path.is_symlink():
                shutil.rmtree(path)
            else:
                path.unlink()
    except OSError as exc:
        raise InputError(str(shown), [Problem(
            "", "a folder that can be written", exc.strerror or type(exc).__name__,
            "the folder (a mount point or the working folder) is written file by file: "
            f"{len(written)} of {len(files)} files were replaced; run the command again")]
        ) from None
    return FolderWrite(written, removed)


def _unwritable(folder: Path, why: str) -> InputError:
    return InputError(str(folder), [Problem(
        "", "a folder that can be written (the results are written all at once)",
        why, "nothing was written; the folder was left as it was")])


def _carry(source: Path, target: Path) -> None:
    """``source`` (a file, link or folder of the old folder) at ``target``, without
    touching ``source``."""
    if source.is_symlink():
        os.symlink(os.readlink(source), target)
    elif source.is_dir():
        target.mkdir()
        for entry in os.scandir(source):
            _carry(Path(entry.path), target / entry.name)
        shutil.copystat(source, target)
    else:
        try:
            os.link(source, target)
        except OSError:  # a file system without hard links: copy
            shutil.copy2(source, target)


def _write_synced(path: Path, data: str | bytes) -> None:
    """Write ``data`` and flush it to the disk (a full disk shows up here, not later)."""
    raw = data.encode("utf-8") if isinstance(data, str) else data
    with open(path, "wb") as handle:
        handle.write(raw)
        handle.flush()
        os.fsync(handle.fileno())
    os.chmod(path, 0o666 & ~_umask())


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _mode_of(folder: Path) -> int:
    """The old folder's permissions, or those ``mkdir`` would give a new one."""
    try:
        return folder.stat().st_mode & 0o7777
    except OSError:
        return 0o777 & ~_umask()


def _swap(temp: Path, folder: Path) -> None:
    """Put ``temp`` in ``folder``'s place: rename the old folder aside, rename the new one
    in (renaming the old one back if that fails), then delete the old one."""
    if not folder.exists():
        os.rename(temp, folder)
        return
    old = Path(tempfile.mkdtemp(prefix=f".{folder.name}.old-", dir=folder.parent))
    os.rmdir(old)  # the name only: rename needs it free
    os.rename(folder, old)
    try:
        os.rename(temp, folder)
    except BaseException:
        os.rename(old, folder)
        raise
    shutil.rmtree(old, ignore_errors=True)


# -- what each command writes -------------------------------------------------------------
def run_files(record: dict[str, Any], oc_text: str, boundaries_text: str | None
              ) -> dict[str, str]:
    """``octrial run``'s files: ``oc.csv``, ``boundaries.csv`` when there is one, and
    ``run.json`` sealing them (``record`` gains the ``file_sha256`` key)."""
    files = {"oc.csv": oc_text}
    if boundaries_text is not None:
        files["boundaries.csv"] = boundaries_text
    record[SEAL] = seal(files)
    files["run.json"] = json_text(record)
    return files


def write_run(folder: str | Path, record: dict[str, Any], oc_text: str,
              boundaries_text: str | None) -> FolderWrite:
    """Write a run's files into ``folder`` all at once.

    Kept from the old folder: everything but the old run's files, a report made from it,
    and workflow checks or a calibration of another design (see :func:`dependents_of`).
    """
    files = run_files(record, oc_text, boundaries_text)
    design = (record.get("design") or {}).get("sha256", "")
    stale = set(RUN_FILES) | set(REPORT_FILES) | stale_dependents(Path(folder), design)
    return write_folder(folder, files, drop=stale.__contains__)


def stale_dependents(folder: Path, design_sha256: str) -> set[str]:
    """Names of the check and calibration files in ``folder`` that are not about the
    design with SHA-256 ``design_sha256`` (so a new run of that design drops them)."""
    stale: set[str] = set()
    if not folder.is_dir():
        return stale
    names = [p.name for p in folder.iterdir()]
    checks = _readable(folder / "checks.json")
    if checks is not False and (checks is None or not checks_belong(checks, design_sha256)):
        stale |= {n for n in names if is_check_file(n)}
    calibration = _readable(folder / "calibration.json")
    if calibration is not False and (calibration is None
                                     or not calibration_belongs(calibration, design_sha256)):
        stale |= {n for n in names if n in CALIBRATION_FILES}
    return stale


def _readable(path: Path) -> dict[str, Any] | Literal[False] | None:
    """The record at ``path``; ``False`` when there is none, ``None`` when unreadable."""
    if not path.is_file():
        return False
    try:
        return read_record(path)
    except (InputError, OSError):
        return None


def read_record(path: Path) -> dict[str, Any]:
    """A JSON record (run.json, checks.json, calibration.json) as a dict.

    Raises
    ------
    InputError
        When the file is not a JSON object.
    """
    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise single(str(path), "", "a JSON record", str(exc)) from None
    if not isinstance(data, dict):
        raise single(str(path), "", "a JSON object", type(data).__name__)
    return data


def checks_belong(checks: dict[str, Any], design_sha256: str) -> bool:
    """Whether a ``checks.json`` record is about the design with that SHA-256."""
    return bool(design_sha256) and _design_sha(checks) == design_sha256


def calibration_belongs(calibration: dict[str, Any], design_sha256: str) -> bool:
    """Whether a ``calibration.json`` record goes with a run of the design with that
    SHA-256: the run is of the design calibrated or of the calibrated design written."""
    if not design_sha256:
        return False
    seal = calibration.get(SEAL)
    written = seal if isinstance(seal, dict) else {}
    tomls = {sha for name, sha in written.items() if str(name).endswith(".toml")}
    return design_sha256 == _design_sha(calibration) or design_sha256 in tomls


def _design_sha(record: dict[str, Any]) -> str | None:
    design = record.get("design")
    return design.get("sha256") if isinstance(design, dict) else None


# -- reading ------------------------------------------------------------------------------
SEALED_BY = {"oc.csv": "run.json", "boundaries.csv": "run.json",
             "sbc.csv": "checks.json", "sensitivity.csv": "checks.json",
             "prior-predictive.png": "checks.json",
             "calibration.csv": "calibration.json", "sizing.csv": "calibration.json"}
"""Every input a report reads besides the records, and the record whose seal covers it."""


def seal_conflicts(folder: Path, files: Mapping[str, str | bytes]) -> list[Problem]:
    """What writing ``files`` (name -> contents) into ``folder`` would do to its seals.

    A file that a record in the folder seals may be written again only with the same
    bytes; a file that the folder's record would have to list (``SEALED_BY``) but does
    not may not be added. Each conflict is a problem naming the file; none means the
    folder's seals still hold after the write.
    """
    problems: list[Problem] = []
    records = {name: read_record(folder / name) for name in set(SEALED_BY.values())
               if (folder / name).is_file()}
    for file, data in files.items():
        new = digest(data)
        owner = SEALED_BY.get(file)
        sealed = {name: record[SEAL][file] for name, record in records.items()
                  if isinstance(record.get(SEAL), dict) and file in record[SEAL]}
        for name, expected in sealed.items():
            if expected != new:
                problems.append(Problem(
                    str(file), f"the table {name} seals (SHA-256 {expected})",
                    f"a different table (SHA-256 {new})",
                    f"writing it would break the seal of {name}; write it to another "
                    "folder"))
        if not sealed and owner in records:
            problems.append(Problem(
                str(file), f"a file {owner} lists", f"a file {owner} does not list",
                f"writing it would make the report refuse the folder of {owner}; write it "
                "to another folder"))
    return problems


def check_sealed(folder: Path, records: Mapping[str, dict[str, Any] | None],
                 design_sha256: str) -> None:
    """Refuse a folder whose files are not exactly what its records sealed.

    ``records`` maps the records to look at (``run.json``, ``checks.json``,
    ``calibration.json``) to their contents, ``None`` for one that is absent; files a
    report reads are checked for the records named only. Every problem is listed: a
    record without a seal; a sealed file missing or with another SHA-256; a file the
    report would show that no record sealed; checks or a calibration not about the design
    with SHA-256 ``design_sha256``.

    Raises
    ------
    InputError
        Naming each file and what is wrong with it.
    """
    problems: list[Problem] = []
    design = design_sha256
    for name, record in records.items():
        if record is None:
            continue
        seal_of = record.get(SEAL)
        if not isinstance(seal_of, dict):
            problems.append(Problem(
                f"{name}: {SEAL}", "the SHA-256 of every file the command wrote",
                "no such record", "written by an older octrial or by hand; run the "
                f"command that writes {name} again"))
            continue
        if name == "checks.json" and not checks_belong(record, design):
            problems.append(Problem(
                "checks.json: design.sha256", f"the run's design ({design})",
                show(_design_sha(record)), "checks of another design; run 'octrial check' "
                "on the run's design again, or remove the check's files"))
        if name == "calibration.json" and not calibration_belongs(record, design):
            problems.append(Problem(
                "calibration.json: design.sha256", f"the run's design ({design}) or the "
                "calibrated design written", show(_design_sha(record)),
                "a calibration of another design; run the calibrated design or calibrate "
                "again, or remove the calibration's files"))
        for file, expected in seal_of.items():
            path = folder / str(file)
            if not path.is_file():
                if str(file).endswith(".toml"):
                    continue  # the calibrated design file may be moved; it is not shown
                problems.append(Problem(str(file), f"the file {name} records", "no such file",
                                        "deleted or moved after it was written"))
            elif (found := file_digest(path)) != expected:
                problems.append(Problem(str(file), f"SHA-256 {expected} (as {name} records)",
                                        f"SHA-256 {found}",
                                        "the file was changed after it was written"))
    for file, record_name in SEALED_BY.items():
        if record_name not in records:
            continue
        record = records[record_name]
        sealed = record.get(SEAL) if record else None
        if (folder / file).is_file() and not (isinstance(sealed, dict) and file in sealed):
            problems.append(Problem(file, f"a file recorded in {record_name}",
                                    "a file no record lists",
                                    "left from another run or copied in; remove it"))
    if problems:
        raise InputError(str(folder), problems)
