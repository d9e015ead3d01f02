"""What each endpoint provides for an interim decision.

The decision itself is the design's rule (:mod:`octrial.interim.rule`); an endpoint adds
how its observations map to sample sizes and the sufficient statistic, plain words for the
posterior probability of benefit, the posterior summaries (mean and equal-tailed credible
interval) and, where the data model can be checked subject by subject, the posterior
predictive adequacy checks. One subclass per endpoint, registered in
:data:`octrial.interim.decision.ENDPOINTS`.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from octrial.design.model import Design
from octrial.errors import Problem
from octrial.interim.observations import Syntax
from octrial.plurals import noun


@dataclass(frozen=True)
class PosteriorSummary:
    """Posterior mean and equal-tailed credible interval of one quantity (``mean`` is
    ``None`` where the posterior has no finite mean, for example a rate ratio whose control
    rate may be arbitrarily close to 0)."""

    quantity: str
    mean: float | None
    lower: float
    upper: float


@dataclass(frozen=True)
class Frame:
    """The observations placed on a design's rule.

    Attributes
    ----------
    design : Design
        The design whose rule is applied: the user's design, or a copy in other units of
        size (count data whose exposure is not a whole number of subjects) or with a
        larger count lattice (counts beyond it).
    sizes : tuple of int
        Per arm, the size observed in ``design``'s units (subjects).
    """

    design: Design
    sizes: tuple[int, ...]


class EndpointInterim(ABC):
    """Interim-look support for one endpoint type."""

    endpoint: str
    syntax: Syntax
    """How the endpoint's data are written (``ARM=x/n``)."""

    def frame(self, design: Design, observed: dict[str, Any], look: int) -> Frame:
        """The design whose rule at ``look`` (from 1) the observations are read on, and
        their sizes in its units (by default the design itself and :meth:`sizes`)."""
        return Frame(design, self.sizes(design, observed))

    size_word = "sample size"
    """What the size of an arm is called in messages."""

    def quantity(self, design: Design, n: float) -> str:
        """A size in ``design``'s units as a plain number in the user's units (``'28'``)."""
        return f"{n:g}"

    def amount(self, design: Design, n: float) -> str:
        """A size in ``design``'s units in words (``'28 subjects'``)."""
        return f"{self.quantity(design, n)} {noun(n, 'subject')}"

    def has_prior(self, design: Design) -> bool:
        """Whether the design has an analysis prior (else the rule is in counts)."""
        return all(arm.prior is not None for arm in design.arms)

    def assess_point(self, design: Design, look: int, sizes: tuple[int, ...],
                     observed: dict[str, Any], seed: int) -> Any:
        """The rule's :class:`~octrial.interim.rule.Assessment` at the observed point, for
        families without a count lattice (lattice families are read off their tables)."""
        raise NotImplementedError(f"{self.endpoint} designs are read off the lattice")

    def bound_rules(self, design: Design, look: int,
                    sizes: tuple[int, ...]) -> tuple[str, str] | None:
        """Families without a lattice: the (efficacy, futility) bounds in words at
        ``sizes``."""
        return None

    def extra_record(self, design: Design, frame: Frame, look: int) -> dict[str, Any]:
        """Further entries of the JSON record (for example exposures for count data)."""
        return {}

    def warnings(self, design: Design, observed: dict[str, Any]) -> tuple[str, ...]:
        """Warnings about the observations themselves (none by default)."""
        return ()

    @abstractmethod
    def sizes(self, design: Design, observed: dict[str, Any]) -> tuple[int, ...]:
        """Subjects observed per arm, in the design's arm order."""

    @abstractmethod
    def statistics(self, design: Design, observed: dict[str, Any]) -> tuple[int, ...]:
        """The lattice point of the observations (one count per arm)."""

    @abstractmethod
    def statement(self, design: Design) -> str:
        """The posterior probability of benefit in words, e.g. ``Pr(rate > 0.2 | data)``."""

    @abstractmethod
    def summaries(
        self, design: Design, observed: dict[str, Any], level: float,
    ) -> tuple[PosteriorSummary, ...]:
        """Posterior mean and credible interval of each arm's parameter (and the effect)."""

    # -- per-subject data ----------------------------------------------------------
    subject_outcome = ""
    """The outcome column of a per-subject file ('response', 'events', 'value')."""

    def read_subject_file(self, design: Design, path: Path) -> dict[str, dict[str, Any]]:
        """Per arm, the per-subject arrays of ``path`` (:func:`~octrial.interim.subjects.
        read_subjects` with this endpoint's outcome column)."""
        raise NotImplementedError

    def observed_from_subjects(self, design: Design, path: Path,
                               data: dict[str, dict[str, Any]]) -> dict[str, Any]:
        """The ``--data`` observation of each arm, derived from per-subject data."""
        raise NotImplementedError

    def disagreements(self, design: Design, path: Path, from_file: dict[str, Any],
                      given: dict[str, Any]) -> list[Problem]:
        """Arms whose ``--data`` (``given``) differ from the summary of the per-subject
        file ``path`` (``from_file``) beyond the rounding of a typed number, as problems
        of ``--data`` naming both values. Exact equality by default (whole numbers)."""
        return [disagreement(arm, path, from_file[arm].describe(), given[arm].describe())
                for arm in design.arm_names if from_file[arm] != given[arm]]

    def check_subjects(
        self, design: Design, path: Path, data: dict[str, dict[str, Any]], seed: int,
    ) -> tuple[tuple[Any, ...], tuple[str, ...]]:
        """Posterior predictive adequacy checks on per-subject ``data`` read from
        ``path``, and warnings; none by default."""
        return (), ()


def disagreement(arm: str, path: Path, in_file: str, in_data: str) -> Problem:
    """The problem of an arm whose ``--data`` disagree with its per-subject data."""
    return Problem(arm, f"the data of the per-subject file {path} ({in_file})", in_data,
                   "leave out --data to take the data from the file")
