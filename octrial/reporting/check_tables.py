"""Tables of the workflow checks written by ``octrial check`` (checks.json).

One table per check, built from the record as written: the verdicts, the prior predictive
summaries, simulation-based calibration per quantity, shrinkage and z-score per look, the
draws posterior quantiles need, and prior-data conflict against drift with its effect on
the probability of success.
"""

from __future__ import annotations

from typing import Any

from octrial.reporting.tables import Column, Table, _row

KIND_PREFIX = "octrial-checks/"
"""checks.json files whose ``kind`` starts with this get these tables."""


def is_ours(checks: dict[str, Any]) -> bool:
    """Whether ``checks`` was written by ``octrial check``."""
    return str(checks.get("kind", "")).startswith(KIND_PREFIX)


def _table(name: str, caption: str, columns: tuple[Column, ...], rows: list[list[Any]],
           notes: tuple[str, ...] = ()) -> Table:
    return Table(name, caption, columns, tuple(_row(r, columns) for r in rows), notes)


def verdict_table(checks: dict[str, Any]) -> Table:
    columns = (Column("check", "check"), Column("item", "item"),
               Column("verdict", "verdict"), Column("detail", "numbers"))
    rows = [[v["check"], v["item"], v["verdict"], v["detail"]] for v in checks["verdicts"]]
    notes = (f"Seed {checks.get('seed')}; {checks['settings']['simulations']:,} simulated "
             "studies for calibration and sensitivity. 'flag' marks a premise to examine "
             "(heuristic thresholds, docs/methods.md); 'fail' a posterior computation that "
             "simulation-based calibration rejects.",)
    return _table("checks-verdicts", "Workflow checks: verdicts", columns, rows, notes)


def predictive_table(record: dict[str, Any]) -> Table | None:
    columns = (Column("prior", "prior"), Column("observable", "observable"),
               Column("mean", "mean", "number"), Column("sd", "sd", "number"),
               Column("q05", "5%", "number"), Column("q50", "median", "number"),
               Column("q95", "95%", "number"),
               Column("claim_side", "on the claim's side", "probability"),
               Column("outside", "outside plausible range", "probability"),
               Column("all_or_none", "all or none", "probability"))
    rows = []
    for source in ("analysis", "design"):
        entry = record.get(source) or {}
        for o in entry.get("outcomes", []):
            rows.append([f"{source} prior", o["label"], o["mean"], o["sd"], o["q05"],
                         o["q50"], o["q95"], o.get("claim_side"),
                         o.get("outside_plausible_range"), o.get("all_or_none")])
    if not rows:
        return None
    notes = [f"On the claim's side: {record.get('claim_side', '')}."]
    plausible = record.get("plausible_range")
    if plausible:
        notes.append(f"Plausible range of the observed effect: [{plausible['low']:.4g}, "
                     f"{plausible['high']:.4g}] ({plausible['why']}).")
    sizes = record.get("effective_sample_size") or {}
    if sizes:
        notes.append("Prior effective sample size: " + "; ".join(
            _prior_size(label, entry) for label, entry in sizes.items()) + ". "
            + str(record.get("effective_sample_size_note", "")))
    for source in ("analysis", "design"):
        entry = record.get(source) or {}
        if "not_available" in entry:
            notes.append(f"No {source}-prior predictive: {entry['not_available']}.")
    # time-to-event designs report every look, and name it in each observable's label
    when = "at each look" if any("look" in str(r[1]) for r in rows) else "at the final look"
    return _table("checks-prior-predictive", f"Prior predictive distributions {when}",
                  columns, rows, tuple(notes))


def _prior_size(label: str, entry: Any) -> str:
    """One arm's effective sample size in words: the simple count and, where given, the
    FDA (2010) n V1 / V2 - n."""
    if not isinstance(entry, dict) or entry.get("simple") is None:
        return f"{label}: not given"
    text = f"{label} {entry['simple']:.3g} ({entry.get('simple_formula') or 'simple'})"
    fda = entry.get("fda") or {}
    if fda.get("ess") is not None:
        text += f", n V1 / V2 - n = {fda['ess']:.3g} at n = {fda.get('n', 0):g}"
    return text


def sbc_table(record: dict[str, Any]) -> Table | None:
    if "quantities" not in record:
        return None
    columns = (Column("id", "quantity and look"), Column("statistic", "statistic"),
               Column("computation", "computation"),
               Column("chi_square_p", "chi-square p", "probability"),
               Column("ks_p", "KS p", "probability"),
               Column("p_adjusted", "Holm p", "probability"),
               Column("outside", "bins outside band", "count"),
               Column("verdict", "verdict"))
    rows = [[q["id"], q["statistic"], q["computation"], q["chi_square_p"], q["ks_p"],
             q["p_adjusted"], q["bins_outside_band"], q["verdict"]]
            for q in record["quantities"]]
    notes = (f"{record['simulations']:,} studies with true values drawn from the analysis "
             f"prior; {record['bins']} bins; {record['band_level']:.0%} pointwise binomial "
             f"band; a quantity fails when its Holm-adjusted p-value (the smaller of the two "
             f"tests, doubled) is below {record['alpha']:g} (Talts et al. 2018).",)
    return _table("checks-sbc", "Simulation-based calibration", columns, rows, notes)


