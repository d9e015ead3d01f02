"""A several-arm design in words: arms, looks, the conduct at a look, allocation,
selection and the assumptions behind every number of its report.

Each arm's own rule is worded by :mod:`octrial.reporting.wording` from that arm's
two-arm (one-arm) design (:attr:`MultiArmDesign.pairs`), so its sentences are the ones
a two-arm report gives.
"""

from __future__ import annotations

from typing import Any

import octrial.reporting.wording as wording
from octrial.multiarm.model import MultiArmDesign
from octrial.reporting.formats import truth

__all__ = ["allocation_sentence", "arm_rows", "assumptions", "conduct_sentences",
           "look_rows", "selection_sentence"]


def _describe(prior: Any) -> str:
    describe = getattr(prior, "describe", None)
    return describe() if callable(describe) else str(prior)


def arm_rows(design: MultiArmDesign) -> list[dict[str, str]]:
    """Per arm (control first): its role, allocation weight and share, analysis prior."""
    arms = ([design.control] if design.control is not None else []) + list(design.treatments)
    total = sum(a.allocation for a in arms)
    return [{"arm": a.name,
             "role": "shared control" if a is design.control else "treatment",
             "allocation": f"{a.allocation:g} ({a.allocation / total:.0%})",
             "prior": _describe(a.prior) if a.prior is not None else "none"}
            for a in arms]


def look_rows(design: MultiArmDesign) -> list[dict[str, Any]]:
    """Per look: totals, planned sizes per arm, each arm's thresholds, the Pr(best) rule."""
    rules = wording.look_rules(design.pairs[0])  # every arm has the same thresholds
    rows = []
    for k, rule in enumerate(rules):
        row: dict[str, Any] = {"look": k + 1, "n": design.looks.n[k],
                               "efficacy": rule["efficacy"], "futility": rule["futility"],
                               "futility_predictive": rule["futility_predictive"]}
        for a, size in zip(design.arm_names, design.looks.per_arm[k], strict=True):
            row[f"n_{a}"] = size
        drop = design.looks.drop_if_best_below[k]
        row["drop"] = "–" if drop is None else truth(drop)
        rows.append(row)
    return rows


def allocation_sentence(design: MultiArmDesign) -> str:
    """How subjects are shared between the arms."""
    a = design.allocation
    if not a.adaptive:
        return ("Fixed: every arm in the study receives its planned share (the allocation "
                "weights above); a dropped arm's subjects are not given to the others.")
    form = (f"proportional to Pr(best)^{a.power:g}" if a.kind == "power" else
            "proportional to Pr(best)^c with c = n / (2 N) (Thall & Wathen 2007)")
    control = ("an equal share" if a.control_share is None
               else f"a fixed share {a.control_share:g}") if design.shared_control else ""
    parts = [f"Response-adaptive: after each look the treatment arms' shares of the next "
             f"block are {form}"]
    if control:
        parts.append(f"the control keeps {control}")
    if a.minimum:
        parts.append(f"every arm in the study keeps at least {a.minimum:g}")
    if a.burn_in:
        parts.append(f"the fixed weights apply to the first {a.burn_in} subjects")
    split = "by complete randomisation" if a.assignment == "randomised" else "by rounding"
    parts.append(f"blocks are split over the arms {split}")
    return "; ".join(parts) + "."


def selection_sentence(design: MultiArmDesign) -> str:
    """Dropping on Pr(best) and selection of the arms that go on."""
    drops = [d for d in design.looks.drop_if_best_below if d is not None]
    text = []
    if drops:
        text.append("At interim looks, an arm whose posterior probability of being the best "
                    "treatment arm is below the look's threshold is dropped")
    if design.selection.keep is not None:
        text.append(f"at most {design.selection.keep} treatment arms go on after each interim "
                    "look (those most likely to be the best)")
    if not text:
        return "None: every arm stays until its own rule stops it or the study ends."
    return "; ".join(text).capitalize() + "."


def conduct_sentences(design: MultiArmDesign) -> list[str]:
    """What happens at a look, and when the study succeeds."""
    versus = "the shared control" if design.shared_control else (
        f"the benchmark {truth(design.hypothesis.benchmark)}")
    return [
        f"Each treatment arm is judged by its own rule against {versus}: the rule of the "
        "two-arm design of that arm alone, with the thresholds above.",
        *wording.rule_sentences(design.pairs[0]),
        _look_sentence(design),
        "The study succeeds when at least one treatment arm succeeds.",
    ]


def _look_sentence(design: MultiArmDesign) -> str:
    """What happens at a look, in the order the engines apply it."""
    steps = ["each arm is looked up in its own rule (efficacy: the arm succeeds and leaves; "
             "futility: it leaves)"]
    if any(d is not None for d in design.looks.drop_if_best_below):
        steps.append("arms with a low probability of being the best are dropped")
    if design.selection.keep is not None:
        steps.append(f"at most {design.selection.keep} go on")
    text = ("At each look every arm still in the study adds its planned subjects; "
            + "; then ".join(steps) + ".")
    if design.shared_control:
        text += " The control enrols while any treatment arm does."
    return text + " The study ends when no treatment arm is left."


def assumptions(data: Any) -> list[str]:
    """Every assumption the several-arm report's numbers depend on."""
    design = data.design
    pair = design.pairs[0]
    items = list(pair.family.assumptions(pair)) or [
        "The data model of the endpoint stated in the design file."]
    items += [
        "The arms' outcomes are independent given the true values; the true values are "
        "those of each scenario and do not change during the study.",
        "Every subject's outcome is known at the look that counts the subject: no delayed "
        "outcomes, no drop-out, no missing data.",
        "Each arm's rule is applied exactly as stated, efficacy before futility, futility "
        "stopping binding; then the Pr(best) dropping and the selection, in that order.",
        "The analysis priors are as stated in the design summary; results for other priors "
        "may differ.",
        "The family-wise error rate and each arm's type I error are evaluated at the "
        "scenarios of the grid only; the null region between them is not searched here "
        "(octrial calibrate searches the global null line).",
    ]
    if design.allocation.adaptive:
        items.append("Adaptive allocation follows the stated rule exactly at every block; "
                     "its Pr(best) is computed numerically (see docs/adaptive-allocation.md).")
    else:
        items.append("Looks happen at exactly the planned cumulative sizes of every arm "
                     "still in the study; the allocation is met exactly at every look.")
    engines = set(data.oc["method"])
    if "monte-carlo" in engines:
        items.append("Monte Carlo results depend on the pseudo-random streams derived from "
                     f"the seed ({data.record.get('seed')}); other seeds give results "
                     "within the stated standard errors.")
    if "exact" in engines:
        items.append("Exact results are exact up to the numerical tolerances stated in the "
                     "precision section.")
    return items
