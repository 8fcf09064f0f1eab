"""Dead times, overlaps, glitches and missing edges measured in a two-gate capture.

Every time is an integer count of capture ticks; the tick length is an exact Fraction, so a gap
is compared with a window limit exactly. Floats appear only in statistics and plotting arrays.

Transitions are read from the joint state of the two gates (high side, low side) at each change
(several changes at one time stamp are simultaneous: the state after all of them counts):
- `to_high`: low side turns off, both are off (the dead time), high side turns on. The gap is the
  time both are off; 0 if one turns off as the other turns on; negative (minus the overlap
  duration) if the high side turns on before the low side is off. The gap always ends at the
  first on-edge, even the on-edge of a glitch: a glitch never lengthens a gap.
- `to_low`: the same from high side on to low side on.
- an overlap is any interval with both gates on (shoot-through), reported with its start time.
- a possible overlap is any interval where one gate is unknown (x or z) while the other is on or
  also unknown: it may be a shoot-through, so it fails like one. The one exception is the
  capture's start while both gates are still unknown (a simulator's $dumpvars x before any
  level is known): nothing is observed yet, as if the capture started later (noted).
- a glitch is a pulse on one gate shorter than the set width (`--glitch`; a pulse of zero width,
  two changes at one time stamp, always is one). Glitches are listed; they stay in the
  measurement (every gap and overlap is measured on the signals as captured). An on-pulse
  glitch fails the verdict when a window is set (inside a dead time it ends the dead time early
  and then leaves both gates off again). A missing-edge finding that a glitch explains (a gate
  on for a glitch and off again, or off for a glitch and on again) is not listed.
- a missing edge: a dead time that ends with the same gate turning on again (the other gate never
  turned on), a level reported twice in a row (an edge between them was lost), or an edge the
  capture itself reports lost (a serial stream's sequence gap). With a window set, a capture
  with missing edges, or with an unknown level after the first known levels (a dead time
  through x/z cannot be measured), cannot prove the dead time: the verdict is "inconclusive"
  (exit 1) unless something fails outright.

Judgement with the capture's resolution r (ticks; capture.py): a measured gap g may be off by
less than r either way, so it passes a window minimum only if g - r >= min and a maximum only if
g + r <= max (exact integers), and a transition with g < r has no proven dead time at all.

The measurement is one incremental engine over the events of both gates in time order, fed chunk
by chunk (a whole capture in memory is one chunk). It carries the current level of each gate, the
changes at the last timestamp (they may go on in the next chunk), the last two joint states and
the last two level changes of each gate, so a chunk boundary never changes a result. It keeps
every gap (int32 ticks where they fit) but time stamps only for the worst instances and the
(possible) overlaps. Listed findings stop at 1000 per kind and side; their counts do not.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from fractions import Fraction
from typing import Any, cast, overload

import numpy as np
import numpy.typing as npt

from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import ceil_fraction, floor_fraction
from gapforge.bench.capture import CaptureStream, Events, GateCapture, UnorderedTimes, stream_of

EDGES = ("to_high", "to_low")
DEFAULT_PERCENTILES = (1.0, 5.0, 50.0, 95.0, 99.0)

# joint state code = high * 4 + low, levels 0/1/2 (x)/3 (z)
_OFF, _LOW_ON, _HIGH_ON, _BOTH = 0, 1, 4, 5
# a joint state with an unknown (x/z) level
_UNKNOWN = np.array([(s >> 2) >= 2 or (s & 3) >= 2 for s in range(16)], dtype=bool)
# one gate unknown while the other is on or unknown: a possible shoot-through
_RISKY = np.array([(s >> 2) != 0 and (s & 3) != 0 and s != _BOTH for s in range(16)], dtype=bool)
_BOTH_UNKNOWN = np.array([(s >> 2) >= 2 and (s & 3) >= 2 for s in range(16)], dtype=bool)

Ints = npt.NDArray[np.int64]
Floats = npt.NDArray[np.float64]


@dataclass(frozen=True)
class Limits:
    """Window and prediction for one transition (seconds, exact; None = not given)."""

    window_min_s: Fraction | None = None
    window_max_s: Fraction | None = None
    predicted_min_s: Fraction | None = None
    predicted_max_s: Fraction | None = None


@dataclass(frozen=True)
class Instance:
    """One measured gap: when the transition started and how long both gates were off."""

    at_s: Fraction
    gap_s: Fraction


@dataclass(frozen=True)
class Finding:
    at_s: Fraction
    text: str


@dataclass(frozen=True)
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


def _no_overlaps(tick: Fraction) -> Overlaps:
    return Overlaps(tick, np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64))


@dataclass(frozen=True)
class Glitch:
    signal: str  # "high" or "low"
    level: int  # the level of the short pulse (1 = a short on-pulse)
    at_s: Fraction
    width_s: Fraction
    in_dead_time: bool = False  # an on-pulse while the other gate was off


@dataclass(frozen=True)
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
        return float(Fraction(_exact_sum(self.gaps_ticks), self.count) * self.tick_s)

    @property
    def std_s(self) -> float | None:
        if not self.count:
            return None
        return float(self.gaps_ticks.std(dtype=np.float64)) * float(self.tick_s)

    @property
    def gaps_s(self) -> Floats:
        """Gaps in seconds as floats (for plotting; judge with gaps_ticks and tick_s)."""
        return self.gaps_ticks.astype(np.float64) * float(self.tick_s)


@dataclass(frozen=True)
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
    # "pass", "fail", "inconclusive" (a window is set but missing edges leave the capture
    # unable to prove it) or "measured" (no window to judge against)
    verdict: str
    reasons: tuple[str, ...]
    notes: tuple[str, ...] = field(default=())
    warnings: tuple[str, ...] = field(default=())
    mean_period_s: Fraction | None = None  # between successive to_high transitions
    resolution_s: Fraction = Fraction(0)  # a measured gap is within this of the true gap
    # intervals with one gate unknown (x/z) while the other is on or unknown
    possible_overlaps: Overlaps = field(default_factory=lambda: _no_overlaps(Fraction(1)))
    glitch_count: int = 0  # every glitch (the listed ones are the first 1000 per side)
    missing_edge_count: int = 0  # every missing edge, with the capture's own lost events

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


def measure_capture(
    capture: GateCapture | CaptureStream,
    *,
    limits: Mapping[str, Limits] | None = None,
    glitch_width_s: Fraction = Fraction(0),
    percentiles: Sequence[float] = DEFAULT_PERCENTILES,
    bins: int = 20,
    worst: int = 5,
    resolution_s: Fraction | None = None,
) -> Measurement:
    """Measure every dead time, overlap, glitch and missing edge; judge against `limits`.

    A CaptureStream (capture.open_capture) is measured chunk by chunk: only the gaps (int32
    where they fit), the overlaps and the worst instances are kept, not the edges.
    `resolution_s` widens the capture's own resolution (a coarser instrument); it is rounded
    up to whole ticks and never narrows it."""
    stream = capture if isinstance(capture, CaptureStream) else stream_of(capture)
    tick = stream.tick_s
    for p in percentiles:
        if not 0 <= p <= 100:
            raise GapforgeError(f"percentile {p} must be between 0 and 100", "--percentiles")
    resolution = stream.resolution_ticks
    if resolution_s is not None:
        if resolution_s <= 0:
            raise GapforgeError("the resolution must be above zero", "--resolution")
        resolution = max(resolution, ceil_fraction(resolution_s / tick))  # rounded up: safe
    width = ceil_fraction(glitch_width_s / tick) if glitch_width_s > 0 else 0
    try:
        raw = _run(stream, stream.chunks(), worst, width)
    except UnorderedTimes:
        raw = _run(stream, stream.sorted_chunks(), worst, width)
    where = stream.source or "capture"
    if raw.count[0] == 0:
        raise GapforgeError("the high-side signal never changes in the capture (no edges)", where)
    if raw.count[1] == 0:
        raise GapforgeError("the low-side signal never changes in the capture (no edges)", where)
    glitches = sorted(raw.glitches, key=lambda g: (g.at_s, g.signal))
    missing = raw.repeats + raw.lost
    missing.sort(key=lambda f: f.at_s)
    missing_count = raw.repeat_total + raw.lost_total + stream.lost_events
    overlaps = raw.overlaps_found()
    possible = raw.possible_found()
    if all(raw.count_of(e) == 0 for e in EDGES) and not overlaps and not possible:
        raise GapforgeError(
            "no dead-time transitions found (no edges where one gate hands over to the other)", where
        )
    limits = dict(limits or {})
    has_window = any(
        lim.window_min_s is not None or lim.window_max_s is not None for lim in limits.values()
    )
    stats: dict[str, EdgeStats] = {}
    reasons: list[str] = []
    notes: list[str] = []
    for name in EDGES:
        g = raw.gaps_of(name)
        lim = limits.get(name, Limits())
        below = above = 0
        # conservative: the true gap is above g - resolution and below g + resolution
        if g.size and lim.window_min_s is not None:
            lowest = ceil_fraction(lim.window_min_s / tick)  # g - resolution >= lowest passes
            below = int(np.count_nonzero(g < lowest + resolution))
        if g.size and lim.window_max_s is not None:
            highest = floor_fraction(lim.window_max_s / tick)  # g + resolution <= highest passes
            above = int(np.count_nonzero(g > highest - resolution))
        stats[name] = _stats(name, g, raw.worst_of(name), tick, percentiles, bins, below, above)
        if below:
            reasons.append(f"{name}: {below} gap(s) not proven above the window minimum "
                           "(gap - resolution < minimum)")
        if above:
            reasons.append(f"{name}: {above} gap(s) not proven below the window maximum "
                           "(gap + resolution > maximum)")
        unproven = int(np.count_nonzero(g < resolution)) if g.size else 0
        if unproven and not below:
            reasons.append(f"{name}: {unproven} transition(s) with no dead time proven "
                           "(gap less than the capture resolution)")
        st = stats[name]
        if lim.predicted_min_s is not None and st.min_s is not None and (
            st.min_s < lim.predicted_min_s
        ):
            notes.append(f"{name}: shortest measured gap is below the predicted minimum")
        if lim.predicted_max_s is not None and st.max_s is not None and (
            st.max_s > lim.predicted_max_s
        ):
            notes.append(f"{name}: longest measured gap is above the predicted maximum")
    if possible:
        reasons.insert(0, f"{len(possible)} possible overlap(s): one gate unknown (x/z) while "
                       "the other is on or unknown")
    if overlaps:
        reasons.insert(0, f"{len(overlaps)} overlap(s): both gates on (shoot-through)")
    if raw.glitch_on_total and has_window:
        reasons.append(f"{raw.glitch_on_total} on-pulse glitch(es): a gate briefly on (inside a "
                       "dead time it ends the dead time early)")
    inconclusive: list[str] = []
    if missing_count and has_window:
        inconclusive.append(f"{missing_count} missing edge(s): the capture cannot prove every "
                            "dead time")
    elif missing_count:
        notes.append(f"{missing_count} missing edge(s)")
    if raw.glitch_total:
        notes.append(f"{raw.glitch_total} glitch(es) shorter than the set width")
    if raw.leading_unknown:
        notes.append("both gates unknown (x/z) at the start of the capture, before their first "
                     "known levels: not measured")
    if stream.time_unit_assumed and has_window:
        inconclusive.append("the capture states no time unit (a VCD without $timescale): "
                            "state it with --timescale to judge the window")
    unknown = raw.unknown - (1 if raw.first_unknown else 0)  # after the first known levels
    if unknown > 0 and has_window:
        inconclusive.append(f"{unknown} interval(s) with an unknown (x/z) gate level: a dead "
                            "time there cannot be measured")
    elif unknown > 0:
        notes.append(f"{unknown} interval(s) with an unknown (x/z) gate level")
    if reasons:
        verdict = "fail"
    elif inconclusive:
        verdict = "inconclusive"
    else:
        verdict = "pass" if has_window else "measured"
    start = raw.first_time if raw.first_time is not None else 0
    return Measurement(
        source=stream.source,
        tick_s=tick,
        duration_s=tick * (raw.end - start),
        to_high=stats["to_high"],
        to_low=stats["to_low"],
        overlaps=overlaps,
        glitches=tuple(glitches),
        missing_edges=tuple(missing),
        unknown_intervals=max(unknown, 0),
        limits=limits,
        verdict=verdict,
        reasons=tuple(reasons + inconclusive),
        notes=tuple(notes),
        warnings=stream.warnings,
        mean_period_s=raw.mean_period(tick),
        resolution_s=tick * resolution,
        possible_overlaps=possible,
        glitch_count=raw.glitch_total,
        missing_edge_count=missing_count,
    )


def _run(stream: CaptureStream, chunks: Iterator[Events], worst: int, width: int) -> _Engine:
    """One pass over the events."""
    engine = _Engine(stream.tick_s, (stream.high_initial, stream.low_initial), worst, width)
    for chunk in chunks:
        engine.feed(*chunk)
    engine.finish(stream.end)
    return engine


# transition patterns over three consecutive joint states a, b, c (c = 16: no next state)
_NO_STATE = 16
(_TH_OFF, _TH_DIRECT, _TH_BOTH, _TH_LOST, _TL_OFF, _TL_DIRECT, _TL_BOTH, _TL_LOST) = range(1, 9)
_SIGN = np.array([0, 1, 0, -1, 0, 1, 0, -1, 0], dtype=np.int64)  # gap = (tc - tb) * sign


def _pattern_table() -> npt.NDArray[np.uint8]:
    table = np.zeros(1 << 14, dtype=np.uint8)
    for a in range(16):
        for b in range(16):
            for c in range(_NO_STATE + 1):
                for base, before, after, on_bit in ((0, _LOW_ON, _HIGH_ON, c >> 2),
                                                    (4, _HIGH_ON, _LOW_ON, c & 3)):
                    if a != before:
                        continue
                    cat = 0
                    if b == _OFF and c != _NO_STATE and on_bit == 1:
                        cat = base + 1  # through both off, then the other side turns on
                    elif b == after:
                        cat = base + 2  # hand-over at one instant: no dead time
                    elif b == _BOTH and c == after:
                        cat = base + 3  # both on for a while: minus the overlap
                    elif b == _OFF and c == before:
                        cat = base + 4  # the dead time ended with the same side on again
                    table[(a << 9) | (b << 5) | c] = cat
    return table


_PATTERNS = _pattern_table()
_MAX_FINDINGS = 1000  # per kind and side, as listed findings
_BEFORE = -(2**62)  # the time of the level before the capture (never part of a pulse width)


def _other_at(
    t: Ints, h: npt.NDArray[np.uint8], lo: npt.NDArray[np.uint8], side: int, at: int
) -> int:
    """The other gate's level after every change at time `at` of this batch."""
    j = int(np.searchsorted(t, at, side="right")) - 1
    return int(lo[j] if side == 0 else h[j])


