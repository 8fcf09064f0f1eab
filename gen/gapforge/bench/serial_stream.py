"""Live gate-edge stream from a capture firmware over a serial link.

The line protocol (version 2, every line checked) is in `serial_protocol`; putting the lines
back in time order (the modular counter, the sequence numbers, the reorder buffer) is in
`serial_order`. This module turns received bytes into a capture (`LineDecoder`) and reads a
port (`read_serial`).

A transition is one hand-over from one gate to the other (a `to_high` or `to_low` dead time): a
gate turning on when the last gate to turn on was the other one. As in the measurement, a gate
whose first report is an off-edge was on before it (so if the other gate turned on first, that
was a hand-over too). `read_serial(max_transitions=N)` stops right after the edge that completes
the N-th transition - the on-edge, or, when the hand-over overlaps (the other gate still on),
the other gate's off-edge - so a capture of clean hand-overs holds exactly N of them. Edges are
counted as they leave the reorder buffer, in time order.

The measurement takes the stream's resolution as one counter tick: both edges of a gap are
latched by the same counter, so the gap is known to within one tick.

`read_serial` works with any pyserial URL (`/dev/ttyUSB0`, `loop://`, `socket://host:port`,
`rfc2217://host:port`) and never raises for what happens on the link: partial lines, timeouts
or a port that disappears end the capture with a stated reason and what was measured. A run of
`GARBAGE_RUN` undecodable lines in a row (a wrong baud rate, another program on the port) ends
it as `garbage_stop`, which the command reports as an error.
"""

from __future__ import annotations

import contextlib
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from fractions import Fraction
from typing import Any

import numpy as np

from gapforge.base.errors import GapforgeError
from gapforge.base.records import record
from gapforge.bench.capture import GateCapture, make_capture
from gapforge.bench.serial_order import CounterClock, ReorderBuffer, SequenceTracker
from gapforge.bench.serial_protocol import (
    HEADER_EVERY,
    MAX_LINE,
    PROTOCOL,
    Bad,
    Edge,
    Header,
    KeepAlive,
    Refused,
    parse_line,
)

__all__ = ["GARBAGE_RUN", "HEADER_EVERY", "MAX_LINE", "PROTOCOL", "LineDecoder", "SerialResult", "StreamStatus",
           "open_port", "read_serial"]

GARBAGE_RUN = 256  # undecodable lines in a row that end a capture


@dataclass
class StreamStatus:
    """Counters of one stream so far (also what the progress display shows)."""

    lines: int = 0
    edges: int = 0
    transitions: int = 0
    garbage: int = 0
    corrupt: int = 0  # lines that parsed but failed their check (part of `garbage`)
    partial: int = 0
    lost_lines: int = 0
    reordered: int = 0
    before_header: int = 0  # lines before the first header (a stream joined mid-way)
    headers: int = 0  # header lines received (the firmware repeats it)
    clock_hz: int | None = None
    counter_bits: int | None = None
    elapsed_s: float = 0.0
    first_garbage: str = ""
    garbage_run: int = 0  # undecodable lines in a row, now


@dataclass
class _Transitions:
    """Counts hand-overs as edges arrive in time order and says when the count is reached."""

    active_low: tuple[bool, bool]
    stop_after: int | None
    count: int = 0
    reached: bool = False
    _last_on: int | None = None  # the side that turned on last (0 high, 1 low)
    _last_on_seen: bool = False  # _last_on turned on in the stream (not implied at the start)
    _on: list[int | None] = field(default_factory=lambda: [None, None])  # None: no edge yet
    _stop_at_off: int | None = None  # the count is reached: stop when this side turns off

    def edge(self, side: int, level: int) -> None:
        on = level ^ int(self.active_low[side])
        other = 1 - side
        first = self._on[side] is None
        self._on[side] = on
        if on:
            if self._last_on == other:
                self._one_more(other if self._on[other] == 1 else None)
            self._last_on, self._last_on_seen = side, True
        elif first:  # this gate was on since before the stream
            if self._last_on == other and self._last_on_seen:
                self._one_more(None)  # the other turned on while this one was still on
            else:
                self._last_on, self._last_on_seen = side, False
        if not on and self._stop_at_off == side:
            self.reached = True

    def _one_more(self, overlapping: int | None) -> None:
        """One more hand-over; `overlapping`: the outgoing gate is still on."""
        self.count += 1
        if self.stop_after is not None and self.count == self.stop_after:
            if overlapping is None:
                self.reached = True
            else:
                self._stop_at_off = overlapping


