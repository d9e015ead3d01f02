"""Normal endpoint with unknown sd: posterior and predictive probabilities.

The reference implementation of the unknown-sd rule, shared by ``octrial decide`` and
the Monte Carlo kernels (which must reach the same decisions). Everything is on the
benefit scale eta = sign x mean (sign = +1 when higher is better); the
normal-inverse-gamma family is closed under that reflection (the mean flips, k, a, b do
not), so lower-is-better designs reuse the same formulas.

**Posterior** (conjugate; Gelman et al., Bayesian Data Analysis, 3rd ed., 2013, sec. 3.3).
Prior eta | s2 ~ N(m0, s2 / k0), s2 ~ InvGamma(a0, b0); data: n values with mean ybar and
sample sd s (sum of squared deviations S = (n - 1) s^2):

    k_n = k0 + n,  m_n = (k0 m0 + n ybar) / k_n,  a_n = a0 + n / 2,
    b_n = b0 + S / 2 + k0 n (ybar - m0)^2 / (2 k_n),

and eta | data is Student t with 2 a_n degrees of freedom, location m_n and scale
sqrt(b_n / (a_n k_n)).

**B, one arm**: Pr(eta > c | data) = T_{2 a_n}((m_n - c) / scale), c = sign x benchmark.

**B, two arms**: Pr(eta_T - eta_C > d | data) with independent Student t posteriors (no
closed form; the Behrens-Fisher problem): the integral of f_C(u) S_T(u + d) over u, by a
trapezoidal rule after u = loc + scale sinh(x) (:func:`difference_sf`, vectorised over
many posteriors that share their degrees of freedom, as at one look of a simulation).

**Predictive probability of final success** (the futility rule's PP). Success at the
final analysis (N subjects per arm) means B_N >= gamma, with B_N computed from the final
posterior exactly as above; PP is its probability under the posterior predictive
distribution of the M = N - n future values given the data so far (both the future mean
and the future spread are random; nothing is plugged in).

One arm, an exact one-dimensional integral. With posterior (m, k, a, b) now,
k_N = k + M and a_N = a + M / 2 are fixed, and the final location mu* = m_N and scale
follow from the future mean and G = (future sum of squares) / 2:

    mu* - m ~ t_{2a}(0, sqrt(b v / a)),  v = M / (k k_N)            (marginally)
    b_N = b + G + c2 (mu* - m)^2,      c2 = k k_N / (2 M)
    s2 | mu* ~ InvGamma(a + 1/2, beta),  beta = b + (mu* - m)^2 / (2 v)
    G | s2 ~ s2 Gamma((M - 1) / 2, 1),
    so Pr(G <= A | mu*) = I_{A / (A + beta)}((M - 1) / 2, a + 1/2)

(the last because G / beta is the ratio of two independent gamma variables, whose
X / (X + Y) is beta). With q = t_{2 a_N}^{-1}(gamma) success is mu* - c >= q sqrt(b_N /
(a_N k_N)); for q > 0 that is mu* > c and G <= A(mu*) = a_N k_N (mu* - c)^2 / q^2 - b -
c2 (mu* - m)^2, so

    PP = integral over {mu* > c, A > 0} of f(mu*) I_{A / (A + beta)}((M - 1) / 2, a + 1/2) dmu*,

a one-dimensional integral over at most two intervals (A is quadratic), by
``scipy.integrate.quad`` (:func:`predictive_one_arm`). gamma <= 0.5 (q <= 0) is handled
the same way with the complementary event. Checked against brute-force simulation of
future subjects in tests/test_unknown_sd.py.

Two arms, Monte Carlo (:func:`predictive_two_arms`): each arm's final (mu*, b_N) is drawn
from the same predictive representation (mu* from its Student t, then G from the
gamma-ratio), B_N is computed by :func:`difference_sf`, and PP is the fraction of
draws with B_N >= gamma, returned with its standard error. A Monte Carlo kernel that
simulates studies draws the future data itself and needs only B (it is the final look's
rule), except when a design has a predictive futility threshold: it must then use the
same definition (B_N >= gamma under the posterior predictive above).

The thresholds' decision tolerance is applied by the caller (B within 1e-12 of a
threshold reaches it), as everywhere in octrial; ``gamma`` here is the threshold as
compared, i.e. already lowered by the tolerance where the caller wants that.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import integrate, special, stats

QUAD = {"epsabs": 1e-13, "epsrel": 1e-12, "limit": 400}
"""Settings of ``scipy.integrate.quad`` for the one-arm predictive integral."""

SINH_STEP = 0.12
"""Trapezoidal step in x (u = loc + scale sinh(x)) for the two-arm probability."""

TAIL = 1e-16
"""Student t tail mass left out either side by the two-arm rule."""

PREDICTIVE_DRAWS = 50_000
"""Monte Carlo draws of the two-arm predictive probability (SE <= 0.0023; about 0.001
near a futility threshold of 0.05)."""

PREDICTIVE_STEP = 0.2
"""Trapezoidal step of B_N inside the predictive simulation (error about 1e-11)."""

BATCH = 20_000


@dataclass(frozen=True)
class StudentPosterior:
    """The normal-inverse-gamma posterior of eta (benefit scale).

    Attributes
    ----------
    mean, mean_n, shape, scale : float
        m_n, k_n, a_n, b_n (module docstring).
    """

    mean: float
    mean_n: float
    shape: float
    scale: float

    @property
    def df(self) -> float:
        """Degrees of freedom of eta's Student t posterior, 2 a_n."""
        return 2.0 * self.shape

    @property
    def t_scale(self) -> float:
        """Scale of eta's Student t posterior, sqrt(b_n / (a_n k_n))."""
        return math.sqrt(self.scale / (self.shape * self.mean_n))

    def distribution(self) -> stats.rv_continuous:
        """eta | data as a frozen scipy Student t."""
        return stats.t(self.df, self.mean, self.t_scale)


