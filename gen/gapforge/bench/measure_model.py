"""What a measurement returns: limits, gaps per edge with statistics, overlaps, glitches,
findings and the verdict (plain values; `measure` computes them, `measure_engine` finds them).

Every time is an integer count of capture ticks; the tick length is an exact Fraction, so a gap
is compared with a window limit exactly. Floats appear only in statistics and plotting arrays.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import field
from fractions import Fraction
from typing import Any, overload

import numpy as np
import numpy.typing as npt

from gapforge.base.records import record

EDGES = ("to_high", "to_low")
DEFAULT_PERCENTILES = (1.0, 5.0, 50.0, 95.0, 99.0)

Ints = npt.NDArray[np.int64]
Floats = npt.NDArray[np.float64]


@record
class Limits:
    """Window and prediction for one transition (seconds, exact; None = not given)."""

    window_min_s: Fraction | None = None
    window_max_s: Fraction | None = None
    predicted_min_s: Fraction | None = None
    predicted_max_s: Fraction | None = None


@record
class Instance:
    """One measured gap: when the transition started and how long both gates were off."""

    at_s: Fraction
    gap_s: Fraction


@record
class Finding:
    at_s: Fraction
    text: str


@record
class Overlap:
    """Both gates on: a shoot-through event."""

    at_s: Fraction
    duration_s: Fraction


class Overlaps(Sequence[Overlap]):
    """Every overlap, held as two int64 tick arrays (start, duration); an Overlap with exact
    times is built when an item is read, so millions of them cost 16 bytes each."""

    __slots__ = ("durations_ticks", "starts_ticks", "tick_s")
    __hash__ = None  # type: ignore[assignment]

    def __init__(self, tick_s: Fraction, starts_ticks: Ints, durations_ticks: Ints) -> None:
        self.tick_s = tick_s
        self.starts_ticks = starts_ticks
        self.durations_ticks = durations_ticks

    def __len__(self) -> int:
        return int(self.starts_ticks.size)

    @overload
    def __getitem__(self, index: int) -> Overlap: ...

    @overload
    def __getitem__(self, index: slice) -> Overlaps: ...

    def __getitem__(self, index: int | slice) -> Overlap | Overlaps:
        if isinstance(index, slice):
            return Overlaps(self.tick_s, self.starts_ticks[index], self.durations_ticks[index])
        return Overlap(self.tick_s * int(self.starts_ticks[index]),
                       self.tick_s * int(self.durations_ticks[index]))

    def __eq__(self, other: object) -> bool:
        if isinstance(other, Overlaps):
            return (self.tick_s == other.tick_s
                    and np.array_equal(self.starts_ticks, other.starts_ticks)
                    and np.array_equal(self.durations_ticks, other.durations_ticks))
        if isinstance(other, Sequence):
            return list(self) == list(other)
        return NotImplemented

    def __repr__(self) -> str:
        return f"Overlaps({len(self)} at tick {self.tick_s})"

    @property
    def at_s(self) -> Floats:
        """Start times in seconds as floats (for plotting)."""
        return self.starts_ticks.astype(np.float64) * float(self.tick_s)


def no_overlaps(tick: Fraction) -> Overlaps:
    return Overlaps(tick, np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64))


@record
class Glitch:
    signal: str  # "high" or "low"
    level: int  # the level of the short pulse (1 = a short on-pulse)
    at_s: Fraction
    width_s: Fraction
    in_dead_time: bool = False  # an on-pulse while the other gate was off


@record
class EdgeStats:
    """Every gap of one transition kind (in time order, int32 ticks where they fit, else int64),
    with statistics. Time stamps are kept only for the worst instances."""

    name: str
    tick_s: Fraction
    gaps_ticks: npt.NDArray[np.signedinteger[Any]]
    percentiles: tuple[tuple[float, float], ...]
    histogram_edges_s: tuple[float, ...]
    histogram_counts: tuple[int, ...]
    shortest: tuple[Instance, ...]
    longest: tuple[Instance, ...]
    below_window: int = 0
    above_window: int = 0

    @property
    def count(self) -> int:
        return int(self.gaps_ticks.size)

    @property
    def min_s(self) -> Fraction | None:
        return self.tick_s * int(self.gaps_ticks.min()) if self.count else None

    @property
    def max_s(self) -> Fraction | None:
        return self.tick_s * int(self.gaps_ticks.max()) if self.count else None

    @property
    def mean_s(self) -> float | None:
        if not self.count:
            return None
        return float(Fraction(exact_sum(self.gaps_ticks), self.count) * self.tick_s)

    @property
    def std_s(self) -> float | None:
        if not self.count:
            return None
        return float(self.gaps_ticks.std(dtype=np.float64)) * float(self.tick_s)

    @property
    def gaps_s(self) -> Floats:
        """Gaps in seconds as floats (for plotting; judge with gaps_ticks and tick_s)."""
        return self.gaps_ticks.astype(np.float64) * float(self.tick_s)


@record
class Measurement:
    source: str
    tick_s: Fraction
    duration_s: Fraction
    to_high: EdgeStats
    to_low: EdgeStats
    overlaps: Overlaps  # a sequence of Overlap
    glitches: tuple[Glitch, ...]  # listed (up to 1000 per side), in time order
    missing_edges: tuple[Finding, ...]  # listed (up to 1000 per kind and side)
    unknown_intervals: int
    limits: Mapping[str, Limits]
    # "ok", "fail" or "inconclusive" (the capture cannot prove the window: missing edges, an
    # unknown level, an assumed time unit); without a window "ok" judges the overlaps only
    verdict: str
    reasons: tuple[str, ...]
    notes: tuple[str, ...] = field(default=())
    warnings: tuple[str, ...] = field(default=())
    mean_period_s: Fraction | None = None  # between successive to_high transitions
    resolution_s: Fraction = Fraction(0)  # a measured gap is within this of the true gap
    # intervals with one gate unknown (x/z) while the other is on or unknown
    possible_overlaps: Overlaps = field(default_factory=lambda: no_overlaps(Fraction(1)))
    glitch_count: int = 0  # every glitch (the listed ones are the first 1000 per side)
    missing_edge_count: int = 0  # every missing edge, with the capture's own lost events
    window_judged: bool = False  # a window was given (else only overlaps decide the verdict)
    resolution_origin: str = ""  # where the resolution comes from, in words
    limits_source: str = ""  # what the limits come from (a window, a design's output/entry)

    def edge(self, name: str) -> EdgeStats:
        return self.to_high if name == "to_high" else self.to_low

    @property
    def overlap_at_s(self) -> Floats:
        """Start times of every overlap in seconds (floats, for plotting)."""
        return self.overlaps.at_s

    @property
    def failed(self) -> bool:
        """Not proven: the verdict is "fail" or "inconclusive" (exit 1)."""
        return self.verdict in ("fail", "inconclusive")

    @property
    def resolution_ticks(self) -> int:
        return int(self.resolution_s / self.tick_s)


def exact_sum(values: npt.NDArray[np.signedinteger[Any]]) -> int:
    """The sum as a Python int: int64 when no partial sum can overflow, else in slices."""
    if values.size == 0:
        return 0
    biggest = max(abs(int(values.min())), abs(int(values.max())))
    if biggest * values.size < 2**63:
        return int(values.sum(dtype=np.int64))
    step = max(1, (2**62) // max(biggest, 1))
    return sum(int(values[at : at + step].sum(dtype=np.int64)) for at in range(0, values.size, step))
