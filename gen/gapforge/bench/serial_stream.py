"""Live gate-edge stream from a capture firmware over a serial link (gapforge line protocol v1).

The firmware timestamps each gate edge with a free-running timer-capture counter and prints one
ASCII line per edge (the C helper from `gapforge firmware` formats them)::

    #GFCAP 1 clock_hz=160000000 counter_bits=32      header: protocol 1, counter clock, width
    H1 0001F4A0 07                                   high side turned on at counter 0x0001F4A0
    L0 0001F4B8 08                                   low side turned off
    T 8001F4B8 09                                    keep-alive: no edge, counter now

Edge lines are `<H|L><0|1> <counter, hex> <sequence, 2 hex digits>`; the sequence counts every
edge and keep-alive line modulo 256, so lost lines are seen. The counter wraps at 2**counter_bits;
the reader unwraps it, which needs at least one line per wrap period (the keep-alive line exists
for idle gates). Other lines starting with '#' are comments. Lines end with LF (CR LF is accepted).
A second header ends the capture (the firmware restarted and its counter is no longer continuous).

A transition is one hand-over from one gate to the other (a `to_high` or `to_low` dead time): a
gate turning on when the last gate to turn on was the other one. As in the measurement, a gate
whose first report is an off-edge was on before it (so if the other gate turned on first, that
was a hand-over too). `read_serial(max_transitions=N)` stops right after the edge that completes
the N-th transition - the on-edge, or, when the hand-over overlaps (the other gate still on),
the other gate's off-edge - so a capture of clean hand-overs holds exactly N of them.

The measurement takes the stream's resolution as one counter tick: both edges of a gap are
latched by the same counter, so the gap is known to within one tick.

`read_serial` works with any pyserial URL (`/dev/ttyUSB0`, `loop://`, `socket://host:port`,
`rfc2217://host:port`) and never raises for what happens on the link: garbage, partial lines,
timeouts or a port that disappears end the capture with a stated reason and what was measured.
"""

from __future__ import annotations

import contextlib
import re
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from fractions import Fraction
from typing import Any

import numpy as np

from gapforge.base.errors import GapforgeError
from gapforge.bench.capture import GateCapture, make_capture

PROTOCOL = 1
MAX_LINE = 96

_HEADER = re.compile(rb"^#GFCAP (\d+) clock_hz=(\d+) counter_bits=(\d+)$")
_EDGE = re.compile(rb"^([HL])([01]) ([0-9A-Fa-f]{1,16}) ([0-9A-Fa-f]{2})$")
_KEEP = re.compile(rb"^T ([0-9A-Fa-f]{1,16}) ([0-9A-Fa-f]{2})$")


@dataclass
class StreamStatus:
    """Counters of one stream so far (also what the progress display shows)."""

    lines: int = 0
    edges: int = 0
    transitions: int = 0
    garbage: int = 0
    partial: int = 0
    lost_lines: int = 0
    before_header: int = 0
    clock_hz: int | None = None
    counter_bits: int | None = None
    elapsed_s: float = 0.0
    first_garbage: str = ""


