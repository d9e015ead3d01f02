"""What every endpoint family provides.

An endpoint family is the maths of one likelihood with its priors: how its design-file
sections read, what a true parameter value may be, the posterior probability of benefit,
the predictive distribution of future data, and how a study's data are drawn. Engines and
rules only talk to this interface, so a new endpoint is one new module registered in
:mod:`octrial.endpoints`.

Families whose sufficient statistic per arm is a count (binary, count) also implement
:class:`LatticeFamily`; the exact engine then evaluates any rule on that lattice.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from typing import Any, ClassVar

import numpy as np

from octrial.design.model import Hypothesis
from octrial.design.reader import Table

NULL_TOLERANCE = 1e-9
"""Scenarios within this distance of the null boundary count as null (values written as
decimal ranges rarely land exactly on the boundary in binary floating point)."""


class Family(ABC):
    """The maths and design-file vocabulary of one endpoint.

    Attributes
    ----------
    name : str
        The ``endpoint.type`` value, for example ``'binary'``.
    parameter : str
        Plain name of the per-arm parameter, for example ``'rate'``.
    comparisons : tuple of str
        Allowed ``hypothesis.comparison`` values for two arms (the first is the default).
    default_better : str or None
        Default for ``endpoint.better``; ``None`` makes the key required.
    parameter_range : tuple of float
        The open interval a true parameter lies in (a rate: (0, 1)); calibration spreads its
        search of the null region over it.
    """

    name: ClassVar[str]
    parameter: ClassVar[str]
    comparisons: ClassVar[tuple[str, ...]]
    default_better: ClassVar[str | None] = None
    parameter_range: ClassVar[tuple[float, float]] = (-math.inf, math.inf)

    # -- design-file reading ---------------------------------------------------------
    @abstractmethod
    def read_endpoint(self, table: Table) -> Any:
        """Read the ``[endpoint]`` table (its ``type`` already read) into a frozen value."""

    @abstractmethod
    def read_prior(self, table: Table) -> Any:
        """Read an analysis prior table into a frozen value, recording problems."""

    @abstractmethod
    def true_value_problem(self, value: float) -> str | None:
        """``None`` when ``value`` is a possible true parameter, else what is expected."""

    # -- hypotheses ------------------------------------------------------------------
    def effect(self, hypothesis: Hypothesis, truth: tuple[float, ...]) -> float:
        """The effect that the hypothesis is about, in the better direction.

        One arm: sign x (theta - benchmark). Two arms on a difference:
        sign x (theta_T - theta_C) - shift. Positive means benefit beyond the null.
        """
        if len(truth) == 1:
            return hypothesis.sign * (truth[0] - hypothesis.benchmark)
        return hypothesis.sign * (truth[0] - truth[1]) - hypothesis.shift

    def target_value(self, hypothesis: Hypothesis, truth: tuple[float, ...]) -> float:
        """The true value of the target parameter that simulation summaries are about.

        One arm: the arm's parameter. Two arms on a difference: theta_T - theta_C.
        Families comparing on another scale (a ratio) override this.
        """
        if len(truth) == 1:
            return truth[0]
        return truth[0] - truth[1]

    def is_null(self, hypothesis: Hypothesis, truth: tuple[float, ...]) -> bool:
        """Whether a scenario lies in the null region (boundary included)."""
        return self.effect(hypothesis, truth) <= NULL_TOLERANCE

    @abstractmethod
    def prior_probability_of_claim(self, design: Any) -> float:
        """Pr(benefit beyond the benchmark or margin) under the analysis priors alone."""

    def prior_components(self, prior: Any) -> list[tuple[float, Any]] | None:
        """The prior as a mixture: (weight, frozen scipy distribution) pairs, or ``None``.

        Optional. Assurance integrates over a design prior through its components'
        quantile functions when no exact method applies.
        """
        return None


class LatticeFamily(Family):
    """A family whose per-arm sufficient statistic is a count 0, 1, 2, ...

    The exact engine needs, for each arm, the distribution of the statistic's increment
    between looks, the posterior probability of benefit at every lattice point, and the
    predictive distribution of the statistic's remaining increment.

    Attributes
    ----------
    statistic : str
        Plain name of the per-arm count, for example ``'responses'``.
    truncates : bool
        Whether the lattice is a truncation of an unbounded statistic (counts); the exact
        engine then reports the probability mass it neglects.
    """

    statistic: ClassVar[str]
    truncates: ClassVar[bool] = False

    @abstractmethod
    def lattice_size(self, design: Any, arm: int, n: int) -> int:
        """Number of lattice points (0 .. size-1) kept for arm ``arm`` after ``n`` subjects."""

    @abstractmethod
    def increment_pmf(self, design: Any, truth: float, n: int, size: int) -> np.ndarray:
        """Pr(statistic of ``n`` new subjects = 0 .. size-1) at the true value ``truth``."""

    @abstractmethod
    def posterior(self, design: Any, arm: int, n: int, stats: np.ndarray) -> Any:
        """Posterior for arm ``arm`` after ``n`` subjects, vectorised over ``stats``."""

    @abstractmethod
    def benefit(self, design: Any, posteriors: tuple[Any, ...]) -> tuple[np.ndarray, float]:
        """Posterior probability of benefit on the lattice and its numerical error bound.

        One arm: a vector over the arm's statistic. Two arms: a matrix indexed
        ``[treatment statistic, control statistic]``.
        """

    @abstractmethod
    def predictive_pmf(self, design: Any, posterior: Any, m: int, size: int) -> np.ndarray:
        """Predictive pmf of the statistic of ``m`` future subjects, one row per lattice
        point of ``posterior`` and ``size`` columns."""

    # -- simulation summaries (optional) --------------------------------------------
    def target_mean(self, design: Any, posteriors: tuple[Any, ...]) -> np.ndarray | None:
        """Posterior mean of the target parameter (see :meth:`Family.target_value`) on the
        lattice, shaped like :meth:`benefit`; ``None`` when the family does not provide
        bias, RMSE and coverage summaries."""
        return None

    def target_cdf(
        self, design: Any, posteriors: tuple[Any, ...], value: float,
    ) -> np.ndarray | None:
        """Posterior Pr(target <= ``value``) on the lattice, shaped like :meth:`benefit`."""
        return None
