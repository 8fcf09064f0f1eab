"""The measurement engine: one incremental pass over the events of both gates in time order.

It is fed chunk by chunk (a whole capture in memory is one chunk) and carries what a chunk
boundary must not change: the current level of each gate, the changes at the last timestamp
(they may go on in the next chunk), the last two joint states and the last two level changes of
each gate. Each batch of complete timestamps goes through named steps (`Engine._batch`):

1. `_changes`: each change's joint state (high * 4 + low), a level reported twice (a missing
   edge in a stream of edge reports; a restated level elsewhere), the glitch watch, the levels carried on;
2. `_distinct`: the joint state after all changes at one timestamp, only where it changes, the
   capture's first state, unknown levels and possible overlaps;
3. `_transitions`: overlaps whose end is now known, and the transition patterns over three
   consecutive joint states whose third state is now known (gaps, lost hand-overs).

Gaps go to `_GapRecord` (every gap, the worst instances, the PWM period), glitches to
`_GlitchWatch`. Listed findings stop at 1000 per kind and side; their counts do not.
"""

from __future__ import annotations

from fractions import Fraction
from typing import Any, cast

import numpy as np
import numpy.typing as npt

from gapforge.bench.capture import Events
from gapforge.bench.measure_model import EDGES, Finding, Glitch, Instance, Ints, Overlaps
from gapforge.bench.measure_stats import GapStore, extremes

# joint state code = high * 4 + low, levels 0/1/2 (x)/3 (z)
_OFF, _LOW_ON, _HIGH_ON, _BOTH = 0, 1, 4, 5
# a joint state with an unknown (x/z) level
_UNKNOWN = np.array([(s >> 2) >= 2 or (s & 3) >= 2 for s in range(16)], dtype=bool)
# one gate unknown while the other is on or unknown: a possible shoot-through
_RISKY = np.array([(s >> 2) != 0 and (s & 3) != 0 and s != _BOTH for s in range(16)], dtype=bool)
_BOTH_UNKNOWN = np.array([(s >> 2) >= 2 and (s & 3) >= 2 for s in range(16)], dtype=bool)



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


