"""Interim looks for count endpoints: events/exposure per arm.

The count family's rule depends on each arm's total events and total exposure (Poisson
counts: the likelihood in the rate is lambda^x exp(-lambda t)). Its lattice is indexed by
subjects with a fixed exposure e each, so observed exposures are placed on it as follows:

* when every arm's exposure t is a whole number of subjects (t / e whole), the design's
  own lattice is used at n = t / e, and at the planned sizes the decision is the boundary
  table's;
* otherwise the design is re-expressed in smaller units of exposure e / q (q the least
  common denominator of the arms' t / e, each written as a fraction with denominator at
  most :data:`MAX_DENOMINATOR`): n, per-arm sizes and the maximum are multiplied by q and
  the exposure per unit divided by q, which leaves every posterior and predictive
  probability unchanged (they depend on exposure only) while t becomes a whole number of
  units. A negative binomial endpoint is not re-expressed: its likelihood depends on the
  number of subjects as well, so its exposure must be whole subjects.

The lattice is truncated at counts the design's scenarios make negligible. An observed
count beyond it is served by extending the design's scenarios with a rate of at least
(x + 1) / t (the Poisson(x + 1) upper tail beyond x is far above the truncation share, so
the lattice then covers x), through :func:`octrial.rules.lattice.serving`.

Posterior summaries: each arm's rate (gamma mixture: mean in closed form, quantiles by
root finding on the mixture CDF) and, for two arms, the rate ratio treatment / control,
whose CDF is the Beta identity of :func:`octrial.endpoints.count.prob_ratio` (the same
formula as the decision) and whose mean is E[lambda_T] E[1 / lambda_C] (finite when
every control component's shape exceeds 1). Priors on a grid (log-normal rate, negative
binomial counts) give the same summaries from the grid posterior (trapezoidal moments,
quantiles interpolated on the log-rate grid; for the ratio the distribution of the
difference of log rates by discrete convolution on the shared step).
"""

from __future__ import annotations

import dataclasses
import math
from fractions import Fraction
from pathlib import Path
from typing import Any

import numpy as np
from scipy import interpolate, optimize

from octrial.design import limits
from octrial.design.model import Design
from octrial.endpoints import grid_family
from octrial.endpoints.count import GammaMixture, GammaPosterior, prob_ratio, update
from octrial.errors import Problem, SettingsError
from octrial.interim import adequacy
from octrial.interim.base import EndpointInterim, Frame, PosteriorSummary, disagreement
from octrial.interim.observations import COUNT, SETTING, CountData
from octrial.interim.rule import observed_design
from octrial.interim.subjects import read_subjects
from octrial.numerics.parameter_grid import Grid, GridPosterior
from octrial.plurals import count
from octrial.rules.lattice import serving

MAX_DENOMINATOR = 1000
"""Largest denominator of an arm's exposure in subjects (t / e) taken as exact."""

EXACT = 1e-9
"""Relative difference below which exposure / (e / q) counts as a whole number of units."""

SUMS = 1e-6
"""Relative difference in total exposure between --data and a per-subject file that is
put down to rounding (a larger one is an error)."""

XTOL = 1e-12

REACH_STEP = 1.25
"""Rates added to serve counts beyond the lattice are powers of this."""


def units(design: Design, observed: dict[str, Any]) -> tuple[int, tuple[int, ...], float]:
    """(q, sizes in units of e / q, largest relative rounding of an exposure)."""
    e = design.endpoint.exposure
    fractions = []
    rounding = 0.0
    for arm in design.arm_names:
        ratio = observed[arm].exposure / e
        fraction = Fraction(ratio).limit_denominator(MAX_DENOMINATOR)
        rounding = max(rounding, abs(float(fraction) - ratio) / ratio)
        fractions.append(fraction)
    q = math.lcm(*(f.denominator for f in fractions))
    return q, tuple(int(f * q) for f in fractions), rounding


