"""Posterior probabilities of binary beta-mixture designs at each study's own counts.

Under random conduct (Poisson arrivals, dropout) the studies of one look reach many
different per-arm sizes, so decision tables at planned sizes do not apply and a table per
distinct size costs a whole lattice of quadratures for the few points studies reach.
Here each study's posterior probability is computed at its own counts: one arm, the
posterior tail at the benchmark (regularised incomplete beta); two arms,
``Pr(p_T - p_C > d)`` by :func:`octrial.simulation.beta_difference.prob_difference_exceeds`,
the decision tables' tanh-sinh quadrature (same nodes, step halving until successive
levels agree to 1e-11) run for one pair of posteriors at a time.

Values are memoised by the counts ``(n_T, x_T, n_C, x_C)`` in numba dictionaries kept
for the life of the process, so that batches and scenarios of a design share them (the
values do not depend on the true rates). A memo only saves work: every value is computed
from its own counts alone, so the numbers do not depend on which batches ran before, on
``--jobs`` or on the backend.

Against the decision tables (:func:`octrial.endpoints.binary.prob_difference_exceeds`,
which halve the step until the largest change over the whole table is below 1e-11) a
value can differ by the quadrature tolerance, about 1e-11; a decision can differ only for
a probability that close to a threshold (``tests/test_calendar_speed.py`` counts such
flips over many studies against the tables; none occur there).
"""

from __future__ import annotations

import math
from typing import Any

import numba
import numpy as np
from numba import types
from numba.typed import Dict

from octrial.allocation.decisions import padded_priors, posterior_mixture
from octrial.endpoints.binary import BetaMixture
from octrial.simulation.beta_difference import (
    QUADRATURE_TOLERANCE,
    _mixture_cdf,
    prob_difference_exceeds,
    quadrature_nodes,
)
from octrial.simulation.special import log_beta

MEMO_LIMIT = 1_000_000
"""A memo holding more values than this is emptied (memory bound; it only saves work)."""

_KEY = types.UniTuple(types.int64, 4)
_MEMOS: dict[tuple[Any, ...], Any] = {}
_BOUNDS: dict[tuple[Any, ...], Any] = {}
_NODES: tuple[np.ndarray, ...] | None = None


def serves(design: Any) -> bool:
    """Whether ``design`` is a binary design whose every prior is a beta mixture on the
    rate with a comparison on the difference (the closed-form posteriors this module
    computes); other designs keep the family's tables."""
    family = design.family
    if family.name != "binary" or family.on_grid(design):
        return False
    return all(isinstance(arm.prior, BetaMixture) for arm in design.arms)


def _nodes() -> tuple[np.ndarray, ...]:
    global _NODES
    if _NODES is None:
        _NODES = quadrature_nodes()
    return _NODES


def _memo(key: tuple[Any, ...], store: dict[tuple[Any, ...], Any] | None = None,
          value_type: Any = types.float64) -> Any:
    store = _MEMOS if store is None else store
    memo = store.get(key)
    if memo is None or len(memo) > MEMO_LIMIT:
        memo = Dict.empty(key_type=_KEY, value_type=value_type)
        store[key] = memo
    return memo


@numba.njit(cache=True)
def _value(two_arm, upper, d, prior_w, prior_a, prior_b, n_t, x_t, n_c, x_c, log_u, log_1mu,
           log_w, start, memo):  # pragma: no cover - compiled
    """One arm, Pr(p > d) (``upper``) or Pr(p <= d) at ``x_t`` of ``n_t``; two arms,
    Pr(p_T - p_C > d) (``upper``) or Pr(p_C - p_T > d); memoised by the counts."""
    key = (n_t, x_t, n_c, x_c)
    found = memo.get(key, -1.0)
    if found >= 0.0:
        return found
    width = prior_w.shape[1]
    tw, ta, tb = np.empty(width), np.empty(width), np.empty(width)
    posterior_mixture(prior_w[0], prior_a[0], prior_b[0], n_t, x_t, tw, ta, tb)
    if not two_arm:
        value = _mixture_cdf(tw, ta, tb, d, upper)
    else:
        cw, ca, cb = np.empty(width), np.empty(width), np.empty(width)
        posterior_mixture(prior_w[1], prior_a[1], prior_b[1], n_c, x_c, cw, ca, cb)
        if upper:
            value = prob_difference_exceeds(tw, ta, tb, cw, ca, cb, d, log_u, log_1mu,
                                            log_w, start, QUADRATURE_TOLERANCE)
        else:
            value = prob_difference_exceeds(cw, ca, cb, tw, ta, tb, d, log_u, log_1mu,
                                            log_w, start, QUADRATURE_TOLERANCE)
    memo[key] = value
    return value


