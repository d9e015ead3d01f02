"""What the workflow checks need from an endpoint family, for one design.

Every check treats the design's prior and data model as a generator of simulated studies
with a known truth. A :class:`CheckModel` supplies, for one design:

* the model's parameters (one per arm, or the effect itself when the analysis prior is on
  the effect) and the quantities the checks judge (:class:`Quantity`): the target the
  decision is about at every look, and on two arms each arm's own parameter at the final
  look;
* draws of true parameters from the analysis prior or the design prior;
* simulated study data at every look given true values (the data model);
* posteriors at a look for many simulated studies at once, computed by the engines' own
  functions (conjugate updates, mixture weights, the two-arm quadrature, the grid
  engine), as a :class:`Posteriors` value: CDF at given values, mean, variance, draws;
* prior predictive distributions of the outcome at the final look.

A family gives its model through
:meth:`~octrial.endpoints.base.Family.check_model` (see DEVELOPERS.md, "Adding the
workflow checks for an endpoint").
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass
from typing import Any

import numpy as np

from octrial.checks.predictive import Predictive
from octrial.design.model import Design
from octrial.errors import single

ANALYSIS = "analysis"
DESIGN = "design"
SOURCES = (ANALYSIS, DESIGN)


@dataclass(frozen=True)
class Quantity:
    """A posterior quantity the checks judge.

    Attributes
    ----------
    name : str
        Short name used in files, for example ``'rate_treatment'`` or ``'difference'``.
    label : str
        Words for tables and axes, for example ``'rate_T − rate_C'``.
    target : bool
        Whether the decision rule is about it (then it is checked at every look).
    computation : str
        How the engines compute its posterior, in words (for the SBC table).
    closed_form : bool
        Whether that computation is a closed form (SBC then checks the code path only).
    """

    name: str
    label: str
    target: bool
    computation: str
    closed_form: bool


class Posteriors(ABC):
    """Posteriors of many simulated studies (rows) at one look."""

    @abstractmethod
    def __len__(self) -> int: ...

    @abstractmethod
    def cdf(self, quantity: Quantity, values: np.ndarray) -> np.ndarray:
        """Pr(quantity <= values[i] | study i's data), one value per row."""

    @abstractmethod
    def mean(self, quantity: Quantity) -> np.ndarray:
        """Posterior mean per row."""

    @abstractmethod
    def variance(self, quantity: Quantity) -> np.ndarray:
        """Posterior variance per row (``inf`` for an improper prior with no data)."""

    @abstractmethod
    def draw(self, quantity: Quantity, rng: np.random.Generator, draws: int) -> np.ndarray:
        """Independent posterior draws, shape (rows, draws)."""


class CheckModel(ABC):
    """The checks' view of one design (see module docstring).

    Parameters
    ----------
    design : Design
        The design whose analysis priors compute the posteriors.
    """

    def __init__(self, design: Design) -> None:
        self.design = design

    # -- parameters and quantities ---------------------------------------------------
    @property
    @abstractmethod
    def parameters(self) -> tuple[str, ...]:
        """Names of the true parameters, one column each in :meth:`draw_truths`."""

    @abstractmethod
    def quantities(self) -> tuple[Quantity, ...]:
        """The target first, then any per-arm quantities."""

    @abstractmethod
    def true_value(self, quantity: Quantity, truths: np.ndarray) -> np.ndarray:
        """The quantity's true value for each row of ``truths``."""

    def target(self) -> Quantity:
        """The quantity the decision is about."""
        return next(q for q in self.quantities() if q.target)

    # -- priors ----------------------------------------------------------------------
    @abstractmethod
    def cannot_draw(self, source: str) -> str | None:
        """Why truths cannot be drawn from the ``source`` prior ('analysis' or 'design'),
        or ``None`` when they can."""

    def cannot_compute(self) -> str | None:
        """Why no posterior can be computed (no analysis prior), or ``None``. An improper
        analysis prior gives posteriors but no truths (:meth:`cannot_draw`)."""
        return self.cannot_draw(ANALYSIS)

    @abstractmethod
    def draw_truths(self, rng: np.random.Generator, size: int, source: str) -> np.ndarray:
        """True parameters drawn from the ``source`` prior: shape (size, parameters)."""

    @abstractmethod
    def prior(self) -> Posteriors:
        """The analysis prior as a one-row :class:`Posteriors` (no data)."""

    # -- data and posteriors ---------------------------------------------------------
    @abstractmethod
    def simulate(self, rng: np.random.Generator, truths: np.ndarray) -> Any:
        """Simulated data at every look for studies with true values ``truths``."""

    @abstractmethod
    def posterior(self, data: Any, look: int) -> Posteriors:
        """Posteriors at look ``look`` (0-based) of every simulated study in ``data``."""

    @abstractmethod
    def typical_data(self) -> Any:
        """One study's data at the final look, at the analysis prior's mean (for the
        tail-accuracy check), in the form :meth:`posterior` accepts."""

    # -- prior predictive ------------------------------------------------------------
    @abstractmethod
    def predictive(self, source: str) -> list[Predictive]:
        """Prior predictive distributions at the final look under the ``source`` prior:
        each arm's outcome (or the observed effect), and on two arms the observed effect
        last."""

    def predictive_from(self, source: str, settings: Any) -> list[Predictive]:
        """The prior predictive distributions of :meth:`predictive`; a family whose
        distributions are simulated overrides this to draw from the check's own random
        stream (``settings``: the settled :class:`~octrial.checks.settings.CheckSettings`)."""
        return self.predictive(source)

    def plausible_effect(self) -> tuple[float, float, str] | None:
        """The default range of plausible observed effects (low, high, why), or ``None``."""
        return None


def benchmark(design: Design) -> float:
    """The null boundary of a one-arm design (the design loader requires one)."""
    value = design.hypothesis.benchmark
    if value is None:
        raise ValueError("a one-arm design without a benchmark")
    return value


def model_for(design: Design) -> CheckModel:
    """The check model of ``design``'s endpoint family
    (:meth:`~octrial.endpoints.base.Family.check_model`)."""
    model = design.family.check_model(design)
    if model is None:
        from octrial.endpoints import FAMILIES, Family

        offered = [name for name, family in FAMILIES.items()
                   if type(family).check_model is not Family.check_model]
        raise single(design.source.path or design.name, "endpoint.type",
                     "an endpoint with workflow checks (" + ", ".join(offered) + ")",
                     design.endpoint.type)
    return model
