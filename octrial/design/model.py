"""The design as an immutable value.

Everything here is a frozen dataclass of tuples and numbers: cheap to hash, to cache and
to send to worker processes. Validation happens once, in :mod:`octrial.design.load`; code
that receives a :class:`Design` trusts it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from octrial.conduct.model import Conduct

METHODS = ("auto", "exact", "monte-carlo")
"""Values of ``simulation.method``."""
EVENT_DRIVEN_ENGINES = ("subjects", "events")
"""Values of ``simulation.event_driven_engine``: event-driven studies simulated subject
by subject, or event by event (one hazard period; :mod:`octrial.simulation.event_jump`)."""

TREATMENT = "treatment"
CONTROL = "control"


@dataclass(frozen=True)
class Source:
    """Where a design came from: path, SHA-256 of the bytes, and the text itself."""

    path: str
    sha256: str
    text: str


@dataclass(frozen=True)
class Hypothesis:
    """What counts as benefit.

    Attributes
    ----------
    better : {'higher', 'lower'}
        Which direction of the endpoint's parameter is good for the treatment.
    benchmark : float or None
        One arm: the value the treatment must beat.
    comparison : str or None
        Two arms: the effect measure ('difference', 'ratio' or 'odds-ratio').
    margin : float
        Two arms: superiority margin (>= 0) or non-inferiority margin (> 0); on a ratio
        scale a relative margin (see :attr:`threshold`).
    kind : {'superiority', 'non-inferiority'}
        Two arms: which claim the study makes.
    prior, design_prior : object or None
        Two arms, families whose prior is on the effect itself (normal endpoint with known
        sd): the analysis and design priors of the effect. ``None`` otherwise.
    relevant_effect : float or None
        The clinically relevant effect beyond the null boundary: Bayesian power under the
        design prior is taken over effects at least this large (``None``: the whole
        alternative).
    """

    better: str
    benchmark: float | None = None
    comparison: str | None = None
    margin: float = 0.0
    kind: str = "superiority"
    prior: Any = None
    design_prior: Any = None
    relevant_effect: float | None = None

    @property
    def sign(self) -> int:
        """+1 when higher is better, -1 when lower is better."""
        return 1 if self.better == "higher" else -1

    @property
    def shift(self) -> float:
        """The effect, in the better direction, that a success must exceed.

        Superiority by margin ``d`` needs effect > d; non-inferiority with margin ``d``
        needs effect > -d.
        """
        return self.margin if self.kind == "superiority" else -self.margin

    @property
    def null_value(self) -> float:
        """One arm: the benchmark (the loader requires one for one-arm designs)."""
        if self.benchmark is None:
            raise ValueError("a two-arm hypothesis has no benchmark")
        return self.benchmark

    @property
    def measure(self) -> str:
        """Two arms: the comparison (the loader sets the family's default)."""
        if self.comparison is None:
            raise ValueError("a one-arm hypothesis has no comparison")
        return self.comparison

    @property
    def neutral(self) -> float:
        """The no-effect value of the comparison: 0 for a difference, 1 for a ratio."""
        return 0.0 if self.comparison in (None, "difference") else 1.0

    @property
    def threshold(self) -> float:
        """Two arms: the value of the effect measure the claim must pass,
        ``neutral + sign x shift``.

        Success means measure > threshold when higher is better and measure < threshold
        when lower is better. On a ratio: superiority by margin d needs a ratio above
        1 + d (higher better) or below 1 - d (lower better); non-inferiority with margin
        d needs a ratio above 1 - d or below 1 + d.
        """
        return self.neutral + self.sign * self.shift


@dataclass(frozen=True)
class Arm:
    """One arm.

    Attributes
    ----------
    name : str
        'treatment' or 'control'.
    prior : object or None
        The analysis prior (the family's prior value); ``None`` only for count rules.
    allocation : float
        Allocation weight.
    design_prior : object or None
        The distribution that generates true values (assurance, prior predictive checks);
        written like an analysis prior. ``None`` when the design file gives none.
    """

    name: str
    prior: Any
    allocation: float = 1.0
    design_prior: Any = None


@dataclass(frozen=True)
class ThresholdSpec:
    """How a threshold was written: a constant, a per-look list, or a function of t.

    ``form`` is 'constant', 'list' or one of :data:`octrial.design.thresholds.FUNCTIONS`;
    ``values`` holds the constant or the list; ``lam`` and ``eta`` the function's
    parameters.
    """

    form: str
    values: tuple[float | None, ...] = ()
    lam: float | None = None
    eta: float | None = None


@dataclass(frozen=True)
class Looks:
    """The interim looks and the decision rule at each.

    Attributes
    ----------
    n : tuple of int
        Cumulative total sample size at each look; the last is the maximum N.
    per_arm : tuple of tuple of int
        ``per_arm[k][j]`` is arm ``j``'s cumulative sample size at look ``k``.
    efficacy, futility, futility_predictive : tuple of (float or None)
        Posterior (or predictive) probability thresholds per look; ``None`` where the look
        has none. The last look's efficacy value is the final success threshold.
    efficacy_count, futility_count : tuple of (int or None), or None
        A rule stated in counts instead (one arm): success if responses reach
        ``efficacy_count[k]``, futility if they are at or below ``futility_count[k]``
        (reversed when lower is better).
    specs : tuple of (str, ThresholdSpec)
        How each threshold was written, for reports and for writing the design back.
    trigger : str
        What each look waits for: ``"complete"`` (``n`` subjects with an observed
        outcome, the meaning without ``[conduct]``), ``"enrolled"`` (subjects enrolled),
        ``"events"`` (time-to-event endpoints) or ``"time"`` (calendar time).
    at : tuple of float
        The trigger's target at each look (enrolled subjects, events or times); empty for
        ``"complete"``, where ``n`` is the target.
    """

    n: tuple[int, ...]
    per_arm: tuple[tuple[int, ...], ...]
    efficacy: tuple[float | None, ...]
    futility: tuple[float | None, ...]
    futility_predictive: tuple[float | None, ...]
    efficacy_count: tuple[int | None, ...] | None = None
    futility_count: tuple[int | None, ...] | None = None
    specs: tuple[tuple[str, ThresholdSpec], ...] = ()
    trigger: str = "complete"
    at: tuple[float, ...] = ()

    @property
    def count(self) -> int:
        """Number of looks K."""
        return len(self.n)

    @property
    def uses_counts(self) -> bool:
        """Whether the rule is stated directly in counts."""
        return self.efficacy_count is not None

    @property
    def information(self) -> tuple[float, ...]:
        """Information fraction t_k = n_k / N at each look."""
        return tuple(n / self.n[-1] for n in self.n)


@dataclass(frozen=True)
class Scenarios:
    """The true parameter values to evaluate: one row per scenario, one column per arm."""

    arms: tuple[str, ...]
    values: tuple[tuple[float, ...], ...]
    dropped: int = 0
    """Combinations left out because they fell outside the parameter's range."""

    def __len__(self) -> int:
        return len(self.values)


@dataclass(frozen=True)
class Simulation:
    """Which engine to use, and the Monte Carlo settings when it simulates."""

    method: str = "auto"
    replicates: int = 10_000
    seed: int | None = None
    interval_level: float = 0.95
    """Level of the equal-tailed credible interval whose coverage is reported."""
    grid_points: int = 4001
    """Points of the parameter grid for posteriors with no closed form (grid engine)."""
    event_driven_engine: str = "subjects"
    """How studies in calendar time are simulated (:data:`EVENT_DRIVEN_ENGINES`)."""


@dataclass(frozen=True)
class Design:
    """A validated study design; build one with :func:`octrial.load_design`."""

    name: str
    title: str
    endpoint: Any
    hypothesis: Hypothesis
    arms: tuple[Arm, ...]
    looks: Looks
    scenarios: Scenarios
    simulation: Simulation
    source: Source = field(compare=False, repr=False, default=Source("", "", ""))
    conduct: Conduct | None = None
    """How the study runs in calendar time (``[conduct]``); ``None``: outcomes known at
    enrolment, nobody lost."""

    @property
    def family(self) -> Any:
        """The endpoint family object that does this design's maths."""
        from octrial.endpoints import family_for

        return family_for(self.endpoint)

    @property
    def arm_names(self) -> tuple[str, ...]:
        """Arm names in file order (treatment first)."""
        return tuple(a.name for a in self.arms)

    @property
    def two_arm(self) -> bool:
        """Whether treatment is compared with a concurrent control."""
        return len(self.arms) == 2

    def arm(self, name: str) -> Arm:
        """The arm called ``name``."""
        for a in self.arms:
            if a.name == name:
                return a
        raise KeyError(name)