@numba.njit(cache=True)
def _fill(two_arm, upper, d, prior_w, prior_a, prior_b, n_t, x_t, n_c, x_c, log_u,
          log_1mu, log_w, start, memo, out):  # pragma: no cover - compiled
    """``out[i]``: :func:`_value` at the i-th study's counts."""
    for i in range(out.size):
        out[i] = _value(two_arm, upper, d, prior_w, prior_a, prior_b, n_t[i], x_t[i],
                        n_c[i], x_c[i], log_u, log_1mu, log_w, start, memo)


@numba.njit(cache=True)
def _boundary(two_arm, upper, d, threshold, prior_w, prior_a, prior_b, final_t, final_c,
              z_c, log_u, log_1mu, log_w, start, memo, bounds):  # pragma: no cover
    """The treatment's final responses at the edge of final success, at final sizes
    ``final_t``, ``final_c`` and ``z_c`` control responses: the smallest count that
    succeeds (``upper``: the probability rises with the count; ``final_t + 1`` when none
    does), else the largest (``-1`` when none does). Found by bisection: the posterior
    of a binomial rate is stochastically increasing in the count whatever the prior
    (the likelihood's monotone ratio), so success is a threshold in the count."""
    key = (final_t, final_c, z_c, 0)
    found = bounds.get(key, -2)
    if found > -2:
        return found
    lo, hi = 0, final_t + 1
    while lo < hi:
        mid = (lo + hi) // 2
        value = _value(two_arm, upper, d, prior_w, prior_a, prior_b, final_t, mid, final_c,
                       z_c, log_u, log_1mu, log_w, start, memo)
        succeeds = value >= threshold
        if succeeds == upper:
            hi = mid  # upper: success from mid on; else failure from mid on
        else:
            lo = mid + 1
    edge = lo if upper else lo - 1
    bounds[key] = edge
    return edge


@numba.njit(cache=True)
def _predictive_pmf(w, a, b, n, x, m, out):  # pragma: no cover - compiled
    """Beta-binomial Pr(Y = 0..m) of ``m`` future subjects after ``x`` of ``n``:
    C(m, y) B(a' + y, b' + m - y) / B(a', b') mixed over the posterior's components,
    each term from the previous by the ratio of successive terms, in logs
    ((m - y) / (y + 1) x (a' + y) / (b' + m - y - 1)), so that no term underflows."""
    width = w.size
    pw, pa, pb = np.empty(width), np.empty(width), np.empty(width)
    posterior_mixture(w, a, b, n, x, pw, pa, pb)
    for y in range(m + 1):
        out[y] = 0.0
    for j in range(width):
        if pw[j] <= 0.0:
            continue
        log_term = log_beta(pa[j], pb[j] + m) - log_beta(pa[j], pb[j])
        for y in range(m + 1):
            out[y] += pw[j] * math.exp(log_term)
            if y < m:
                log_term += (math.log((m - y) / (y + 1.0))
                             + math.log((pa[j] + y) / (pb[j] + m - y - 1.0)))


