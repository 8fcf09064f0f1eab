"""Monte Carlo statistics of the reference network's quantities: min, max, mean, the 0.135 / 50 /
99.865 % percentiles (numpy's linear interpolation) and the share below a minimum, either from
samples in memory or streamed from regenerated chunks in one pass (JCGM 101:2008 Monte Carlo
propagation; exact order statistics, bounded memory)."""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import TYPE_CHECKING

import numpy as np

from gapforge.analog.network import PAIR_KEYS
from gapforge.base.records import record

if TYPE_CHECKING:  # numpy.typing only for the checker: a build does not import it
    import numpy.typing as npt

    FloatArray = npt.NDArray[np.float64]
QUANTITIES = ("node_rising", "node_falling", "to_high", "to_low")
PERCENTILES = (0.135, 50.0, 99.865)


@record
class Stats:
    min: float
    max: float
    mean: float
    percentiles: tuple[float, float, float]  # 0.135 / 50 / 99.865 %
    share_below: float | None  # fraction of samples below the given minimum (dead times)



def stats_direct(values: FloatArray, key: str, below: float | None) -> Stats:
    pct = np.percentile(values, PERCENTILES)
    share = float(np.count_nonzero(values < below)) / len(values) if (
        below is not None and key in PAIR_KEYS
    ) else None
    return Stats(
        float(values.min()),
        float(values.max()),
        float(values.mean()),
        (float(pct[0]), float(pct[1]), float(pct[2])),
        share,
    )


def stats_streaming(
    chunk_results: Callable[[int], dict[str, FloatArray]],
    n_chunks: int,
    total: int,
    below: float | None,
    progress: Callable[[int, int], None] | None = None,
) -> dict[str, Stats]:
    """One pass over the chunks: extremes, sums, counts, and the values near each wanted order
    statistic, exactly.

    The first chunk is a pilot: for each percentile it brackets the wanted rank by a window of
    values wide enough (six binomial standard deviations of the pilot's rank, plus slack) that
    the global order statistic almost surely falls inside; every chunk then keeps only the values
    inside the windows (about 1 % of them) and counts those below. When a rank falls outside its
    window after all (a pathological population), that quantity's order statistics are found by
    the exact histogram passes of `_order_stats_by_histogram` instead. Memory: one chunk plus
    the kept values; cost: one evaluation per sample, as in the in-memory path.
    """
    lo = {k: math.inf for k in QUANTITIES}
    hi = {k: -math.inf for k in QUANTITIES}
    sums = dict.fromkeys(QUANTITIES, 0.0)
    counts_below = dict.fromkeys(QUANTITIES, 0)
    wanted = _wanted_ranks(total)
    windows: dict[str, list[tuple[float, float]]] = {}
    under: dict[str, list[int]] = {}
    kept: dict[str, list[list[FloatArray]]] = {}
    for i in range(n_chunks):
        res = chunk_results(i)
        if i == 0:
            for k in QUANTITIES:
                windows[k] = _pilot_windows(np.sort(res[k]), wanted, total)
                under[k] = [0] * len(windows[k])
                kept[k] = [[] for _ in windows[k]]
        for k in QUANTITIES:
            v = res[k]
            lo[k] = min(lo[k], float(v.min()))
            hi[k] = max(hi[k], float(v.max()))
            sums[k] += float(v.sum())
            if below is not None:
                counts_below[k] += int(np.count_nonzero(v < below))
            for w, (w_lo, w_hi) in enumerate(windows[k]):
                under[k][w] += int(np.count_nonzero(v < w_lo))
                kept[k][w].append(v[(v >= w_lo) & (v <= w_hi)])
        if progress is not None:
            progress(i + 1, n_chunks)
    out: dict[str, Stats] = {}
    for k in QUANTITIES:
        found = _order_stats_from_windows(wanted, under[k], kept[k])
        if found is None:
            found = _order_stats_by_histogram(chunk_results, n_chunks, k, lo[k], hi[k], wanted)
        pcts = [a + (b - a) * frac for (_r0, _r1, frac), (a, b) in zip(wanted, found, strict=True)]
        share = counts_below[k] / total if (below is not None and k in PAIR_KEYS) else None
        out[k] = Stats(lo[k], hi[k], sums[k] / total, (pcts[0], pcts[1], pcts[2]), share)
    return out


