"""Check model of the lattice families: binary and count endpoints.

Each arm's statistic is a count (responses; events in the arm's exposure). Posteriors come
from the family's own ``posterior`` (the conjugate beta or gamma mixture update, or the
grid engine for logit-normal and log-normal priors and negative binomial counts),
evaluated once per distinct count, as the engines do on their lattice. The target of two
arms is computed as the engines compute it:

* binary, difference of rates: the tanh-sinh quadrature of Pr(p_T - p_C > d) that the
  general simulation kernel evaluates per study
  (:func:`octrial.simulation.beta_difference.prob_difference_exceeds`);
* count, rate ratio (conjugate): the Beta identity summed over mixture components
  (:func:`octrial.endpoints.count.prob_ratio`), on the log rate ratio;
* grid posteriors (odds ratio of rates, log-normal priors, negative binomial counts):
  theta_T - theta_C on the grid's scale (log odds ratio, log rate ratio), by the grid
  engine's outer trapezoidal sum (:func:`octrial.checks.grid_values.difference_cdf`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special

import octrial.checks.grid_values as grid_values
from octrial.checks.model import ANALYSIS, CheckModel, Posteriors, Quantity, benchmark
from octrial.checks.predictive import Predictive, pair_effect, truncated_support
from octrial.design.model import Design
from octrial.design_prior import design_prior_design
from octrial.endpoints import count as count_maths
from octrial.endpoints import grid_family
from octrial.endpoints.binary import BetaMixture, BetaPosterior, LogitNormal
from octrial.endpoints.count import GammaMixture, GammaPosterior
from octrial.plurals import noun, series
from octrial.simulation import beta_difference

ROW_BATCH = 64
"""Studies per batch when a grid difference is integrated (bounds memory)."""


@dataclass(frozen=True, eq=False)
class LatticeData:
    """Simulated counts: ``stats[k, j, i]`` is arm j's cumulative count at look k in
    study i."""

    stats: np.ndarray

    def __len__(self) -> int:
        return self.stats.shape[2]


class LatticeModel(CheckModel):
    """What binary and count designs share (see module docstring); :class:`BinaryModel`
    and :class:`CountModel` add what differs."""

    word: str
    """The per-arm parameter in words ('response rate')."""
    conjugate: str
    """The conjugate prior's name ('beta')."""
    grid_name: str
    """Name and label of the two-arm target on the grid engine's scale."""
    grid_label: str

    @staticmethod
    def to_grid(value: np.ndarray) -> np.ndarray:
        """The rate on the grid engine's scale (logit or log)."""
        raise NotImplementedError

    @staticmethod
    def from_grid(theta: np.ndarray) -> np.ndarray:
        """The inverse of :meth:`to_grid`."""
        raise NotImplementedError

    def __init__(self, design: Design) -> None:
        super().__init__(design)
        self.family = design.family
        self.on_grid = self.family.on_grid(design) if self._has_priors(design) else False

    @staticmethod
    def _has_priors(design: Design) -> bool:
        return all(arm.prior is not None for arm in design.arms)

    # -- parameters and quantities ---------------------------------------------------
    @property
    def parameters(self) -> tuple[str, ...]:
        return self.design.arm_names

    def quantities(self) -> tuple[Quantity, ...]:
        arms = self.design.arms
        per_arm = tuple(Quantity(f"rate_{a.name}", f"{self.word} ({a.name})",
                                 len(arms) == 1, *self._arm_computation(j))
                        for j, a in enumerate(arms))
        if len(arms) == 1:
            return per_arm
        return (self._target_quantity(), *per_arm)

    def _arm_computation(self, arm: int) -> tuple[str, bool]:
        prior = self.design.arms[arm].prior
        if self.on_grid:
            points = self.design.simulation.grid_points
            return (f"grid engine ({points} points on the {self.family.grid_scale} scale; "
                    "end-corrected CDF at the nodes, Hermite between them)", False)
        single = prior is not None and len(prior.weights) == 1
        kind = self.conjugate
        if single:
            return f"conjugate {kind} update (closed form)", True
        return f"{kind}-mixture update (posterior weights from marginal likelihoods)", False

    def _target_quantity(self) -> Quantity:
        if self.on_grid:
            points = self.design.simulation.grid_points
            return Quantity(self.grid_name, self.grid_label, True, f"grid engine ({points} "
                            "points): outer trapezoidal sum over the control grid", False)
        return self._conjugate_target()

    def _conjugate_target(self) -> Quantity:
        """The two-arm target with conjugate priors."""
        raise NotImplementedError

    def true_value(self, quantity: Quantity, truths: np.ndarray) -> np.ndarray:
        if quantity.name.startswith("rate_"):
            return truths[:, self.parameters.index(quantity.name.removeprefix("rate_"))]
        t, c = truths[:, 0], truths[:, 1]
        if quantity.name == "difference":
            return t - c
        return self.to_grid(t) - self.to_grid(c)

    # -- priors ----------------------------------------------------------------------
    def cannot_draw(self, source: str) -> str | None:
        key = "prior" if source == ANALYSIS else "design_prior"
        missing = [a.name for a in self.design.arms if getattr(a, key) is None]
        if not missing:
            return None
        what = "analysis prior" if source == ANALYSIS else "design prior"
        return f"no {what} on the {series(missing)} {noun(len(missing), 'arm')}"

    def draw_truths(self, rng: np.random.Generator, size: int, source: str) -> np.ndarray:
        key = "prior" if source == ANALYSIS else "design_prior"
        return np.column_stack([self._draw_prior(getattr(a, key), rng, size)
                                for a in self.design.arms])

    def _draw_prior(self, prior: Any, rng: np.random.Generator, size: int) -> np.ndarray:
        if isinstance(prior, LogitNormal):
            return special.expit(rng.normal(prior.logit_mean, prior.logit_sd, size))
        components = self.family.prior_components(prior)
        weights = np.array([w for w, _ in components])
        pick = rng.choice(weights.size, size=size, p=weights / weights.sum())
        out = np.empty(size)
        for j, (_, dist) in enumerate(components):
            where = pick == j
            out[where] = dist.rvs(size=int(where.sum()), random_state=rng)
        return out

    def prior(self) -> LatticePosteriors:
        posts = tuple(self.family.posterior(self.design, j, 0, np.zeros(1))
                      for j in range(len(self.design.arms)))
        return LatticePosteriors(self, posts, tuple(np.zeros(1, int) for _ in posts))

    # -- data and posteriors ---------------------------------------------------------
    def simulate(self, rng: np.random.Generator, truths: np.ndarray) -> LatticeData:
        looks = self.design.looks.per_arm
        m, arms = truths.shape
        stats = np.zeros((len(looks), arms, m), dtype=np.int64)
        previous = (0,) * arms
        for k, sizes in enumerate(looks):
            for j in range(arms):
                step = sizes[j] - previous[j]
                new = self._increment(rng, truths[:, j], step) if step > 0 else 0
                stats[k, j] = (stats[k - 1, j] if k else 0) + new
            previous = sizes
        return LatticeData(stats)

    def _increment(self, rng: np.random.Generator, truth: np.ndarray, n: int) -> np.ndarray:
        """The statistic of ``n`` new subjects per study."""
        raise NotImplementedError

    def _arm_predictive(self, design: Design, j: int, name: str, post: Any, n: int,
                        exposure: float) -> Predictive:
        """Arm ``j``'s prior predictive outcome at the final look."""
        raise NotImplementedError

    def _plausible_one_arm(self) -> tuple[float, float, str] | None:
        """The default plausible range of one arm's observed rate."""
        raise NotImplementedError

    @staticmethod
    def _exposure(design: Design) -> float:
        """Exposure per subject (1 where the statistic counts subjects)."""
        return 1.0

    def posterior(self, data: LatticeData, look: int) -> LatticePosteriors:
        posts, rows = [], []
        for j in range(len(self.design.arms)):
            unique, inverse = np.unique(data.stats[look, j], return_inverse=True)
            n = self.design.looks.per_arm[look][j]
            posts.append(self.family.posterior(self.design, j, n, unique))
            rows.append(inverse.ravel())
        return LatticePosteriors(self, tuple(posts), tuple(rows))

    def typical_data(self) -> LatticeData:
        looks = self.design.looks
        exposure = self._exposure(self.design)
        stats = []
        for j, arm in enumerate(self.design.arms):
            mean = (grid_family.mean_of(self.design, j, arm.prior) if self.on_grid
                    else arm.prior.mean)
            stats.append([round(mean * exposure * n[j]) for n in looks.per_arm])
        return LatticeData(np.array(stats, dtype=np.int64).T[:, :, None])

    # -- prior predictive ------------------------------------------------------------
    def predictive(self, source: str) -> list[Predictive]:
        design = self.design if source == ANALYSIS else design_prior_design(self.design)
        family = self.family
        exposure = self._exposure(design)
        out = []
        for j, arm in enumerate(design.arms):
            n = design.looks.per_arm[-1][j]
            post = family.posterior(design, j, 0, np.zeros(1))
            out.append(self._arm_predictive(design, j, arm.name, post, n, exposure))
        sizes = [design.looks.per_arm[-1][j] * exposure for j in range(len(design.arms))]
        if len(out) == 1:
            word = self.word.removesuffix(" rate")
            only = out[0]
            out.append(Predictive.from_pmf(f"observed_{word}_rate", f"observed {word} rate",
                                           only.values / sizes[0], only.weights, effect=True))
            return out
        out.append(self._effect(out[0], out[1], sizes))
        return out

    def _effect(self, first: Predictive, second: Predictive,
                sizes: list[float]) -> Predictive:
        comparison = self.design.hypothesis.comparison
        if comparison == "difference":
            return pair_effect(first, second, lambda t, c: t - c, "observed_difference",
                               "observed difference in response rates, T − C",
                               sizes[0], sizes[1])
        n_t, n_c = sizes
        if comparison == "odds-ratio":
            def log_odds_ratio(t, c):
                # 0.5 added to every cell (Haldane-Anscombe) so that zero cells are finite
                xt, xc = t * n_t, c * n_c
                return (np.log((xt + 0.5) / (n_t - xt + 0.5))
                        - np.log((xc + 0.5) / (n_c - xc + 0.5)))
            return pair_effect(first, second, log_odds_ratio, "observed_log_odds_ratio",
                               "observed log odds ratio, T to C (0.5 added to each cell)",
                               n_t, n_c)

        def log_ratio(t, c):
            return np.log((t * n_t + 0.5) / n_t) - np.log((c * n_c + 0.5) / n_c)
        return pair_effect(first, second, log_ratio, "observed_log_rate_ratio",
                           "observed log rate ratio, T to C (0.5 added to each count)",
                           n_t, n_c)

    def plausible_effect(self) -> tuple[float, float, str] | None:
        h = self.design.hypothesis
        if not self.design.two_arm:
            return self._plausible_one_arm()
        if h.comparison == "difference":
            return (-0.5, 0.5, "an observed difference in response rates within ±0.5")
        return (math.log(0.1), math.log(10.0),
                "an observed ratio within a factor 10 of no effect (log scale ±2.30)")