def rescaled(design: Design, q: int) -> Design:
    """``design`` in units of exposure e / q (every probability unchanged)."""
    if q == 1:
        return design
    looks = design.looks
    endpoint = dataclasses.replace(design.endpoint, exposure=design.endpoint.exposure / q)
    new_looks = dataclasses.replace(
        looks, n=tuple(n * q for n in looks.n),
        per_arm=tuple(tuple(n * q for n in row) for row in looks.per_arm))
    return dataclasses.replace(design, endpoint=endpoint, looks=new_looks)


def covering(design: Design, look: int, sizes: tuple[int, ...],
             events: tuple[int, ...]) -> Design:
    """``design`` with scenarios extended, when needed, so that the lattice of the rule at
    ``look`` (from 1) holds ``events`` at ``sizes`` (module docstring). The added rate is
    rounded up to a power of :data:`REACH_STEP`, so nearby counts share one extension."""
    family = design.family
    reduced = observed_design(design, look - 1, sizes)
    if all(x < family.lattice_size(reduced, j, n) for j, (x, n) in enumerate(
            zip(events, sizes, strict=True))):
        return design
    e = design.endpoint.exposure
    reach = family.lattice_reach(design)
    needed = [REACH_STEP ** math.ceil(math.log((x + 1) / (n * e), REACH_STEP))
              for x, n in zip(events, sizes, strict=True)]
    return serving(design, np.array([tuple(max(r, top) for r, top in zip(
        needed, reach, strict=True))]))


def gamma_quantile(post: GammaPosterior, q: float) -> float:
    """The ``q`` quantile of a one-point gamma-mixture posterior."""
    hi = float(np.max((post.a + 10 * np.sqrt(post.a) + 10) / post.b))
    while post.cdf(hi)[0] < q:
        hi *= 2
    return optimize.brentq(lambda t: post.cdf(t)[0] - q, 0.0, hi, xtol=XTOL * hi,
                           rtol=1e-13)


def ratio_quantile(treatment: GammaPosterior, control: GammaPosterior, q: float) -> float:
    """The ``q`` quantile of lambda_T / lambda_C for one-point posteriors."""
    def cdf(log_r: float) -> float:
        return prob_ratio(treatment, control, math.exp(log_r), below=True)[0, 0] - q
    centre = math.log(treatment.mean()[0] / control.mean()[0])
    lo, hi = centre - 1.0, centre + 1.0
    while cdf(lo) > 0:
        lo -= 2 * (hi - lo)
    while cdf(hi) < 0:
        hi += 2 * (hi - lo)
    return math.exp(optimize.brentq(cdf, lo, hi, xtol=1e-13, rtol=1e-13))


def ratio_mean(treatment: GammaPosterior, control: GammaPosterior) -> float | None:
    """E[lambda_T / lambda_C] = E[lambda_T] E[1 / lambda_C], or ``None`` when infinite
    (some control component with shape <= 1)."""
    if np.any(control.a <= 1):
        return None
    inverse = float(np.sum(control.weights * control.b / (control.a - 1)))
    return float(treatment.mean()[0]) * inverse


def grid_quantiles(nodes: np.ndarray, cdf: np.ndarray, density: np.ndarray,
                   qs: tuple[float, ...]) -> list[float]:
    """Quantiles from a CDF and density tabulated on equally spaced nodes: the cubic
    Hermite interpolant of the CDF (values and slopes at both ends of the interval that
    holds q; error of order step^4) solved for q."""
    out = []
    for q in qs:
        i = int(np.clip(np.searchsorted(cdf, q) - 1, 0, nodes.size - 2))
        spline = interpolate.CubicHermiteSpline(nodes[i:i + 2], cdf[i:i + 2],
                                                density[i:i + 2])
        lo, hi = nodes[i], nodes[i + 1]
        if (spline(lo) - q) * (spline(hi) - q) > 0:  # q outside the tabulated range
            out.append(float(lo if q <= cdf[i] else hi))
            continue
        out.append(optimize.brentq(lambda x, f=spline, q=q: float(f(x)) - q, lo, hi,
                                   xtol=1e-15))
    return out


