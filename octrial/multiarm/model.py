"""A design with several treatment arms, as an immutable value.

Each treatment arm is judged on its own against the shared control (or against the
benchmark when the design has no control) by the same per-look rule a two-arm (one-arm)
design uses; :attr:`MultiArmDesign.pairs` holds that rule for each arm as an ordinary
validated :class:`~octrial.design.model.Design`, so a design with one treatment arm is
exactly the two-arm design. What the several arms add lives here: dropping an arm when
its posterior probability of being the best is low, carrying at most a given number of
arms forward, and the allocation of subjects.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from octrial.allocation.rule import FORMS, AllocationRule
from octrial.design.model import Arm, Design, Hypothesis, Scenarios, Simulation, Source

MIN_TREATMENTS = 2
MAX_TREATMENTS = 8
"""A multi-arm design has 2 to 8 treatment arms (one treatment arm is a two-arm design)."""

ALLOCATION_KINDS = FORMS
"""Values of ``allocation.kind``: the forms of :class:`octrial.allocation.AllocationRule`
(``'fixed'``, ``'power'``, ``'information'``)."""

ASSIGNMENTS = ("randomised", "rounded")
"""Values of ``allocation.assignment``: how a block is split over the arms."""


@dataclass(frozen=True)
class MultiArmLooks:
    """The interim looks and what several arms add to each arm's own rule.

    Attributes
    ----------
    n : tuple of int
        Planned cumulative total sample size at each look, all arms together.
    per_arm : tuple of tuple of int
        ``per_arm[k][j]`` is arm ``j``'s planned cumulative size at look ``k`` (arms in
        :attr:`MultiArmDesign.arm_names` order: control first when there is one). An
        arm that is dropped enrols nobody after it is dropped; the others keep their
        planned sizes.
    drop_if_best_below : tuple of (float or None)
        Per look: an arm still in the study whose posterior probability of being the
        best treatment arm is below this value is dropped (``None``: no such rule; never
        at the last look).
    """

    n: tuple[int, ...]
    per_arm: tuple[tuple[int, ...], ...]
    drop_if_best_below: tuple[float | None, ...]

    @property
    def count(self) -> int:
        """Number of looks K."""
        return len(self.n)


@dataclass(frozen=True)
class Selection:
    """Which arms go on after an interim look.

    Attributes
    ----------
    keep : int or None
        At most this many treatment arms continue after each interim look: those with
        the highest posterior probability of being the best (ties to the earlier arm in
        file order). ``None``: every arm that is not dropped continues.
    """

    keep: int | None = None


@dataclass(frozen=True)
class Allocation:
    """How subjects are shared out between the arms.

    Attributes
    ----------
    kind : {'fixed', 'power', 'information'}
        ``'fixed'``: each arm's share is its ``allocation`` weight (the planned per-arm
        sizes of :attr:`MultiArmLooks.per_arm`). ``'power'``: response-adaptive,
        treatment shares proportional to Pr(best) ** ``power``; ``'information'``: the
        same with the power n / (2 N) (Thall & Wathen 2007).
    power : float
        Exponent of the ``'power'`` form.
    control_share : float or None
        Share of every block given to the shared control (None: an equal share).
    minimum : float
        Least share of a block for any active treatment arm.
    burn_in : int
        Subjects enrolled before adaptation starts (the fixed weights apply until then).
    assignment : {'randomised', 'rounded'}
        How an adaptive block is split over the arms: a multinomial draw, or the block
        times the probabilities rounded by the largest-remainder method.
    """

    kind: str = "fixed"
    power: float = 1.0
    control_share: float | None = None
    minimum: float = 0.0
    burn_in: int = 0
    assignment: str = "randomised"

    @property
    def adaptive(self) -> bool:
        """Whether the shares follow the data (response-adaptive randomisation)."""
        return self.kind != "fixed"

    def rule(self, weights: tuple[float, ...] | None = None) -> AllocationRule:
        """The allocation rule of :mod:`octrial.allocation` for these settings.

        Parameters
        ----------
        weights : tuple of float, optional
            The arms' fixed weights (control first), used before the burn-in ends and
            by the ``'fixed'`` form; None: the rule's defaults.
        """
        return AllocationRule(self.kind, self.power, self.control_share, self.minimum,
                              self.burn_in, weights)


@dataclass(frozen=True)
class MultiArmDesign:
    """A validated design with 2-8 treatment arms; build one with
    :func:`octrial.multiarm.load_multiarm`.

    Attributes
    ----------
    control : Arm or None
        The shared control; ``None`` when every arm is compared with the benchmark.
    treatments : tuple of Arm
        The treatment arms, in file order.
    pairs : tuple of Design
        Per treatment arm, its own rule as an ordinary design: that arm (named
        'treatment') against the control, or alone against the benchmark, with the
        arm's planned per-look sizes.
    scenarios : Scenarios
        True values, one column per arm in :attr:`arm_names` order.
    """

    name: str
    title: str
    endpoint: object
    hypothesis: Hypothesis
    control: Arm | None
    treatments: tuple[Arm, ...]
    looks: MultiArmLooks
    selection: Selection
    allocation: Allocation
    scenarios: Scenarios
    simulation: Simulation
    pairs: tuple[Design, ...] = field(compare=False, repr=False, default=())
    source: Source = field(compare=False, repr=False, default=Source("", "", ""))

    @property
    def shared_control(self) -> bool:
        """Whether the treatment arms share a concurrent control."""
        return self.control is not None

    @property
    def arm_names(self) -> tuple[str, ...]:
        """Every arm's name: the control first (when there is one), then the treatments."""
        first = (self.control.name,) if self.control is not None else ()
        return first + tuple(a.name for a in self.treatments)

    @property
    def treatment_names(self) -> tuple[str, ...]:
        """The treatment arms' names in file order."""
        return tuple(a.name for a in self.treatments)

    def allocation_rule(self) -> AllocationRule:
        """The allocation rule the simulation and ``decide`` both apply.

        Before the burn-in (and throughout with ``kind = 'fixed'``) the shares follow the
        arms' fixed weights when they differ or the kind is ``'fixed'``; otherwise the
        rule's default ratio (``control_share`` to the control, equal treatment shares).
        """
        arms = ((self.control,) if self.control is not None else ()) + self.treatments
        weights = tuple(float(a.allocation) for a in arms)
        fixed = self.allocation.kind == "fixed"
        return self.allocation.rule(weights if fixed or len(set(weights)) > 1 else None)

    @property
    def family(self) -> Any:
        """The endpoint family object that does this design's maths."""
        from octrial.endpoints import family_for

        return family_for(self.endpoint)