class BinaryModel(LatticeModel):
    """Binary designs: binomial responses, beta-mixture or logit-normal priors."""

    word = "response rate"
    conjugate = "beta"
    grid_name = "log_odds_ratio"
    grid_label = "log odds ratio, treatment to control"
    to_grid = staticmethod(special.logit)
    from_grid = staticmethod(special.expit)

    def _conjugate_target(self) -> Quantity:
        return Quantity("difference", "rate_T − rate_C", True,
                        "tanh-sinh quadrature of Pr(p_T − p_C > d) (the engines' "
                        "two-arm quadrature)", False)

    def _increment(self, rng: np.random.Generator, truth: np.ndarray, n: int) -> np.ndarray:
        return rng.binomial(n, truth)

    def _arm_predictive(self, design: Design, j: int, name: str, post: Any, n: int,
                        exposure: float) -> Predictive:
        pmf = self.family.predictive_pmf(design, post, n, n + 1)[0]
        return Predictive.from_pmf(
            f"responses_{name}", f"responses among {n} subjects ({name})",
            np.arange(n + 1), pmf, extremes=(0.0, float(n)))

    def _plausible_one_arm(self) -> tuple[float, float, str] | None:
        return None


class CountModel(LatticeModel):
    """Count designs: Poisson or negative binomial events, gamma-mixture or log-normal
    priors."""

    word = "event rate"
    conjugate = "gamma"
    grid_name = "log_rate_ratio"
    grid_label = "log rate ratio, treatment to control"

    @staticmethod
    def to_grid(value: np.ndarray) -> np.ndarray:
        """The log rate ratio's scale: log."""
        return np.log(value)

    @staticmethod
    def from_grid(theta: np.ndarray) -> np.ndarray:
        """The inverse of :meth:`to_grid`."""
        return np.exp(theta)

    def _conjugate_target(self) -> Quantity:
        mixtures = any(len(a.prior.weights) > 1 for a in self.design.arms)
        return Quantity("log_rate_ratio", "log rate ratio, treatment to control", True,
                        "Beta identity for the rate ratio" + (
                            ", summed over mixture components" if mixtures else ""),
                        not mixtures)

    def _increment(self, rng: np.random.Generator, truth: np.ndarray, n: int) -> np.ndarray:
        e = self.design.endpoint
        mean = truth * e.exposure * n
        if e.model == "poisson":
            return rng.poisson(mean)
        size = n / e.dispersion  # the sum of n subjects' counts (see CountFamily)
        return rng.negative_binomial(size, size / (size + mean))

    def _arm_predictive(self, design: Design, j: int, name: str, post: Any, n: int,
                        exposure: float) -> Predictive:
        family = self.family
        start = int(4 * n * exposure * max(_prior_mean(design, j), 1e-3)) + 16
        pmf = truncated_support(
            lambda size, d=design, p=post, n=n: family.predictive_pmf(d, p, n, size)[0],
            start)
        return Predictive.from_pmf(
            f"events_{name}", f"events in {n * exposure:g} units of exposure ({name})",
            np.arange(pmf.size), pmf)

    @staticmethod
    def _exposure(design: Design) -> float:
        return float(design.endpoint.exposure)

    def _plausible_one_arm(self) -> tuple[float, float, str] | None:
        rate = benchmark(self.design)
        return (rate / 10, rate * 10,
                "an observed event rate within a factor 10 of the benchmark")


