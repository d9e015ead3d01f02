"""``verify`` for designs with several treatment arms: claims recomputed exactly.

The claims file has the columns of an ordinary claims file (:mod:`.claims`): one
``true_<arm>`` column per arm of the design (the control and every treatment arm),
``metric``, ``claimed`` and optionally ``replicates``, ``se`` and ``note``. A metric is a
probability or expected-size column of the several-arm oc.csv (:func:`arms_metrics`): per
arm ``<arm>_prob_success``, ``<arm>_expected_n``, ``<arm>_look<k>_stop_efficacy``,
``<arm>_look<k>_stop_futility``; for the study ``prob_success`` (at least one arm
succeeds), ``fwer``, ``prob_stop_efficacy``, ``prob_stop_futility``,
``look<k>_stop_efficacy``, ``look<k>_stop_futility``, ``expected_n`` and (with a shared
control) ``control_expected_n``. Every claim is recomputed exactly, by the control-path
walk (:mod:`octrial.engines.arms_exact`; fixed allocation, per-arm rules) or, when Pr(best)
dropping or selection couples the arms, on the joint lattice
(:mod:`octrial.engines.arms_joint`; small binary studies), and judged by the
same rounding-aware two-sided test as any claim (:mod:`.comparison`), Holm-adjusted over
all claims.

Expected sample sizes claimed from simulation need the standard deviation of the sample
size: per arm and for the control it is exact (each is fixed by the look at which the arm
or the study stops); for the total, whose arms are correlated, the bound
sd <= (largest - smallest possible total) / 2 (Popoviciu's inequality on variances, 1935)
is used, which can only make a claim look more consistent.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from octrial._version import __version__
from octrial.caution import CAUTION
from octrial.csv_input import read_rows
from octrial.design.reader import Phrase, Problems, suggest
from octrial.engines.arms_exact import evaluate_design, unsupported
from octrial.engines.arms_joint import joint_exact
from octrial.errors import InputError, Problem
from octrial.multiarm.load import is_multiarm
from octrial.multiarm.model import MultiArmDesign
from octrial.output import csv_text, json_text
from octrial.provenance import environment, now
from octrial.review.claims import OPTIONAL, Claim, Claims, spreadsheet_safe
from octrial.review.comparison import EXPECTED_N, standard_errors, two_sided_p, z_scores
from octrial.review.multiplicity import holm
from octrial.run_folder import write_folder

__all__ = ["ArmsVerification", "arms_metrics", "read_arms_claims", "several_arms", "verify_arms",
           "write_arms_verification"]

CONSISTENT, DISCREPANT = "consistent", "discrepant"


@dataclass(frozen=True, eq=False)
class ArmsVerification:
    """Every claim with its recomputation and verdict (``table``) and run facts."""

    design: MultiArmDesign
    claims: Claims
    table: pd.DataFrame
    info: dict[str, Any]

    @property
    def discrepant(self) -> bool:
        """Whether any claim is discrepant."""
        return bool((self.table["verdict"] == DISCREPANT).any())


def several_arms(path: str | Path) -> bool:
    """Whether the design file at ``path`` names several treatment arms (a file that
    cannot be read is left to the ordinary loader, which reports why)."""
    try:
        data = tomllib.loads(Path(path).read_bytes().decode("utf-8-sig"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return False
    return is_multiarm(data)


def arms_metrics(design: MultiArmDesign) -> tuple[str, ...]:
    """The metrics a claim may name for ``design``."""
    looks = range(1, design.looks.count + 1)
    out = ["prob_success", "fwer", "prob_stop_efficacy", "prob_stop_futility", "expected_n"]
    out += [f"look{k}_stop_{why}" for k in looks for why in ("efficacy", "futility")]
    if design.shared_control:
        out.append("control_expected_n")
    for name in design.treatment_names:
        out += [f"{name}_prob_success", f"{name}_expected_n"]
        out += [f"{name}_look{k}_stop_{why}" for k in looks for why in ("efficacy", "futility")]
    return tuple(out)


def read_arms_claims(path: str | Path, design: MultiArmDesign) -> Claims:
    """Read and check a claims file against a several-arm design.

    Raises
    ------
    InputError
        Listing every problem, each with its line and column.
    """
    table = read_rows(path, "claims file")
    problems = Problems()
    truths = tuple(f"true_{n}" for n in design.arm_names)
    allowed = (*truths, "metric", "claimed", *OPTIONAL)
    where_header = f"line {table.header_line} (header)"
    columns: dict[str, int] = {}
    for i, name in enumerate(table.header):
        if name in columns:
            problems.add(where_header, "each column once", Phrase(f"'{name}' twice"))
        elif name not in allowed:
            problems.add(where_header, "columns among " + ", ".join(allowed),
                         Phrase(f"an unknown column '{name}'"), suggest(name, allowed))
        columns[name] = i
    for name in (*truths, "metric", "claimed"):
        if name not in columns:
            problems.add(where_header, f"a column {name}", Phrase("no such column"))
    if problems:
        raise InputError(table.path, problems)
    valid = arms_metrics(design)
    claims = []
    for line, fields in table.rows:
        if len(fields) != len(table.header):
            problems.add(f"line {line}", f"{len(table.header)} comma-separated fields (as in "
                         "the header)", Phrase(f"{len(fields)} fields"))
            continue
        cell = {name: fields[i] for name, i in columns.items()}
        before = len(problems)
        truth = tuple(_number(cell[c], f"line {line}, column {c}", problems) for c in truths)
        metric = cell["metric"]
        if metric not in valid:
            problems.add(f"line {line}, column metric", "a metric of this several-arm "
                         "design: " + ", ".join(valid), metric, suggest(metric, valid))
        claimed = _number(cell["claimed"], f"line {line}, column claimed", problems)
        if (claimed is not None and not metric.endswith("expected_n")
                and not 0.0 <= claimed <= 1.0):
            problems.add(f"line {line}, column claimed", "a probability in [0, 1]",
                         cell["claimed"])
        replicates = 0
        if cell.get("replicates"):
            value = _number(cell["replicates"], f"line {line}, column replicates", problems)
            if value is not None and (value < 0 or not float(value).is_integer()):
                problems.add(f"line {line}, column replicates", "a whole number >= 0 (0 or "
                             "empty: the claim is exact)", cell["replicates"])
            elif value is not None:
                replicates = int(value)
        se = None
        if cell.get("se"):
            se = _number(cell["se"], f"line {line}, column se", problems)
            if se is not None and se <= 0:
                problems.add(f"line {line}, column se", "a standard error > 0 (leave empty "
                             "for none)", cell["se"])
        if len(problems) == before and claimed is not None:
            claims.append(Claim(line, tuple(float(v) for v in truth if v is not None), metric,
                                claimed, cell["claimed"], replicates, se, cell.get("note", "")))
    if problems:
        raise InputError(table.path, problems)
    return Claims(table.path, table.sha256, tuple(claims))


def _number(text: str, where: str, problems: Problems) -> float | None:
    try:
        value = float(text)
    except ValueError:
        problems.add(where, "a number", text)
        return None
    if not np.isfinite(value):
        problems.add(where, "a finite number", text)
        return None
    return value


def verify_arms(design: MultiArmDesign, claims: Claims, *, alpha: float = 0.05,
                tolerance: float = 1e-6) -> ArmsVerification:
    """Recompute every claim exactly and judge it (module docstring).

    Raises
    ------
    InputError
        When neither exact several-arm engine applies.
    """
    truths = sorted({c.truth for c in claims.claims})
    table, facts = _exact_table(design, truths)
    index = {t: i for i, t in enumerate(truths)}
    n_max = _total_range(design)
    per_arm = np.array(design.looks.per_arm)
    arm_spread = float((per_arm[-1] - per_arm[0]).max()) / 2.0
    rows = []
    for c in claims.claims:
        row = table.iloc[index[c.truth]]
        value = float(row[c.metric])
        # an sd the engine does not give exactly is bounded (Popoviciu; module docstring)
        sd_column = c.metric.removesuffix("_expected_n") + "_sd_n"
        if c.metric.endswith("_expected_n") and sd_column in table.columns:
            sd = float(row[sd_column])
        elif c.metric.endswith("_expected_n"):
            sd = arm_spread
        else:
            sd = (n_max[1] - n_max[0]) / 2.0
        rows.append((c, value, sd))
    claimed = np.array([c.claimed for c, _, _ in rows])
    recomputed = np.array([r for _, r, _ in rows])
    is_n = np.array([c.metric.endswith("expected_n") for c, _, _ in rows])
    kinds = np.where(is_n, EXPECTED_N, "probability")
    claim_se, recomputed_se = standard_errors(
        kinds, claimed, np.array([c.replicates for c, _, _ in rows]),
        np.array([np.nan if c.se is None else c.se for c, _, _ in rows]), recomputed,
        np.zeros(len(rows), dtype=int), np.array([s for _, _, s in rows]))
    allowance = np.array([c.rounding for c, _, _ in rows]) + tolerance * np.where(
        is_n, n_max[1], 1.0)
    z = z_scores(claimed, recomputed, allowance, claim_se, recomputed_se)
    p = two_sided_p(z)
    p_holm = holm(p)
    out = pd.DataFrame({"line": [c.line for c, _, _ in rows]})
    for j, arm in enumerate(design.arm_names):
        out[f"true_{arm}"] = [c.truth[j] for c, _, _ in rows]
    out["metric"] = [c.metric for c, _, _ in rows]
    out["claimed"] = [c.text for c, _, _ in rows]
    out["recomputed"] = recomputed
    out["claim_se"], out["recomputed_se"] = claim_se, recomputed_se
    out["z"], out["p"], out["p_holm"] = z, p, p_holm
    out["verdict"] = np.where(p_holm < alpha, DISCREPANT, CONSISTENT)
    out["note"] = [spreadsheet_safe(c.note) for c, _, _ in rows]
    info = {"alpha": alpha, "adjustment": "Holm (1979)",
            "tolerance": tolerance, "claims_total": len(out), "scenarios": len(truths),
            "discrepant": int((out["verdict"] == DISCREPANT).sum()),
            "consistent": int((out["verdict"] == CONSISTENT).sum()), **facts}
    return ArmsVerification(design, claims, out, info)


def _exact_table(design: MultiArmDesign,
                 truths: list[tuple[float, ...]]) -> tuple[pd.DataFrame, dict[str, Any]]:
    """The exact table at ``truths``: the control-path walk when the arms are judged
    independently, else the joint lattice (binary, small studies)."""
    why = unsupported(design)
    if why is None:
        table, outcome = evaluate_design(design, np.array(truths))
        # bounds on the exact numbers' error: truncated counts, grid posteriors
        return table, {"engine": "exact (several arms, control paths)",
                       "max_neglected_mass": float(outcome.neglected.max()),
                       "max_uncertain_mass": float(outcome.uncertain.max())}
    if design.allocation.kind == "fixed":
        try:
            rows = [joint_exact(design, t) for t in truths]
        except (ValueError, NotImplementedError) as exc:
            why = f"{why}; the joint exact engine does not apply either ({exc})"
        else:
            return pd.DataFrame(rows), {"engine": "exact (several arms, joint lattice)"}
    raise InputError(design.source.path, [Problem(
        "", "a several-arm design with an exact engine (fixed allocation; per-arm rules, "
        "or a small binary study)", why)])


def _total_range(design: MultiArmDesign) -> tuple[float, float]:
    """Smallest and largest possible total sample size (the first look's total, the
    last look's)."""
    return float(design.looks.n[0]), float(design.looks.n[-1])


def write_arms_verification(folder: str | Path, result: ArmsVerification, *, started: str,
                            command: list[str]) -> list[Path]:
    """Write verify.csv and verify.json into ``folder`` all at once; returns the paths."""
    design = result.design
    record = {
        "octrial_version": __version__,
        "design": {"name": design.name, "path": design.source.path,
                   "sha256": design.source.sha256},
        "claims": {"path": result.claims.path, "sha256": result.claims.sha256},
        "command": command, "started": started, "finished": now(),
        **result.info,
        "environment": environment(),
        "caution": CAUTION,
    }
    return write_folder(folder, {"verify.csv": csv_text(result.table),
                                 "verify.json": json_text(record)}).written