@numba.njit(cache=True)
def _predictive(two_arm, upper, d, threshold, prior_w, prior_a, prior_b, n_t, x_t, n_c,
                x_c, final_t, final_c, log_u, log_1mu, log_w, start, memo, bounds,
                out):  # pragma: no cover - compiled
    """``out[i]``: the predictive probability of final success of the i-th study at
    final sizes ``final_t[i]``, ``final_c[i]`` (Lee & Liu 2008): the future responses'
    beta-binomial probabilities summed over the final counts that succeed."""
    for i in range(out.size):
        m_t = final_t[i] - n_t[i]
        pmf_t = np.empty(m_t + 1)
        _predictive_pmf(prior_w[0], prior_a[0], prior_b[0], n_t[i], x_t[i], m_t, pmf_t)
        # beyond[k] = Pr(Y_T >= k); within[k] = Pr(Y_T <= k)
        beyond = np.zeros(m_t + 2)
        for y in range(m_t, -1, -1):
            beyond[y] = beyond[y + 1] + pmf_t[y]
        if not two_arm:
            edge = _boundary(False, upper, d, threshold, prior_w, prior_a, prior_b,
                             final_t[i], 0, 0, log_u, log_1mu, log_w, start, memo, bounds)
            out[i] = _success_mass(upper, edge - x_t[i], m_t, beyond)
            continue
        m_c = final_c[i] - n_c[i]
        pmf_c = np.empty(m_c + 1)
        _predictive_pmf(prior_w[1], prior_a[1], prior_b[1], n_c[i], x_c[i], m_c, pmf_c)
        total = 0.0
        for y_c in range(m_c + 1):
            edge = _boundary(True, upper, d, threshold, prior_w, prior_a, prior_b,
                             final_t[i], final_c[i], x_c[i] + y_c, log_u, log_1mu, log_w,
                             start, memo, bounds)
            total += pmf_c[y_c] * _success_mass(upper, edge - x_t[i], m_t, beyond)
        out[i] = min(max(total, 0.0), 1.0)


@numba.njit(cache=True)
def _success_mass(upper, edge, m, beyond):  # pragma: no cover - compiled
    """Pr(future responses reach the edge): ``upper``, Pr(Y >= edge); else
    Pr(Y <= edge), from ``beyond[k] = Pr(Y >= k)``."""
    if upper:
        if edge <= 0:
            return beyond[0]
        return beyond[edge] if edge <= m else 0.0
    if edge < 0:
        return 0.0
    return beyond[0] - beyond[edge + 1] if edge < m else beyond[0]


@numba.njit(cache=True)
def _means(prior_w, prior_a, prior_b, n, x, out):  # pragma: no cover - compiled
    """Posterior mean of the rate of one arm at ``x[i]`` of ``n[i]``."""
    width = prior_w.size
    pw, pa, pb = np.empty(width), np.empty(width), np.empty(width)
    for i in range(out.size):
        posterior_mixture(prior_w, prior_a, prior_b, n[i], x[i], pw, pa, pb)
        total = 0.0
        for j in range(width):
            total += pw[j] * pa[j] / (pa[j] + pb[j])
        out[i] = total