class CountInterim(EndpointInterim):
    """events/exposure per arm."""

    endpoint = "count"
    syntax = COUNT
    size_word = "exposure"

    # -- sizes -----------------------------------------------------------------------
    def sizes(self, design: Design, observed: dict[str, Any]) -> tuple[int, ...]:
        """Sizes in units of exposure e / q (see :func:`units`)."""
        return units(design, observed)[1]

    def frame(self, design: Design, observed: dict[str, Any], look: int) -> Frame:
        q, sizes, _ = units(design, observed)
        if q != 1 and design.endpoint.model == "negative-binomial":
            e = design.endpoint.exposure
            raise SettingsError(SETTING, [Problem(
                arm, f"a whole number of subjects' exposure (a multiple of {e:g}: the "
                "negative binomial model depends on the number of subjects)",
                f"{observed[arm].exposure:g}")
                for arm in design.arm_names
                if not float(observed[arm].exposure / e).is_integer()])
        on = rescaled(design, q)
        covered = covering(on, look, sizes, self.statistics(on, observed))
        # counts far beyond the design's scenarios extend the lattice: size it first
        limits.require_lattice_fits(covered, SETTING, "", "fewer events per exposure, or "
                                    "an exposure that is a whole number of subjects")
        return Frame(covered, sizes)

    def quantity(self, design: Design, n: float) -> str:
        return f"{n * design.endpoint.exposure:.6g}"

    def amount(self, design: Design, n: float) -> str:
        return f"exposure {self.quantity(design, n)}"

    def statistics(self, design: Design, observed: dict[str, Any]) -> tuple[int, ...]:
        return tuple(observed[arm].events for arm in design.arm_names)

    def warnings(self, design: Design, observed: dict[str, Any]) -> tuple[str, ...]:
        q, sizes, rounding = units(design, observed)
        if rounding <= EXACT:
            return ()
        e = design.endpoint.exposure / q
        taken = ", ".join(f"{arm} {n * e:.10g}" for arm, n in zip(
            design.arm_names, sizes, strict=True))
        unit = "" if q == 1 else f" (1/{q} of the exposure per subject)"
        return (f"Exposures were rounded to a multiple of {e:.6g}{unit} for the count "
                f"lattice: {taken}; relative change up to {rounding:.1e}.",)

    def extra_record(self, design: Design, frame: Frame, look: int) -> dict[str, Any]:
        e = design.endpoint.exposure
        looks = design.looks
        unit = frame.design.endpoint.exposure
        arms = design.arm_names
        return {
            "exposure_per_subject": e,
            "planned_exposure": {a: n * e for a, n in zip(arms, looks.per_arm[look - 1],
                                                         strict=True)},
            "remaining_exposure": {a: top * e - n * unit for a, top, n in zip(
                arms, looks.per_arm[-1], frame.sizes, strict=True)},
        }

    # -- words and summaries ---------------------------------------------------------
    def statement(self, design: Design) -> str:
        h = design.hypothesis
        side = ">" if h.better == "higher" else "<"
        if not design.two_arm:
            return f"Pr(rate {side} {h.benchmark:g} | data)"
        return f"Pr(rate_treatment / rate_control {side} {h.threshold:g} | data)"

    def summaries(
        self, design: Design, observed: dict[str, Any], level: float,
    ) -> tuple[PosteriorSummary, ...]:
        tail = (1.0 - level) / 2.0
        qs = (tail, 1.0 - tail)
        if design.family.on_grid(design):
            return self._grid_summaries(design, observed, qs)
        posts = [update(arm.prior, observed[arm.name].exposure,
                        np.array([observed[arm.name].events])) for arm in design.arms]
        out = [PosteriorSummary(f"rate ({arm})", float(post.mean()[0]),
                                gamma_quantile(post, qs[0]), gamma_quantile(post, qs[1]))
               for arm, post in zip(design.arm_names, posts, strict=True)]
        if design.two_arm:
            treatment, control = posts
            out.append(PosteriorSummary(
                "rate ratio (treatment / control)", ratio_mean(treatment, control),
                ratio_quantile(treatment, control, qs[0]),
                ratio_quantile(treatment, control, qs[1])))
        return tuple(out)

    def _grid_summaries(self, design: Design, observed: dict[str, Any],
                        qs: tuple[float, float]) -> tuple[PosteriorSummary, ...]:
        e = design.endpoint.exposure
        posts = [grid_family.posterior(design, j, observed[arm].exposure / e,
                                       np.array([observed[arm].events]))
                 for j, arm in enumerate(design.arm_names)]
        out = []
        for arm, post in zip(design.arm_names, posts, strict=True):
            nodes = post.grid.nodes
            mean = float(post.weights[0] @ np.exp(nodes))
            lower, upper = grid_quantiles(nodes, post.cdf()[0], post.density[0], qs)
            out.append(PosteriorSummary(f"rate ({arm})", mean, math.exp(lower),
                                        math.exp(upper)))
        if design.two_arm:
            treatment, control = posts
            # density of log lambda_T - log lambda_C on the shared step
            h = treatment.grid.step
            density = h * np.convolve(treatment.density[0], control.density[0][::-1])
            start = (treatment.grid.anchor - control.grid.anchor
                     + h * (treatment.grid.lo - control.grid.hi))
            difference = GridPosterior(Grid(start, h, 0, density.size - 1), density[None])
            nodes, cdf = difference.grid.nodes, difference.cdf()[0]
            mean = (float(treatment.weights[0] @ np.exp(treatment.grid.nodes))
                    * float(control.weights[0] @ np.exp(-control.grid.nodes)))
            lower, upper = grid_quantiles(nodes, cdf, density, qs)
            out.append(PosteriorSummary("rate ratio (treatment / control)", mean,
                                        math.exp(lower), math.exp(upper)))
        return tuple(out)

    # -- per-subject data ------------------------------------------------------------
    subject_outcome = "events"

    def read_subject_file(self, design: Design, path: Path) -> dict[str, dict[str, Any]]:
        return read_subjects(str(path), design.arm_names, "events", whole=True,
                             exposure=design.endpoint.exposure)

    def observed_from_subjects(self, design: Design, path: Path,
                               data: dict[str, dict[str, Any]]) -> dict[str, Any]:
        return {arm: CountData(int(data[arm]["events"].sum()),
                               float(data[arm]["exposure"].sum()))
                for arm in design.arm_names}

    def disagreements(self, design: Design, path: Path, from_file: dict[str, Any],
                      given: dict[str, Any]) -> list[Problem]:
        """Events must be equal; total exposures equal up to :data:`SUMS` (relative)."""
        out = []
        for arm in design.arm_names:
            file, typed = from_file[arm], given[arm]
            if file.events != typed.events or abs(file.exposure - typed.exposure) > (
                    SUMS * typed.exposure):
                out.append(disagreement(
                    arm, path, f"{count(file.events, 'event')} in exposure {file.exposure:.10g}",
                    f"{count(typed.events, 'event')} in exposure {typed.exposure:.10g}"))
        return out

    def check_subjects(
        self, design: Design, path: Path, data: dict[str, dict[str, Any]], seed: int,
    ) -> tuple[tuple[Any, ...], tuple[str, ...]]:
        endpoint = design.endpoint
        priors = [arm.prior for arm in design.arms]
        if endpoint.model != "poisson" or not all(isinstance(p, GammaMixture)
                                                   for p in priors):
            if endpoint.model != "poisson":
                what = "a negative binomial endpoint"
            elif any(p is None for p in priors):
                what = "a rule in counts without an analysis prior"
            else:
                what = "a log-normal prior"
            return (), (f"No posterior predictive check of the data model for {what} (the "
                        "checks use the conjugate Poisson-gamma posterior): the per-subject "
                        f"file {path} gave the data only.",)
        checks: list[Any] = []
        for j, (arm, prior) in enumerate(zip(design.arm_names, priors, strict=True)):
            checks += adequacy.count_checks(
                arm, data[arm]["events"], data[arm]["exposure"],
                weights=np.array(prior.weights), shape=np.array(prior.a),
                rate=np.array(prior.b), seed=arm_seed(seed, j))
        return tuple(checks), ()


def arm_seed(seed: int, arm: int) -> int:
    """An independent seed per arm from the user's seed (SeedSequence entropy pooling)."""
    return int(np.random.SeedSequence([seed, arm]).generate_state(1, np.uint64)[0])
