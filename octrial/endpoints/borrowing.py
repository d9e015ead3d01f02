"""Historical borrowing: the ``historical`` and ``borrowing`` keys of a prior table.

A prior table may carry a historical data set and a borrowing method:

```toml
[arms.control.prior]
distribution = "beta"                       # the initial (vague) prior
a = 1
b = 1
historical = { responses = 30, n = 100 }    # count: { events, exposure }; normal: { mean, sd, n }
borrowing = { method = "power", a0 = 0.5 }  # or { method = "robust-mixture", vague_weight = 0.2 }
```

* **Power prior** (Ibrahim & Chen 2000): the initial prior times the historical likelihood
  raised to a0 in [0, 1]; a0 = 0 ignores the historical data, a0 = 1 pools them.
* **Robust mixture** (Schmidli et al. 2014): (1 - w) x [initial prior updated with the
  historical data, optionally discounted by a0] + w x [initial prior], with w the stated
  weight of the vague component. The posterior weight moves to the vague component when
  the current data conflict with the historical.

Both stay conjugate for beta, gamma and normal priors, so the families turn them into an
ordinary mixture prior at read time; :class:`Borrowing` keeps what was written for
reports, the effective sample size and the drift columns of ``oc.csv``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from octrial.design.reader import PRIOR_SIZE, Phrase, Table

METHODS = ("power", "robust-mixture")


@dataclass(frozen=True)
class Borrowing:
    """How a prior borrows from historical data.

    Attributes
    ----------
    method : {'power', 'robust-mixture'}
    a0 : float
        Weight of the historical likelihood (power prior; the informative component of a
        robust mixture, 1 unless written).
    vague_weight : float or None
        Robust mixture: prior weight of the vague component.
    historical : tuple of (str, float)
        The historical data as written, for example (('responses', 30), ('n', 100)).
    estimate : float
        The historical estimate of the parameter (rate or mean); scenario drift is
        measured from it.
    size : float
        How much historical data there is: subjects (binary, normal) or total exposure
        (count).
    """

    method: str
    a0: float
    vague_weight: float | None
    historical: tuple[tuple[str, float], ...]
    estimate: float
    size: float

    def data(self) -> dict[str, float]:
        """The historical data as a dictionary."""
        return dict(self.historical)

    def describe(self) -> str:
        """One line for reports."""
        data = ", ".join(f"{k} = {v:g}" for k, v in self.historical)
        if self.method == "power":
            return f"power prior, a0 = {self.a0:g}, historical {data}"
        discount = f", a0 = {self.a0:g}" if self.a0 != 1 else ""
        return (f"robust mixture, vague weight {self.vague_weight:g}{discount}, "
                f"historical {data}")


def read_borrowing(table: Table, fields: dict[str, str]) -> dict | None:
    """Read ``historical`` and ``borrowing`` from a prior table.

    Parameters
    ----------
    table : Table
        The prior table.
    fields : dict
        Historical keys and what each must be: 'count' (whole number >= 0),
        'size' (whole number >= 1), 'positive' (> 0) or 'number'.

    Returns
    -------
    dict or None
        ``{'method', 'a0', 'vague_weight', 'historical': {key: value}}``, or ``None`` when
        the table has neither key or a problem was recorded.
    """
    has_data, has_method = table.has("historical"), table.has("borrowing")
    if not has_data and not has_method:
        return None
    names = " and ".join(fields)
    if not has_data:
        table.fail("historical", f"historical data ({{ {', '.join(fields)} }}) for the "
                   "borrowing prior", Phrase("nothing (the key is missing)"))
    if not has_method:
        table.fail("borrowing", "a borrowing method for the historical data: "
                   "{ method = 'power', a0 = ... } or { method = 'robust-mixture', "
                   "vague_weight = ... }", Phrase("nothing (the key is missing)"))
    if not (has_data and has_method):
        return None
    data = table.table("historical")
    method_table = table.table("borrowing")
    if data is None or method_table is None:
        return None
    data.allow(*fields)
    values: dict[str, float] = {}
    for key, kind in fields.items():
        value = _field(data, key, kind, names)
        if value is not None:
            values[key] = value
    method_table.allow("method", "a0", "vague_weight")
    method = method_table.string("method", METHODS)
    a0 = method_table.number("a0", required=method == "power",
                             default=1.0, check=lambda v: 0 <= v <= 1,
                             expected="a weight a0 in [0, 1]")
    vague = None
    if method == "robust-mixture":
        vague = method_table.number("vague_weight", check=lambda v: 0 <= v <= 1,
                                    expected="a weight in [0, 1] for the vague component")
    elif method == "power" and method_table.has("vague_weight"):
        method_table.fail("vague_weight", "no vague weight for a power prior (it belongs "
                          "to method = 'robust-mixture')", method_table.data["vague_weight"])
    if (method is None or a0 is None or len(values) != len(fields)
            or (method == "robust-mixture" and vague is None)):
        return None
    return {"method": method, "a0": a0, "vague_weight": vague, "historical": values}


def _field(data: Table, key: str, kind: str, names: str) -> float | None:
    if kind == "count":
        return data.number(key, integer=True, check=lambda v: 0 <= v <= PRIOR_SIZE,
                           expected=f"a whole number from 0 to {PRIOR_SIZE:.0f} (historical "
                           f"data need {names})")
    if kind == "size":
        return data.number(key, integer=True, check=lambda v: 1 <= v <= PRIOR_SIZE,
                           expected=f"a whole number from 1 to {PRIOR_SIZE:.0f} (historical "
                           f"data need {names})")
    if kind == "positive":
        return data.number(key, check=lambda v: v > 0,
                           expected=f"a number > 0 (historical data need {names})")
    return data.number(key, expected=f"a number (historical data need {names})")


def make_borrowing(spec: dict, estimate: float, size: float) -> Borrowing:
    """The :class:`Borrowing` record for a spec from :func:`read_borrowing`."""
    return Borrowing(spec["method"], spec["a0"], spec["vague_weight"],
                     tuple(spec["historical"].items()), estimate, size)


def borrow_mixture(
    prior: Any, update: Callable[..., Any], size: float, x: float, spec: dict,
    estimate: float,
) -> Any:
    """Borrowing for a conjugate mixture prior with fields ``weights, a, b, borrowing``
    (beta or gamma mixtures).

    The historical data (statistic ``x`` in ``size`` subjects or exposure) enter with
    weight a0 as fractional data: the power prior is the posterior after (a0 x, a0 size),
    a mixture of the same family. A robust mixture puts weight 1 - w on that and w on the
    initial prior.
    """
    a0 = spec["a0"]
    post = update(prior, a0 * size, np.array([a0 * x]))
    record = make_borrowing(spec, estimate, size)
    weights, a, b = tuple(post.weights[0]), tuple(post.a[0]), tuple(post.b[0])
    if spec["method"] == "robust-mixture":
        w_vague = spec["vague_weight"]
        weights = tuple((1 - w_vague) * w for w in weights) + tuple(
            w_vague * w for w in prior.weights)
        a, b = a + tuple(prior.a), b + tuple(prior.b)
        keep = [i for i, w in enumerate(weights) if w > 0]
        weights, a, b = (tuple(v[i] for i in keep) for v in (weights, a, b))
    return type(prior)(tuple(map(float, weights)), tuple(map(float, a)), tuple(map(float, b)),
                       borrowing=record)
