"""Posterior predictive checks of the data model on per-subject data.

For a statistic T of the data, replicated data sets y_rep are drawn from the posterior
predictive distribution (parameters from the posterior given the observed y, then data
from the model), and the observed T(y) is compared with the distribution of T(y_rep)
(Gelman, Meng & Stern 1996; Gelman et al., Bayesian Data Analysis, 3rd ed., 2013, ch. 6).
The two tail probabilities Pr(T(y_rep) >= T(y) | y) and Pr(T(y_rep) <= T(y) | y) are
reported, with the two-sided value 2 min(both) (capped at 1); below :data:`FLAG` the
statistic is flagged with a plain-words verdict. Posterior predictive p-values are
conservative (Bayarri & Berger 2000), so a flag is a strong signal and no flag is weak
reassurance.

Models and statistics:

* counts, Poisson(lambda x exposure) with a gamma-mixture prior on lambda: the number of
  zeros and the variance-to-mean ratio of the counts;
* normal data with known sd and a normal-mixture prior on the mean: the sample standard
  deviation and skewness;
* normal data with unknown sd and a normal-inverse-gamma prior: the same two statistics.

Conjugate updates (the formulas are in docs/methods.md):

* gamma mixture: components Gamma(a_j + x, b_j + t), weights proportional to
  w_j b_j^a_j Gamma(a_j + x) / (Gamma(a_j) (b_j + t)^(a_j + x));
* normal mixture, known sd: precision 1/s_j^2 + n/sd^2, mean (m_j/s_j^2 + n ybar/sd^2) /
  precision, weights proportional to w_j N(ybar; m_j, s_j^2 + sd^2/n);
* normal-inverse-gamma: k_n = k0 + n, m_n = (k0 m0 + n ybar) / k_n, a_n = a0 + n/2,
  b_n = b0 + S/2 + k0 n (ybar - m0)^2 / (2 k_n), with S the sum of squared deviations.

These functions take the prior's numbers directly, so each endpoint family wires them to
its own prior values.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special, stats

from octrial.endpoints import unknown_sd

DRAWS = 20_000
"""Replicated data sets per check; the p-values' Monte Carlo error is at most 0.0036."""

BATCH = 2_000
"""Replicated data sets drawn at once (bounds memory for large studies)."""

FLAG = 0.05
"""Two-sided posterior predictive p-value below which a statistic is flagged."""

INTERVAL = 0.95
"""Central probability of the predictive range shown beside the observed statistic."""


@dataclass(frozen=True)
class AdequacyCheck:
    """One statistic against its posterior predictive distribution.

    Attributes
    ----------
    arm : str
    statistic : str
        'zeros', 'variance-to-mean ratio', 'standard deviation' or 'skewness'.
    observed : float
    predictive_mean, predictive_lower, predictive_upper : float
        Mean and central 95% range of the statistic over replicated data sets.
    p_upper, p_lower : float
        Pr(T(y_rep) >= T(y) | y) and Pr(T(y_rep) <= T(y) | y).
    p_value : float
        Two-sided: min(1, 2 min(p_upper, p_lower)).
    draws : int
        Replicated data sets used (those where the statistic is defined).
    flagged : bool
        Whether ``p_value`` < :data:`FLAG`.
    verdict : str
        Plain words.
    """

    arm: str
    statistic: str
    observed: float
    predictive_mean: float
    predictive_lower: float
    predictive_upper: float
    p_upper: float
    p_lower: float
    p_value: float
    draws: int
    flagged: bool
    verdict: str


# -- conjugate posteriors ------------------------------------------------------------

