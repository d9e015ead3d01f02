"""What a calibration writes: the calibrated design file, the summary text and record."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from octrial._version import __version__
from octrial.calibration.core import Calibration
from octrial.caution import CAUTION
from octrial.design.write import edited_text, value_text
from octrial.output import csv_text, json_text
from octrial.plurals import count
from octrial.provenance import environment, now
from octrial.run_folder import REPORT_FILES, SEAL, seal, write_folder

KNOB_WORDS = {
    "final": "final success threshold",
    "efficacy": "efficacy threshold at every look",
    "futility": "futility threshold",
    "futility-predictive": "predictive futility threshold",
    "eta": "eta of the efficacy function",
    "stages": "looks and bounds",
}


def _where(point: dict[str, float] | None) -> str:
    return "" if not point else ", ".join(f"{k} = {v:g}" for k, v in point.items())


def _equivalent(value: dict[str, Any]) -> str:
    span = value.get("equivalent")
    if not span:
        return ""
    lo, hi = span
    # the candidate value is the closed end; the next less stringent candidate the open one
    text = f"({lo:.10g}, {hi:.10g}]" if value["exact"] == hi else f"[{lo:.10g}, {hi:.10g})"
    return f"any value in {text} gives the same rule"


def chosen_lines(cal: Calibration) -> list[str]:
    """One line per chosen value."""
    lines = []
    for name, value in cal.summary["chosen"].items():
        if name == "stages":
            continue
        v = value["value"]
        text = f"{KNOB_WORDS.get(name, name)} = {v:.10g}" if isinstance(v, float) else (
            f"{KNOB_WORDS.get(name, name)} = {v}")
        same = _equivalent(value)
        lines.append(text + (f" ({same})" if same else ""))
    return lines


def summary_lines(cal: Calibration) -> list[str]:
    """The printed summary."""
    s = cal.summary
    limits = ([] if s["alpha"] is None else [f"alpha = {s['alpha']:g}"]) + s.get("criteria", [])
    out = [f"{cal.original.name}: {s['task']} at {', '.join(limits)}"
           + (f", power >= {s['power_target']:g} at {_where(s['alternative'])}"
              if s["power_target"] is not None else "")]
    out.append(f"  null region searched: {s['null_grid']}")
    if s.get("null_range"):
        out.append(f"  assumption: {s['null_range']['assumption']}")
    for line in chosen_lines(cal):
        out.append(f"  chosen: {line}")
    out.append(f"  looks: n = {', '.join(map(str, s['looks_n']))}")
    if "search" in s:
        out.append(f"  search: {s['search']['criterion']} {s['search']['stages']}-stage "
                   f"{s['search']['rule']} rule over N = {s['search']['range'][0]}.."
                   f"{s['search']['range'][1]}")
    se = f" (se {s['type1_error_se']:.4f})" if s["type1_error_se"] else ""
    out.append(f"  type I error: {s['type1_error']:.4f}{se}, largest at "
               f"{_where(s['worst_null_point'])}")
    if s.get("type1_error_refined") is not None:
        out.append(f"  between grid points (refined along the null line): "
                   f"{s['type1_error_refined']:.6f} at {_where(s['worst_null_point_refined'])}")
    if s["power"] is not None:
        out.append(f"  power: {s['power']:.4f} at {_where(s['alternative'])}")
    en = (f"  expected N: {s['expected_n_null']:.2f} under the null "
          f"({_where(s['null_reference_point'])})")
    if s["expected_n_alternative"] is not None:
        en += f", {s['expected_n_alternative']:.2f} at the alternative"
    out.append(en)
    if "sizing" in s:
        z = s["sizing"]
        first = z["smallest_passing"] if z["smallest_passing"] is not None else "none"
        stable = z["stable_from"] if z["stable_from"] is not None else "none"
        out.append(f"  sample size: smallest N that passes {first}; every N in the range "
                   f"from {stable} passes; chosen N = {z['chosen_n']} (rule: {z['rule']})")
    if s.get("boundaries"):
        out.append("  rule in counts: " + "; ".join(
            f"look {b['look']} (n = {b['n']}): efficacy {b['efficacy']}, "
            f"{'failure' if b['look'] == len(s['boundaries']) else 'futility'} {b['futility']}"
            for b in s["boundaries"]))
    claim = s.get("prior_probability_of_claim")
    if s.get("assurance") and "probability" in s["assurance"]:
        a = s["assurance"]
        se = f" (se {a['probability_se']:.4f})" if a.get("replicates") else ""
        out.append(f"  assurance (design prior): {a['probability']:.4f}{se}; expected N "
                   f"{a['expected_n']:.2f}; Pr(claim true) under the design prior "
                   f"{a['design_prior_probability_of_claim']:.4f}")
    if claim is not None:
        out.append(f"  prior probability of the claim (analysis prior): {claim:.4f}")
    bayes = s.get("bayesian_operating_characteristics")
    if bayes and "prob_success" in bayes:
        from octrial.bayesian_oc import METRICS

        out.append("  under the design prior: " + ", ".join(
            f"{k} {bayes[k]:.4g}" for k in METRICS))
    out.append(f"  candidates examined: {s['candidates']} ({s['method']}; "
               f"{count(s['evaluations'], 'evaluation')})")
    if s.get("simulation"):
        z = s["simulation"]
        out.append(f"  simulation: {z['replicates']:,} studies per true value, seed "
                   f"{z['seed']}, the same studies for every candidate")
    for note in s["notes"]:
        out.append(f"  note: {note}")
    return out


def calibrated_toml(cal: Calibration, command: list[str]) -> str:
    """The calibrated design file: the original text with the chosen values."""
    source = cal.original.source
    header = [
        f"Calibrated by octrial {__version__} on {now()} from {source.path or 'a design'}",
        f"(SHA-256 {source.sha256 or 'unknown'}).",
        "Command: " + " ".join(command),
        *(f"Chosen: {line}." for line in chosen_lines(cal)),
        f"Type I error at most {cal.summary['type1_error']:.6g} over the null grid: "
        f"{cal.summary['null_grid']}"
        + (f"; power {cal.summary['power']:.6g}." if cal.summary["power"] is not None
           else "."),
        "Comments below are the original's; where they state values, the keys marked",
        "'calibrated' now hold others.",
    ]
    original_looks = cal.original.source.text
    return edited_text(original_looks, cal.data, "looks", header)


def record(cal: Calibration, *, started: str, command: list[str], files: list[str]) -> dict:
    """``calibration.json``: the summary with provenance."""
    source = cal.original.source
    return {
        "octrial_version": __version__,
        "design": {"name": cal.original.name, "path": source.path, "sha256": source.sha256},
        "calibrated_design": {"name": cal.design.name,
                              "looks": {k: (v if not isinstance(v, dict) else value_text(v))
                                        for k, v in cal.data["looks"].items()}},
        "command": command,
        "started": started,
        "finished": now(),
        "request": {k: v for k, v in vars(cal.request).items()},
        **cal.summary,
        "files": files,
        "environment": environment(),
        "caution": CAUTION,
    }


def write_calibration(folder: str | Path, cal: Calibration, *, started: str,
                      command: list[str]) -> list[Path]:
    """Write the calibration's files into ``folder`` all at once, sealed in
    calibration.json: calibration.csv, sizing.csv (when sized), ``<name>.calibrated.toml``
    and calibration.json. An earlier ``sizing.csv`` and report are dropped. Returns the
    paths written."""
    toml_name = f"{cal.original.name}.calibrated.toml"
    texts = {"calibration.csv": csv_text(cal.candidates)}
    if cal.sizing is not None:
        texts["sizing.csv"] = csv_text(cal.sizing)
    texts[toml_name] = calibrated_toml(cal, command)
    names = [*texts, "calibration.json"]
    summary = record(cal, started=started, command=command, files=names)
    summary[SEAL] = seal(texts)
    texts["calibration.json"] = json_text(summary)
    return write_folder(folder, texts, drop=lambda name: name in (
        "sizing.csv", *REPORT_FILES)).written