def update(mean: Any, mean_n: float, shape: float, scale: Any, *, n: int,
           ybar: Any, sd: Any) -> StudentPosterior:
    """Posterior after ``n`` values with mean ``ybar`` and sample sd ``sd`` (n - 1
    divisor), from the prior (mean, mean_n, shape, scale); all on the benefit scale.
    ``mean``, ``scale``, ``ybar`` and ``sd`` may be arrays of many studies (the
    posterior's fields are then arrays too).

    Examples
    --------
    >>> post = update(0.0, 1.0, 2.0, 2.0, n=9, ybar=1.0, sd=1.5)
    >>> post.mean_n, post.mean, post.shape, post.scale
    (10.0, 0.9, 6.5, 11.45)
    """
    k = mean_n + n
    m = (mean_n * mean + n * ybar) / k
    a = shape + n / 2.0
    b = scale + 0.5 * (n - 1) * sd**2 + mean_n * n * (ybar - mean) ** 2 / (2.0 * k)
    return StudentPosterior(m, k, a, b)


def benefit_one_arm(post: StudentPosterior, claim: float) -> float:
    """B = Pr(eta > claim | data)."""
    return float(special.stdtr(post.df, (post.mean - claim) / post.t_scale))


def _sinh_rule(df: float, step: float) -> tuple[np.ndarray, np.ndarray]:
    """Nodes z and weights w with sum_j w_j g(z_j) ~ E[g(Z)] for Z ~ Student t(df):
    trapezoid in x for z = sinh(x), over the range holding all but 2 :data:`TAIL`."""
    top = math.asinh(float(special.stdtrit(df, 1.0 - TAIL)))
    x = np.arange(-math.floor(top / step), math.floor(top / step) + 1) * step
    z = np.sinh(x)
    return z, step * np.cosh(x) * stats.t.pdf(z, df)


