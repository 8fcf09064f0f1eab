"""Statistics of the measured gaps: the gap store, percentiles, histogram, worst instances.

The gaps of one edge are kept in fixed-size blocks, int32 until one does not fit (`GapStore`).
The histogram counts offsets from the shortest gap, so it stays exact in float64 whatever the
gaps (a gap of 2**53 ticks or more has no float neighbour one tick away).
"""

from __future__ import annotations

from collections.abc import Sequence
from fractions import Fraction
from typing import Any

import numpy as np
import numpy.typing as npt

from gapforge.bench.measure_model import EdgeStats, Instance, Ints

_INT32_MIN, _INT32_MAX = -(2**31), 2**31 - 1


class GapStore:
    """Gaps appended into fixed-size blocks (no regrowth copies): int32 until one does not fit,
    then int64. The final array is joined freeing each block as it is copied."""

    BLOCK = 1 << 20

    def __init__(self) -> None:
        self.blocks: list[npt.NDArray[np.signedinteger[Any]]] = []
        self.used = 0  # entries used in the last block
        self.size = 0
        self.wide = False

    def append(self, gaps: Ints) -> None:
        if not self.wide and (int(gaps.min()) < _INT32_MIN or int(gaps.max()) > _INT32_MAX):
            self.wide = True
            self.blocks = [b.astype(np.int64) for b in self.blocks]
        at = 0
        while at < gaps.size:
            if not self.blocks or self.used == self.BLOCK:
                self.blocks.append(np.empty(self.BLOCK, dtype=np.int64 if self.wide else np.int32))
                self.used = 0
            take = min(int(gaps.size) - at, self.BLOCK - self.used)
            self.blocks[-1][self.used : self.used + take] = gaps[at : at + take]
            self.used += take
            at += take
        self.size += int(gaps.size)

    def array(self) -> npt.NDArray[np.signedinteger[Any]]:
        if not self.blocks:
            return np.zeros(0, dtype=np.int32)
        if len(self.blocks) == 1:
            only = self.blocks[0][: self.used]
            return only.copy() if self.used < self.BLOCK // 4 else only
        out = np.empty(self.size, dtype=self.blocks[0].dtype)
        self.blocks.reverse()
        at = 0
        while self.blocks:
            block = self.blocks.pop()
            take = block.size if self.blocks else self.used
            out[at : at + take] = block[:take]
            at += take
            del block
        self.blocks, self.used = [out], self.size
        return out


def edge_stats(
    name: str,
    gaps: npt.NDArray[np.signedinteger[Any]],
    worst: tuple[tuple[Instance, ...], tuple[Instance, ...]],
    tick: Fraction,
    percentiles: Sequence[float],
    bins: int,
    below: int,
    above: int,
) -> EdgeStats:
    if gaps.size == 0:
        return EdgeStats(name, tick, gaps, (), (), (), (), (), below, above)
    fl = float(tick)
    lo, hi = int(gaps.min()), int(gaps.max())
    nbins = max(1, min(bins, hi - lo + 1))
    # the histogram counts offsets from the shortest gap: exact in float64 whatever the gaps
    # (a gap of 2**53 ticks or more has no float neighbour one tick away)
    if hi - lo < _DENSE_SPAN:
        # one pass: counts per tick value; percentiles and histogram from the counts
        counts_per = np.zeros(hi - lo + 1, dtype=np.intp)
        for at in range(0, gaps.size, 1 << 16):  # in slices: bincount copies to intp
            counts_per += np.bincount(gaps[at : at + (1 << 16)] - lo, minlength=hi - lo + 1)
        pct = _percentiles_from_counts(counts_per, lo, percentiles, fl)
        counts, offsets = np.histogram(np.arange(hi - lo + 1), bins=nbins, range=(0, hi - lo + 1),
                                       weights=counts_per[: hi - lo + 1])
    else:
        pct = tuple((float(p), float(np.percentile(gaps, p)) * fl) for p in percentiles)
        counts, offsets = np.histogram(gaps - np.int64(lo), bins=nbins, range=(0, hi - lo + 1))
    return EdgeStats(
        name,
        tick,
        gaps,
        pct,
        tuple(float(lo + Fraction(float(e))) * fl for e in offsets),
        tuple(int(c) for c in counts),
        worst[0],
        worst[1],
        below,
        above,
    )


_DENSE_SPAN = 1 << 20


def _percentiles_from_counts(
    counts: npt.NDArray[np.intp], lo: int, percentiles: Sequence[float], tick: float
) -> tuple[tuple[float, float], ...]:
    """numpy's default (linear) percentile of the values lo + i, each counts[i] times."""
    cum = np.cumsum(counts)
    n = int(cum[-1])
    out: list[tuple[float, float]] = []
    for p in percentiles:
        rank = p / 100 * (n - 1)
        below = int(np.floor(rank))
        frac = rank - below
        a = lo + int(np.searchsorted(cum, below, side="right"))
        b = lo + int(np.searchsorted(cum, min(below + 1, n - 1), side="right"))
        value = a + (b - a) * frac if frac < 0.5 else b - (b - a) * (1 - frac)
        out.append((float(p), float(value) * tick))
    return tuple(out)


def extremes(values: Ints, k: int) -> list[int]:
    """Indices of the k smallest values, smallest first, earlier first among equals."""
    if k <= 0:
        return []
    if k < values.size:
        cut = np.partition(values, k - 1)[k - 1]
        candidates = np.flatnonzero(values <= cut)
    else:
        candidates = np.arange(values.size)
    order = np.lexsort((candidates, values[candidates]))
    return [int(i) for i in candidates[order][:k]]
