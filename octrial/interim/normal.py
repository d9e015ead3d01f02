"""Interim looks for normal endpoints: mean,sd,n per arm.

**Known sd.** The rule is a pair of bounds per look on the score (the sample mean, or the
difference in sample means, times the information; :mod:`octrial.rules.normal`). At an
interim look the rule is rebuilt for the observed sizes (this look at the observed
sizes, the planned final look after it: :func:`octrial.interim.rule.observed_design`),
and the decision is read off those bounds on the scale of the boundary table (sample mean
or difference in sample means, exactly the numbers in ``boundaries.csv``), so at the
planned sizes it is the table's decision at, and on either side of, every bound. B and
the predictive probability at the observed point are computed by the same functions that
place the bounds (:func:`octrial.rules.normal.benefit` and
:func:`octrial.rules.normal.predictive`: the future score is normal given the data, so
PP is a mixture of normal tail probabilities) and the decision and its reason come from
:func:`octrial.interim.rule.probability_decision`. The two readings of the rule agree
except within root-finding accuracy of a bound, where B (or PP) equals its threshold to
about 1e-12; there the table's reading is kept and the reason says so. The observed sd is
not used by the analysis; a two-sided chi-square test ((n - 1) s^2 / sd^2 against
chi-square with n - 1 degrees of freedom; common practice) warns when it is far from the
design's sd.

**Unknown sd.** Per arm a normal-inverse-gamma posterior; B and PP come from
:mod:`octrial.endpoints.unknown_sd` (one arm: Student t and an exact one-dimensional
integral; two arms: a trapezoidal rule for B and Monte Carlo with a standard error for
PP). There is no table of bounds (the decision depends on the sample mean and sd
together), so the decision is :func:`~octrial.interim.rule.probability_decision` alone.

Posterior summaries: known sd, the mean (one arm) or the difference in means (two arms),
whose posterior is a normal mixture (quantiles by root finding on its CDF); unknown sd,
each arm's mean (Student t) and sd (sqrt of the inverse-gamma variance: mean
sqrt(b) Gamma(a - 1/2) / Gamma(a), quantiles the square roots of the inverse-gamma's) and
for two arms the difference in means (mean m_T - m_C; quantiles by root finding on
:func:`~octrial.endpoints.unknown_sd.difference_sf`).
"""

from __future__ import annotations

import functools
import math
from pathlib import Path
from typing import Any

import numpy as np
from scipy import optimize, special, stats

from octrial.design.model import Design
from octrial.endpoints import unknown_sd
from octrial.endpoints.normal import Flat, NormalPosterior, update
from octrial.errors import InputError, Problem
from octrial.interim import adequacy
from octrial.interim.base import EndpointInterim, PosteriorSummary, disagreement
from octrial.interim.count import arm_seed
from octrial.interim.observations import NORMAL, NormalData
from octrial.interim.rule import (
    CONTINUE,
    FAILURE,
    STOP_EFFICACY,
    STOP_FUTILITY,
    SUCCESS,
    Assessment,
    observed_design,
    probability_decision,
    thresholds_at,
)
from octrial.interim.subjects import read_subjects
from octrial.rules.normal import NormalRule, benefit, build_normal_rule, predictive
from octrial.rules.stop import DECISION_TOLERANCE

SD_CHECK = 0.05
"""Two-sided p-value of the chi-square test of the observed sd below which a known-sd
design warns."""

KNIFE_EDGE = 1e-9
"""Largest distance of B (or PP) from its threshold at which the bound reading and the
probability reading may differ (root-finding accuracy of the bounds)."""

AGREE = 0.01
"""Per-subject mean and sd may differ from --data by this fraction of the sd (rounding)
before they disagree (an error)."""

VAGUE = 1e6
"""Prior sd, in units of the data sd, of the vague per-arm prior used by the known-sd
adequacy checks of a two-arm design (spread and skewness do not depend on the mean)."""


@functools.lru_cache(maxsize=64)
def observed_rule(design: Design, k: int, sizes: tuple[int, ...]) -> tuple[Design, NormalRule]:
    """The known-sd rule of look ``k`` (from 0) at ``sizes``, then the planned final look."""
    reduced = observed_design(design, k, sizes)
    return reduced, build_normal_rule(reduced)