@dataclass
class LineDecoder:
    """Turns received bytes into unwrapped edge times. Pure: no I/O, fed by `feed`.

    `active_low` (high side, low side) is used only to count transitions; `stop_after` stops
    the decoder right after the edge that completes that many transitions."""

    status: StreamStatus = field(default_factory=StreamStatus)
    active_low: tuple[bool, bool] = (False, False)
    stop_after: int | None = None
    times: list[int] = field(default_factory=list)
    channels: list[int] = field(default_factory=list)  # 0 = high side, 1 = low side
    levels: list[int] = field(default_factory=list)
    stopped: str | None = None
    _pending: bytes = b""
    _last_counter: int | None = None
    _now: int = 0
    _seq: int | None = None
    _last_on: int | None = None  # the side that turned on last (0 high, 1 low)
    _last_on_seen: bool = False  # _last_on turned on in the stream (not implied at the start)
    _on: list[int | None] = field(default_factory=lambda: [None, None])  # None: no edge yet
    _stop_at_off: int | None = None  # the count is reached: stop when this side turns off

    def feed(self, data: bytes) -> None:
        if self.stopped:
            return
        buffer = self._pending + data
        lines = buffer.split(b"\n")
        self._pending = lines.pop()
        if len(self._pending) > MAX_LINE:
            self._garbage(self._pending[:40])
            self._pending = b""
        for raw in lines:
            self._line(raw.rstrip(b"\r"))
            if self.stopped:
                self._pending = b""  # what follows the stop is not read
                return

    def finish(self) -> None:
        """End of input: a line without its end is a partial line."""
        if self._pending.strip():
            self.status.partial += 1
        self._pending = b""

    def _garbage(self, raw: bytes) -> None:
        self.status.garbage += 1
        if not self.status.first_garbage:
            self.status.first_garbage = raw[:40].decode("ascii", "replace")

    def _line(self, raw: bytes) -> None:
        line = raw.strip()
        if not line:
            return
        self.status.lines += 1
        if line.startswith(b"#GFCAP"):
            self._header(line)
            return
        if line.startswith(b"#"):
            return
        edge = _EDGE.match(line)
        keep = _KEEP.match(line) if edge is None else None
        if edge is None and keep is None:
            self._garbage(line)
            return
        if self.status.clock_hz is None:
            self.status.before_header += 1
            return
        if edge is not None:
            counter, seq = int(edge.group(3), 16), int(edge.group(4), 16)
        else:
            assert keep is not None
            counter, seq = int(keep.group(1), 16), int(keep.group(2), 16)
        bits = self.status.counter_bits or 32
        if counter >> bits:
            self._garbage(line)
            return
        if self._seq is not None:
            self.status.lost_lines += (seq - self._seq - 1) % 256
        self._seq = seq
        if self._last_counter is None:
            self._now = counter
        else:
            self._now += (counter - self._last_counter) % (1 << bits)
        self._last_counter = counter
        if edge is not None:
            side, level = (0 if edge.group(1) == b"H" else 1), int(edge.group(2))
            self.times.append(self._now)
            self.channels.append(side)
            self.levels.append(level)
            self.status.edges += 1
            self._count_transition(side, level ^ int(self.active_low[side]))

    def _count_transition(self, side: int, on: int) -> None:
        other = 1 - side
        first = self._on[side] is None
        self._on[side] = on
        if on:
            if self._last_on == other:
                self._transition(other if self._on[other] == 1 else None)
            self._last_on, self._last_on_seen = side, True
        elif first:  # this gate was on since before the stream
            if self._last_on == other and self._last_on_seen:
                self._transition(None)  # the other turned on while this one was still on
            else:
                self._last_on, self._last_on_seen = side, False
        if not on and self._stop_at_off == side:
            self.stopped = f"transition count reached ({self.stop_after})"

    def _transition(self, overlapping: int | None) -> None:
        """One more hand-over; `overlapping`: the outgoing gate is still on."""
        self.status.transitions += 1
        if self.stop_after is not None and self.status.transitions == self.stop_after:
            if overlapping is None:
                self.stopped = f"transition count reached ({self.stop_after})"
            else:
                self._stop_at_off = overlapping

    def _header(self, line: bytes) -> None:
        match = _HEADER.match(line)
        if match is None:
            self._garbage(line)
            return
        version, clock, bits = (int(g) for g in match.groups())
        if self.status.clock_hz is not None:
            self.stopped = "a second header arrived (the capture firmware restarted)"
            return
        if version != PROTOCOL or clock <= 0 or not 8 <= bits <= 64:
            self.stopped = (
                f"unsupported header (protocol {version}, clock_hz {clock}, counter_bits {bits}); "
                f"expected protocol {PROTOCOL}, clock_hz > 0, counter_bits 8..64"
            )
            return
        self.status.clock_hz = clock
        self.status.counter_bits = bits

    def capture(
        self, source: str, *, active_low_high: bool = False, active_low_low: bool = False
    ) -> GateCapture | None:
        """The edges so far as a capture (None before a header arrived)."""
        if self.status.clock_hz is None:
            return None
        t = np.asarray(self.times, dtype=np.int64)
        ch = np.asarray(self.channels, dtype=np.uint8)
        lv = np.asarray(self.levels, dtype=np.uint8)
        warnings: list[str] = []
        if self.status.lost_lines:
            warnings.append(f"{self.status.lost_lines} line(s) lost (sequence gaps)")
        if self.status.garbage:
            warnings.append(
                f"{self.status.garbage} garbage line(s) skipped (first: {self.status.first_garbage!r})"
            )
        if self.status.partial:
            warnings.append(f"{self.status.partial} partial line(s) at the end")
        high, low = ch == 0, ch == 1
        return make_capture(
            Fraction(1, self.status.clock_hz),
            (t[high], lv[high]),
            (t[low], lv[low]),
            end=self._now,
            source=source,
            active_low_high=active_low_high,
            active_low_low=active_low_low,
            warnings=tuple(warnings),
            edges_only=True,
            resolution_ticks=1,  # one counter tick
            lost_events=self.status.lost_lines,
        )


@dataclass(frozen=True)
class SerialResult:
    capture: GateCapture | None
    status: StreamStatus
    stop_reason: str


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
            elif time.monotonic() - last_data >= idle_timeout_s:
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
    decoder.status.elapsed_s = time.monotonic() - start
    if progress is not None:
        progress(decoder.status)
    capture = decoder.capture(url, active_low_high=active_low_high, active_low_low=active_low_low)
    return SerialResult(capture, decoder.status, reason)