def difference_sf(
    loc_t: np.ndarray | float, scale_t: np.ndarray | float, df_t: float,
    loc_c: np.ndarray | float, scale_c: np.ndarray | float, df_c: float, d: float,
    step: float | None = None,
) -> np.ndarray:
    """Pr(eta_T - eta_C > d) for independent Student t posteriors, vectorised over the
    locations and scales (the degrees of freedom are shared).

    The integral of one arm's density against the other's distribution function, over
    the arm with the smaller scale (its density is the sharper factor), substituting
    u = loc + scale sinh(x) and using the trapezoidal rule in x, which converges
    geometrically for integrands analytic in a strip and decaying exponentially in x
    (Trefethen & Weideman 2014, SIAM Review 56: 385-458): step :data:`SINH_STEP` times the
    smallest ratio of the scales. Agrees with adaptive ``scipy.integrate.quad`` to about
    1e-14 (tests/test_unknown_sd.py); ``step`` = 0.2 (the predictive simulation's) to
    about 1e-11.
    """
    step = SINH_STEP if step is None else step
    loc_t, scale_t, loc_c, scale_c = (np.asarray(v, dtype=float)[..., None]
                                      for v in (loc_t, scale_t, loc_c, scale_c))
    if np.median(scale_c) <= np.median(scale_t):
        z, w = _sinh_rule(df_c, step * min(1.0, float(np.min(scale_t / scale_c))))
        u = loc_c + scale_c * z  # Pr(T > u + d) averaged over the control's posterior
        values = special.stdtr(df_t, (loc_t - u - d) / scale_t) @ w
    else:
        z, w = _sinh_rule(df_t, step * min(1.0, float(np.min(scale_c / scale_t))))
        u = loc_t + scale_t * z  # Pr(C < u - d) averaged over the treatment's posterior
        values = special.stdtr(df_c, (u - d - loc_c) / scale_c) @ w
    return np.clip(values, 0.0, 1.0)


def benefit_two_arms(treatment: StudentPosterior, control: StudentPosterior,
                     shift: float) -> float:
    """B = Pr(eta_T - eta_C > shift | data)."""
    return float(difference_sf(treatment.mean, treatment.t_scale, treatment.df,
                               control.mean, control.t_scale, control.df, shift))


def success_quantile(df: float, gamma: float) -> float:
    """q with T_df(q) = gamma: final success is (m_N - c) / scale_N >= q (one arm)."""
    return float(special.stdtrit(df, gamma))


def predictive_one_arm(post: StudentPosterior, future: int, claim: float,
                       gamma: float) -> float:
    """Pr(B_N >= gamma | data) after ``future`` more values (one arm; module docstring).

    Parameters
    ----------
    post : StudentPosterior
        The posterior now (benefit scale).
    future : int
        M, values still to come before the final analysis.
    claim : float
        c: success is eta > c with probability at least ``gamma``.
    gamma : float
        The final success threshold as compared.
    """
    if future <= 0:
        return float(benefit_one_arm(post, claim) >= gamma)
    m, k, a, b = post.mean, post.mean_n, post.shape, post.scale
    big_m = float(future)
    k_end, a_end = k + big_m, a + big_m / 2.0
    q = success_quantile(2.0 * a_end, gamma)
    v = big_m / (k * k_end)
    c2 = k * k_end / (2.0 * big_m)
    h = (big_m - 1.0) / 2.0
    marginal = stats.t(2.0 * a, m, math.sqrt(b * v / a))
    if q == 0.0:
        return float(marginal.sf(claim))
    lead = a_end * k_end / q**2

    def spare(x: np.ndarray | float) -> np.ndarray | float:
        """A(mu*): how much half the future sum of squares may be."""
        return lead * (x - claim) ** 2 - b - c2 * (x - m) ** 2

    def below(x: float) -> float:
        """Pr(G <= A(x) | mu* = x)."""
        room = spare(x)
        if room <= 0:
            return 0.0
        if h == 0.0:
            return 1.0
        beta = b + (x - m) ** 2 / (2.0 * v)
        return float(special.betainc(h, a + 0.5, room / (room + beta)))

    # A is quadratic in mu*: (lead - c2) x^2 - 2 (lead c - c2 m) x + lead c^2 - c2 m^2 - b
    roots = np.roots([lead - c2, -2.0 * (lead * claim - c2 * m),
                      lead * claim**2 - c2 * m**2 - b])
    cuts = sorted(float(r.real) for r in roots if abs(r.imag) < 1e-12 * (1 + abs(r.real)))
    side = (claim, np.inf) if q > 0 else (-np.inf, claim)
    edges = [side[0], *[x for x in cuts if side[0] < x < side[1]], side[1]]
    total = 0.0
    for lo, hi in itertools.pairwise(edges):
        if q > 0 and spare(_inside(lo, hi, m)) <= 0:
            continue  # A <= 0 throughout: no success here
        if q > 0:
            f = lambda x: marginal.pdf(x) * below(x)  # noqa: E731
        else:
            f = lambda x: marginal.pdf(x) * (1.0 - below(x))  # noqa: E731
        total += integrate.quad(f, lo, hi, **QUAD)[0]
    if q < 0:
        total += marginal.sf(claim)
    return float(min(1.0, max(0.0, total)))