def mixture_quantile(post: NormalPosterior, q: float) -> float:
    """The ``q`` quantile of a one-point normal-mixture posterior (benefit scale)."""
    sd = 1.0 / np.sqrt(post.precision[0])
    lo = float(np.min(post.mean[0] - 40 * sd))
    hi = float(np.max(post.mean[0] + 40 * sd))
    return optimize.brentq(lambda x: 1.0 - post.sf(x)[0] - q, lo, hi, xtol=1e-14 * (
        1 + abs(hi)), rtol=1e-14)


class NormalInterim(EndpointInterim):
    """mean,sd,n per arm."""

    endpoint = "normal"
    syntax = NORMAL

    def sizes(self, design: Design, observed: dict[str, Any]) -> tuple[int, ...]:
        return tuple(observed[arm].n for arm in design.arm_names)

    def statistics(self, design: Design, observed: dict[str, Any]) -> tuple[int, ...]:
        """Normal data have no lattice point (see :meth:`assess_point`)."""
        return ()

    def has_prior(self, design: Design) -> bool:
        if design.endpoint.known_sd:
            return design.family.analysis_prior(design) is not None
        return super().has_prior(design)

    def statement(self, design: Design) -> str:
        h = design.hypothesis
        side = ">" if h.better == "higher" else "<"
        if not design.two_arm:
            return f"Pr(mean {side} {h.benchmark:g} | data)"
        better, worse = ("treatment", "control") if h.better == "higher" else (
            "control", "treatment")
        return f"Pr(mean_{better} - mean_{worse} > {h.shift:g} | data)"

    @staticmethod
    def estimate(design: Design, observed: dict[str, Any]) -> float:
        """The sample mean (one arm) or the difference in sample means."""
        means = [observed[arm].mean for arm in design.arm_names]
        return means[0] if len(means) == 1 else means[0] - means[1]

    # -- the rule at the observed point ---------------------------------------------
    def assess_point(self, design: Design, look: int, sizes: tuple[int, ...],
                     observed: dict[str, Any], seed: int) -> Assessment:
        if design.endpoint.known_sd:
            return self._known(design, look, sizes, observed)
        return self._unknown(design, look, sizes, observed, seed)

    def _known(self, design: Design, look: int, sizes: tuple[int, ...],
               observed: dict[str, Any]) -> Assessment:
        k, last = look - 1, look == design.looks.count
        family, h = design.family, design.hypothesis
        reduced, rule = observed_rule(design, k, tuple(sizes))
        now, end = rule.looks[0], rule.looks[-1]
        prior = family.analysis_prior(design)
        value = h.sign * self.estimate(design, observed)  # on the benefit scale
        score = np.array([now.information * value])
        b = float(benefit(prior, h.sign, now.information, rule.claim, score)[0])
        pp = None if last else float(predictive(prior, h.sign, now.information,
                                                end.information, end.upper, score)[0])
        th = thresholds_at(design, k, sum(sizes))
        decision, reason = probability_decision(th, b, pp, last, self.statement(design))
        # the bounds on the table's scale: value >= upper / I, value < lower / I
        if value >= now.upper / now.information:
            table = SUCCESS if last else STOP_EFFICACY
        elif value < now.lower / now.information:
            table = FAILURE if last else STOP_FUTILITY
        else:
            table = CONTINUE
        if decision != table:
            gaps = [abs(b - t) for t in (th.efficacy, th.futility) if t is not None]
            if pp is not None and th.futility_predictive is not None:
                gaps.append(abs(pp - th.futility_predictive))
            if min(gaps, default=math.inf) > KNIFE_EDGE + DECISION_TOLERANCE:
                raise ArithmeticError(f"decision {decision!r} differs from the bounds' "
                                      f"{table!r} at {value}")
            decision = table
            reason += ("; the estimate lies on the boundary (within its numerical "
                       "accuracy), where the boundary table decides")
        rows = rule.boundary_table(reduced).iloc[0]
        names = ("success", "failure") if last else ("efficacy", "futility")
        bounds = {names[0]: rows["efficacy_rule"], names[1]: rows["futility_rule"]}
        return Assessment(b, pp, th, decision, reason, bounds)

    def bound_rules(self, design: Design, look: int,
                    sizes: tuple[int, ...]) -> tuple[str, str] | None:
        if not design.endpoint.known_sd:
            return None
        reduced, rule = observed_rule(design, look - 1, tuple(sizes))
        row = rule.boundary_table(reduced).iloc[0]
        return row["efficacy_rule"], row["futility_rule"]

    def posteriors(self, design: Design,
                   observed: dict[str, Any]) -> list[unknown_sd.StudentPosterior]:
        """Unknown sd: each arm's posterior on the data's own scale."""
        out = []
        for arm in design.arms:
            p, data = arm.prior, observed[arm.name]
            out.append(unknown_sd.update(p.mean, p.mean_n, p.shape, p.scale, n=data.n,
                                         ybar=data.mean, sd=data.sd))
        return out

    def _unknown(self, design: Design, look: int, sizes: tuple[int, ...],
                 observed: dict[str, Any], seed: int) -> Assessment:
        k, last = look - 1, look == design.looks.count
        h = design.hypothesis
        posts = [reflect(p, h.sign) for p in self.posteriors(design, observed)]
        final = thresholds_at(design, design.looks.count - 1, design.looks.n[-1]).efficacy
        assert final is not None  # the final look always has a success threshold (load.py)
        gamma = final - DECISION_TOLERANCE
        future = tuple(top - n for top, n in zip(design.looks.per_arm[-1], sizes,
                                                  strict=True))
        se = None
        if not design.two_arm:
            assert h.benchmark is not None  # one arm (load.py)
            claim = h.sign * h.benchmark
            b = unknown_sd.benefit_one_arm(posts[0], claim)
            pp = None if last else unknown_sd.predictive_one_arm(posts[0], future[0], claim,
                                                                 gamma)
        else:
            b = unknown_sd.benefit_two_arms(posts[0], posts[1], h.shift)
            pp = None
            if not last:
                pp, se = unknown_sd.predictive_two_arms(posts[0], posts[1],
                                                        (future[0], future[1]), h.shift,
                                                        gamma, seed)
        th = thresholds_at(design, k, sum(sizes))
        decision, reason = probability_decision(th, b, pp, last, self.statement(design))
        return Assessment(b, pp, th, decision, reason, _probability_bounds(th, last), se)

    # -- summaries -------------------------------------------------------------------
    def summaries(
        self, design: Design, observed: dict[str, Any], level: float,
    ) -> tuple[PosteriorSummary, ...]:
        tail = (1.0 - level) / 2.0
        if design.endpoint.known_sd:
            family = design.family
            info = family.information(design, self.sizes(design, observed))
            prior = family.analysis_prior(design)
            # the parameter's own scale: sign +1
            post = update(prior, 1, info, np.array([info * self.estimate(design, observed)]))
            name = ("difference in means (treatment - control)" if design.two_arm
                    else f"mean ({design.arm_names[0]})")
            mean = float(np.sum(post.weights * post.mean))
            return (PosteriorSummary(name, mean, mixture_quantile(post, tail),
                                     mixture_quantile(post, 1.0 - tail)),)
        posts = self.posteriors(design, observed)
        out = []
        for arm, student in zip(design.arm_names, posts, strict=True):
            t = student.distribution()
            centre = student.mean if student.df > 1 else None  # no mean below 1 df
            out.append(PosteriorSummary(f"mean ({arm})", centre, float(t.ppf(tail)),
                                        float(t.ppf(1.0 - tail))))
            out.append(sd_summary(arm, student, tail))
        if design.two_arm:
            treatment, control = posts

            def above(d: float) -> float:
                return unknown_sd.benefit_two_arms(treatment, control, d)
            span = 50 * (treatment.t_scale + control.t_scale)
            centre = treatment.mean - control.mean
            lo, hi = centre - span, centre + span
            quantiles = [optimize.brentq(lambda d, q=q: (1 - above(d)) - q, lo, hi,
                                         xtol=1e-12 * (1 + abs(centre)), rtol=1e-13)
                         for q in (tail, 1.0 - tail)]
            out.append(PosteriorSummary("difference in means (treatment - control)",
                                        centre, *quantiles))
        return tuple(out)

    # -- observations and per-subject data --------------------------------------------
    def warnings(self, design: Design, observed: dict[str, Any]) -> tuple[str, ...]:
        sd = design.endpoint.sd
        if sd is None:
            return ()
        out = []
        for arm in design.arm_names:
            data = observed[arm]
            ratio = (data.n - 1) * data.sd**2 / sd**2
            low = stats.chi2.cdf(ratio, data.n - 1)
            p = min(1.0, 2 * min(low, 1 - low))
            if p < SD_CHECK:
                wider = data.sd > sd
                out.append(
                    f"The {arm} sample sd ({data.sd:g}) is {'larger' if wider else 'smaller'} "
                    f"than the design's known sd ({sd:g}) by more than chance explains "
                    f"(chi-square test, two-sided p = {p:.2g}). The analysis uses the known "
                    f"sd, so its posterior is {'too narrow' if wider else 'too wide'}; "
                    "consider an unknown-sd design.")
        return tuple(out)

    # -- per-subject data: values; mean, sd (divisor n - 1) and n --------------------
    subject_outcome = "value"

    def read_subject_file(self, design: Design, path: Path) -> dict[str, dict[str, Any]]:
        return read_subjects(str(path), design.arm_names, "value", whole=False)

    def observed_from_subjects(self, design: Design, path: Path,
                               data: dict[str, dict[str, Any]]) -> dict[str, Any]:
        out = {}
        for arm in design.arm_names:
            values = data[arm]["value"]
            sd = float(values.std(ddof=1))
            if not sd > 0:
                raise InputError(str(path), [Problem(
                    arm, "values that are not all equal (a sample sd > 0)",
                    f"{values.size} equal values")])
            out[arm] = NormalData(float(values.mean()), sd, int(values.size))
        return out

    def disagreements(self, design: Design, path: Path, from_file: dict[str, Any],
                      given: dict[str, Any]) -> list[Problem]:
        """n must be equal; mean and sd equal to within :data:`AGREE` of the sd."""
        out = []
        for arm in design.arm_names:
            file, typed = from_file[arm], given[arm]
            if file.n != typed.n or abs(file.mean - typed.mean) > AGREE * typed.sd or abs(
                    file.sd - typed.sd) > AGREE * typed.sd:
                out.append(disagreement(
                    arm, path, f"mean {file.mean:.10g}, sd {file.sd:.10g}, n = {file.n}",
                    f"mean {typed.mean:g}, sd {typed.sd:g}, n = {typed.n}"))
        return out

    def check_subjects(
        self, design: Design, path: Path, data: dict[str, dict[str, Any]], seed: int,
    ) -> tuple[tuple[Any, ...], tuple[str, ...]]:
        checks: list[Any] = []
        for j, arm in enumerate(design.arms):
            values = data[arm.name]["value"]
            seed_j = arm_seed(seed, j)
            if design.endpoint.known_sd:
                sd = design.endpoint.sd
                prior = arm.prior if not design.two_arm else None
                if prior is None or isinstance(prior, Flat):
                    weights, means, sds = [1.0], [float(values.mean())], [VAGUE * sd]
                else:
                    weights, means, sds = prior.weights, prior.mean, prior.sd
                checks += adequacy.normal_known_sd_checks(
                    arm.name, values, sd=sd, weights=np.array(weights),
                    means=np.array(means), sds=np.array(sds), seed=seed_j)
            else:
                p = arm.prior
                checks += adequacy.normal_unknown_sd_checks(
                    arm.name, values, m0=p.mean, k0=p.mean_n, a0=p.shape, b0=p.scale,
                    seed=seed_j)
        return tuple(checks), ()