def gamma_mixture_posterior(
    weights: np.ndarray, shape: np.ndarray, rate: np.ndarray, events: float, exposure: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Posterior of a Poisson rate under a gamma mixture: (weights, shapes, rates)."""
    w, a, b = (np.asarray(v, dtype=float) for v in (weights, shape, rate))
    a_post, b_post = a + events, b + exposure
    log_w = (np.log(w) + a * np.log(b) - special.gammaln(a) + special.gammaln(a_post)
             - a_post * np.log(b_post))
    return np.exp(log_w - special.logsumexp(log_w)), a_post, b_post


def normal_mixture_posterior(
    weights: np.ndarray, means: np.ndarray, sds: np.ndarray, ybar: float, n: int, sd: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Posterior of a normal mean (known sd) under a normal mixture: (weights, means, sds)."""
    w, m, s = (np.asarray(v, dtype=float) for v in (weights, means, sds))
    precision = 1.0 / s**2 + n / sd**2
    mean = (m / s**2 + n * ybar / sd**2) / precision
    log_w = np.log(w) + stats.norm.logpdf(ybar, m, np.sqrt(s**2 + sd**2 / n))
    return np.exp(log_w - special.logsumexp(log_w)), mean, 1.0 / np.sqrt(precision)


def normal_inverse_gamma_posterior(
    m0: float, k0: float, a0: float, b0: float, values: np.ndarray,
) -> tuple[float, float, float, float]:
    """Posterior (m_n, k_n, a_n, b_n) of the normal-inverse-gamma prior
    mu | s2 ~ N(m0, s2 / k0), s2 ~ InvGamma(a0, b0)
    (:func:`octrial.endpoints.unknown_sd.update` on the values' mean and sd)."""
    y = np.asarray(values, dtype=float)
    post = unknown_sd.update(m0, k0, a0, b0, n=y.size, ybar=float(np.mean(y)),
                             sd=float(np.std(y, ddof=1)) if y.size > 1 else 0.0)
    return post.mean, post.mean_n, post.shape, post.scale


# -- statistics ----------------------------------------------------------------------

def zeros(y: np.ndarray) -> np.ndarray:
    """Number of zero counts per row."""
    return np.sum(y == 0, axis=-1).astype(float)


def variance_to_mean(y: np.ndarray) -> np.ndarray:
    """Sample variance (n - 1 divisor) over sample mean per row; NaN where the mean is 0."""
    mean = np.mean(y, axis=-1)
    var = np.var(y, axis=-1, ddof=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(mean > 0, var / mean, np.nan)


def spread(y: np.ndarray) -> np.ndarray:
    """Sample standard deviation (n - 1 divisor) per row."""
    return np.std(y, axis=-1, ddof=1)


def skewness(y: np.ndarray) -> np.ndarray:
    """Sample skewness g1 = m3 / m2^(3/2) per row (moments with divisor n); 0 for constant
    rows."""
    centred = y - np.mean(y, axis=-1, keepdims=True)
    m2 = np.mean(centred**2, axis=-1)
    m3 = np.mean(centred**3, axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(m2 > 0, m3 / m2**1.5, 0.0)


# -- the checks ----------------------------------------------------------------------

def _replicate(sample, statistics, draws: int, seed: int) -> list[np.ndarray]:
    """Draw ``draws`` replicated data sets in batches; return each statistic's values."""
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    out: list[list[np.ndarray]] = [[] for _ in statistics]
    done = 0
    while done < draws:
        size = min(BATCH, draws - done)
        y = sample(rng, size)
        for bucket, statistic in zip(out, statistics, strict=True):
            bucket.append(statistic(y))
        done += size
    return [np.concatenate(b) for b in out]


def _compare(arm: str, name: str, observed: float, replicated: np.ndarray,
             words: tuple[str, str], unit: str = "") -> AdequacyCheck:
    values = replicated[np.isfinite(replicated)]
    p_upper = float(np.mean(values >= observed))
    p_lower = float(np.mean(values <= observed))
    p = min(1.0, 2.0 * min(p_upper, p_lower))
    tail = (1.0 - INTERVAL) / 2.0
    lower, upper = (float(v) for v in np.quantile(values, [tail, 1.0 - tail]))
    flagged = p < FLAG
    shown = f"{observed:.4g}{unit}"
    where = f"observed {shown}; 95% of replicated studies between {lower:.4g} and {upper:.4g}"
    p_text = "p < 0.001" if p < 0.001 else f"p = {p:.3f}"
    if not flagged:
        verdict = f"consistent with the model ({where}; {p_text})"
    else:
        verdict = f"{words[0] if p_upper < p_lower else words[1]} ({where}; {p_text})"
    return AdequacyCheck(arm, name, float(observed), float(np.mean(values)), lower, upper,
                         p_upper, p_lower, p, int(values.size), flagged, verdict)


def count_checks(
    arm: str, counts: np.ndarray, exposure: np.ndarray, *, weights: np.ndarray,
    shape: np.ndarray, rate: np.ndarray, draws: int = DRAWS, seed: int = 0,
) -> tuple[AdequacyCheck, ...]:
    """Zeros and variance-to-mean ratio of per-subject counts under the Poisson model.

    Parameters
    ----------
    arm : str
        The arm the counts belong to (for the report).
    counts : array of int
        Events per subject.
    exposure : array of float
        Exposure per subject (same length).
    weights, shape, rate : array
        The gamma-mixture prior on the event rate (shape a, rate b per component).
    draws : int
        Replicated data sets.
    seed : int
    """
    y = np.asarray(counts, dtype=float)
    e = np.asarray(exposure, dtype=float)
    w, a, b = gamma_mixture_posterior(weights, shape, rate, y.sum(), e.sum())

    def sample(rng: np.random.Generator, size: int) -> np.ndarray:
        j = rng.choice(w.size, size=size, p=w)
        lam = rng.gamma(a[j], 1.0 / b[j])
        return rng.poisson(lam[:, None] * e[None, :]).astype(float)

    z_rep, v_rep = _replicate(sample, (zeros, variance_to_mean), draws, seed)
    out = [_compare(arm, "zeros", float(zeros(y)), z_rep, (
        "more zeros than a Poisson model produces; consider a zero-inflated or overdispersed "
        "model (for example a negative binomial)",
        "fewer zeros than a Poisson model produces; check the data and the exposure times"))]
    ratio = float(variance_to_mean(y))
    if np.isfinite(ratio):
        out.append(_compare(arm, "variance-to-mean ratio", ratio, v_rep, (
            "more variable than a Poisson model allows (overdispersed); consider a negative "
            "binomial model",
            "less variable than a Poisson model produces (underdispersed); check for capped "
            "or very regular counts")))
    return tuple(out)


def _normal_statistics(arm: str, y: np.ndarray, sample, draws: int, seed: int,
                       spread_words: tuple[str, str]) -> tuple[AdequacyCheck, ...]:
    s_rep, g_rep = _replicate(sample, (spread, skewness), draws, seed)
    return (
        _compare(arm, "standard deviation", float(spread(y)), s_rep, spread_words),
        _compare(arm, "skewness", float(skewness(y)), g_rep, (
            "skewed to the right beyond what a normal model produces; consider a "
            "transformation (for example logarithms) or another model",
            "skewed to the left beyond what a normal model produces; consider a "
            "transformation or another model")),
    )


def normal_known_sd_checks(
    arm: str, values: np.ndarray, *, sd: float, weights: np.ndarray, means: np.ndarray,
    sds: np.ndarray, draws: int = DRAWS, seed: int = 0,
) -> tuple[AdequacyCheck, ...]:
    """Spread and skewness of per-subject values under the known-sd normal model.

    ``weights``, ``means``, ``sds`` describe the normal-mixture prior on the mean.
    """
    y = np.asarray(values, dtype=float)
    w, m, s = normal_mixture_posterior(weights, means, sds, float(y.mean()), y.size, sd)

    def sample(rng: np.random.Generator, size: int) -> np.ndarray:
        j = rng.choice(w.size, size=size, p=w)
        mu = rng.normal(m[j], s[j])
        return mu[:, None] + sd * rng.standard_normal((size, y.size))

    return _normal_statistics(arm, y, sample, draws, seed, (
        f"more spread out than the assumed standard deviation ({sd:g}) produces; the "
        "known-sd model understates the uncertainty; consider a larger sd or an unknown-sd "
        "model",
        f"less spread out than the assumed standard deviation ({sd:g}) produces; the design "
        "may be conservative; check the assumed sd"))


def normal_unknown_sd_checks(
    arm: str, values: np.ndarray, *, m0: float, k0: float, a0: float, b0: float,
    draws: int = DRAWS, seed: int = 0,
) -> tuple[AdequacyCheck, ...]:
    """Spread and skewness of per-subject values under the normal-inverse-gamma model."""
    y = np.asarray(values, dtype=float)
    m_n, k_n, a_n, b_n = normal_inverse_gamma_posterior(m0, k0, a0, b0, y)

    def sample(rng: np.random.Generator, size: int) -> np.ndarray:
        variance = b_n / rng.gamma(a_n, 1.0, size=size)
        mu = rng.normal(m_n, np.sqrt(variance / k_n))
        return mu[:, None] + np.sqrt(variance)[:, None] * rng.standard_normal((size, y.size))

    return _normal_statistics(arm, y, sample, draws, seed, (
        "more spread out than the model's posterior allows; look for outliers or a "
        "heavier-tailed distribution",
        "less spread out than the model's posterior allows; check for rounding or "
        "truncated values"))
