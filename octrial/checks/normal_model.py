"""Check model of normal endpoints.

**Known sd.** The parameter is the mean (one arm) or the difference in means (two arms,
prior on the effect); the data enter through the score S_k, a Gaussian random walk on the
benefit scale eta = sign x parameter with increments N(eta dI, dI)
(:mod:`octrial.endpoints.normal`). Posteriors are the family's own normal-mixture update
(:func:`octrial.endpoints.normal.update`). A flat analysis prior is improper: no truths
can be drawn from it and it has no prior predictive distribution, so the checks that
need one say so.

**Unknown sd.** Each arm has a normal-inverse-gamma prior (mu | s2 ~ N(m, s2 / k),
s2 ~ InvGamma(a, b)). A study's data per arm are its size, sample mean and sum of squared
deviations; the posterior comes from the unknown-sd rule's own conjugate update
(:func:`octrial.endpoints.unknown_sd.update`, vectorised over studies; the update is the
same on the parameter's scale as on the benefit scale), and mu is Student t with 2 a_n
degrees of freedom, location m_n and scale sqrt(b_n / (a_n k_n)). On two arms the
difference of two independent t posteriors has no closed form; its CDF is the rule's
:func:`octrial.endpoints.unknown_sd.difference_sf` (a sinh-substituted trapezoidal rule),
with each study's value moved into the treatment location.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from octrial.checks.model import ANALYSIS, CheckModel, Posteriors, Quantity, benchmark
from octrial.checks.predictive import Predictive
from octrial.design.model import Design
from octrial.endpoints import unknown_sd
from octrial.endpoints.normal import (
    Flat,
    NormalMixture,
    NormalPosterior,
    benefit_components,
    update,
)
from octrial.plurals import noun, series


def normal_model(design: Design) -> CheckModel:
    """The check model of a normal design: known or unknown sd."""
    if design.endpoint.known_sd:
        return KnownSdModel(design)
    return UnknownSdModel(design)


def _mixture_draws(prior: NormalMixture, rng: np.random.Generator, size: int) -> np.ndarray:
    w = np.asarray(prior.weights)
    pick = rng.choice(w.size, size=size, p=w / w.sum())
    return rng.normal(np.asarray(prior.mean)[pick], np.asarray(prior.sd)[pick])


# -- known sd ------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class ScoreData:
    """Simulated scores on the benefit scale: ``scores[k, i]`` at look k in study i."""

    scores: np.ndarray

    def __len__(self) -> int:
        return self.scores.shape[1]


class KnownSdModel(CheckModel):
    """Normal endpoint with known sd (see module docstring)."""

    def __init__(self, design: Design) -> None:
        super().__init__(design)
        self.family = design.family
        self.sign = design.hypothesis.sign
        self.information = [self.family.information(design, n) for n in design.looks.per_arm]

    def _prior(self, source: str) -> Any:
        d = self.design
        holder = d.hypothesis if d.two_arm else d.arms[0]
        return holder.prior if source == ANALYSIS else holder.design_prior

    @property
    def parameters(self) -> tuple[str, ...]:
        return ("difference",) if self.design.two_arm else ("treatment",)

    def quantities(self) -> tuple[Quantity, ...]:
        prior = self._prior(ANALYSIS)
        mixture = isinstance(prior, NormalMixture) and len(prior.weights) > 1
        computation = ("normal-mixture update (posterior weights from marginal likelihoods)"
                       if mixture else "conjugate normal update (closed form)")
        if self.design.two_arm:
            return (Quantity("difference", "mean_T − mean_C", True, computation, not mixture),)
        return (Quantity("mean", "mean (treatment)", True, computation, not mixture),)

    def true_value(self, quantity: Quantity, truths: np.ndarray) -> np.ndarray:
        return truths[:, 0]

    def cannot_draw(self, source: str) -> str | None:
        prior = self._prior(source)
        what = "analysis prior" if source == ANALYSIS else "design prior"
        if prior is None:
            return f"no {what}"
        if isinstance(prior, Flat):
            return f"the {what} is flat (improper): no true values can be drawn from it"
        return None

    def cannot_compute(self) -> str | None:
        return None if self._prior(ANALYSIS) is not None else "no analysis prior"

    def draw_truths(self, rng: np.random.Generator, size: int, source: str) -> np.ndarray:
        return _mixture_draws(self._prior(source), rng, size)[:, None]

    def prior(self) -> KnownSdPosteriors:
        prior = self._prior(ANALYSIS)
        if isinstance(prior, Flat):
            return KnownSdPosteriors(None, self.sign)
        w, m, p = benefit_components(prior, self.sign)
        return KnownSdPosteriors(NormalPosterior(w[None, :], m[None, :], p[None, :]),
                                 self.sign)

    def simulate(self, rng: np.random.Generator, truths: np.ndarray) -> ScoreData:
        eta = self.sign * truths[:, 0]
        scores = np.empty((len(self.information), eta.size))
        previous, total = 0.0, np.zeros(eta.size)
        for k, info in enumerate(self.information):
            step = info - previous
            total = total + eta * step + math.sqrt(step) * rng.standard_normal(eta.size)
            scores[k] = total
            previous = info
        return ScoreData(scores)

    def posterior(self, data: ScoreData, look: int) -> KnownSdPosteriors:
        return KnownSdPosteriors(update(self._prior(ANALYSIS), self.sign,
                                        self.information[look], data.scores[look]), self.sign)

    def typical_data(self) -> ScoreData:
        prior = self._prior(ANALYSIS)
        if isinstance(prior, Flat):
            h = self.design.hypothesis
            eta = h.shift if self.design.two_arm else self.sign * benchmark(self.design)
        else:
            eta = self.sign * prior.prior_mean
        info = self.information[-1]
        return ScoreData(np.full((len(self.information), 1), info * eta))

    def predictive(self, source: str) -> list[Predictive]:
        prior = self._prior(source)
        d = self.design
        info = self.information[-1]
        components = [(w, stats.norm(m, math.sqrt(s**2 + 1.0 / info)))
                      for w, m, s in zip(prior.weights, prior.mean, prior.sd, strict=True)]
        if d.two_arm:
            n_t, n_c = d.looks.per_arm[-1]
            return [Predictive.from_mixture(
                "observed_difference",
                f"observed difference in means, T − C ({n_t} + {n_c} subjects)",
                components, effect=True)]
        n = d.looks.per_arm[-1][0]
        return [Predictive.from_mixture("sample_mean", f"sample mean of {n} subjects",
                                        components, effect=True)]

    def plausible_effect(self) -> tuple[float, float, str] | None:
        sd = self.design.endpoint.sd
        if self.design.two_arm:
            return (-sd, sd, f"an observed difference in means within one subject-level "
                             f"sd (±{sd:g})")
        b = self.design.hypothesis.benchmark
        return (b - sd, b + sd, f"an observed mean within one subject-level sd ({sd:g}) of "
                                f"the benchmark")


class KnownSdPosteriors(Posteriors):
    """Normal-mixture posteriors of eta (the family's :class:`NormalPosterior`); values
    are returned on the parameter's own scale. ``post`` is ``None`` for a flat prior with
    no data."""

    def __init__(self, post: Any, sign: int) -> None:
        self.post = post
        self.sign = sign

    def __len__(self) -> int:
        return 1 if self.post is None else self.post.weights.shape[0]

    def cdf(self, quantity: Quantity, values: np.ndarray) -> np.ndarray:
        v = np.asarray(values, dtype=float)[:, None]
        if self.sign > 0:
            return 1.0 - self.post.sf(v)
        return self.post.sf(-v)

    def mean(self, quantity: Quantity) -> np.ndarray:
        if self.post is None:
            return np.full(1, np.nan)
        return self.sign * np.sum(self.post.weights * self.post.mean, axis=1)

    def variance(self, quantity: Quantity) -> np.ndarray:
        if self.post is None:
            return np.full(1, np.inf)
        return self.post.variance()

    def draw(self, quantity: Quantity, rng: np.random.Generator, draws: int) -> np.ndarray:
        p = self.post
        cum = np.cumsum(p.weights, axis=1)
        u = rng.random((p.weights.shape[0], draws))
        pick = np.minimum((u[:, :, None] > cum[:, None, :]).sum(axis=2), p.weights.shape[1] - 1)
        mean = np.take_along_axis(p.mean, pick, axis=1)
        sd = 1.0 / np.sqrt(np.take_along_axis(p.precision, pick, axis=1))
        return self.sign * (mean + sd * rng.standard_normal(mean.shape))


# -- unknown sd ----------------------------------------------------------------------

@dataclass(frozen=True)
class Nig:
    """Normal-inverse-gamma parameters (arrays broadcast over studies)."""

    m: Any
    k: Any
    a: Any
    b: Any

    def updated(self, n: int, mean: np.ndarray, ss: np.ndarray) -> Nig:
        """The posterior after ``n`` observations with sample ``mean`` and sum of squared
        deviations ``ss``, by :func:`octrial.endpoints.unknown_sd.update`."""
        if n == 0:
            return self
        sd = np.sqrt(ss / (n - 1)) if n > 1 else np.zeros_like(mean)
        post = unknown_sd.update(self.m, self.k, self.a, self.b, n=n, ybar=mean, sd=sd)
        return Nig(post.mean, post.mean_n, post.shape, post.scale)

    def t(self) -> Any:
        """The marginal Student t of mu (frozen, vectorised)."""
        return stats.t(2.0 * self.a, self.m, np.sqrt(self.b / (self.a * self.k)))

    def mean_variance(self) -> tuple[np.ndarray, np.ndarray]:
        m = np.asarray(self.m, dtype=float)
        with np.errstate(divide="ignore"):
            v = np.where(self.a > 1, self.b / (self.k * (self.a - 1.0)), np.inf)
        return m, np.broadcast_to(v, m.shape)


@dataclass(frozen=True, eq=False)
class SampleData:
    """Per look and arm: size, sample mean and sum of squared deviations per study."""

    n: tuple[tuple[int, ...], ...]
    mean: np.ndarray
    ss: np.ndarray

    def __len__(self) -> int:
        return self.mean.shape[2]


class UnknownSdModel(CheckModel):
    """Normal endpoint with unknown sd (see module docstring)."""

    def __init__(self, design: Design) -> None:
        super().__init__(design)
        self.sign = design.hypothesis.sign

    def _nig(self, arm: int, source: str = ANALYSIS) -> Nig:
        prior = getattr(self.design.arms[arm], "prior" if source == ANALYSIS else "design_prior")
        return Nig(prior.mean, prior.mean_n, prior.shape, prior.scale)

    @property
    def parameters(self) -> tuple[str, ...]:
        names = self.design.arm_names
        return (*(f"mean_{a}" for a in names), *(f"sd_{a}" for a in names))

    def quantities(self) -> tuple[Quantity, ...]:
        arms = self.design.arm_names
        per_arm = tuple(Quantity(f"mean_{a}", f"mean ({a})", len(arms) == 1,
                                 "normal-inverse-gamma update of the unknown-sd rule, "
                                 "Student t marginal (closed form)", True) for a in arms)
        if len(arms) == 1:
            return per_arm
        return (Quantity("difference", "mean_T − mean_C", True,
                         "difference of two Student t posteriors (the unknown-sd rule's "
                         "sinh-substituted trapezoidal rule)", False), *per_arm)

    def true_value(self, quantity: Quantity, truths: np.ndarray) -> np.ndarray:
        if quantity.name == "difference":
            return truths[:, 0] - truths[:, 1]
        return truths[:, self.parameters.index(quantity.name)]

    def cannot_draw(self, source: str) -> str | None:
        key = "prior" if source == ANALYSIS else "design_prior"
        missing = [a.name for a in self.design.arms if getattr(a, key) is None]
        what = "analysis prior" if source == ANALYSIS else "design prior"
        if not missing:
            return None
        return f"no {what} on the {series(missing)} {noun(len(missing), 'arm')}"

    def draw_truths(self, rng: np.random.Generator, size: int, source: str) -> np.ndarray:
        means, sds = [], []
        for j in range(len(self.design.arms)):
            nig = self._nig(j, source)
            variance = nig.b / rng.gamma(nig.a, 1.0, size)
            means.append(rng.normal(nig.m, np.sqrt(variance / nig.k)))
            sds.append(np.sqrt(variance))
        return np.column_stack([*means, *sds])

    def prior(self) -> NigPosteriors:
        arms = len(self.design.arms)
        return NigPosteriors(self, tuple(self._nig(j) for j in range(arms)))

    def simulate(self, rng: np.random.Generator, truths: np.ndarray) -> SampleData:
        looks = self.design.looks.per_arm
        arms, m = len(self.design.arms), truths.shape[0]
        mean = np.zeros((len(looks), arms, m))
        ss = np.zeros((len(looks), arms, m))
        previous = (0,) * arms
        for k, sizes in enumerate(looks):
            for j in range(arms):
                mu, sd = truths[:, j], truths[:, arms + j]
                old, step = previous[j], sizes[j] - previous[j]
                if step == 0:
                    mean[k, j], ss[k, j] = mean[k - 1, j], ss[k - 1, j]
                    continue
                new_mean = mu + sd * rng.standard_normal(m) / math.sqrt(step)
                new_ss = sd**2 * rng.chisquare(step - 1, m) if step > 1 else np.zeros(m)
                if old == 0:
                    mean[k, j], ss[k, j] = new_mean, new_ss
                    continue
                # pooling two groups (Chan, Golub & LeVeque 1983)
                delta = new_mean - mean[k - 1, j]
                mean[k, j] = mean[k - 1, j] + delta * step / sizes[j]
                ss[k, j] = ss[k - 1, j] + new_ss + delta**2 * old * step / sizes[j]
            previous = sizes
        return SampleData(looks, mean, ss)

    def posterior(self, data: SampleData, look: int) -> NigPosteriors:
        return NigPosteriors(self, tuple(
            self._nig(j).updated(data.n[look][j], data.mean[look, j], data.ss[look, j])
            for j in range(len(self.design.arms))))

    def typical_data(self) -> SampleData:
        looks = self.design.looks.per_arm
        arms = len(self.design.arms)
        mean = np.zeros((len(looks), arms, 1))
        ss = np.zeros((len(looks), arms, 1))
        for j in range(arms):
            nig = self._nig(j)
            for k, sizes in enumerate(looks):
                mean[k, j], ss[k, j] = nig.m, (sizes[j] - 1) * nig.b / nig.a
        return SampleData(looks, mean, ss)

    def predictive(self, source: str) -> list[Predictive]:
        out = []
        for j, arm in enumerate(self.design.arms):
            nig = self._nig(j, source)
            n = self.design.looks.per_arm[-1][j]
            scale = math.sqrt(nig.b / nig.a * (1.0 / nig.k + 1.0 / n))
            out.append(Predictive.from_mixture(
                f"sample_mean_{arm.name}", f"sample mean of {n} subjects ({arm.name})",
                [(1.0, stats.t(2.0 * nig.a, nig.m, scale))], effect=len(self.design.arms) == 1))
        if len(out) == 2:
            out.append(_difference_of(out[0], out[1]))
        return out

    def plausible_effect(self) -> tuple[float, float, str] | None:
        nigs = [self._nig(j) for j in range(len(self.design.arms))]
        if any(n.a <= 1 for n in nigs):
            return None
        sd = math.sqrt(float(np.mean([n.b / (n.a - 1.0) for n in nigs])))
        two = self.design.two_arm
        what = "difference in means" if two else "mean"
        centre = 0.0 if two else benchmark(self.design)
        reference = "no effect" if two else "the benchmark"
        return (centre - sd, centre + sd, f"an observed {what} within one subject-level sd "
                                          f"(the prior's expected sd, {sd:.4g}) of {reference}")


def _difference_of(first: Predictive, second: Predictive) -> Predictive:
    """The density of first - second (independent) by numerical convolution."""
    lo = first.values[0] - second.values[-1]
    hi = first.values[-1] - second.values[0]
    grid = np.linspace(lo, hi, 2 * first.values.size + 1)
    u = second.values
    du = u[1] - u[0]
    if first.components is None:  # the convolution needs the first as a mixture
        raise ValueError(f"{first.name}: no mixture components to convolve")
    f1 = first.components[0][1]
    density = np.array([np.sum(f1.pdf(x + u) * second.weights) * du for x in grid])
    return Predictive.from_density("observed_difference", "observed difference in means, "
                                   "T − C", grid, density, effect=True)


class NigPosteriors(Posteriors):
    """Per-arm normal-inverse-gamma posteriors (see module docstring)."""

    def __init__(self, model: UnknownSdModel, arms: tuple[Nig, ...]) -> None:
        self.model = model
        self.arms = arms

    def __len__(self) -> int:
        return int(np.size(self.arms[0].m))

    def _arm(self, quantity: Quantity) -> int | None:
        if quantity.name == "difference":
            return None
        return self.model.parameters.index(quantity.name)

    def cdf(self, quantity: Quantity, values: np.ndarray) -> np.ndarray:
        values = np.asarray(values, dtype=float)
        j = self._arm(quantity)
        if j is not None:
            return self.arms[j].t().cdf(values)
        # Pr(mu_T - mu_C <= d) = 1 - Pr((mu_T - d) - mu_C > 0), one d per study
        t, c = self.arms
        scale_t, scale_c = (np.sqrt(n.b / (n.a * n.k)) for n in (t, c))
        size = (len(self),)
        exceeds = unknown_sd.difference_sf(
            np.broadcast_to(t.m, size) - values, np.broadcast_to(scale_t, size), 2.0 * t.a,
            np.broadcast_to(c.m, size), np.broadcast_to(scale_c, size), 2.0 * c.a, 0.0)
        return np.clip(1.0 - exceeds, 0.0, 1.0)

    def mean(self, quantity: Quantity) -> np.ndarray:
        j = self._arm(quantity)
        if j is not None:
            return np.broadcast_to(self.arms[j].mean_variance()[0], (len(self),))
        return np.broadcast_to(self.arms[0].mean_variance()[0]
                               - self.arms[1].mean_variance()[0], (len(self),))

    def variance(self, quantity: Quantity) -> np.ndarray:
        j = self._arm(quantity)
        if j is not None:
            return np.broadcast_to(self.arms[j].mean_variance()[1], (len(self),))
        return np.broadcast_to(self.arms[0].mean_variance()[1]
                               + self.arms[1].mean_variance()[1], (len(self),))

    def draw(self, quantity: Quantity, rng: np.random.Generator, draws: int) -> np.ndarray:
        def one(nig: Nig) -> np.ndarray:
            c = _column(nig)
            scale = np.sqrt(c.b / (c.a * c.k))
            return c.m + scale * rng.standard_t(2.0 * c.a, (len(self), draws))

        j = self._arm(quantity)
        if j is not None:
            return one(self.arms[j])
        return one(self.arms[0]) - one(self.arms[1])


def _column(nig: Nig) -> Nig:
    """The parameters as column vectors (rows: studies)."""
    return dataclasses.replace(nig, **{f: np.reshape(np.asarray(getattr(nig, f), float),
                                                     (-1, 1)) for f in ("m", "k", "a", "b")})

