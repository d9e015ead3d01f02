"""Discrete draws from precomputed inverse-CDF tables, one 64-bit random word each.

Within a scenario every look's increment of an arm's statistic has a fixed distribution
(for binary: Binomial(n_k - n_{k-1}, p)), so each is drawn by inverting its CDF: with a
uniform 64-bit word u, the draw is the smallest y with u < F(y) 2^64. A guide table
indexed by the top bits of u gives the starting point (Chen & Asau 1974; Devroye 1986,
section III.2.4), so a draw costs one table look-up and on average about one comparison.

Comparing integers keeps the full 64 bits of the word (finer than a double's 53), and the
words come straight from the bit generator (``random_raw``), the cheapest random output
numpy has. The tables hold the CDF rounded to 2^-64; outcomes with probability below
that are never drawn (far below any Monte Carlo error).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numba
import numpy as np

WORD = 2.0**64
TOP = np.iinfo(np.uint64).max


@dataclass(frozen=True, eq=False)
class DrawTables:
    """Several inverse-CDF tables packed into flat arrays for a kernel.

    Table ``t`` occupies ``bounds[start[t] : start[t] + length[t]]`` (bounds[y] is
    F(y) 2^64, the last forced to the largest word) and its guide table
    ``guide[guide_start[t] : ...]`` is indexed by ``u >> shift[t]``.
    """

    bounds: np.ndarray
    start: np.ndarray
    length: np.ndarray
    guide: np.ndarray
    guide_start: np.ndarray
    shift: np.ndarray

    @classmethod
    def from_pmfs(cls, pmfs: Sequence[np.ndarray]) -> DrawTables:
        """Pack one table per probability mass function (outcomes 0 .. len - 1)."""
        bounds, guides, starts, lengths, guide_starts, shifts = [], [], [], [], [], []
        offset = guide_offset = 0
        for pmf in pmfs:
            b = cdf_bounds(np.asarray(pmf, dtype=float))
            bits = max(1, int(np.ceil(np.log2(b.size))) + 1)
            shift = 64 - bits
            points = np.arange(2**bits, dtype=np.uint64) << np.uint64(shift)
            guide = np.minimum(np.searchsorted(b, points, side="right"), b.size - 1)
            bounds.append(b)
            guides.append(guide.astype(np.int64))
            starts.append(offset)
            lengths.append(b.size)
            guide_starts.append(guide_offset)
            shifts.append(shift)
            offset += b.size
            guide_offset += guide.size
        return cls(np.concatenate(bounds), np.array(starts, dtype=np.int64),
                   np.array(lengths, dtype=np.int64), np.concatenate(guides),
                   np.array(guide_starts, dtype=np.int64), np.array(shifts, dtype=np.int64))

    def arrays(self) -> tuple[np.ndarray, ...]:
        """The arrays in the order :func:`draw` takes them."""
        return self.bounds, self.start, self.length, self.guide, self.guide_start, self.shift


def cdf_bounds(pmf: np.ndarray) -> np.ndarray:
    """F(y) 2^64 as unsigned 64-bit integers, the last one the largest word."""
    cdf = np.clip(np.cumsum(pmf), 0.0, 1.0)
    scaled = np.ldexp(cdf, 64)
    out = np.empty(cdf.size, dtype=np.uint64)
    big = scaled >= WORD
    out[~big] = scaled[~big].astype(np.uint64)
    out[big] = TOP
    out[-1] = TOP
    return out


@numba.njit(cache=True, inline="always")
def draw(word, t, bounds, start, length, guide, guide_start, shift):
    """The outcome of table ``t`` for the random 64-bit ``word``."""
    y = guide[guide_start[t] + (word >> np.uint64(shift[t]))]
    last = length[t] - 1
    base = start[t]
    while y < last and word >= bounds[base + y]:
        y += 1
    return y
