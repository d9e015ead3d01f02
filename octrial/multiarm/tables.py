"""Everything the several-arm kernel looks up, computed once per design (lattice
families: binary and count).

Each treatment arm's decision at each look is its own design's lattice table
(:func:`octrial.rules.lattice.build_rule` on :attr:`MultiArmDesign.pairs`), so a design
with one treatment arm decides exactly as the two-arm design does. Posterior means, and
each treatment arm's posterior density and 'worse than u' probability on the quadrature
nodes of :mod:`octrial.numerics.beta_best` (for the probability of being the best), are
tabulated per look and per count.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from octrial.endpoints.binary import BetaMixture, BinaryEndpoint
from octrial.multiarm.model import MultiArmDesign
from octrial.numerics.beta_best import best_of_rows, mixture_on_nodes, quadrature_nodes, spans
from octrial.rules.lattice import build_rule

CONTINUE, EFFICACY, FUTILITY = 0, 1, 2


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
    density, worse : ndarray, shape (T x K x X, G)
        Rows of :func:`octrial.numerics.beta_best.best_of_rows`: treatment arm ``t``'s
        posterior at look ``k`` after ``x`` responses is row ``(t K + k) X + x`` (its
        density and 'worse than u' probability on the G quadrature nodes); empty when no
        rule needs Pr(best).
    support, reach : ndarray, shape (T x K x X, 2)
        The rows' spans (:func:`octrial.numerics.beta_best.spans`).
    weights : ndarray, shape (G,)
        Quadrature weights.
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
    density: np.ndarray
    worse: np.ndarray
    support: np.ndarray
    reach: np.ndarray
    weights: np.ndarray
    drop_below: np.ndarray
    keep: int
    control: bool

    @property
    def needs_best(self) -> bool:
        """Whether any rule needs the probability of being the best."""
        return bool(np.any(self.drop_below >= 0) or self.keep > 0)

    def best(self, k: int, responses: np.ndarray, active: np.ndarray) -> np.ndarray:
        """Pr(best) of each active treatment arm at look ``k`` with ``responses[t]`` in
        arm ``t`` (0 for the others)."""
        T, K, X = self.mean.shape
        rows = (np.arange(T) * K + k) * X + np.asarray(responses, np.int64)
        out = np.zeros(T)
        best_of_rows(self.density, self.worse, self.support, self.reach, self.weights,
                     rows, np.asarray(active, np.bool_), out)
        return out


def build_tables(design: MultiArmDesign) -> MultiArmTables:
    """Tabulate ``design``'s per-arm rules, posterior means and posteriors on the nodes.

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
    nodes, weights = quadrature_nodes()
    rows = T * K * x_max if needs_best else 0
    density = np.zeros((rows, nodes.size))
    worse = np.ones((rows, nodes.size))
    higher = design.hypothesis.better == "higher"
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
                first = (t * K + k) * x_max
                density[first:first + points], worse[first:first + points] = (
                    mixture_on_nodes(post.weights, post.a, post.b, nodes, higher))
    support, reach = spans(density, worse, weights)
    return MultiArmTables(increments, sizes, decision, mean, density, worse, support,
                          reach, weights, drop, keep, design.shared_control)