@dataclass
class LineDecoder:
    """Turns received bytes into edge times in time order. Pure: no I/O, fed by `feed`.

    `active_low` (high side, low side) is used only to count transitions; `stop_after` stops
    the decoder right after the edge that completes that many transitions."""

    status: StreamStatus = field(default_factory=StreamStatus)
    active_low: tuple[bool, bool] = (False, False)
    stop_after: int | None = None
    times: list[int] = field(default_factory=list)
    channels: list[int] = field(default_factory=list)  # 0 = high side, 1 = low side
    levels: list[int] = field(default_factory=list)
    stopped: str | None = None
    garbage_stop: bool = False  # stopped by a run of undecodable lines
    _pending: bytes = b""
    _clock: CounterClock | None = None
    _seq: SequenceTracker = field(default_factory=SequenceTracker)
    _order: ReorderBuffer = field(default_factory=ReorderBuffer)
    _count: _Transitions | None = None

    def __post_init__(self) -> None:
        self._count = _Transitions(self.active_low, self.stop_after)

    # -- bytes to lines ---------------------------------------------------------------------

    def feed(self, data: bytes) -> None:
        if self.stopped:
            return
        lines = (self._pending + data).split(b"\n")
        self._pending = lines.pop()
        if len(self._pending) > MAX_LINE:
            self._undecodable(self._pending[:40], corrupt=False)
            self._pending = b""
        for raw in lines:
            self._line(raw.rstrip(b"\r"))
            if self.stopped:
                self._pending = b""  # what follows the stop is not read
                return

    def finish(self) -> None:
        """End of input: a line without its end is a partial line; held edges are released."""
        if self._pending.strip():
            self.status.partial += 1
        self._pending = b""
        self._release(self._order.flush())

    def settle(self) -> None:
        """Release the edges held for reordering (the link went quiet)."""
        if not self.stopped:
            self._release(self._order.flush())

    # -- one line ---------------------------------------------------------------------------

    def _line(self, raw: bytes) -> None:
        line = raw.strip()
        if not line:
            return
        self.status.lines += 1
        if len(line) > MAX_LINE:
            self._undecodable(line, corrupt=False)
            return
        parsed = parse_line(line)
        if isinstance(parsed, Bad):
            if self.status.clock_hz is None and self.status.garbage_run + 1 < GARBAGE_RUN:
                # joined mid-way: skipped while waiting for the next header (a run of them
                # still ends the capture: a wrong baud rate never shows a header)
                self.status.before_header += 1
                self.status.garbage_run += 1
                if not self.status.first_garbage:
                    self.status.first_garbage = line[:40].decode("ascii", "replace")
                return
            self._undecodable(line, parsed.corrupt)
            return
        self.status.garbage_run = 0
        if isinstance(parsed, Header):
            self._header(parsed)
        elif isinstance(parsed, Refused):
            self._stop(parsed.reason, keep=True)
        elif isinstance(parsed, (Edge, KeepAlive)):
            self._counted(parsed)

    def _undecodable(self, raw: bytes, corrupt: bool) -> None:
        self.status.garbage += 1
        self.status.corrupt += int(corrupt)
        self.status.garbage_run += 1
        if not self.status.first_garbage:
            self.status.first_garbage = raw[:40].decode("ascii", "replace")
        if self.status.garbage_run >= GARBAGE_RUN:
            self.garbage_stop = True
            self._stop(f"{GARBAGE_RUN} undecodable lines in a row (first undecodable line: "
                       f"{self.status.first_garbage!r}); wrong baud rate, or not a gapforge "
                       f"capture stream (protocol {PROTOCOL})?", keep=True)

    def _header(self, header: Header) -> None:
        if self.status.clock_hz is not None:
            if (header.clock_hz, header.counter_bits) == (self.status.clock_hz,
                                                           self.status.counter_bits):
                self.status.headers += 1  # the firmware repeats its header: nothing changes
                return
            self._stop("a header with another clock or counter width arrived (the capture "
                       "firmware restarted with other settings)", keep=True)
            return
        self.status.headers += 1
        self.status.clock_hz = header.clock_hz
        self.status.counter_bits = header.counter_bits
        self._clock = CounterClock(header.counter_bits)

    def _counted(self, line: Edge | KeepAlive) -> None:
        """An edge or keep-alive line: sequence, time, then (edges) the reorder buffer."""
        if self._clock is None:
            self.status.before_header += 1
            return
        if line.counter >> self._clock.bits:
            self._undecodable(b"counter wider than counter_bits", corrupt=True)
            return
        self._seq.see(line.seq)
        self.status.lost_lines = self._seq.lost + self._order.unplaced
        at = self._clock.place(line.counter)
        if isinstance(line, Edge):
            self._release(self._order.push(at, line.side, line.level))
            self.status.reordered = self._order.reordered
            self.status.lost_lines = self._seq.lost + self._order.unplaced

    # -- edges in time order ----------------------------------------------------------------

    def _release(self, edges: list[tuple[int, int, int]]) -> None:
        assert self._count is not None
        for at, side, level in edges:
            if self._count.reached:
                return  # the capture ends at the edge that reached the count
            self.times.append(at)
            self.channels.append(side)
            self.levels.append(level)
            self.status.edges += 1
            self._count.edge(side, level)
            self.status.transitions = self._count.count
            if self._count.reached:
                self._stop(f"transition count reached ({self.stop_after})", keep=False)
                return

    def _stop(self, reason: str, *, keep: bool) -> None:
        """Stop reading; `keep`: the edges held back are valid and released, else dropped."""
        if self.stopped is None:
            self.stopped = reason
        if keep:
            self._release(self._order.flush())
        else:
            self._order.drop()

    # -- the result -------------------------------------------------------------------------

    def capture(
        self, source: str, *, active_low_high: bool = False, active_low_low: bool = False
    ) -> GateCapture | None:
        """The edges so far as a capture (None before a header arrived); releases the edges
        held for reordering."""
        if self.status.clock_hz is None:
            return None
        self._release(self._order.flush())
        t = np.asarray(self.times, dtype=np.int64)
        ch = np.asarray(self.channels, dtype=np.uint8)
        lv = np.asarray(self.levels, dtype=np.uint8)
        high, low = ch == 0, ch == 1
        latest = self._clock.latest if self._clock is not None else None
        return make_capture(
            Fraction(1, self.status.clock_hz),
            (t[high], lv[high]),
            (t[low], lv[low]),
            end=latest or 0,
            source=source,
            active_low_high=active_low_high,
            active_low_low=active_low_low,
            warnings=self._warnings(),
            edges_only=True,
            resolution_ticks=1,  # one counter tick
            lost_events=self.status.lost_lines,
        )

    def _warnings(self) -> tuple[str, ...]:
        s = self.status
        warnings: list[str] = []
        if s.lost_lines:
            warnings.append(f"{s.lost_lines} line(s) lost (sequence gaps, or edges that arrived "
                            "too late to put in time order)")
        if s.reordered:
            warnings.append(f"{s.reordered} edge line(s) arrived out of time order and were put "
                            "in place")
        if s.garbage:
            corrupt = f", {s.corrupt} failing their check" if s.corrupt else ""
            warnings.append(f"{s.garbage} undecodable line(s) skipped{corrupt} "
                            f"(first: {s.first_garbage!r})")
        if s.partial:
            warnings.append(f"{s.partial} partial line(s) at the end")
        if s.before_header:
            warnings.append(f"joined a running stream: {s.before_header} line(s) before the "
                            "first header were skipped (the firmware repeats its header every "
                            f"{HEADER_EVERY} lines)")
        return tuple(warnings)


