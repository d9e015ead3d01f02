"""Everything the several-arm kernel looks up, computed once per design (lattice
families: binary and count).

Each treatment arm's decision at each look is its own design's lattice table
(:func:`octrial.rules.lattice.build_rule` on :attr:`MultiArmDesign.pairs`), so a design
with one treatment arm decides exactly as the two-arm design does. Posterior means and
the posterior CDF of each treatment arm on a fixed grid (for the probability of being the
best, :mod:`octrial.multiarm.best`) are tabulated per look and per count.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from octrial.endpoints.binary import BetaMixture, BinaryEndpoint
from octrial.multiarm.model import MultiArmDesign
from octrial.rules.lattice import build_rule

CONTINUE, EFFICACY, FUTILITY = 0, 1, 2

BEST_GRID = 1024
"""Cells of the [0, 1] grid on which Pr(best) is summed (a Stieltjes trapezoid sum over
the posterior CDFs; error O(1/BEST_GRID^2) for smooth posteriors, checked against an
independent scipy Monte Carlo in tests/test_multiarm.py)."""


@dataclass(frozen=True, eq=False)
class MultiArmTables:
    """Flat lookup tables of a binary several-arm design.

    Attributes
    ----------
    increments : ndarray, shape (K, A)
        Subjects each arm (control first when there is one) adds at each look.
    sizes : ndarray, shape (K, A)
        Points of each arm's lattice at each look (counts beyond a truncated lattice are
        held at its edge, as the two-arm table kernel holds them).
    decision : ndarray of int8, shape (T, K, X, C)
        Treatment arm ``t``'s code (continue, efficacy, futility) at look ``k`` with
        ``x`` responses in the arm and ``c`` in the control (``C == 1`` without a
        control).
    mean : ndarray, shape (T, K, X)
        Posterior mean of treatment arm ``t``'s rate at look ``k`` after ``x`` responses.
    cdf : ndarray, shape (T, K, X, G + 1)
        Posterior CDF of the arm's rate on the grid ``i / G`` (of ``1 - rate`` when
        lower is better, so 'best' is always 'largest'); empty when no rule needs
        Pr(best).
    drop_below : ndarray, shape (K,)
        Per look, the Pr(best) threshold under which an arm is dropped (-1: none).
    keep : int
        At most this many arms continue after an interim look (0: no limit).
    control : bool
        Whether arm 0 of ``increments`` is a shared control.
    """

    increments: np.ndarray
    sizes: np.ndarray
    decision: np.ndarray
    mean: np.ndarray
    cdf: np.ndarray
    drop_below: np.ndarray
    keep: int
    control: bool

    @property
    def needs_best(self) -> bool:
        """Whether any rule needs the probability of being the best."""
        return bool(np.any(self.drop_below >= 0) or self.keep > 0)


def build_tables(design: MultiArmDesign, grid: int = BEST_GRID) -> MultiArmTables:
    """Tabulate ``design``'s per-arm rules, posterior means and posterior CDFs.

    Raises
    ------
    NotImplementedError
        For families without a lattice (normal, time-to-event), and for rules that need
        Pr(best) (dropping, selection) with anything but binary endpoints with beta or
        beta-mixture priors.
    """
    family = design.family
    if not getattr(family, "lattice", False):
        raise NotImplementedError("several-arm simulation covers lattice families "
                                  "(binary, count) so far")
    binary = isinstance(design.endpoint, BinaryEndpoint) and all(
        isinstance(a.prior, BetaMixture) for a in design.treatments)
    looks = design.looks
    per_arm = np.array(looks.per_arm, dtype=np.int64)
    increments = np.diff(np.vstack([np.zeros(per_arm.shape[1], np.int64), per_arm]), axis=0)
    offset = 1 if design.shared_control else 0
    T, K = len(design.treatments), looks.count
    rules = [build_rule(pair) for pair in design.pairs]
    sizes = np.ones((K, per_arm.shape[1]), dtype=np.int64)
    for t, rule in enumerate(rules):
        for k, table in enumerate(rule.looks):
            sizes[k, offset + t] = table.shape[0]
            if design.shared_control:
                sizes[k, 0] = max(sizes[k, 0], table.shape[1])
    x_max = int(sizes[:, offset:].max())
    c_max = int(sizes[:, 0].max()) if design.shared_control else 1
    decision = np.full((T, K, x_max, c_max), FUTILITY, dtype=np.int8)
    mean = np.zeros((T, K, x_max))
    keep = design.selection.keep or 0
    drop = np.array([-1.0 if v is None else v for v in looks.drop_if_best_below])
    needs_best = bool(np.any(drop >= 0) or keep > 0)
    if needs_best and not binary:
        raise NotImplementedError("dropping by Pr(best) and selection cover binary "
                                  "endpoints with beta or beta-mixture priors so far")
    cdf = np.zeros((T, K, x_max, grid + 1) if needs_best else (0, 0, 0, 0))
    nodes = np.linspace(0.0, 1.0, grid + 1)
    lower = design.hypothesis.better == "lower"
    for t, (pair, rule) in enumerate(zip(design.pairs, rules, strict=True)):
        for k, table in enumerate(rule.looks):
            codes = np.full(table.shape, CONTINUE, dtype=np.int8)
            codes[table.futility] = FUTILITY
            codes[table.efficacy] = EFFICACY
            if codes.ndim == 1:
                codes = codes[:, None]
            decision[t, k, :codes.shape[0], :codes.shape[1]] = codes
            n = int(per_arm[k, offset + t])
            points = table.shape[0]
            post = family.posterior(pair, 0, n, np.arange(points))
            mean[t, k, :points] = post.mean()
            if needs_best:
                cdf[t, k, :points] = _cdf_on_grid(post, nodes, lower)
    return MultiArmTables(increments, sizes, decision, mean, cdf, drop, keep,
                          design.shared_control)


def _cdf_on_grid(post, nodes: np.ndarray, lower: bool) -> np.ndarray:
    """Posterior CDF at ``nodes`` per count; of 1 - rate when lower is better."""
    out = np.zeros((len(post), nodes.size))
    for c in range(post.weights.shape[1]):
        w, a, b = (v[:, c, None] for v in (post.weights, post.a, post.b))
        # Pr(1 - p <= u) = Pr(p >= 1 - u) = I_u(b, a)
        out += w * (special.betainc(b, a, nodes[None, :]) if lower
                    else special.betainc(a, b, nodes[None, :]))
    return out
