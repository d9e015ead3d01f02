"""Decision thresholds per look: constants, per-look lists, or functions of information.

A threshold key in ``[looks]`` holds one of

* a number: the same threshold at every look (futility kinds: every interim look);
* a list with one entry per look, each a number or ``"none"`` (futility kinds may also
  list the interim looks only);
* a table ``{ function = "1 - lambda * t^eta", lambda = ..., eta = ... }`` giving the
  threshold as a function of the information fraction t = n_k / N. This shape is used for
  the posterior cut-off by Zhou, Lee & Yuan (2017); ``"lambda * t^eta"`` is its mirror,
  rising with t, often used for futility.
"""

from __future__ import annotations

from collections.abc import Callable

from octrial.design.model import ThresholdSpec
from octrial.design.reader import Phrase, Table, is_number

FUNCTIONS: dict[str, Callable[[float, float, float], float]] = {
    "1 - lambda * t^eta": lambda lam, eta, t: 1.0 - lam * t**eta,
    "lambda * t^eta": lambda lam, eta, t: lam * t**eta,
}
"""Threshold functions of the information fraction t, by the name written in the file."""

PROBABILITY = "a probability in [0, 1]"


def _canonical(name: str) -> str | None:
    squashed = name.replace(" ", "")
    for known in FUNCTIONS:
        if known.replace(" ", "") == squashed:
            return known
    return None


def evaluate_spec(spec: ThresholdSpec, information: tuple[float, ...]) -> list[float | None]:
    """The threshold value at each look for a (valid) specification."""
    k = len(information)
    if spec.form == "constant":
        return [spec.values[0]] * k
    if spec.form == "list":
        return list(spec.values)
    f = FUNCTIONS[spec.form]
    lam, eta = spec.lam, spec.eta
    assert lam is not None and eta is not None  # a function form has both (read_threshold)
    return [f(lam, eta, t) for t in information]


def read_threshold(
    looks: Table, key: str, information: tuple[float, ...], interim_only: bool,
) -> tuple[ThresholdSpec | None, list[float | None]]:
    """Read one threshold key of ``[looks]``.

    Parameters
    ----------
    looks : Table
        The ``[looks]`` table.
    key : str
        'efficacy', 'futility' or 'futility_predictive'.
    information : tuple of float
        Information fraction at each look.
    interim_only : bool
        Whether the threshold applies at interim looks only (futility kinds): the value
        at the final look is then ``None``.

    Returns
    -------
    spec : ThresholdSpec or None
        How it was written (``None`` when absent or invalid).
    values : list of (float or None)
        One entry per look.
    """
    k = len(information)
    absent: list[float | None] = [None] * k
    if not looks.has(key):
        return None, absent
    raw = looks.data[key]
    spec: ThresholdSpec | None = None
    if is_number(raw):
        spec = ThresholdSpec("constant", (float(raw),))
    elif isinstance(raw, list):
        lengths = (k - 1, k) if interim_only and k > 1 else (k,)
        if len(raw) not in lengths:
            what = " or ".join(str(n) for n in lengths)
            looks.fail(key, f"a list with {what} entries (one per look)",
                       Phrase(f"{len(raw)} entries"))
            return None, absent
        entries = looks.numbers(key, check=lambda v: 0 <= v <= 1, expected=PROBABILITY,
                                allow_none=True)
        if entries is None or len(entries) != len(raw):
            return None, absent
        if any(e is None and r != "none" for e, r in zip(entries, raw, strict=True)):
            return None, absent
        if len(entries) == k - 1:
            entries = [*entries, None]
        spec = ThresholdSpec("list", tuple(entries))
    elif isinstance(raw, dict):
        table = Table(raw, looks.key(key), looks.problems)
        table.allow("function", "lambda", "eta")
        name = table.string("function", required=False, default="1 - lambda * t^eta")
        form = _canonical(name) if name is not None else None
        if name is not None and form is None:
            table.fail("function", "one of " + ", ".join(f"'{f}'" for f in FUNCTIONS), name)
        lam = table.number("lambda", check=lambda v: v >= 0, expected="a number >= 0")
        eta = table.number("eta", check=lambda v: v > 0, expected="a number > 0")
        if form is None or lam is None or eta is None:
            return None, absent
        spec = ThresholdSpec(form, lam=lam, eta=eta)
    else:
        looks.fail(key, "a number, a list with one entry per look, or a table "
                   "{ function, lambda, eta }", raw)
        return None, absent

    values = evaluate_spec(spec, information)
    if interim_only:
        values[-1] = None
    for i, v in enumerate(values):
        if v is not None and not 0.0 <= v <= 1.0:
            where = key if spec.form != "list" else f"{key}[{i + 1}]"
            looks.fail(where, PROBABILITY + f" at look {i + 1}", Phrase(f"{v:.6g}"))
            return None, absent
    return spec, values
