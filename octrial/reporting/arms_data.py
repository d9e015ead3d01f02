"""What a several-arm report shows, gathered from a design file or from a run folder.

The several-arm counterpart of :mod:`octrial.reporting.data`: a run folder written by
``octrial run`` on a design with several treatment arms is read back as written (after
its seals are checked, :func:`octrial.run_folder.check_sealed`), or a design file is
evaluated for the report (:func:`octrial.arms_evaluation.compute_arms`).
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from octrial.arms_evaluation import compute_arms, oc_columns
from octrial.design.model import Source
from octrial.errors import InputError, Problem, single
from octrial.multiarm.load import is_multiarm, load_multiarm, parse_multiarm
from octrial.multiarm.model import MultiArmDesign
from octrial.provenance import now, run_record
from octrial.reporting.data import design_toml, read_flags, read_table, require_run_files
from octrial.run_folder import check_sealed, read_record

__all__ = ["ArmsReportData", "arms_from_design", "arms_from_run_folder", "is_arms_run"]


@dataclass(frozen=True, eq=False)
class ArmsReportData:
    """The inputs of one several-arm report.

    Attributes
    ----------
    design : MultiArmDesign
    oc : DataFrame
        The several-arm ``oc.csv`` table (docs/output-files.md).
    boundaries : DataFrame or None
        ``boundaries.csv``: each arm's own boundary table, with an ``arm`` column.
    record : dict
        The ``run.json`` record.
    origin : str
        Where the numbers come from, in words.
    alpha : float or None
        The family-wise error level the design is meant to keep (drawn on the figures,
        compared with the largest family-wise error).
    """

    design: MultiArmDesign
    oc: pd.DataFrame
    boundaries: pd.DataFrame | None
    record: dict[str, Any]
    origin: str
    alpha: float | None = None

    @property
    def type1(self) -> dict[str, Any] | None:
        """The largest family-wise error rate over the scenarios with a null arm."""
        return self.record.get("type1")

    @property
    def type1_per_arm(self) -> dict[str, Any]:
        """Per arm, its largest probability of success where it is null."""
        return self.record.get("type1_per_arm") or {}

    @property
    def calibration_record(self) -> None:
        """No calibration is shown in a several-arm report (the figures ask)."""
        return None


def is_arms_run(folder: Path) -> bool:
    """Whether ``folder``'s run.json records a design with several treatment arms."""
    path = Path(folder) / "run.json"
    if not path.is_file():
        return False
    try:
        record = read_record(path)
    except InputError:
        return False
    text = (record.get("design") or {}).get("text")
    if not isinstance(text, str):
        return False
    try:
        return is_multiarm(tomllib.loads(text))
    except tomllib.TOMLDecodeError:
        return False


def arms_from_design(path: str | Path, method: str | None = None,
                     command: list[str] | None = None,
                     alpha: float | None = None) -> ArmsReportData:
    """Evaluate a several-arm design file and gather what its report shows."""
    started = now()
    design = load_multiarm(path)
    evaluation = compute_arms(design, method)
    record = run_record(evaluation, started=started, finished=now(), command=command)
    origin = f"design file {design.source.path or design.name}, evaluated for this report"
    return ArmsReportData(evaluation.design, evaluation.oc, evaluation.boundaries, record,
                          origin, alpha)


def arms_from_run_folder(folder: str | Path, alpha: float | None = None) -> ArmsReportData:
    """Read a run folder of a several-arm design.

    Raises
    ------
    InputError
        When a file is missing, not what run.json sealed, or lacks documented columns.
    """
    folder = Path(folder)
    require_run_files(folder)
    record = read_record(folder / "run.json")
    design = _design_of(record, folder)
    records = {name: read_record(folder / name) if (folder / name).is_file() else None
               for name in ("checks.json", "calibration.json")}
    check_sealed(folder, {"run.json": record, **records}, design.source.sha256)
    oc = read_table(folder / "oc.csv")
    absent = [c for c in oc_columns(design) if c not in oc.columns]
    absent += [c for c in ("method", "replicates") if c not in oc.columns]
    if absent:
        raise InputError(str(folder / "oc.csv"), [Problem(
            c, "the several-arm oc.csv column (docs/output-files.md)", "no such column")
            for c in absent])
    read_flags(oc, ["is_null", *(f"{a}_is_null" for a in design.treatment_names)])
    boundaries_path = folder / "boundaries.csv"
    boundaries = read_table(boundaries_path) if boundaries_path.is_file() else None
    return ArmsReportData(design, oc, boundaries, record, f"run folder {folder}", alpha)


def _design_of(record: dict[str, Any], folder: Path) -> MultiArmDesign:
    """The several-arm design behind a run, from its text in run.json."""
    info = record.get("design") or {}
    where = str(folder / "run.json")
    text, sha = info.get("text"), info.get("sha256", "")
    if not isinstance(text, str):
        raise single(where, "design.text", "the design file's text", "none",
                     "re-run 'octrial run' on the design")
    return parse_multiarm(design_toml(where, text, sha),
                          Source(info.get("path") or "", sha, text))