class BetaCounts:
    """Posterior summaries of a binary beta-mixture design at per-study counts.

    Parameters
    ----------
    design : Design
        A design :func:`serves` accepts.

    Examples
    --------
    >>> import numpy as np
    >>> from octrial import load_design
    >>> design = load_design("designs/delayed-response.toml")
    >>> at = BetaCounts(design)
    >>> b = at.benefit((np.array([30.0]), np.array([20.0])), np.array([[60, 60]]))
    >>> bool(0.95 < b[0] < 0.99)
    True
    """

    def __init__(self, design: Any) -> None:
        h = design.hypothesis
        self.two_arm = len(design.arms) == 2
        self.higher = h.better == "higher"
        self.shift = float(h.shift) if self.two_arm else float(h.benchmark)
        priors = [(p.weights, p.a, p.b) for p in (arm.prior for arm in design.arms)]
        self.prior_w, self.prior_a, self.prior_b = padded_priors(priors)
        self._identity = (tuple(tuple(tuple(v) for v in p) for p in priors), self.two_arm)

    def _values(self, statistics: tuple[np.ndarray, ...], n: np.ndarray, upper: bool,
                d: float) -> np.ndarray:
        n = np.asarray(n, dtype=np.int64)
        rows = n.shape[0]
        x_t = np.asarray(statistics[0], dtype=np.int64)
        if self.two_arm:
            n_c, x_c = np.ascontiguousarray(n[:, 1]), np.asarray(statistics[1], dtype=np.int64)
        else:
            n_c = x_c = np.zeros(rows, dtype=np.int64)
        out = np.empty(rows)
        memo = _memo((*self._identity, upper, d))
        # numba's Dispatcher type does not carry the compiled function's parameters
        _fill(  # type: ignore[call-arg]
            self.two_arm, upper, d, self.prior_w, self.prior_a, self.prior_b,
            np.ascontiguousarray(n[:, 0]), np.ascontiguousarray(x_t), n_c,
            np.ascontiguousarray(x_c), *_nodes(), memo, out)
        return out

    def benefit(self, statistics: tuple[np.ndarray, ...], n: np.ndarray) -> np.ndarray:
        """Posterior probability of benefit per study.

        Parameters
        ----------
        statistics : tuple of ndarray
            Responses per arm, one value per study.
        n : ndarray of int, shape (studies, arms)
            Subjects with an outcome per study and arm (each at least 1 where the
            caller decides; a study with 0 gets the prior's probability).
        """
        return self._values(statistics, n, self.higher, self.shift)

    def estimate(self, statistics: tuple[np.ndarray, ...], n: np.ndarray,
                 value: float) -> tuple[np.ndarray, np.ndarray]:
        """Per study the posterior mean of the target (the rate; two arms p_T - p_C)
        and the posterior Pr(target <= ``value``), as
        :meth:`~octrial.endpoints.binary.BinaryFamily.target_mean` and ``target_cdf``."""
        n = np.asarray(n, dtype=np.int64)
        means = []
        for j in range(n.shape[1]):
            out = np.empty(n.shape[0])
            _means(self.prior_w[j], self.prior_a[j], self.prior_b[j],
                   np.ascontiguousarray(n[:, j]),
                   np.asarray(statistics[j], dtype=np.int64), out)
            means.append(out)
        mean = means[0] - means[1] if self.two_arm else means[0]
        if self.two_arm:
            cdf = 1.0 - self._values(statistics, n, True, float(value))
        else:
            cdf = self._values(statistics, n, False, float(value))
        return mean, cdf

    def predictive(self, statistics: tuple[np.ndarray, ...], n: np.ndarray,
                   final: np.ndarray, threshold: float) -> np.ndarray:
        """Per study the predictive probability that the final analysis at per-arm sizes
        ``final`` (shape like ``n``, each at least ``n``) reaches ``threshold``: the
        final success threshold less the decision tolerance, as the stop rule compares
        (:data:`octrial.rules.stop.DECISION_TOLERANCE`)."""
        n = np.asarray(n, dtype=np.int64)
        final = np.asarray(final, dtype=np.int64)
        rows = n.shape[0]
        x_t = np.ascontiguousarray(statistics[0], dtype=np.int64)
        zeros = np.zeros(rows, dtype=np.int64)
        two = self.two_arm
        n_c = np.ascontiguousarray(n[:, 1]) if two else zeros
        x_c = np.ascontiguousarray(statistics[1], dtype=np.int64) if two else zeros
        final_c = np.ascontiguousarray(final[:, 1]) if two else zeros
        out = np.empty(rows)
        memo = _memo((*self._identity, self.higher, self.shift))
        bounds = _memo((*self._identity, self.higher, self.shift, threshold), _BOUNDS,
                       types.int64)
        _predictive(  # type: ignore[call-arg]
            two, self.higher, self.shift, float(threshold), self.prior_w, self.prior_a,
            self.prior_b, np.ascontiguousarray(n[:, 0]), x_t, n_c, x_c,
            np.ascontiguousarray(final[:, 0]), final_c, *_nodes(), memo, bounds, out)
        return out
