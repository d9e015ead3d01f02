"""How a study runs in calendar time: the ``[conduct]`` table of a design.

Every time is in the design's time unit (``time_unit``, a word used in labels only; months
by default). A design without ``[conduct]`` is analysed as today: every enrolled subject's
outcome is known at once, nobody is lost and looks are counted in subjects with an outcome.

These are frozen dataclasses of numbers and tuples, like the rest of
:mod:`octrial.design.model`, so a design stays hashable.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

ARRIVALS = ("poisson", "even", "fixed")
"""How subjects arrive: a Poisson process with the stated (piecewise-constant) rates, evenly
at those rates (deterministic), or at a fixed list of times (deterministic)."""


@dataclass(frozen=True)
class Accrual:
    """Enrolment over calendar time, all arms together.

    Attributes
    ----------
    rates : tuple of float
        Subjects enrolled per time unit in each period (``arrivals`` poisson or even).
    starts : tuple of float
        When each period starts: ``starts[0] == 0``, strictly increasing, one per rate;
        the last rate holds until enrolment ends (a ramp-up is a few short periods).
    times : tuple of float
        ``arrivals == "fixed"``: the enrolment times, non-decreasing, at least as many as
        the maximum enrolment.
    arrivals : str
        One of :data:`ARRIVALS`.
    """

    rates: tuple[float, ...] = ()
    starts: tuple[float, ...] = (0.0,)
    times: tuple[float, ...] = ()
    arrivals: str = "poisson"

    @property
    def deterministic(self) -> bool:
        """Whether every enrolment time is fixed in advance (even or fixed arrivals)."""
        return self.arrivals != "poisson"

    def expected_count(self, t: float) -> float:
        """Expected subjects enrolled by time ``t`` (the cumulative rate; for fixed
        times, the number of times at or before ``t``)."""
        if self.arrivals == "fixed":
            return float(sum(1 for s in self.times if s <= t))
        total = 0.0
        ends = (*self.starts[1:], math.inf)
        for rate, start, end in zip(self.rates, self.starts, ends, strict=True):
            if t <= start:
                break
            total += rate * (min(t, end) - start)
        return total

    def time_of(self, i: int) -> float:
        """When the ``i``-th subject (1-based) is enrolled under even or fixed arrivals:
        the time the cumulative rate reaches ``i``, or ``times[i - 1]``; for Poisson
        arrivals, the time the expected count reaches ``i``."""
        if self.arrivals == "fixed":
            return self.times[i - 1]
        ends = (*self.starts[1:], math.inf)
        done = 0.0
        for rate, start, end in zip(self.rates, self.starts, ends, strict=True):
            here = rate * (end - start)
            if done + here >= i:
                return start + (i - done) / rate
            done += here
        raise ValueError(f"subject {i} is never enrolled")  # the last period is unbounded


@dataclass(frozen=True)
class Conduct:
    """How the study runs in calendar time.

    Attributes
    ----------
    accrual : Accrual
        Enrolment over time.
    max_enrolment : int
        Subjects enrolled at most (all arms together).
    lag : float
        Time from enrolment to the outcome (binary, count and normal endpoints; 0 means
        the outcome is known at enrolment, as without ``[conduct]``).
    dropout_hazard : float
        Exponential hazard of loss to follow-up per time unit (0: nobody is lost). For
        binary, count and normal endpoints a subject lost before the lag has no outcome;
        for time-to-event endpoints loss censors the subject's time.
    analyse_pipeline : bool
        Whether, after a stop at an interim look, the final analysis waits for the
        outcomes of subjects already enrolled (the pipeline) and includes them.
    time_unit : str
        The unit of every time (labels only).
    """

    accrual: Accrual
    max_enrolment: int
    lag: float = 0.0
    dropout_hazard: float = 0.0
    analyse_pipeline: bool = False
    time_unit: str = "month"

    @property
    def lost_before_outcome(self) -> float:
        """Probability that a subject is lost before the outcome (binary, count, normal):
        ``1 - exp(-hazard x lag)``."""
        return -math.expm1(-self.dropout_hazard * self.lag)

    @property
    def deterministic(self) -> bool:
        """Whether each look's counts are fixed in advance: deterministic arrivals and
        nobody lost."""
        return self.accrual.deterministic and self.dropout_hazard == 0.0
