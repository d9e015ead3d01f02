"""The files ``octrial check`` writes, each atomically (docs/output-files.md).

``checks.json`` (every verdict and number), ``sbc.csv`` (every simulated study's CDF value
or rank), ``sensitivity.csv`` (every simulated study's shrinkage and z-score per look),
one PNG histogram per SBC quantity (``sbc-<quantity>-look<k>[-rank].png``),
``prior-predictive.png``, ``sensitivity.png``, ``tail-accuracy.png`` and, with design
priors, ``design-prior-sensitivity.csv`` (the Bayesian operating characteristics under
alternative design priors). ``checks.json`` records the SHA-256 of the others
(``file_sha256``), so that a report can tell they are this check's
(:mod:`octrial.run_folder`).
"""

from __future__ import annotations

import math
import re
from pathlib import Path
from typing import Any

import numpy as np

import octrial.reporting.check_figures as check_figures
from octrial.checks.core import CheckOutcome
from octrial.output import csv_text, json_text
from octrial.run_folder import REPORT_FILES, SEAL, is_check_file, seal, write_folder

CHECKS_JSON = "checks.json"
SBC_CSV = "sbc.csv"
SENSITIVITY_CSV = "sensitivity.csv"
DESIGN_PRIOR_CSV = "design-prior-sensitivity.csv"


def plain(value: Any) -> Any:
    """``value`` with numpy scalars and arrays turned into Python values and non-finite
    numbers into ``None`` (strict JSON has no NaN or infinity)."""
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return [plain(v) for v in value.tolist()]
    if isinstance(value, np.bool_ | bool):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        return float(value) if math.isfinite(value) else None
    return value


def sbc_file(entry: dict[str, Any]) -> str:
    """The PNG file name of one SBC quantity."""
    return "sbc-" + re.sub(r"[^a-z0-9]+", "-", entry["id"].lower()).strip("-") + ".png"


def write_outputs(outcome: CheckOutcome, folder: Path) -> list[Path]:
    """Write every output of ``outcome`` into ``folder``; returns the paths written.

    Everything is rendered first, then written all at once
    (:func:`~octrial.run_folder.write_folder`), so a failure leaves the folder as it
    was; files of an earlier check that this one does not write, and a report made
    before, are removed.
    """
    folder = Path(folder)
    record = outcome.record
    files: dict[str, str | bytes] = {}
    sbc = record.get("sbc") or {}
    for entry in sbc.get("quantities", []):
        fig = check_figures.sbc_figure([entry], sbc["band_level"])
        files[sbc_file(entry)] = check_figures.png(fig)
    if outcome.predictive:
        files["prior-predictive.png"] = check_figures.png(
            check_figures.predictive_figure(outcome.predictive))
    if not outcome.sensitivity.empty:
        files["sensitivity.png"] = check_figures.png(check_figures.sensitivity_figure(
            outcome.sensitivity, record["sensitivity"]["label"]))
        files[SENSITIVITY_CSV] = csv_text(outcome.sensitivity)
    tail = record.get("tail_accuracy") or {}
    if "table" in tail:
        files["tail-accuracy.png"] = check_figures.png(check_figures.tail_figure(tail))
    if not outcome.sbc.empty:
        files[SBC_CSV] = csv_text(outcome.sbc)
    rows = (record.get("design_prior_sensitivity") or {}).get("rows")
    if rows:
        import pandas as pd

        files[DESIGN_PRIOR_CSV] = csv_text(pd.DataFrame(rows))
    record[SEAL] = seal(files)
    files[CHECKS_JSON] = json_text(plain(record))
    return write_folder(folder, files, drop=lambda name: (
        is_check_file(name) or name in REPORT_FILES)).written
