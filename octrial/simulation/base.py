"""The interface every simulator implements, and the totals it returns.

A :class:`Simulator` simulates studies of one design at one scenario (true parameter
values). The Monte Carlo engine owns seeding and batching: it calls
:meth:`Simulator.simulate` once per batch with a generator seeded for that scenario and
batch, and adds up the :class:`Tally` values in batch order. So a simulator only turns
random numbers into totals: how many studies stopped for efficacy and for futility at
each look, and, when the design has analysis priors, the sums of powers of the posterior
mean's error at the stopping look and how many credible intervals covered the truth.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass

import numpy as np

from octrial.simulation.calendar import calendar_size


@dataclass(frozen=True, eq=False)
class Tally:
    """Totals over simulated studies; tallies of disjoint batches add up.

    Attributes
    ----------
    replicates : int
        Studies simulated.
    efficacy, futility : ndarray of int64, shape (looks,)
        Studies that stopped for efficacy (at the last look: succeeded) and for futility
        (at the last look: failed) at each look.
    error_sums : ndarray of float, shape (3,), or None
        Sums of e, e^2 and e^4 with e = posterior mean - true value of the target
        parameter at the stopping look (``None`` without analysis priors).
    covered : int or None
        Studies whose equal-tailed credible interval at the stopping look contains the
        true value.
    clipped : int
        Studies whose statistic ran past a truncated lattice (0 for bounded statistics).
    calendar : ndarray of float, or None
        Calendar-time totals of studies that run in calendar time
        (:mod:`octrial.simulation.calendar`); ``None`` otherwise.
    """

    replicates: int
    efficacy: np.ndarray
    futility: np.ndarray
    error_sums: np.ndarray | None = None
    covered: int | None = None
    clipped: int = 0
    calendar: np.ndarray | None = None

    def __add__(self, other: Tally) -> Tally:
        def both(a, b):
            return None if a is None or b is None else a + b

        return Tally(self.replicates + other.replicates, self.efficacy + other.efficacy,
                     self.futility + other.futility, both(self.error_sums, other.error_sums),
                     both(self.covered, other.covered), self.clipped + other.clipped,
                     both(self.calendar, other.calendar))

    def probabilities(self) -> np.ndarray:
        """Every estimated probability: per-look efficacy and futility, early stops,
        success and coverage (what a target standard error applies to)."""
        r = self.replicates
        k = self.efficacy.size
        counts = [*self.efficacy, *self.futility, self.efficacy.sum(),
                  self.efficacy[: k - 1].sum(), self.futility[: k - 1].sum()]
        if self.covered is not None:
            counts.append(self.covered)
        return np.asarray(counts, dtype=float) / r

    def to_arrays(self) -> dict[str, np.ndarray]:
        """Plain arrays (for saving a finished scenario)."""
        out = {"replicates": np.array(self.replicates), "efficacy": self.efficacy,
               "futility": self.futility, "clipped": np.array(self.clipped)}
        if self.error_sums is not None:
            out["error_sums"] = self.error_sums
            out["covered"] = np.array(self.covered)
        if self.calendar is not None:
            out["calendar"] = self.calendar
        return out

    @classmethod
    def from_arrays(cls, arrays: dict[str, np.ndarray]) -> Tally:
        """The inverse of :meth:`to_arrays`."""
        sums = arrays.get("error_sums")
        return cls(int(arrays["replicates"]), np.asarray(arrays["efficacy"], dtype=np.int64),
                   np.asarray(arrays["futility"], dtype=np.int64),
                   None if sums is None else np.asarray(sums, dtype=float),
                   None if sums is None else int(arrays["covered"]), int(arrays["clipped"]),
                   None if "calendar" not in arrays else np.asarray(arrays["calendar"],
                                                                    dtype=float))


def tally_problems(arrays: dict[str, np.ndarray], looks: int, replicates: int | None = None,
                   at_most: int | None = None) -> list[str]:
    """What is wrong with ``arrays`` as a saved :class:`Tally` of a ``looks``-look design
    (a checkpoint): missing or misshapen arrays, counts that are negative, not whole or
    beyond the studies, studies that do not end exactly once, non-finite sums. The
    studies must be ``replicates`` when given, else between 1 and ``at_most``."""
    wrong: list[str] = []
    needed = ("replicates", "efficacy", "futility", "clipped")
    absent = [name for name in needed if name not in arrays]
    if absent:
        return [f"no {', '.join(absent)}"]
    shapes = {"replicates": (), "clipped": (), "efficacy": (looks,), "futility": (looks,)}
    if "error_sums" in arrays or "covered" in arrays:
        shapes |= {"error_sums": (3,), "covered": ()}
    for name, shape in shapes.items():
        value = arrays.get(name)
        if value is None or np.shape(value) != shape:
            wrong.append(f"{name} of shape {np.shape(value) if value is not None else None}"
                         f" (expected {shape})")
    if wrong:
        return wrong
    counts = {name: np.asarray(arrays[name]) for name in
              ("replicates", "efficacy", "futility", "clipped", "covered") if name in arrays}
    for name, value in counts.items():
        if value.dtype.kind not in "iu":
            wrong.append(f"{name} not whole numbers ({value.dtype})")
    if wrong:
        return wrong
    r = int(counts["replicates"])
    if replicates is not None and r != replicates:
        wrong.append(f"{r} studies (expected {replicates})")
    elif replicates is None and not 1 <= r <= (at_most if at_most is not None else r):
        wrong.append(f"{r} studies (expected 1 to {at_most})")
    for name, value in counts.items():
        if np.any(value < 0) or np.any(value > r):
            wrong.append(f"{name} outside 0 to {r}")
    ended = int(counts["efficacy"].sum() + counts["futility"].sum())
    if ended != r:
        wrong.append(f"{ended} studies ending at a look (expected {r})")
    sums = arrays.get("error_sums")
    if sums is not None and not (np.all(np.isfinite(sums)) and sums[1] >= 0 and sums[2] >= 0):
        wrong.append("error sums not finite, or negative sums of squares")
    calendar = arrays.get("calendar")
    if calendar is not None and not (np.shape(calendar) == (calendar_size(looks),)
                                     and np.all(np.isfinite(calendar))
                                     and np.all(np.asarray(calendar) >= 0)):
        wrong.append("calendar totals not a finite non-negative vector")
    return wrong


class Simulator(ABC):
    """Simulated studies of one design at one scenario.

    Attributes
    ----------
    looks : int
        Number of looks K.
    kernel : str
        Which kernel runs: ``'table'`` (decision tables on the statistic's lattice) or
        ``'general'`` (posterior and predictive probabilities evaluated per study).
    """

    looks: int
    kernel: str

    @abstractmethod
    def simulate(self, rng: np.random.Generator, replicates: int) -> Tally:
        """Simulate ``replicates`` studies with random numbers from ``rng`` only."""
