"""Everything a report shows, gathered from a design file or from a run folder.

A report is rendered from one :class:`ReportData`: the design, the operating
characteristics (``oc.csv``), the boundary table, the run record (``run.json``) and,
when present in a run folder, the calibration files (``calibration.csv``, ``sizing.csv``,
``calibration.json``) and the workflow checks (``checks.json``). Given a design file,
the design is evaluated when the report is made; given a run folder, the files are read
back as written, so the report shows exactly the numbers in ``oc.csv``, after their
SHA-256 seals are checked (:func:`octrial.run_folder.check_sealed`): a file edited,
missing, left from another run, or checks and a calibration of another design are refused.
"""

from __future__ import annotations

import hashlib
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from octrial.design.load import load_design, parse_design
from octrial.design.model import Design, Source
from octrial.errors import InputError, Problem, single
from octrial.evaluation import compute
from octrial.provenance import now, run_record
from octrial.run_folder import check_sealed, checks_belong, read_record

RUN_FILES = ("oc.csv", "run.json")
"""Files a run folder must hold."""

OPTIONAL_FILES = ("boundaries.csv", "calibration.csv", "sizing.csv", "calibration.json",
                  "checks.json", "sensitivity.csv")
"""Files a run folder may hold; each adds to the report when present."""

OC_REQUIRED = ("scenario", "is_null", "prob_success", "prob_success_se", "prob_stop_efficacy",
               "prob_stop_futility", "expected_n", "sd_n", "method", "replicates")
"""``oc.csv`` columns the report cannot do without (besides ``true_<arm>`` and looks)."""


@dataclass(frozen=True, eq=False)
class ReportData:
    """The inputs of one report.

    Attributes
    ----------
    design : Design
    oc : DataFrame
        The ``oc.csv`` table.
    boundaries : DataFrame or None
        The ``boundaries.csv`` table (discrete endpoints).
    record : dict
        The ``run.json`` record.
    origin : str
        Where the numbers come from, in words (a run folder, or a design evaluated for
        the report).
    calibration : DataFrame or None
        ``calibration.csv`` (every candidate a calibration examined), when present.
    sizing : DataFrame or None
        ``sizing.csv`` (one row per maximum sample size searched), when present.
    calibration_record : dict or None
        ``calibration.json`` (the calibration's summary and request), when present.
    checks : dict or None
        ``checks.json`` when the run folder holds one.
    sensitivity : DataFrame or None
        ``sensitivity.csv`` (written by ``octrial check`` beside checks.json): every
        simulated study's posterior shrinkage and z-score per look.
    prior_predictive_png : bytes or None
        ``prior-predictive.png``, drawn by the same ``octrial check`` as checks.json (its
        distributions are not in checks.json, so the report embeds the drawing).
    alpha : float or None
        The one-sided type I error level the design is meant to keep (for the figures'
        alpha line and the verdict on the maximum type I error); taken from the
        calibration's request when not given.
    """

    design: Design
    oc: pd.DataFrame
    boundaries: pd.DataFrame | None
    record: dict[str, Any]
    origin: str
    calibration: pd.DataFrame | None = None
    sizing: pd.DataFrame | None = None
    calibration_record: dict[str, Any] | None = None
    checks: dict[str, Any] | None = None
    alpha: float | None = None
    sensitivity: pd.DataFrame | None = None
    prior_predictive_png: bytes | None = None

    @property
    def type1(self) -> dict[str, Any] | None:
        """The maximum type I error over the null scenarios (from run.json)."""
        return self.record.get("type1")


def from_design(
    design: Design | str | Path, method: str | None = None, command: list[str] | None = None,
    alpha: float | None = None, checks_folder: str | Path | None = None,
) -> ReportData:
    """Evaluate a design and gather what its report shows.

    Parameters
    ----------
    design : Design or path
        A loaded design or a design file.
    method : str, optional
        Overrides ``simulation.method``.
    command : list of str, optional
        The command line to record (default: ``sys.argv``).
    alpha : float, optional
        The type I error level to show (see :class:`ReportData`).
    checks_folder : path, optional
        A folder where ``octrial check`` may have written checks.json (and
        sensitivity.csv); they are shown when they are about this very design file
        (same SHA-256).
    """
    started = now()
    loaded = design if isinstance(design, Design) else load_design(design)
    evaluation = compute(loaded, method)
    record = run_record(evaluation, started=started, finished=now(), command=command)
    origin = f"design file {loaded.source.path or loaded.name}, evaluated for this report"
    checks, sensitivity, predictive = (None, None, None) if checks_folder is None else (
        _checks_of(Path(checks_folder), loaded))
    return ReportData(loaded, evaluation.oc, evaluation.boundaries, record, origin,
                      alpha=alpha, checks=checks, sensitivity=sensitivity,
                      prior_predictive_png=predictive)


def _checks_of(folder: Path, design: Design) -> tuple[dict[str, Any] | None,
                                                      pd.DataFrame | None, bytes | None]:
    """checks.json, sensitivity.csv and prior-predictive.png in ``folder`` when they
    belong to ``design``."""
    checks = _optional_json(folder / "checks.json")
    if checks is None or not checks_belong(checks, design.source.sha256):
        return None, None, None
    check_sealed(folder, {"checks.json": checks}, design.source.sha256)
    drawing = folder / "prior-predictive.png"
    return (checks, _optional_table(folder / "sensitivity.csv"),
            drawing.read_bytes() if drawing.is_file() else None)