def _inside(lo: float, hi: float, centre: float) -> float:
    """A point strictly inside (lo, hi), for infinite ends too."""
    if math.isinf(lo) and math.isinf(hi):
        return centre
    if math.isinf(lo):
        return hi - 1.0
    if math.isinf(hi):
        return lo + 1.0
    return 0.5 * (lo + hi)


def final_draws(post: StudentPosterior, future: int, rng: np.random.Generator,
                size: int) -> tuple[np.ndarray, np.ndarray]:
    """Draws of the final (location, scale) of eta's Student t posterior after
    ``future`` more values, from the posterior predictive (module docstring)."""
    m, k, a, b = post.mean, post.mean_n, post.shape, post.scale
    big_m = float(future)
    k_end, a_end = k + big_m, a + big_m / 2.0
    if future <= 0:
        return np.full(size, m), np.full(size, post.t_scale)
    v = big_m / (k * k_end)
    shift = math.sqrt(b * v / a) * rng.standard_t(2.0 * a, size)
    beta = b + shift**2 / (2.0 * v)
    h = (big_m - 1.0) / 2.0
    x = rng.standard_gamma(h, size) if h > 0 else np.zeros(size)
    g = beta * x / rng.standard_gamma(a + 0.5, size)
    b_end = b + g + k * k_end / (2.0 * big_m) * shift**2
    return m + shift, np.sqrt(b_end / (a_end * k_end))


def predictive_two_arms(
    treatment: StudentPosterior, control: StudentPosterior, future: tuple[int, int],
    shift: float, gamma: float, seed: int, draws: int = PREDICTIVE_DRAWS,
) -> tuple[float, float]:
    """(PP, its Monte Carlo standard error) for two arms (module docstring).

    Parameters
    ----------
    treatment, control : StudentPosterior
        Posteriors now (benefit scale: for lower-is-better designs the caller passes the
        arms' reflected posteriors, so the claim is eta_T - eta_C > shift).
    future : (int, int)
        Values still to come per arm.
    shift : float
        The margin on the benefit scale (superiority d, non-inferiority -d).
    gamma : float
        The final success threshold as compared.
    seed : int
    draws : int
    """
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    df_t = 2.0 * (treatment.shape + future[0] / 2.0)
    df_c = 2.0 * (control.shape + future[1] / 2.0)
    hits = 0
    done = 0
    while done < draws:
        size = min(BATCH, draws - done)
        loc_t, scale_t = final_draws(treatment, future[0], rng, size)
        loc_c, scale_c = final_draws(control, future[1], rng, size)
        b_end = difference_sf(loc_t, scale_t, df_t, loc_c, scale_c, df_c, shift,
                              PREDICTIVE_STEP)
        hits += int(np.count_nonzero(b_end >= gamma))
        done += size
    p = hits / draws
    se = math.sqrt(p * (1.0 - p) / draws) if 0 < p < 1 else 1.0 - 0.05 ** (1.0 / draws)
    return p, se