def _prior_mean(design: Design, arm: int) -> float:
    prior = design.arms[arm].prior
    if isinstance(prior, GammaMixture | BetaMixture):
        return prior.mean
    return grid_family.mean_of(design, arm, prior)


class LatticePosteriors(Posteriors):
    """Per-arm posteriors at distinct counts, with each study's row per arm."""

    def __init__(self, model: LatticeModel, posts: tuple[Any, ...],
                 rows: tuple[np.ndarray, ...]) -> None:
        self.model = model
        self.posts = posts
        self.rows = rows

    def __len__(self) -> int:
        return self.rows[0].size

    def _arm(self, quantity: Quantity) -> int | None:
        if not quantity.name.startswith("rate_"):
            return None
        return self.model.parameters.index(quantity.name.removeprefix("rate_"))

    def _conjugate_rows(self, j: int) -> Any:
        post, rows = self.posts[j], self.rows[j]
        return type(post)(post.weights[rows], post.a[rows], post.b[rows])

    # -- per-arm moments on the natural scale ---------------------------------------
    def _arm_moments(self, j: int) -> tuple[np.ndarray, np.ndarray]:
        post, rows = self.posts[j], self.rows[j]
        if self.model.on_grid:
            value = self.model.from_grid(post.grid.nodes)
            mean = post.weights @ value
            second = post.weights @ value**2
            return mean[rows], np.clip(second - mean**2, 0, None)[rows]
        return post.mean()[rows], post.variance()[rows]

    def _theta_moments(self, j: int) -> tuple[np.ndarray, np.ndarray]:
        """Mean and variance of theta on the comparison's log scale."""
        post, rows = self.posts[j], self.rows[j]
        if self.model.on_grid:
            nodes = post.grid.nodes
            mean = post.weights @ nodes
            return mean[rows], np.clip(post.weights @ nodes**2 - mean**2, 0, None)[rows]
        # gamma mixture: E[log rate | component] = digamma(a) - log b, variance trigamma(a)
        m = special.digamma(post.a) - np.log(post.b)
        mean = np.sum(post.weights * m, axis=1)
        second = np.sum(post.weights * (special.polygamma(1, post.a) + m**2), axis=1)
        return mean[rows], np.clip(second - mean**2, 0, None)[rows]

    def mean(self, quantity: Quantity) -> np.ndarray:
        j = self._arm(quantity)
        if j is not None:
            return self._arm_moments(j)[0]
        if quantity.name == "difference":
            return self._arm_moments(0)[0] - self._arm_moments(1)[0]
        return self._theta_moments(0)[0] - self._theta_moments(1)[0]

    def variance(self, quantity: Quantity) -> np.ndarray:
        j = self._arm(quantity)
        if j is not None:
            return self._arm_moments(j)[1]
        if quantity.name == "difference":
            return self._arm_moments(0)[1] + self._arm_moments(1)[1]
        return self._theta_moments(0)[1] + self._theta_moments(1)[1]

    # -- CDF at given values ---------------------------------------------------------
    def cdf(self, quantity: Quantity, values: np.ndarray) -> np.ndarray:
        values = np.broadcast_to(np.asarray(values, dtype=float), (len(self),))
        j = self._arm(quantity)
        if j is not None:
            low, high = self.model.family.parameter_range
            if self.model.on_grid:
                inside = (values > low) & (values < high)
                theta = self.model.to_grid(np.where(inside, values, 0.5))
                value = grid_values.cdf_at(self.posts[j], self.rows[j], theta)
                return np.where(inside, value, np.where(values <= low, 0.0, 1.0))
            inside = np.clip(values, low, min(high, np.finfo(float).max))
            return self._conjugate_rows(j).cdf(inside[:, None])
        if self.model.on_grid:
            out = np.empty(len(self))
            for start in range(0, len(self), ROW_BATCH):
                part = slice(start, start + ROW_BATCH)
                out[part] = grid_values.difference_cdf(
                    self.posts[0], self.posts[1], self.rows[0][part], self.rows[1][part],
                    values[part])
            return out
        if quantity.name == "difference":
            return self._difference_cdf(values)
        return self._ratio_cdf(values)

    def _difference_cdf(self, values: np.ndarray) -> np.ndarray:
        t, c = self._conjugate_rows(0), self._conjugate_rows(1)
        nodes = beta_difference.quadrature_nodes()
        out = np.empty(values.size)
        for i, d in enumerate(values):
            if not -1.0 < d < 1.0:
                out[i] = 0.0 if d <= -1.0 else 1.0
                continue
            # numba's Dispatcher type does not carry the compiled function's parameters
            out[i] = 1.0 - beta_difference.prob_difference_exceeds(  # type: ignore[call-arg]
                t.weights[i], t.a[i], t.b[i], c.weights[i], c.a[i], c.b[i], float(d),
                *nodes, beta_difference.QUADRATURE_TOLERANCE)
        return out

    def _ratio_cdf(self, values: np.ndarray) -> np.ndarray:
        t, c = self._conjugate_rows(0), self._conjugate_rows(1)
        out = np.empty(values.size)
        for i, d in enumerate(values):
            one_t = GammaPosterior(t.weights[i:i + 1], t.a[i:i + 1], t.b[i:i + 1])
            one_c = GammaPosterior(c.weights[i:i + 1], c.a[i:i + 1], c.b[i:i + 1])
            out[i] = count_maths.prob_ratio(one_t, one_c, math.exp(d), below=True)[0, 0]
        return out

    # -- draws -----------------------------------------------------------------------
    def _arm_draws(self, j: int, rng: np.random.Generator, draws: int,
                   grid_scale: bool) -> np.ndarray:
        if self.model.on_grid:
            theta = grid_values.draw(self.posts[j], self.rows[j], rng, draws)
            return theta if grid_scale else self.model.from_grid(theta)
        post = self._conjugate_rows(j)
        pick = _pick(post.weights, rng, draws)
        a = np.take_along_axis(post.a, pick, axis=1)
        b = np.take_along_axis(post.b, pick, axis=1)
        value = rng.beta(a, b) if isinstance(post, BetaPosterior) else rng.gamma(a, 1.0 / b)
        return self.model.to_grid(value) if grid_scale else value

    def draw(self, quantity: Quantity, rng: np.random.Generator, draws: int) -> np.ndarray:
        j = self._arm(quantity)
        if j is not None:
            return self._arm_draws(j, rng, draws, grid_scale=False)
        log_scale = quantity.name != "difference"
        return (self._arm_draws(0, rng, draws, log_scale)
                - self._arm_draws(1, rng, draws, log_scale))


def _pick(weights: np.ndarray, rng: np.random.Generator, draws: int) -> np.ndarray:
    """Mixture component indices, shape (rows, draws), drawn with each row's weights."""
    cum = np.cumsum(weights, axis=1)
    u = rng.random((weights.shape[0], draws)) * cum[:, -1:]
    return np.minimum((u[:, :, None] > cum[:, None, :]).sum(axis=2), weights.shape[1] - 1)