@record
class SerialResult:
    capture: GateCapture | None
    status: StreamStatus
    stop_reason: str
    garbage_stop: bool = False  # ended by a run of undecodable lines: an error, not a capture


def open_port(url: str, baud: int) -> Any:
    """Open a pyserial URL; a port that cannot be opened is bad input."""
    import serial

    try:
        return serial.serial_for_url(url, baudrate=baud, timeout=0.05)
    except (serial.SerialException, OSError, ValueError) as exc:
        raise GapforgeError(f"cannot open the serial port: {exc}", url) from None


def read_serial(
    url: str,
    baud: int,
    *,
    max_transitions: int | None = None,
    max_seconds: float | None = None,
    idle_timeout_s: float = 2.0,
    progress: Callable[[StreamStatus], None] | None = None,
    active_low_high: bool = False,
    active_low_low: bool = False,
    port: Any = None,
) -> SerialResult:
    """Read edge lines until a limit (`max_transitions` dead-time transitions, `max_seconds`),
    a timeout, the end of the stream or a vanished port."""
    import serial

    if max_transitions is not None and max_transitions < 1:
        raise GapforgeError("must be at least 1", "--count")
    link = port if port is not None else open_port(url, baud)
    decoder = LineDecoder(active_low=(active_low_high, active_low_low), stop_after=max_transitions)
    start = time.monotonic()
    last_data = start
    last_progress = 0.0
    reason = ""
    try:
        while True:
            now = time.monotonic()
            decoder.status.elapsed_s = now - start
            if max_seconds is not None and now - start >= max_seconds:
                reason = f"time limit reached ({max_seconds:g} s)"
                break
            try:
                waiting = link.in_waiting
                data = link.read(min(max(waiting, 1), 1 << 16))
            except (serial.SerialException, OSError) as exc:
                reason = f"the port vanished ({exc.__class__.__name__}: {exc})"
                break
            if data:
                last_data = time.monotonic()
                decoder.feed(bytes(data))
                if decoder.stopped:
                    reason = decoder.stopped
                    break
            else:
                # a quiet link: the edges held for reordering go out (a late line older than
                # them would count as lost, never be misplaced)
                decoder.settle()
                if decoder.stopped:
                    reason = decoder.stopped
                    break
            if not data and time.monotonic() - last_data >= idle_timeout_s:
                reason = f"no data for {idle_timeout_s:g} s (timeout)"
                break
            if progress is not None and time.monotonic() - last_progress >= 0.2:
                last_progress = time.monotonic()
                progress(decoder.status)
    except KeyboardInterrupt:
        reason = "interrupted"
    finally:
        if port is None:
            with contextlib.suppress(Exception):
                link.close()
    decoder.finish()
    if decoder.stopped:  # the count may be reached by the edges released at the end
        reason = decoder.stopped
    decoder.status.elapsed_s = time.monotonic() - start
    if progress is not None:
        progress(decoder.status)
    capture = decoder.capture(url, active_low_high=active_low_high, active_low_low=active_low_low)
    return SerialResult(capture, decoder.status, reason, decoder.garbage_stop)
