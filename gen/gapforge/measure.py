"""Dead times, overlaps, glitches and missing edges measured in a two-gate capture.

Every time is an integer count of capture ticks; the tick length is an exact Fraction, so a gap
is compared with a window limit exactly. Floats appear only in statistics and plotting arrays.

Transitions are read from the joint state of the two gates (high side, low side) at each change:
- `to_high`: low side turns off, both are off (the dead time), high side turns on. The gap is the
  time both are off; 0 if one turns off as the other turns on; negative (minus the overlap
  duration) if the high side turns on before the low side is off.
- `to_low`: the same from high side on to low side on.
- an overlap is any interval with both gates on (shoot-through), reported with its start time,
  measured on the raw signals (glitch filtering never hides one).
- a glitch is a pulse on one gate shorter than the set width; glitches are listed and then left
  out of the dead-time statistics.
- a missing edge: a dead time that ends with the same gate turning on again (the other gate never
  turned on), or a level reported twice in a row (an edge between them was lost).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np
import numpy.typing as npt

from gapforge.capture import GateCapture
from gapforge.errors import GapforgeError
from gapforge.quantities import ceil_fraction, floor_fraction

EDGES = ("to_high", "to_low")
DEFAULT_PERCENTILES = (1.0, 5.0, 50.0, 95.0, 99.0)

# joint state code = high * 4 + low, levels 0/1/2 (x)/3 (z)
_OFF, _LOW_ON, _HIGH_ON, _BOTH = 0, 1, 4, 5

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


@dataclass(frozen=True)
class Glitch:
    signal: str  # "high" or "low"
    level: int  # the level of the short pulse (1 = a short on-pulse)
    at_s: Fraction
    width_s: Fraction


@dataclass(frozen=True)
class EdgeStats:
    """Every gap of one transition kind, with statistics."""

    name: str
    tick_s: Fraction
    gaps_ticks: Ints
    at_ticks: Ints
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
        return float(self.gaps_ticks.mean()) * float(self.tick_s) if self.count else None

    @property
    def std_s(self) -> float | None:
        return float(self.gaps_ticks.std()) * float(self.tick_s) if self.count else None

    @property
    def gaps_s(self) -> Floats:
        """Gaps in seconds as floats (for plotting; judge with gaps_ticks and tick_s)."""
        return self.gaps_ticks.astype(np.float64) * float(self.tick_s)

    @property
    def at_s(self) -> Floats:
        return self.at_ticks.astype(np.float64) * float(self.tick_s)


@dataclass(frozen=True)
class Measurement:
    source: str
    tick_s: Fraction
    duration_s: Fraction
    to_high: EdgeStats
    to_low: EdgeStats
    overlaps: tuple[Overlap, ...]
    glitches: tuple[Glitch, ...]
    missing_edges: tuple[Finding, ...]
    unknown_intervals: int
    limits: Mapping[str, Limits]
    verdict: str  # "pass", "fail" or "measured" (no window to judge against)
    reasons: tuple[str, ...]
    notes: tuple[str, ...] = field(default=())
    warnings: tuple[str, ...] = field(default=())

    def edge(self, name: str) -> EdgeStats:
        return self.to_high if name == "to_high" else self.to_low

    @property
    def overlap_at_s(self) -> Floats:
        """Start times of every overlap in seconds (floats, for plotting)."""
        return np.array([float(o.at_s) for o in self.overlaps], dtype=np.float64)

    @property
    def failed(self) -> bool:
        return self.verdict == "fail"


def measure_capture(
    capture: GateCapture,
    *,
    limits: Mapping[str, Limits] | None = None,
    glitch_width_s: Fraction = Fraction(0),
    percentiles: Sequence[float] = DEFAULT_PERCENTILES,
    bins: int = 20,
    worst: int = 5,
) -> Measurement:
    """Measure every dead time, overlap, glitch and missing edge; judge against `limits`."""
    tick = capture.tick_s
    where = capture.source or "capture"
    if capture.high_times.size == 0:
        raise GapforgeError("the high-side signal never changes in the capture (no edges)", where)
    if capture.low_times.size == 0:
        raise GapforgeError("the low-side signal never changes in the capture (no edges)", where)
    for p in percentiles:
        if not 0 <= p <= 100:
            raise GapforgeError(f"percentile {p} must be between 0 and 100", "--percentiles")
    limits = dict(limits or {})
    missing: list[Finding] = []
    ht, hv = _dedupe(capture.high_times, capture.high_levels, "high", tick, missing)
    lt, lv = _dedupe(capture.low_times, capture.low_levels, "low", tick, missing)
    init = (capture.high_initial, capture.low_initial)
    times, states = _joint(ht, hv, lt, lv, init)
    overlaps = _overlaps(times, states, capture.end, tick)
    unknown = int(np.count_nonzero(((states >> 2) >= 2) | ((states & 3) >= 2))) - (
        1 if states.size and (((states[0] >> 2) >= 2) or ((states[0] & 3) >= 2)) else 0
    )
    glitches: list[Glitch] = []
    width = ceil_fraction(glitch_width_s / tick) if glitch_width_s > 0 else 0
    if width > 0:
        ht2, hv2 = _deglitch(ht, hv, width, "high", tick, glitches)
        lt2, lv2 = _deglitch(lt, lv, width, "low", tick, glitches)
        if len(glitches):
            times, states = _joint(ht2, hv2, lt2, lv2, init)
    glitches.sort(key=lambda g: g.at_s)
    gaps = _transitions(times, states, tick, missing)
    missing.sort(key=lambda f: f.at_s)
    if all(g[0].size == 0 for g in gaps.values()) and not overlaps:
        raise GapforgeError(
            "no dead-time transitions found (no edges where one gate hands over to the other)", where
        )
    stats: dict[str, EdgeStats] = {}
    reasons: list[str] = []
    notes: list[str] = []
    for name in EDGES:
        g, at = gaps[name]
        lim = limits.get(name, Limits())
        below = above = 0
        if g.size and lim.window_min_s is not None:
            below = int(np.count_nonzero(g < ceil_fraction(lim.window_min_s / tick)))
        if g.size and lim.window_max_s is not None:
            above = int(np.count_nonzero(g > floor_fraction(lim.window_max_s / tick)))
        stats[name] = _stats(name, g, at, tick, percentiles, bins, worst, below, above)
        if below:
            reasons.append(f"{name}: {below} gap(s) shorter than the window minimum")
        if above:
            reasons.append(f"{name}: {above} gap(s) longer than the window maximum")
        nonpositive = int(np.count_nonzero(g <= 0))
        if nonpositive and not below:
            reasons.append(f"{name}: {nonpositive} transition(s) with no dead time at all")
        st = stats[name]
        if lim.predicted_min_s is not None and st.min_s is not None and (
            st.min_s < lim.predicted_min_s
        ):
            notes.append(f"{name}: shortest measured gap is below the predicted minimum")
        if lim.predicted_max_s is not None and st.max_s is not None and (
            st.max_s > lim.predicted_max_s
        ):
            notes.append(f"{name}: longest measured gap is above the predicted maximum")
    if overlaps:
        reasons.insert(0, f"{len(overlaps)} overlap(s): both gates on (shoot-through)")
    if missing:
        notes.append(f"{len(missing)} missing edge(s)")
    if glitches:
        notes.append(f"{len(glitches)} glitch(es) shorter than the set width")
    if unknown > 0:
        notes.append(f"{unknown} interval(s) with an unknown (x/z) gate level")
    has_window = any(
        lim.window_min_s is not None or lim.window_max_s is not None for lim in limits.values()
    )
    verdict = "fail" if reasons else ("pass" if has_window else "measured")
    start = min(int(capture.high_times[0]), int(capture.low_times[0]))
    return Measurement(
        source=capture.source,
        tick_s=tick,
        duration_s=tick * (capture.end - start),
        to_high=stats["to_high"],
        to_low=stats["to_low"],
        overlaps=tuple(overlaps),
        glitches=tuple(glitches),
        missing_edges=tuple(missing),
        unknown_intervals=max(unknown, 0),
        limits=limits,
        verdict=verdict,
        reasons=tuple(reasons),
        notes=tuple(notes),
        warnings=capture.warnings,
    )


def _dedupe(
    times: Ints, levels: npt.NDArray[np.uint8], signal: str, tick: Fraction, missing: list[Finding]
) -> tuple[Ints, npt.NDArray[np.uint8]]:
    """Drop changes that repeat the level; a repeated clean level means a lost edge."""
    if levels.size < 2:
        return times, levels
    same = levels[1:] == levels[:-1]
    if not same.any():
        return times, levels
    repeat = np.flatnonzero(same & (levels[1:] <= 1) & (times[1:] != times[:-1])) + 1
    for i in repeat[:1000].tolist():
        missing.append(
            Finding(tick * int(times[i]), f"{signal} side: level {int(levels[i])} reported twice; "
                    "an edge in between is missing")
        )
    keep = np.ones(levels.size, dtype=bool)
    keep[1:] = ~same
    return times[keep], levels[keep]


def _joint(
    ht: Ints,
    hv: npt.NDArray[np.uint8],
    lt: Ints,
    lv: npt.NDArray[np.uint8],
    initial: tuple[int, int] = (2, 2),
) -> tuple[Ints, npt.NDArray[np.uint8]]:
    """Joint state (high*4 + low) after all changes at each distinct time, repeats removed.

    Both inputs are sorted, so the merge is two binary searches (no sort); at equal times the
    high-side change comes first, and only the last state at each time is kept anyway."""
    # for each change of one side, how many changes of the other side come before it
    low_before_high = np.searchsorted(lt, ht, side="left")
    high_upto_low = np.searchsorted(ht, lt, side="right")
    t = np.empty(ht.size + lt.size, dtype=np.int64)
    state: npt.NDArray[np.uint8] = np.empty(t.size, dtype=np.uint8)
    pos = np.arange(ht.size) + low_before_high
    t[pos] = ht
    low_prev = np.where(low_before_high > 0, lv[np.maximum(low_before_high - 1, 0)], initial[1])
    state[pos] = (hv << 2) | low_prev.astype(np.uint8)
    del pos, low_prev, low_before_high
    pos = np.arange(lt.size) + high_upto_low
    t[pos] = lt
    high_prev = np.where(high_upto_low > 0, hv[np.maximum(high_upto_low - 1, 0)], initial[0])
    state[pos] = (high_prev.astype(np.uint8) << 2) | lv
    del pos, high_prev, high_upto_low
    last = np.ones(t.size, dtype=bool)
    last[:-1] = t[1:] != t[:-1]
    t, state = t[last], state[last]
    if t.size and initial != (2, 2):
        # the levels before the first change, as a zero-length state at the first time
        t = np.concatenate([t[:1], t])
        state = np.concatenate([np.array([(initial[0] << 2) | initial[1]], dtype=np.uint8), state])
    change = np.ones(t.size, dtype=bool)
    change[1:] = state[1:] != state[:-1]
    return t[change], state[change]


def _overlaps(times: Ints, states: npt.NDArray[np.uint8], end: int, tick: Fraction) -> list[Overlap]:
    idx = np.flatnonzero(states == _BOTH)
    out: list[Overlap] = []
    for k in idx.tolist():
        stop = int(times[k + 1]) if k + 1 < times.size else max(end, int(times[k]))
        out.append(Overlap(tick * int(times[k]), tick * (stop - int(times[k]))))
    return out


def _deglitch(
    times: Ints,
    levels: npt.NDArray[np.uint8],
    width: int,
    signal: str,
    tick: Fraction,
    glitches: list[Glitch],
) -> tuple[Ints, npt.NDArray[np.uint8]]:
    """Remove pulses shorter than `width` ticks (both of their edges), listing each one."""
    if times.size < 3:
        return times, levels
    durations = times[2:] - times[1:-1]  # pulse k+1 starts at change k+1
    clean = (levels[1:-1] <= 1) & (levels[2:] <= 1) & (levels[:-2] <= 1)
    short = np.flatnonzero((durations < width) & clean) + 1
    if short.size == 0:
        return times, levels
    for k in short.tolist():
        glitches.append(Glitch(signal, int(levels[k]), tick * int(times[k]),
                               tick * int(times[k + 1] - times[k])))
    keep = np.ones(times.size, dtype=bool)
    keep[short] = False
    keep[short + 1] = False
    t, v = times[keep], levels[keep]
    if v.size > 1:
        again = np.ones(v.size, dtype=bool)
        again[1:] = v[1:] != v[:-1]
        t, v = t[again], v[again]
    return t, v


def _transitions(
    times: Ints, states: npt.NDArray[np.uint8], tick: Fraction, missing: list[Finding]
) -> dict[str, tuple[Ints, Ints]]:
    out: dict[str, tuple[Ints, Ints]] = {}
    n = states.size
    if n < 2:
        empty = np.zeros(0, dtype=np.int64)
        return {"to_high": (empty, empty), "to_low": (empty, empty)}
    a = states[:-1]
    b = states[1:]
    tb = times[1:]
    # next state after b and its time (only valid for k < n-2)
    c = np.full(n - 1, 255, dtype=np.uint8)
    c[:-1] = states[2:]
    tc = np.zeros(n - 1, dtype=np.int64)
    tc[:-1] = times[2:]
    for name, before, after in (("to_high", _LOW_ON, _HIGH_ON), ("to_low", _HIGH_ON, _LOW_ON)):
        turned_on = ((c >> 2) == 1) if name == "to_high" else ((c & 3) == 1)
        through_off = np.flatnonzero((a == before) & (b == _OFF) & (c != 255) & turned_on)
        direct = np.flatnonzero((a == before) & (b == after))
        through_both = np.flatnonzero((a == before) & (b == _BOTH) & (c == after))
        idx = np.concatenate([through_off, direct, through_both])
        gap = np.concatenate([
            tc[through_off] - tb[through_off],
            np.zeros(direct.size, dtype=np.int64),
            tb[through_both] - tc[through_both],
        ])
        order = np.argsort(idx, kind="stable")
        out[name] = (gap[order], tb[idx][order])
        lost = np.flatnonzero((a == before) & (b == _OFF) & (c == before))
        other = "high" if name == "to_high" else "low"
        for k in lost[:1000].tolist():
            missing.append(Finding(tick * int(tb[k]), f"dead time ended without the {other} side "
                                   "turning on (its edges are missing)"))
    return out


def _stats(
    name: str,
    gaps: Ints,
    at: Ints,
    tick: Fraction,
    percentiles: Sequence[float],
    bins: int,
    worst: int,
    below: int,
    above: int,
) -> EdgeStats:
    if gaps.size == 0:
        return EdgeStats(name, tick, gaps, at, (), (), (), (), (), below, above)
    fl = float(tick)
    pct = tuple((float(p), float(np.percentile(gaps, p)) * fl) for p in percentiles)
    lo, hi = int(gaps.min()), int(gaps.max())
    nbins = max(1, min(bins, hi - lo + 1))
    counts, edges = np.histogram(gaps, bins=nbins, range=(lo, hi + 1))
    k = min(worst, gaps.size)
    shortest = tuple(Instance(tick * int(at[i]), tick * int(gaps[i])) for i in _extremes(gaps, k))
    longest = tuple(Instance(tick * int(at[i]), tick * int(gaps[i])) for i in _extremes(-gaps, k))
    return EdgeStats(
        name,
        tick,
        gaps,
        at,
        pct,
        tuple(float(e) * fl for e in edges),
        tuple(int(c) for c in counts),
        shortest,
        longest,
        below,
        above,
    )


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