def _wanted_ranks(total: int) -> list[tuple[int, int, float]]:
    """For each percentile, the order statistics numpy's linear percentile interpolates."""
    rows = []
    for p in PERCENTILES:
        q = p / 100.0 * (total - 1)
        rows.append((math.floor(q), math.ceil(q), q - math.floor(q)))
    return rows


def _pilot_windows(
    pilot: FloatArray, wanted: list[tuple[int, int, float]], total: int
) -> list[tuple[float, float]]:
    """A value window per percentile that brackets its global rank (from a sorted pilot)."""
    n0 = len(pilot)
    windows = []
    for r_lo, r_hi, _ in wanted:
        p = (0.5 * (r_lo + r_hi) + 0.5) / total
        centre = p * n0
        margin = 6.0 * math.sqrt(n0 * p * (1.0 - p)) + 50.0
        a, b = int(centre - margin), math.ceil(centre + margin)
        w_lo = -math.inf if a <= 0 else float(pilot[a])
        w_hi = math.inf if b >= n0 - 1 else float(pilot[b])
        windows.append((w_lo, w_hi))
    return windows


def _order_stats_from_windows(
    wanted: list[tuple[int, int, float]], under: list[int], kept: list[list[FloatArray]]
) -> list[tuple[float, float]] | None:
    """The wanted order statistics from the kept windows, or None when one fell outside."""
    found = []
    for (r_lo, r_hi, _), before, parts in zip(wanted, under, kept, strict=True):
        values = np.sort(np.concatenate(parts))
        if not (before <= r_lo and r_hi < before + len(values)):
            return None
        found.append((float(values[r_lo - before]), float(values[r_hi - before])))
    return found


def _order_stats_by_histogram(
    chunk_results: Callable[[int], dict[str, FloatArray]],
    n_chunks: int,
    key: str,
    lo: float,
    hi: float,
    wanted: list[tuple[int, int, float]],
) -> list[tuple[float, float]]:
    """The fallback: a histogram pass, then a pass collecting the wanted bins (exact)."""
    bins = 1 << 16
    hist = np.zeros(bins, dtype=np.int64)
    for i in range(n_chunks):
        hist += _bin_counts(chunk_results(i)[key], lo, hi, bins)
    cumulative = np.cumsum(hist)
    targets = sorted({int(np.searchsorted(cumulative, r, side="right"))
                      for row in wanted for r in row[:2]})
    collected: dict[int, list[FloatArray]] = {b: [] for b in targets}
    for i in range(n_chunks):
        v = chunk_results(i)[key]
        idx = _bin_index(v, lo, hi, bins)
        for b in targets:
            collected[b].append(v[idx == b])

    def order_stat(rank: int) -> float:
        b = int(np.searchsorted(cumulative, rank, side="right"))
        before = int(cumulative[b - 1]) if b > 0 else 0
        return float(np.sort(np.concatenate(collected[b]))[rank - before])

    return [(order_stat(r0), order_stat(r1)) for r0, r1, _ in wanted]


def _bin_index(values: FloatArray, lo: float, hi: float, bins: int) -> npt.NDArray[np.int64]:
    if hi <= lo:
        return np.zeros(len(values), dtype=np.int64)
    idx = ((values - lo) * (bins / (hi - lo))).astype(np.int64)
    result: npt.NDArray[np.int64] = np.clip(idx, 0, bins - 1)
    return result


def _bin_counts(values: FloatArray, lo: float, hi: float, bins: int) -> npt.NDArray[np.int64]:
    counts: npt.NDArray[np.int64] = np.bincount(_bin_index(values, lo, hi, bins), minlength=bins)
    return counts
