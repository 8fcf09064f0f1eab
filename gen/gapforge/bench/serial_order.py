"""Putting a serial edge stream back in time order: the modular counter, the sequence numbers,
and a small reorder buffer.

A capture firmware reports two channels in interrupt order, so two near-simultaneous edges may
arrive with the later one first: the counter then steps backwards by a little. The counter is
read as modular arithmetic: a step forward by less than half its range is time going on, a step
backwards by less than half its range is a line that arrived late (a reorder), never a wrap.
(So the firmware sends at least one line per half counter range; the keep-alive line exists for
idle gates.) Edges wait in a buffer of `REORDER_LINES` lines, ordered by time, before they are
released; an edge older than one already released cannot be put in place and is counted as
lost, which makes the measurement inconclusive, never a pass.

Times are counter ticks counted from the first line's counter value (Python integers: a 64-bit
counter at or above 2**63 is no special case).
"""

from __future__ import annotations

import heapq
from dataclasses import dataclass, field

REORDER_LINES = 16  # edges held back for reordering
SEQ_RANGE = 256


@dataclass
class CounterClock:
    """Unwraps a `bits`-wide counter; a backwards step of less than half the range is a
    reorder (the time returned lies before the latest)."""

    bits: int
    latest: int | None = None  # unwrapped time of the latest counter value (ticks)
    _raw: int = 0

    def place(self, counter: int) -> int:
        if self.latest is None:
            self.latest, self._raw = 0, counter
            return 0
        span = 1 << self.bits
        step = (counter - self._raw) % span
        if step < span // 2:
            self.latest += step
            self._raw = counter
            return self.latest
        return self.latest - (span - step)


@dataclass
class SequenceTracker:
    """Lines lost or reordered, from the 8-bit sequence numbers (modulo 256).

    A forward jump counts the skipped numbers as lost; one of them arriving later (a reorder)
    is taken back. A number that is neither new nor awaited (a repeat) counts as a lost line:
    something is wrong with the link."""

    lost: int = 0
    _high: int | None = None
    _missing: set[int] = field(default_factory=set)

    def see(self, seq: int) -> None:
        if self._high is None:
            self._high = seq
            return
        step = (seq - self._high) % SEQ_RANGE
        if step == 0 or (step >= SEQ_RANGE // 2 and seq not in self._missing):
            self.lost += 1  # a repeated or unexplained number: counted, never ignored
            return
        if step >= SEQ_RANGE // 2:  # an awaited number, late
            self._missing.discard(seq)
            self.lost -= 1
            return
        for k in range(1, step):
            self._missing.add((self._high + k) % SEQ_RANGE)
        self.lost += step - 1
        self._high = seq
        # numbers more than half the range behind can no longer be told from new ones
        self._missing = {m for m in self._missing if (seq - m) % SEQ_RANGE < SEQ_RANGE // 2}


@dataclass
class ReorderBuffer:
    """Edges held back by time; `push` returns the edges now released in time order."""

    depth: int = REORDER_LINES
    unplaced: int = 0  # edges older than one already released (counted as lost)
    reordered: int = 0  # edges that arrived after a later one and were put in place
    _heap: list[tuple[int, int, int, int]] = field(default_factory=list)
    _arrivals: int = 0
    _released: int | None = None
    _newest: int | None = None

    def push(self, time: int, side: int, level: int) -> list[tuple[int, int, int]]:
        if self._released is not None and time < self._released:
            self.unplaced += 1
            return []
        if self._newest is not None and time < self._newest:
            self.reordered += 1
        self._newest = time if self._newest is None else max(self._newest, time)
        heapq.heappush(self._heap, (time, self._arrivals, side, level))
        self._arrivals += 1
        out = []
        while len(self._heap) > self.depth:
            out.append(self._pop())
        return out

    def flush(self) -> list[tuple[int, int, int]]:
        out = []
        while self._heap:
            out.append(self._pop())
        return out

    def drop(self) -> None:
        self._heap.clear()

    def _pop(self) -> tuple[int, int, int]:
        time, _, side, level = heapq.heappop(self._heap)
        self._released = time
        return time, side, level