class _GlitchWatch:
    """Pulses shorter than the glitch width on each gate. Carried per side: the last two level
    changes (times, levels; the first seeded with the level before the capture) and the other
    gate's level at the last one."""

    def __init__(self, tick: Fraction, initial: tuple[int, int], width: int) -> None:
        self.tick = tick
        self.width = width
        self._gl: list[tuple[Ints, npt.NDArray[np.uint8], int]] = [
            (np.array([_BEFORE], dtype=np.int64), np.array([initial[side]], dtype=np.uint8), 2)
            for side in (0, 1)
        ]
        self.glitches: list[Glitch] = []
        self._glitch_n = [0, 0]
        self.total = 0
        self.on_total = 0
        self.recent: set[tuple[int, int]] = set()  # (side, start) not yet out of reach

    def watch(
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
        self.total += 1
        if level == 1:
            self.on_total += 1
        self.recent.add((side, at))
        if self._glitch_n[side] >= _MAX_FINDINGS:
            return
        self._glitch_n[side] += 1
        self.glitches.append(Glitch("high" if side == 0 else "low", level, self.tick * at,
                                    self.tick * width, in_dead_time=level == 1 and other == 0))



class _GapRecord:
    """Every gap per edge, the worst instances (shortest and longest) and the to_high start
    times (first, last and count) for the mean PWM period."""

    def __init__(self, tick: Fraction, worst: int) -> None:
        self.tick = tick
        self.worst = worst
        self._gaps: dict[str, GapStore] = {e: GapStore() for e in EDGES}
        self._n: dict[str, int] = dict.fromkeys(EDGES, 0)
        # worst instances: (gap, order, at) of the shortest and (-gap, order, at) of the longest
        self._short: dict[str, list[tuple[int, int, int]]] = {e: [] for e in EDGES}
        self._long: dict[str, list[tuple[int, int, int]]] = {e: [] for e in EDGES}
        self._period: list[int] = []

    def add(self, edge: str, gaps: Ints, at: Ints) -> None:
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
                pick = pick[extremes(values[pick], self.worst)]
            else:
                pick = np.asarray(extremes(values, self.worst), dtype=np.intp)
            keep.extend((int(values[i]), base + int(i), int(at[i])) for i in pick.tolist())
            keep.sort()
            del keep[self.worst :]

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


class Engine:
    """Incremental measurement over time-ordered events with carried state (module docstring).
    `width`: pulses shorter than this many ticks are glitches (zero-width ones always)."""

    def __init__(self, tick: Fraction, initial: tuple[int, int], worst: int, width: int = 0,
                 edge_events: bool = False) -> None:
        self.tick = tick
        # a level reported twice is a lost edge only in a stream of edge reports; a VCD restates
        # levels (a vector written whole, a $dumpall checkpoint) and a sample repeats them
        self.edge_events = edge_events
        self.initial = initial
        self.glitch = _GlitchWatch(tick, initial, max(width, 1))
        self.record = _GapRecord(tick, worst)
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
            self._batch(times[:cut], sides[:cut], levels[:cut])

    def finish(self, end: int) -> None:
        if self.hold is not None and self.hold[0].size:
            self._batch(*self.hold)
        self.hold = None
        last_t = int(self.ctx_t[-1]) if self.ctx_t.size else 0
        self.end = max(end, last_t, *(t for t in self.last_time if t is not None))
        if self.ctx_s.size == 2:
            code = (int(self.ctx_s[0]) << 9) | (int(self.ctx_s[1]) << 5) | _NO_STATE
            if _PATTERNS[code] in (_TH_DIRECT, _TL_DIRECT):
                edge = "to_high" if _PATTERNS[code] == _TH_DIRECT else "to_low"
                self.record.add(edge, np.zeros(1, dtype=np.int64), self.ctx_t[1:2])
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

    def _batch(self, t: Ints, side: npt.NDArray[np.uint8], lev: npt.NDArray[np.uint8]) -> None:
        t, state = self._changes(t, side, lev)
        distinct = self._distinct(t, state)
        if distinct is not None:
            self._transitions(*distinct)

    def _changes(
        self, t: Ints, side: npt.NDArray[np.uint8], lev: npt.NDArray[np.uint8]
    ) -> tuple[Ints, npt.NDArray[np.uint8]]:
        """Each change's joint state; repeated levels, glitches; the state after all changes at
        each distinct time."""
        n = t.size
        idx = np.arange(n)
        is_high = side == 0
        from_high = np.maximum.accumulate(np.where(is_high, idx, -1))
        from_low = np.maximum.accumulate(np.where(is_high, -1, idx))
        h = np.where(from_high >= 0, lev[from_high], np.uint8(self.level[0])).astype(np.uint8)
        lo = np.where(from_low >= 0, lev[from_low], np.uint8(self.level[1])).astype(np.uint8)
        state = cast(npt.NDArray[np.uint8], (h << 2) | lo)
        # a change that leaves the joint state as it was repeats its side's level: in a stream
        # of edge reports, if that level is clean, an edge in between was lost
        same = np.empty(n, dtype=bool)
        same[0] = int(state[0]) == (self.level[0] << 2) | self.level[1]
        np.equal(state[1:], state[:-1], out=same[1:])
        any_same = bool(same.any())
        if any_same and self.edge_events:
            repeat = np.flatnonzero(same & (lev <= 1))
            if repeat.size:
                self._repeat_findings(repeat, t, is_high, lev, from_high, from_low)
        self.glitch.watch(t, is_high, lev, same if any_same else None, h, lo)
        if from_high[-1] >= 0:
            self.last_time[0] = int(t[from_high[-1]])
        if from_low[-1] >= 0:
            self.last_time[1] = int(t[from_low[-1]])
        self.level = [int(h[-1]), int(lo[-1])]
        if n > 1:
            last = np.empty(n, dtype=bool)
            np.not_equal(t[1:], t[:-1], out=last[:-1])
            last[-1] = True
            t, state = t[last], state[last]
        return t, state

    def _distinct(
        self, t: Ints, state: npt.NDArray[np.uint8]
    ) -> tuple[Ints, npt.NDArray[np.uint8], int] | None:
        """The joint states that change, joined to the carried context; the capture's first
        state; unknown levels and possible overlaps."""
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
            return None
        first = self.ctx_s.size == 0
        if self._count_unknown(state, first=first) or self._risk_open is not None:
            self._possible(t, state, first)
        c0 = self.ctx_s.size
        seq_t = np.concatenate([self.ctx_t, t]) if c0 else t
        seq_s = np.concatenate([self.ctx_s, state]) if c0 else state
        return seq_t, seq_s, c0

    def _transitions(self, seq_t: Ints, seq_s: npt.NDArray[np.uint8], c0: int) -> None:
        """Overlaps whose end is now known; transition patterns whose third state is known."""
        both = np.flatnonzero(seq_s[max(c0 - 1, 0) : -1] == _BOTH) + max(c0 - 1, 0)
        if both.size:
            self._ov_start.append(seq_t[both])
            self._ov_length.append(seq_t[both + 1] - seq_t[both])
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
                self.record.add("to_high", gap[to_high], tb[to_high])
                to_low = (kinds > _TH_LOST) & (kinds < _TL_LOST)
                self.record.add("to_low", gap[to_low], tb[to_low])
                lost = np.flatnonzero((kinds == _TH_LOST) | (kinds == _TL_LOST))
                for k in lost.tolist():
                    kind, at = int(kinds[k]), int(tb[k])
                    gate = 1 if kind == _TH_LOST else 0  # the gate that went off and on again
                    # explained by a glitch: on for a glitch and off again, or off for one
                    if ((gate, int(seq_t[hit[k]])) in self.glitch.recent
                            or (gate, at) in self.glitch.recent):
                        continue
                    self._lost_finding(kind, at)
        self.ctx_t = seq_t[-2:].copy()
        self.ctx_s = seq_s[-2:].copy()
        if self.glitch.recent:  # patterns from now on start at ctx_t[0] or later
            self.glitch.recent = {g for g in self.glitch.recent if g[1] >= self.ctx_t[0]}

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

    # -- results ----------------------------------------------------------------------------

    def overlaps_found(self) -> Overlaps:
        empty = np.zeros(0, dtype=np.int64)
        return Overlaps(self.tick, np.concatenate([empty, *self._ov_start]),
                        np.concatenate([empty, *self._ov_length]))

    def possible_found(self) -> Overlaps:
        empty = np.zeros(0, dtype=np.int64)
        return Overlaps(self.tick, np.concatenate([empty, *self._risk_start]),
                        np.concatenate([empty, *self._risk_length]))
