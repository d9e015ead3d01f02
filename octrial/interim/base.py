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
from octrial.errors import InputError, Problem


@dataclass(frozen=True)
class PosteriorSummary:
    """Posterior mean and equal-tailed credible interval of one quantity."""

    quantity: str
    mean: float
    lower: float
    upper: float


class EndpointInterim(ABC):
    """Interim-look support for one endpoint type."""

    endpoint: str

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

    def check_subjects(
        self, design: Design, path: Path, observed: dict[str, Any], seed: int,
    ) -> tuple[Any, ...]:
        """Posterior predictive adequacy checks on per-subject data (none by default)."""
        raise InputError(str(path), [Problem(
            "", "per-subject data for a count or normal endpoint (the adequacy checks test "
            "those data models)", f"a {self.endpoint} design",
            "binary outcomes are fully described by x/n; leave out --subjects")])
