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
from collections.abc import Callable
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np

from octrial.design.model import Hypothesis
from octrial.design.reader import Problems, Table

if TYPE_CHECKING:
    from octrial.checks.model import CheckModel
    from octrial.endpoints.schema import PriorSchema
    from octrial.interim.base import EndpointInterim

NULL_TOLERANCE = 1e-9
"""Scenarios within this distance of the null boundary count as null (values written as
decimal ranges rarely land exactly on the boundary in binary floating point)."""


def _odds_ratio(t: float, c: float) -> float:
    return t * (1.0 - c) / (c * (1.0 - t))


def _from_odds_ratio(c: float, ratio: float) -> float:
    odds = ratio * c / (1.0 - c)
    return odds / (1.0 + odds)


Measure = Callable[[Any, Any], Any]
"""A function of (treatment, control), or (control, value), on floats or arrays alike."""

COMPARISONS: dict[str, tuple[Measure, float]] = {
    "difference": (lambda t, c: t - c, 0.0),
    "ratio": (lambda t, c: t / c, 1.0),
    "odds-ratio": (_odds_ratio, 1.0),
}
"""Two-arm effect measures: the measure of (treatment, control) and its no-effect value."""

SCENARIO_AXES: dict[str, tuple[str, Measure]] = {
    "difference": ("effect", lambda c, e: c + e),
    "ratio": ("ratio", lambda c, r: c * r),
    "odds-ratio": ("odds_ratio", _from_odds_ratio),
}
"""For each comparison, the ``[scenarios]`` key that shifts the control value and how the
treatment value follows from (control, value)."""


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
    difference_margin_below_one: ClassVar[bool] = True
    """Whether a margin on the difference scale must lie below 1 (parameters in (0, 1))."""
    lattice: ClassVar[bool] = False
    """Whether each arm's sufficient statistic is a count on a lattice
    (:class:`LatticeFamily`): decision tables, the exact lattice engine, count rules."""
    truncates: ClassVar[bool] = False
    """Whether the lattice truncates an unbounded statistic (counts); the exact engine then
    reports the probability mass it neglects (see :attr:`truncation_epsilon`)."""
    truncation_epsilon: ClassVar[float] = 0.0
    """Largest neglected mass beyond a truncated lattice, per arm and look."""
    outcome_range_needed: ClassVar[bool] = False
    """Whether the prior predictive check needs a range of plausible outcomes from the user
    (an unbounded outcome: ``octrial check --outcome-range``); bounded outcomes have their
    own."""
    event_driven: ClassVar[bool] = False
    """Whether studies run in calendar time with looks at event counts (``[looks] events``
    and a required ``[conduct]`` table: time-to-event endpoints)."""
    look_unit: ClassVar[str] = "subjects"
    """What ``[looks]`` counts, for reports (``'events'`` for event-driven looks)."""
    statistic: ClassVar[str] = "sample mean"
    """Plain name of the per-arm statistic the rule is read on (``'responses'``)."""

    # -- wording for reports ---------------------------------------------------------
    unit: ClassVar[str] = "parameter units"
    """The unit of the per-arm parameter, for axis labels (``'proportion'``)."""
    data_model: ClassVar[str] = ""
    """The data model in one sentence, for the report's assumptions."""
    prior_size_note: ClassVar[str] = ("Effective sample size as computed by the endpoint "
                                      "family (see docs/methods.md).")
    """How the effective sample sizes of :meth:`effective_sample_size` were computed."""

    def assumptions(self, design: Any) -> tuple[str, ...]:
        """Sentences about the data model behind every number (the report's
        assumptions); by default :attr:`data_model`."""
        return (self.data_model,) if self.data_model else ()

    # -- the family's parts in other layers (reached from here: one registry) --------
    def interim(self) -> EndpointInterim | None:
        """Interim decisions on real data (``octrial decide``): the data syntax,
        posterior summaries and checks (:class:`~octrial.interim.base.EndpointInterim`);
        ``None`` when the family has none."""
        return None

    def check_model(self, design: Any) -> CheckModel | None:
        """What the workflow checks (``octrial check``) need from the family
        (:class:`~octrial.checks.model.CheckModel`) for ``design``; ``None`` when the
        family has none."""
        return None

    def prior_data_conflict(self, design: Any, arm: int, informative: Any,
                            vague: Any) -> list[dict[str, Any]] | None:
        """Prior-data conflict of borrowing arm ``arm`` per true value (``octrial check``,
        :mod:`octrial.checks.conflict`), given the design with the informative prior
        and without borrowing; ``None`` when the family's priors have no such check."""
        return None

    draws_design_prior: ClassVar[bool] = False
    """Whether :meth:`design_prior_draws` is implemented."""

    def design_prior_draws(
        self, design: Any, rng: np.random.Generator, size: int,
    ) -> tuple[np.ndarray, np.ndarray]:
        """True (mean, sd) per study and arm drawn from the design prior, for simulating
        assurance with the family's simulator (when :attr:`draws_design_prior`)."""
        raise NotImplementedError(f"no simulation from the design prior for {self.name} "
                                  "endpoints")

    def boundary_table(self, design: Any, sds: tuple[float, ...] | None = None) -> Any:
        """``octrial boundaries``: the rule per look as bounds a committee applies by hand
        (a pandas table; ``None`` when the family cannot tabulate its rule). ``sds``: the
        sample sds at which bounds are given when :meth:`bounds_depend_on_sd`."""
        return None

    def committee_table(self, design: Any, table: Any) -> str | None:
        """The committee's text for :meth:`boundary_table`'s ``table``."""
        return None

    def bounds_depend_on_sd(self, design: Any) -> bool:
        """Whether the bounds depend on the observed sample sd (so that a table is given
        at chosen sample sds)."""
        return False

    # -- design-file reading ---------------------------------------------------------
    @abstractmethod
    def read_endpoint(self, table: Table) -> Any:
        """Read the ``[endpoint]`` table (its ``type`` already read) into a frozen value."""

    prior_schema: ClassVar[PriorSchema]
    """The prior distributions the family accepts, as a table of constraints on their keys
    (:mod:`octrial.endpoints.schema`): :meth:`read_prior` reads through it and the tests
    derive their bad inputs from it."""

    def read_prior(self, table: Table) -> Any:
        """Read an analysis prior table into a frozen value, recording problems (by default
        through :attr:`prior_schema`; families with borrowing add its keys)."""
        from octrial.endpoints.schema import read_distribution

        return read_distribution(table, self.prior_schema)[1]

    @abstractmethod
    def true_value_problem(self, value: float) -> str | None:
        """``None`` when ``value`` is a possible true parameter, else what is expected."""

    def convert_benchmark(self, endpoint: Any, value: float) -> tuple[float, str | None]:
        """The one-arm benchmark on the parameter's scale from the value written in
        ``hypothesis.benchmark`` (families whose benchmark may be stated on another
        scale convert it), and what is expected when the value is not valid."""
        return value, self.true_value_problem(value)

    def prior_on_effect(self, endpoint: Any, two_arm: bool) -> bool:
        """Whether the analysis prior is on the two-arm effect (``hypothesis.prior``)
        rather than on each arm's parameter (``arms.<arm>.prior``)."""
        return False

    def check_design(self, parts: dict[str, Any], problems: Problems) -> None:
        """Family-specific checks across tables, once every table has been read.

        ``parts`` holds 'endpoint', 'hypothesis', 'arms', 'looks', 'simulation' and
        'two_arm' (any may be ``None`` after earlier problems); problems are recorded with
        their key paths.
        """
        return None

    def margin_problem(self, hypothesis: Hypothesis) -> str | None:
        """``None`` when ``hypothesis.margin`` is valid for its comparison, else what is
        expected. Ratios need a positive threshold 1 + sign x shift; differences of rates
        need a margin below 1."""
        margin = hypothesis.margin
        assert hypothesis.comparison is not None  # asked of two-arm designs only
        if COMPARISONS[hypothesis.comparison][1] == 1.0:
            if hypothesis.threshold <= 0:
                return "a margin in [0, 1) (the ratio it implies must stay above 0)"
            return None if margin >= 0 else "a margin >= 0"
        if self.difference_margin_below_one:
            return None if 0 <= margin < 1 else "a margin in [0, 1)"
        return None if margin >= 0 else "a margin >= 0"

    # -- hypotheses ------------------------------------------------------------------
    def measure(self, comparison: str, treatment: float, control: float) -> float:
        """The two-arm effect measure ('difference', 'ratio', 'odds-ratio')."""
        value: float = COMPARISONS[comparison][0](treatment, control)
        return value

    def effect(self, hypothesis: Hypothesis, truth: tuple[float, ...]) -> float:
        """The effect that the hypothesis is about, in the better direction.

        One arm: sign x (theta - benchmark). Two arms: sign x (measure - no-effect value)
        - shift, where the measure is theta_T - theta_C (no effect 0) or a ratio (no
        effect 1). Positive means benefit beyond the null.
        """
        if len(truth) == 1:
            assert hypothesis.benchmark is not None  # one arm: load.py requires it
            return hypothesis.sign * (truth[0] - hypothesis.benchmark)
        assert hypothesis.comparison is not None  # two arms: load.py sets it
        measure = self.measure(hypothesis.comparison, truth[0], truth[1])
        neutral = COMPARISONS[hypothesis.comparison][1]
        return hypothesis.sign * (measure - neutral) - hypothesis.shift

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
    def prior_probability_of_claim(self, design: Any) -> float | None:
        """Pr(benefit beyond the benchmark or margin) under the analysis priors alone
        (``None`` when the design has no proper analysis prior)."""

    def effective_sample_size(self, design: Any) -> dict[str, Any] | None:
        """The analysis priors' effective sample sizes, by arm (see docs/methods.md)."""
        return None

    # -- decision rules --------------------------------------------------------------
    def decision_rule(self, design: Any, truths: np.ndarray | None = None) -> Any:
        """The rule as tables the exact engines apply, sized for ``truths`` where that
        matters (``None`` when no table form exists). Rules provide
        ``boundary_table(design)`` and ``info()``."""
        return None

    def boundaries_without_rule(self, design: Any) -> Any:
        """``boundaries.csv`` of a design that has no decision table (``None`` when the
        family cannot tabulate its rule)."""
        return None

    def prior_components(self, prior: Any) -> list[tuple[float, Any]] | None:
        """The prior as a mixture: (weight, frozen scipy distribution) pairs, or ``None``.

        Optional. Assurance integrates over a design prior through its components'
        quantile functions when no exact method applies.
        """
        return None

    # == simulation by the generic study loop =======================================
    # Statistics are per-arm sums over subjects (responses, events, outcome totals), so
    # a study's statistic after a look is its previous statistic plus the increment.
    def increment_distribution(self, design: Any, arm: int, truth: Any, n: int) -> Any:
        """The distribution of the statistic of ``n`` new subjects of arm ``arm`` at the
        true value ``truth``, as a frozen scipy distribution (``truth`` may be an array:
        one distribution per value, by scipy's broadcasting).

        The generic study loop draws from it; the common test suite checks it against
        the family's sampler. Families without one cannot be simulated by the loop.
        """
        raise NotImplementedError(f"{self.name} endpoints have no increment distribution")

    def draw_statistics(self, design: Any, arm: int, truth: float, n: int,
                        rng: np.random.Generator, size: int) -> np.ndarray:
        """The statistic of ``n`` new subjects of arm ``arm`` at ``truth`` for ``size``
        studies, with random numbers from ``rng`` only.

        By default drawn from :meth:`increment_distribution`; a family overrides this
        where a faster exact sampler exists.
        """
        dist = self.increment_distribution(design, arm, truth, n)
        return np.asarray(dist.rvs(size=size, random_state=rng))

    def benefit_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                   n: tuple[int, ...]) -> np.ndarray:
        """Posterior probability of benefit per study, from each arm's accumulated
        statistic (one array per arm, one value per study) after per-arm sizes ``n``."""
        raise NotImplementedError(f"{self.name} endpoints have no posterior probability "
                                  "of benefit per study")

    def predictive_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                      n: tuple[int, ...]) -> np.ndarray:
        """Predictive probability of success at the final look per study (arguments as
        :meth:`benefit_at`). Optional: a family without it cannot simulate designs with
        predictive futility (:meth:`simulation_unsupported` says so)."""
        raise NotImplementedError(f"{self.name} endpoints have no predictive probability")

    def offers_predictive(self) -> bool:
        """Whether the family implements :meth:`predictive_at`."""
        return type(self).predictive_at is not Family.predictive_at

    def estimate_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                    n: tuple[int, ...], value: float,
                    ) -> tuple[np.ndarray, np.ndarray] | None:
        """Per study: the posterior mean of the target parameter
        (:meth:`target_value`) and the posterior Pr(target <= ``value``); ``None`` when
        the family (or the design, without analysis priors) offers no estimates, and
        then simulations report no bias, RMSE or coverage."""
        return None

    def simulation_unsupported(self, design: Any) -> str | None:
        """Why :meth:`simulator` cannot simulate ``design``, or ``None`` when it can."""
        looks = design.looks
        if looks.uses_counts:
            return ("a rule stated in counts is simulated with decision tables (kernel "
                    "'table'), not per study")
        if type(self).increment_distribution is Family.increment_distribution and (
                type(self).draw_statistics is Family.draw_statistics):
            return f"{self.name} endpoints have no sampler for simulated studies"
        if type(self).benefit_at is Family.benefit_at:
            return (f"{self.name} endpoints have no posterior probability of benefit per "
                    "simulated study")
        if any(v is not None for v in looks.futility_predictive) and (
                not self.offers_predictive()):
            return (f"{self.name} endpoints offer no predictive probability of success, "
                    "so a design with predictive futility (looks.futility_predictive) "
                    "cannot be simulated")
        return None

    def simulator(self, design: Any, truth: tuple[float, ...], level: float) -> Any:
        """A :class:`~octrial.simulation.base.Simulator` of ``design`` at ``truth``
        (credible intervals at ``level``); by default the generic study loop of
        :mod:`octrial.simulation.generic`, or, for a design with ``[conduct]``, the
        calendar-time studies of :mod:`octrial.simulation.calendar_studies`."""
        if design.conduct is not None:
            from octrial.simulation.calendar_studies import CalendarStudies

            return CalendarStudies(design, truth, level)
        from octrial.simulation.generic import StudyLoop

        return StudyLoop(design, truth, level)


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

    lattice: ClassVar[bool] = True

    def decision_rule(self, design: Any, truths: np.ndarray | None = None) -> Any:
        from octrial.rules.lattice import build_rule

        return build_rule(design, truths=truths)

    def boundary_table(self, design: Any, sds: tuple[float, ...] | None = None) -> Any:
        from octrial.rules.boundaries import boundary_table
        from octrial.rules.lattice import build_rule

        return boundary_table(design, build_rule(design))

    def committee_table(self, design: Any, table: Any) -> str | None:
        from octrial.rules.boundaries import committee_table

        return committee_table(design, table)

    def prior_data_conflict(self, design: Any, arm: int, informative: Any,
                            vague: Any) -> list[dict[str, Any]] | None:
        from octrial.checks.conflict import lattice_conflict

        return lattice_conflict(design, arm, informative, vague)

    def lattice_reach(self, design: Any) -> tuple[float, ...] | None:
        """Per arm, the largest true value the lattice must serve (truncating families);
        taken from the design's scenarios, which :func:`~octrial.rules.lattice.build_rule`
        extends with the truths it is asked about."""
        return None

    @abstractmethod
    def lattice_size(self, design: Any, arm: int, n: int) -> int:
        """Number of lattice points (0 .. size-1) kept for arm ``arm`` after ``n`` subjects.

        Truncating families size the lattice so that the mass beyond it is below
        their truncation epsilon at every true value up to :meth:`lattice_reach`.
        """

    @abstractmethod
    def increment_pmf(self, design: Any, truth: Any, n: int, size: int) -> np.ndarray:
        """Pr(statistic of ``n`` new subjects = 0 .. size-1) at the true value ``truth`` (a
        float; families that broadcast take an array of true values, one row each)."""

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

    def predictive_lattice_size(self, design: Any, arm: int) -> int:
        """Final-look lattice points needed for predictive probabilities: enough that from
        any interim lattice point the predictive mass beyond them is negligible (the final
        lattice itself for bounded statistics)."""
        return self.lattice_size(design, arm, design.looks.per_arm[-1][arm])

    def predictive_error(self, design: Any, posterior: Any, m: int, size: int) -> float:
        """Numerical error bound of :meth:`predictive_pmf` in total variation (0 when the
        pmf is computed in closed form)."""
        return 0.0

    def on_grid(self, design: Any) -> bool:
        """Whether the design's posteriors come from the grid engine (no closed form)."""
        return False

    def rule_info(self, design: Any, error: float) -> dict[str, Any]:
        """Numerical settings behind the rule for run.json (for example a grid), given the
        largest measured error of the probabilities behind it."""
        return {}

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

    # == simulation by the generic study loop, on the lattice ========================
    # Probabilities are evaluated on the lattice points 0 .. max(statistic) and looked up
    # per study: the same maths as the decision tables, at the points studies reach.
    def _posteriors_up_to(self, design: Any, statistics: tuple[np.ndarray, ...],
                          n: tuple[int, ...]) -> tuple[Any, ...]:
        return tuple(self.posterior(design, j, n[j], np.arange(int(np.max(x, initial=0)) + 1))
                     for j, x in enumerate(statistics))

    @staticmethod
    def _look_up(table: np.ndarray, statistics: tuple[np.ndarray, ...]) -> np.ndarray:
        return table[tuple(np.asarray(x, dtype=np.int64) for x in statistics)]

    def benefit_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                   n: tuple[int, ...]) -> np.ndarray:
        table, _ = self.benefit(design, self._posteriors_up_to(design, statistics, n))
        return self._look_up(table, statistics)

    def predictive_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                      n: tuple[int, ...]) -> np.ndarray:
        """PP(x) = sum_y Pr(Y = y | x) 1[final success at x + y] (Lee & Liu 2008), the
        final success region evaluated on a lattice reaching past every study's count by
        the predictive lattice the family asks for."""
        from octrial.rules.lattice import success_from_pmfs
        from octrial.rules.stop import EFFICACY, Rule

        final = design.looks.per_arm[-1]
        rule = Rule.of(design.looks)
        sizes = tuple(
            max(self.predictive_lattice_size(design, j),
                int(np.max(x, initial=0)) + self.lattice_size(design, j, final[j] - n[j]))
            for j, x in enumerate(statistics))
        final_posts = tuple(self.posterior(design, j, final[j], np.arange(size))
                            for j, size in enumerate(sizes))
        success = rule.decide_many(rule.last, self.benefit(design, final_posts)[0]) == EFFICACY
        posts = self._posteriors_up_to(design, statistics, n)
        pmfs = [self.predictive_pmf(design, post, final[j] - n[j], sizes[j])
                for j, post in enumerate(posts)]
        return self._look_up(success_from_pmfs(pmfs, success), statistics)

    def estimate_at(self, design: Any, statistics: tuple[np.ndarray, ...],
                    n: tuple[int, ...], value: float,
                    ) -> tuple[np.ndarray, np.ndarray] | None:
        if any(arm.prior is None for arm in design.arms) and not self.prior_on_effect(
                design.endpoint, design.two_arm):
            return None
        posts = self._posteriors_up_to(design, statistics, n)
        mean = self.target_mean(design, posts)
        cdf = self.target_cdf(design, posts, value)
        if mean is None or cdf is None:
            return None
        return self._look_up(mean, statistics), self._look_up(cdf, statistics)