class _Engine:
    """Incremental measurement over time-ordered events with carried state.

    Carried from chunk to chunk: the current level and last change time of each gate, the
    events of the last (possibly unfinished) timestamp, the last two joint states (for the
    transition patterns and a pending overlap), the start of a pending possible overlap, the
    last two level changes of each gate (for glitches), the worst instances so far and the
    gaps. `width`: pulses shorter than this many ticks are glitches (zero-width ones always)."""

    def __init__(self, tick: Fraction, initial: tuple[int, int], worst: int, width: int = 0) -> None:
        self.tick = tick
        self.initial = initial
        self.worst = worst
        self.width = max(width, 1)
        # glitches: per side the last two level changes (times, levels; the first seeded with
        # the level before the capture) and the other gate's level at the last one
        self._gl: list[tuple[Ints, npt.NDArray[np.uint8], int]] = [
            (np.array([_BEFORE], dtype=np.int64), np.array([initial[side]], dtype=np.uint8), 2)
            for side in (0, 1)
        ]
        self.glitches: list[Glitch] = []
        self._glitch_n = [0, 0]
        self.glitch_total = 0
        self.glitch_on_total = 0
        self._recent_glitches: set[tuple[int, int]] = set()  # (side, start) not yet out of reach
        self._risk_open: int | None = None
        self.leading_unknown = False
        self._risk_start: list[Ints] = []
        self._risk_length: list[Ints] = []
        self.repeat_total = 0
        self.lost_total = 0
        self.level = [initial[0], initial[1]]
        self.last_time: list[int | None] = [None, None]
        self.count = [0, 0]
        self.first_time: int | None = None
        self.end = 0
        self.hold: Events | None = None
        self.ctx_t = np.zeros(0, dtype=np.int64)
        self.ctx_s = np.zeros(0, dtype=np.uint8)
        self.started = False
        self.unknown = 0
        self.first_unknown = False
        self._ov_start: list[Ints] = []
        self._ov_length: list[Ints] = []
        self.repeats: list[Finding] = []
        self.lost: list[Finding] = []
        self._repeat_n = [0, 0]
        self._lost_n = [0, 0]
        self._gaps: dict[str, _GapStore] = {e: _GapStore() for e in EDGES}
        self._n: dict[str, int] = dict.fromkeys(EDGES, 0)
        # worst instances: (gap, order, at) of the shortest and (-gap, order, at) of the longest
        self._short: dict[str, list[tuple[int, int, int]]] = {e: [] for e in EDGES}
        self._long: dict[str, list[tuple[int, int, int]]] = {e: [] for e in EDGES}
        # to_high start times: first, last and count, for the mean PWM period
        self._period: list[int] = []

    # -- input ------------------------------------------------------------------------------

    def feed(self, times: Ints, sides: npt.NDArray[np.uint8], levels: npt.NDArray[np.uint8]) -> None:
        if times.size == 0:
            return
        high = int(np.count_nonzero(sides == 0))
        self.count[0] += high
        self.count[1] += times.size - high
        if self.first_time is None:
            self.first_time = int(times[0])
        if self.hold is not None:
            times = np.concatenate([self.hold[0], times])
            sides = np.concatenate([self.hold[1], sides])
            levels = np.concatenate([self.hold[2], levels])
        # the changes at the last timestamp may go on in the next chunk: keep them back
        cut = int(np.searchsorted(times, times[-1], side="left"))
        self.hold = (times[cut:], sides[cut:], levels[cut:])
        if cut:
            self._process(times[:cut], sides[:cut], levels[:cut])

    def finish(self, end: int) -> None:
        if self.hold is not None and self.hold[0].size:
            self._process(*self.hold)
        self.hold = None
        last_t = int(self.ctx_t[-1]) if self.ctx_t.size else 0
        self.end = max(end, last_t, *(t for t in self.last_time if t is not None))
        if self.ctx_s.size == 2:
            code = (int(self.ctx_s[0]) << 9) | (int(self.ctx_s[1]) << 5) | _NO_STATE
            if _PATTERNS[code] in (_TH_DIRECT, _TL_DIRECT):
                edge = "to_high" if _PATTERNS[code] == _TH_DIRECT else "to_low"
                self._record(edge, np.zeros(1, dtype=np.int64), self.ctx_t[1:2])
        if self.ctx_s.size and self.ctx_s[-1] == _BOTH:
            t = int(self.ctx_t[-1])
            self._ov_start.append(np.array([t], dtype=np.int64))
            self._ov_length.append(np.array([max(self.end, t) - t], dtype=np.int64))
        if self._risk_open is not None:  # a possible overlap runs to the end of the capture
            t = self._risk_open
            self._risk_start.append(np.array([t], dtype=np.int64))
            self._risk_length.append(np.array([max(self.end, t) - t], dtype=np.int64))
            self._risk_open = None

    # -- one batch of complete timestamps ---------------------------------------------------

    def _process(self, t: Ints, side: npt.NDArray[np.uint8], lev: npt.NDArray[np.uint8]) -> None:
        n = t.size
        idx = np.arange(n)
        is_high = side == 0
        from_high = np.maximum.accumulate(np.where(is_high, idx, -1))
        from_low = np.maximum.accumulate(np.where(is_high, -1, idx))
        h = np.where(from_high >= 0, lev[from_high], np.uint8(self.level[0])).astype(np.uint8)
        lo = np.where(from_low >= 0, lev[from_low], np.uint8(self.level[1])).astype(np.uint8)
        state = cast(npt.NDArray[np.uint8], (h << 2) | lo)
        # a change that leaves the joint state as it was repeats its side's level: if that level
        # is clean, an edge in between was lost
        same = np.empty(n, dtype=bool)
        same[0] = int(state[0]) == (self.level[0] << 2) | self.level[1]
        np.equal(state[1:], state[:-1], out=same[1:])
        any_same = bool(same.any())
        if any_same:
            repeat = np.flatnonzero(same & (lev <= 1))
            if repeat.size:
                self._repeat_findings(repeat, t, is_high, lev, from_high, from_low)
        self._glitches(t, is_high, lev, same if any_same else None, h, lo)
        if from_high[-1] >= 0:
            self.last_time[0] = int(t[from_high[-1]])
        if from_low[-1] >= 0:
            self.last_time[1] = int(t[from_low[-1]])
        self.level = [int(h[-1]), int(lo[-1])]
        # the state after all changes at each distinct time
        if n > 1:
            last = np.empty(n, dtype=bool)
            np.not_equal(t[1:], t[:-1], out=last[:-1])
            last[-1] = True
            t, state = t[last], state[last]
        if not self.started:
            self.started = True
            if self.initial != (2, 2):
                # the levels before the first change, as a zero-length state at the first time
                self.ctx_t = t[:1].copy()
                self.ctx_s = np.array([(self.initial[0] << 2) | self.initial[1]], dtype=np.uint8)
                if self._count_unknown(self.ctx_s, first=True):
                    self._possible(self.ctx_t, self.ctx_s, first=False)
        change = np.empty(state.size, dtype=bool)
        change[1:] = state[1:] != state[:-1]
        change[0] = self.ctx_s.size == 0 or state[0] != self.ctx_s[-1]
        if not change.all():
            t, state = t[change], state[change]
        if state.size == 0:
            return
        first = self.ctx_s.size == 0
        if self._count_unknown(state, first=first) or self._risk_open is not None:
            self._possible(t, state, first)
        c0 = self.ctx_s.size
        seq_t = np.concatenate([self.ctx_t, t]) if c0 else t
        seq_s = np.concatenate([self.ctx_s, state]) if c0 else state
        # overlaps whose end is now known
        both = np.flatnonzero(seq_s[max(c0 - 1, 0) : -1] == _BOTH) + max(c0 - 1, 0)
        if both.size:
            self._ov_start.append(seq_t[both])
            self._ov_length.append(seq_t[both + 1] - seq_t[both])
        # transition patterns whose third state is now known
        if seq_s.size >= 3:
            code = (seq_s[:-2].astype(np.uint16) << 9) | (seq_s[1:-1].astype(np.uint16) << 5)
            code |= seq_s[2:]
            cat = _PATTERNS[code]
            hit = np.flatnonzero(cat)
            if hit.size:
                kinds = cat[hit]
                tb = seq_t[hit + 1]
                gap = (seq_t[hit + 2] - tb) * _SIGN[kinds]
                to_high = kinds < _TH_LOST
                self._record("to_high", gap[to_high], tb[to_high])
                to_low = (kinds > _TH_LOST) & (kinds < _TL_LOST)
                self._record("to_low", gap[to_low], tb[to_low])
                lost = np.flatnonzero((kinds == _TH_LOST) | (kinds == _TL_LOST))
                for k in lost.tolist():
                    kind, at = int(kinds[k]), int(tb[k])
                    gate = 1 if kind == _TH_LOST else 0  # the gate that went off and on again
                    # explained by a glitch: on for a glitch and off again, or off for one
                    if ((gate, int(seq_t[hit[k]])) in self._recent_glitches
                            or (gate, at) in self._recent_glitches):
                        continue
                    self._lost_finding(kind, at)
        self.ctx_t = seq_t[-2:].copy()
        self.ctx_s = seq_s[-2:].copy()
        if self._recent_glitches:  # patterns from now on start at ctx_t[0] or later
            self._recent_glitches = {g for g in self._recent_glitches if g[1] >= self.ctx_t[0]}

    def _count_unknown(self, states: npt.NDArray[np.uint8], first: bool) -> int:
        unknown = _UNKNOWN[states]
        count = int(np.count_nonzero(unknown))
        self.unknown += count
        if first:
            self.first_unknown = bool(unknown[0])
        return count

    def _possible(self, t: Ints, state: npt.NDArray[np.uint8], first: bool) -> None:
        """Runs of joint states with one gate unknown and the other on or unknown (not the
        first state of the capture while both gates are unknown: nothing observed yet)."""
        risky = _RISKY[state]
        if first and _BOTH_UNKNOWN[state[0]]:
            risky[0] = False
            self.leading_unknown = True
        before = np.empty_like(risky)
        before[0] = self._risk_open is not None
        before[1:] = risky[:-1]
        starts = t[risky & ~before]
        ends = t[~risky & before]
        if self._risk_open is not None:
            starts = np.concatenate([np.array([self._risk_open], dtype=np.int64), starts])
        closed = ends.size
        if closed:
            lengths = ends - starts[:closed]
            keep = lengths > 0  # an initial state replaced at its own time lasted no time
            self._risk_start.append(starts[:closed][keep])
            self._risk_length.append(lengths[keep])
        self._risk_open = int(starts[closed]) if starts.size > closed else None

    def _glitches(
        self, t: Ints, is_high: npt.NDArray[np.bool_], lev: npt.NDArray[np.uint8],
        same: npt.NDArray[np.bool_] | None, h: npt.NDArray[np.uint8], lo: npt.NDArray[np.uint8],
    ) -> None:
        """Pulses shorter than the glitch width on each gate: a pulse is a level between two
        changes of one gate, clean (0/1) and with clean levels before and after."""
        for side, mine in ((0, is_high), (1, ~is_high)):
            sel = np.flatnonzero(mine)
            if same is not None:
                sel = sel[~same[sel]]  # changes that keep the level are no edges
            if sel.size == 0:
                continue
            carry_t, carry_v, carry_other = self._gl[side]
            times = np.concatenate([carry_t, t[sel]])
            levels = np.concatenate([carry_v, lev[sel]])
            if times.size >= 3:
                # pulse k (1 <= k <= size - 2) runs from change k to change k + 1
                short = np.flatnonzero(times[2:] - times[1:-1] < self.width) + 1
                if short.size:
                    short = short[(levels[short] <= 1) & (levels[short - 1] <= 1)
                                  & (levels[short + 1] <= 1)]
                for k in short.tolist():
                    at = int(times[k])
                    other = carry_other if k < carry_t.size else _other_at(t, h, lo, side, at)
                    self._glitch(side, int(levels[k]), at, int(times[k + 1]) - at, other)
            last = int(times[-1])
            self._gl[side] = (times[-2:].copy(), levels[-2:].copy(),
                              _other_at(t, h, lo, side, last))

    def _glitch(self, side: int, level: int, at: int, width: int, other: int) -> None:
        self.glitch_total += 1
        if level == 1:
            self.glitch_on_total += 1
        self._recent_glitches.add((side, at))
        if self._glitch_n[side] >= _MAX_FINDINGS:
            return
        self._glitch_n[side] += 1
        self.glitches.append(Glitch("high" if side == 0 else "low", level, self.tick * at,
                                    self.tick * width, in_dead_time=level == 1 and other == 0))

    def _repeat_findings(
        self, repeat: npt.NDArray[np.intp], t: Ints, is_high: npt.NDArray[np.bool_],
        lev: npt.NDArray[np.uint8], from_high: npt.NDArray[np.intp],
        from_low: npt.NDArray[np.intp],
    ) -> None:
        for i in repeat.tolist():
            side = 0 if is_high[i] else 1
            prev_i = int((from_high if side == 0 else from_low)[i - 1]) if i else -1
            prev_t = int(t[prev_i]) if prev_i >= 0 else self.last_time[side]
            if prev_t is None or prev_t == int(t[i]):
                continue
            self.repeat_total += 1
            if self._repeat_n[side] >= _MAX_FINDINGS:
                continue
            self._repeat_n[side] += 1
            signal = "high" if side == 0 else "low"
            self.repeats.append(Finding(
                self.tick * int(t[i]),
                f"{signal} side: level {int(lev[i])} reported twice; an edge in between is missing"))

    def _lost_finding(self, kind: int, at: int) -> None:
        side = 0 if kind == _TH_LOST else 1
        self.lost_total += 1
        if self._lost_n[side] >= _MAX_FINDINGS:
            return
        self._lost_n[side] += 1
        other = "high" if side == 0 else "low"
        self.lost.append(Finding(self.tick * at, f"dead time ended without the {other} side "
                                 "turning on (its edges are missing)"))

    def _record(self, edge: str, gaps: Ints, at: Ints) -> None:
        if gaps.size == 0:
            return
        base = self._n[edge]
        self._n[edge] += int(gaps.size)
        self._gaps[edge].append(gaps)
        if edge == "to_high":
            if not self._period:
                self._period = [int(at[0]), int(at[-1]), int(at.size)]
            else:
                self._period[1] = int(at[-1])
                self._period[2] += int(at.size)
        for keep, values in ((self._short[edge], gaps), (self._long[edge], -gaps)):
            if self.worst <= 0:
                continue
            if len(keep) >= self.worst:
                bound = keep[-1][0]
                if int(values.min()) >= bound:
                    continue  # nothing here beats the worst kept so far (ties: earlier wins)
                pick = np.flatnonzero(values < bound)
                pick = pick[_extremes(values[pick], self.worst)]
            else:
                pick = np.asarray(_extremes(values, self.worst), dtype=np.intp)
            keep.extend((int(values[i]), base + int(i), int(at[i])) for i in pick.tolist())
            keep.sort()
            del keep[self.worst :]

    # -- results ----------------------------------------------------------------------------

    def overlaps_found(self) -> Overlaps:
        empty = np.zeros(0, dtype=np.int64)
        return Overlaps(self.tick, np.concatenate([empty, *self._ov_start]),
                        np.concatenate([empty, *self._ov_length]))

    def possible_found(self) -> Overlaps:
        empty = np.zeros(0, dtype=np.int64)
        return Overlaps(self.tick, np.concatenate([empty, *self._risk_start]),
                        np.concatenate([empty, *self._risk_length]))

    def count_of(self, edge: str) -> int:
        return self._n[edge]

    def gaps_of(self, edge: str) -> npt.NDArray[np.signedinteger[Any]]:
        """Every gap of one edge in time order: int32 when all fit, else int64."""
        return self._gaps[edge].array()

    def worst_of(self, edge: str) -> tuple[tuple[Instance, ...], tuple[Instance, ...]]:
        short = tuple(Instance(self.tick * at, self.tick * g) for g, _, at in self._short[edge])
        long = tuple(Instance(self.tick * at, self.tick * -g) for g, _, at in self._long[edge])
        return short, long

    def mean_period(self, tick: Fraction) -> Fraction | None:
        """Mean time between successive to_high transitions (None with fewer than two)."""
        if len(self._period) < 3 or self._period[2] < 2:
            return None
        return tick * Fraction(self._period[1] - self._period[0], self._period[2] - 1)


_INT32_MIN, _INT32_MAX = -(2**31), 2**31 - 1


def _exact_sum(values: npt.NDArray[np.signedinteger[Any]]) -> int:
    """The sum as a Python int: int64 when no partial sum can overflow, else in slices."""
    if values.size == 0:
        return 0
    biggest = max(abs(int(values.min())), abs(int(values.max())))
    if biggest * values.size < 2**63:
        return int(values.sum(dtype=np.int64))
    step = max(1, (2**62) // max(biggest, 1))
    return sum(int(values[at : at + step].sum(dtype=np.int64)) for at in range(0, values.size, step))


class _GapStore:
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


def _stats(
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


def _extremes(values: Ints, k: int) -> list[int]:
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