def reflect(post: unknown_sd.StudentPosterior, sign: int) -> unknown_sd.StudentPosterior:
    """The posterior of sign x mean (the benefit scale)."""
    return unknown_sd.StudentPosterior(sign * post.mean, post.mean_n, post.shape, post.scale)


def sd_summary(arm: str, post: unknown_sd.StudentPosterior, tail: float) -> PosteriorSummary:
    """Posterior mean and interval of sigma, with sigma^2 ~ InvGamma(a_n, b_n)."""
    a, b = post.shape, post.scale
    mean = math.sqrt(b) * math.exp(special.gammaln(a - 0.5) - special.gammaln(a))
    variance = stats.invgamma(a, scale=b)
    return PosteriorSummary(f"sd ({arm})", mean, math.sqrt(variance.ppf(tail)),
                            math.sqrt(variance.ppf(1.0 - tail)))


def _probability_bounds(th: Any, last: bool) -> dict[str, str]:
    """The rule in words where no bound on one statistic exists (unknown sd)."""
    efficacy = "never" if th.efficacy is None else f"posterior >= {th.efficacy:g}"
    if last:
        return {"success": efficacy, "failure": f"posterior < {th.efficacy:g}"}
    futility = [f"posterior < {th.futility:g}"] if th.futility is not None else []
    if th.futility_predictive is not None:
        futility.append(f"predictive < {th.futility_predictive:g}")
    return {"efficacy": efficacy, "futility": " or ".join(futility) or "never"}