def sensitivity_table(record: dict[str, Any]) -> Table | None:
    if "looks" not in record:
        return None
    columns = (Column("look", "look", "count"), Column("n", "n per arm"),
               Column("z", "share |z| > 2", "probability"),
               Column("shrink", "share shrinkage < 0.1", "probability"),
               Column("mean_shrinkage", "mean shrinkage", "number"),
               Column("mean_z", "mean z", "number"), Column("sd_z", "sd z", "number"))
    rows = [[r["look"], " + ".join(map(str, r["n"])), r["share_abs_z_above_2"],
             r["share_shrinkage_below_0.1"], r["mean_shrinkage"], r["mean_z"], r["sd_z"]]
            for r in record["looks"]]
    notes = (f"{record['studies']:,} studies with true values from the "
             f"{record['truths_from']}; quantity: {record['label']}.", *record["flags"])
    return _table("checks-sensitivity", "Posterior shrinkage and z-score per look", columns,
                  rows, notes)


def tail_table(record: dict[str, Any]) -> Table | None:
    if "draws_needed" not in record:
        return None
    columns = (Column("quantile", "quantile", "number"),
               Column("exact", "exact value", "number"),
               Column("draws", "draws for SE = 1% of sd", "count"),
               Column("relative", "relative to the median", "number"))
    rows = [[r["quantile"], r["exact"], r["draws_for_se_1pct_of_sd"],
             r["relative_to_median"]] for r in record["draws_needed"]]
    notes = (f"Posterior of {record['label']} at the {record['data']}; the asymptotic "
             "standard error sqrt(q (1 - q) / L) / f(x_q) "
             f"{'agrees' if record['formula_agrees'] else 'does not agree'} with the spread "
             "over repeated sets of draws.",)
    return _table("checks-tail-accuracy", "Posterior draws needed for accurate quantiles",
                  columns, rows, notes)


def conflict_tables(record: dict[str, Any]) -> list[Table]:
    if "arms" not in record:
        return []
    tables = []
    for arm in record["arms"]:
        rows = arm["by_true_value"]
        keys = [k for k in rows[0] if k.startswith("look")]
        columns = (Column("true_value", "true value", "truth"),
                   Column("drift", "drift", "truth"),
                   *(Column(k, k.replace("_", " ").replace("look", "look "),
                            "probability" if k.endswith("conflict") else "fraction")
                     for k in keys))
        tables.append(_table(
            f"checks-conflict-{arm['arm']}", f"Prior-data conflict: {arm['arm']} arm",
            columns, [[r["true_value"], r["drift"], *(r[k] for k in keys)] for r in rows],
            (f"Measure: {record['measure']}. Informative prior: {arm['informative_prior']}; "
             f"without borrowing: {arm['no_borrowing_prior']}. 'vague weight' is the "
             "expected posterior weight of the robust mixture's vague component.",)))
    decision = record.get("decision") or []
    if decision:
        truth = [k for k in decision[0] if k.startswith(("true_", "drift_"))]
        columns = (*(Column(k, k.replace("_", " "), "truth") for k in truth),
                   Column("is_null", "null"),
                   Column("with", "P(success), borrowing", "probability"),
                   Column("without", "P(success), no borrowing", "probability"),
                   Column("difference", "difference", "number"))
        rows = [[*(r[k] for k in truth), "yes" if r["is_null"] else "no",
                 r["prob_success_borrowing"], r["prob_success_no_borrowing"],
                 r["difference"]] for r in decision]
        tables.append(_table("checks-conflict-decision", "Borrowing and the decision",
                             columns, rows, (f"Computed {record['decision_note']}.",)))
    return tables


def workflow_tables(checks: dict[str, Any]) -> list[Table]:
    """Every table of an ``octrial check`` record, in the order of the checks."""
    tables = [verdict_table(checks)]
    for found in (predictive_table(checks.get("prior_predictive") or {}),
                  sbc_table(checks.get("sbc") or {}),
                  sensitivity_table(checks.get("sensitivity") or {}),
                  tail_table(checks.get("tail_accuracy") or {})):
        if found is not None:
            tables.append(found)
    tables += conflict_tables(checks.get("conflict") or {})
    return tables