def from_run_folder(folder: str | Path, alpha: float | None = None) -> ReportData:
    """Read a folder written by ``octrial run`` (and optionally ``octrial calibrate`` or
    ``octrial check``) and gather what its report shows.

    Raises
    ------
    InputError
        When a required file is missing or unreadable, a file is not what its record
        sealed (edited, missing, from another run; checks or a calibration of another
        design), or the design behind the run cannot be recovered.
    """
    folder = Path(folder)
    require_run_files(folder)
    record = read_record(folder / "run.json")
    design = _design_of(record, folder)
    calibrated = _optional_json(folder / "calibration.json")
    checks = _optional_json(folder / "checks.json")
    check_sealed(folder, {"run.json": record, "checks.json": checks,
                          "calibration.json": calibrated}, design.source.sha256)
    oc = read_table(folder / "oc.csv")
    _check_oc(oc, design, folder / "oc.csv")
    boundaries = _optional_table(folder / "boundaries.csv")
    if boundaries is not None:
        for column in ("efficacy_bound", "futility_bound"):
            # Counts read back as floats when a look has no bound; sample means stay floats.
            values = boundaries[column].dropna() if column in boundaries else None
            if values is not None and (values == values.round()).all():
                boundaries[column] = boundaries[column].astype("Int64")
    if alpha is None and calibrated is not None:
        alpha = _stated_alpha(calibrated)
    sensitivity = _optional_table(folder / "sensitivity.csv")
    drawing = folder / "prior-predictive.png"
    predictive = drawing.read_bytes() if checks is not None and drawing.is_file() else None
    return ReportData(design, oc, boundaries, record, f"run folder {folder}",
                      calibration=_optional_table(folder / "calibration.csv"),
                      sizing=_optional_table(folder / "sizing.csv"),
                      calibration_record=calibrated, checks=checks, alpha=alpha,
                      sensitivity=sensitivity, prior_predictive_png=predictive)


def _stated_alpha(record: dict[str, Any]) -> float | None:
    """The type I error level a calibration was asked to meet, if it says."""
    for holder in (record.get("request") or {}, record):
        value = holder.get("alpha") if isinstance(holder, dict) else None
        if isinstance(value, (int, float)) and 0 < value < 1:
            return float(value)
    return None


def read_table(path: Path) -> pd.DataFrame:
    """Read a CSV table written by octrial (17 significant digits read back exactly:
    pandas' default float parser before version 3 can be one unit in the last place off,
    so the round-trip parser is asked for)."""
    try:
        return pd.read_csv(path, float_precision="round_trip")
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise single(str(path), "", "a CSV table", str(exc).strip()) from None


def _optional_table(path: Path) -> pd.DataFrame | None:
    return read_table(path) if path.is_file() else None


def _optional_json(path: Path) -> dict[str, Any] | None:
    return read_record(path) if path.is_file() else None


def _design_of(record: dict[str, Any], folder: Path) -> Design:
    """The design behind a run: its text in run.json, else the file it names (same SHA)."""
    info = record.get("design") or {}
    sha = info.get("sha256", "")
    path = info.get("path") or ""
    text = info.get("text")
    where = str(folder / "run.json")
    if text is None:
        candidates = [Path(path), folder / Path(path).name] if path else []
        for candidate in candidates:
            if candidate.is_file() and hashlib.sha256(candidate.read_bytes()).hexdigest() == sha:
                text = candidate.read_bytes().decode("utf-8")
                break
        else:
            raise single(where, "design.text", "the design file's text (written by "
                         "'octrial run' since the report command exists), or the design file "
                         f"at {path or 'the recorded path'} with SHA-256 {sha or '?'}",
                         "neither", "re-run 'octrial run' on the design")
    # Text read from the design file already has the recorded SHA-256: checked again, it passes.
    return parse_design(design_toml(where, text, sha), Source(path, sha, text))


def require_run_files(folder: Path) -> None:
    """Refuse a folder without the files every run folder holds (:data:`RUN_FILES`).

    Raises
    ------
    InputError
        Naming each missing file.
    """
    missing = [name for name in RUN_FILES if not (folder / name).is_file()]
    if missing:
        raise InputError(str(folder), [Problem(
            name, "a run folder written by 'octrial run' (oc.csv and run.json)",
            "no such file") for name in missing])


def design_toml(where: str, text: str, sha: str) -> dict[str, Any]:
    """The design text recorded in run.json (``where``), checked against its recorded
    SHA-256 ``sha`` (when there is one) and parsed as TOML.

    Raises
    ------
    InputError
        When the text has another checksum or is not TOML.
    """
    if sha and hashlib.sha256(text.encode("utf-8")).hexdigest() != sha:
        raise single(where, "design.text", f"text with the recorded SHA-256 {sha}",
                     "text with another checksum", "the record was edited; re-run the design")
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise single(where, "design.text", "a TOML design", str(exc)) from None


def read_flags(oc: pd.DataFrame, columns: list[str]) -> None:
    """Make ``oc``'s true/false ``columns`` booleans, in place (a CSV read back may give
    them as text or numbers)."""
    for column in columns:
        if oc[column].dtype != bool:
            oc[column] = oc[column].astype(str).str.lower().isin(("true", "1", "yes"))


def _check_oc(oc: pd.DataFrame, design: Design, path: Path) -> None:
    needed = [*OC_REQUIRED, *(f"true_{arm}" for arm in design.arm_names)]
    needed += [f"look{k + 1}_stop_{why}" for k in range(design.looks.count)
               for why in ("efficacy", "futility")]
    absent = [c for c in needed if c not in oc.columns]
    if absent:
        raise InputError(str(path), [Problem(c, "the oc.csv column (docs/output-files.md)",
                                             "no such column") for c in absent])
    read_flags(oc, ["is_null"])
