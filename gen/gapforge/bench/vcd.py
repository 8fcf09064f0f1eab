"""Value change dump (VCD, IEEE 1364-2005 clause 18) reader for gate captures.

The header (declarations, `vcd_header`) is read command by command in Python, keeping only the
variables the requested names could select. The body, which can be hundreds of megabytes, is
read in fixed-size chunks into one reused buffer and decoded with numpy (`vcd_body`): only the
changes of the requested identifier codes are decoded, with no per-line Python loop. `read_vcd`
returns whole arrays per signal; `open_events` streams the changes of two signals merged in file
order, chunk by chunk, for the measurement.

A file without `$timescale` is read in 1 ns units with a warning and `timescale_assumed` set (a
window cannot be judged on an assumed unit); `timescale=` states the unit for such a file (and
must agree with the file's own when it has one).

Supported: identifier codes of one or more printable characters (starting with a digit or '$'
too), several variables sharing one code, whitespace-separated tokens rather than lines,
"1ns" and "1 ns" timescales (1/10/100 s..fs), "data [7:0]" and "data[7:0]" references, any var
type word, scopes of any type, left-extension of short vectors, a bit selected from a vector,
$dumpvars/$dumpall/$dumpon blocks, $dumpoff (every selected signal becomes x), $comment blocks in
the body, x/X/z/Z values, real changes (skipped), and timestamps that go backwards (warned; the
changes are then ordered by time, stable in file order).

Values are coded 0, 1, X (2) and Z (3). Times are int64 counts of the timescale, which is kept
as an exact Fraction of a second.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path
from typing import TypeVar

import numpy as np
import numpy.typing as npt

from gapforge.base.errors import GapforgeError
from gapforge.base.records import record
from gapforge.bench.vcd_body import PAD, Chunk, State, X, Z, parse_chunk
from gapforge.bench.vcd_header import Header, Selection, Variable, read_header, select

__all__ = [
    "CHUNK_BYTES",
    "EventStream",
    "Header",
    "SignalChanges",
    "UnorderedTimes",
    "Variable",
    "VcdData",
    "X",
    "Z",
    "open_events",
    "read_header",
    "read_vcd",
    "select",
]

_T = TypeVar("_T", bound=np.generic)

CHUNK_BYTES = 1 << 20


@record
class SignalChanges:
    """Every change of one selected signal: times in timescale units and values 0/1/X/Z."""

    name: str
    times: npt.NDArray[np.int64]
    values: npt.NDArray[np.uint8]


@record
class VcdData:
    timescale_s: Fraction
    signals: dict[str, SignalChanges]
    end_time: int
    warnings: tuple[str, ...] = field(default=())
    timescale_assumed: bool = False  # no $timescale in the file and none stated
    sample_rate_hz: Fraction | None = None  # a sample rate the header's $comment states


def _timescale(header: Header, stated: Fraction | None, place: str) -> tuple[Fraction, tuple[str, ...], bool]:
    """The time unit, its warnings, and whether it is assumed (neither in the file nor stated)."""
    from gapforge.base.quantities import format_quantity

    if header.timescale_given:
        if stated is not None and stated != header.timescale_s:
            raise GapforgeError(
                f"the file states $timescale {format_quantity(header.timescale_s, 's')}; "
                f"--timescale {format_quantity(stated, 's')} disagrees", place)
        return header.timescale_s, (), False
    if stated is not None:
        return stated, (f"{place}: no $timescale in the file: read in the stated "
                        f"{format_quantity(stated, 's')} units",), False
    return header.timescale_s, (f"{place}: no $timescale in the file: read in 1 ns units "
                                "(common practice, not proven); state the unit with "
                                "--timescale",), True


# ---------------------------------------------------------------------------------------------
# body


class UnorderedTimes(Exception):
    """Raised by an ordered event stream at the first timestamp that goes backwards."""


def _keys(selections: Sequence[Selection]) -> dict[bytes, list[int]]:
    wanted: dict[bytes, list[int]] = {}
    for sel in selections:
        positions = wanted.setdefault(sel.variable.code.encode("ascii"), [])
        if sel.position not in positions:
            positions.append(sel.position)
    return wanted


def _chunks(
    path: Path, header: Header, wanted: dict[bytes, list[int]], state: State, place: str,
    chunk_bytes: int,
) -> Iterator[Chunk]:
    """Decode the body chunk by chunk into one reused buffer (constant memory per chunk)."""
    try:
        handle = path.open("rb")
    except OSError as exc:
        raise GapforgeError(f"cannot read: {exc.strerror}", place) from None
    with handle:
        handle.seek(header.body_offset)
        state.offset = header.body_offset
        # PAD spaces before the data: a virtual separator, and room for 8-byte loads that end
        # at a short token near the start; one spare byte for a separator after the last token
        buffer = bytearray(b" " * PAD) + bytearray(chunk_bytes + 1)
        carry = 0
        while True:
            requested = len(buffer) - 1 - PAD - carry
            with memoryview(buffer) as whole, whole[PAD + carry : len(buffer) - 1] as view:
                got = handle.readinto(view) or 0
            eof = got < requested
            filled = PAD + carry + got
            if filled == PAD:
                break
            if eof:
                state.unterminated = filled > PAD and buffer[filled - 1] > 32
                buffer[filled] = 0x0A  # the final token may run to the end of the file
                filled += 1
            arr = np.frombuffer(buffer, dtype=np.uint8, count=filled)
            cut = filled if eof else _cut(arr)
            if cut <= PAD:
                del arr
                buffer.extend(bytes(len(buffer)))  # one token longer than a chunk
                carry = filled - PAD
                continue
            used, chunk = parse_chunk(buffer, arr[:cut], wanted, state, eof)
            del arr
            yield chunk
            rest = filled - used
            state.offset += used - PAD
            if eof:
                if rest:
                    raise GapforgeError("cannot read the end of the file", place)
                break
            buffer[PAD : PAD + rest] = buffer[used:filled]
            carry = rest


def read_vcd(
    path: Path, names: Sequence[str], *, chunk_bytes: int = CHUNK_BYTES, where: str | None = None,
    timescale: Fraction | None = None,
) -> VcdData:
    """Read every change of the named signals. Raises GapforgeError on malformed input."""
    place = where or str(path)
    header = read_header(path, names)
    unit, unit_warnings, assumed = _timescale(header, timescale, place)
    selections = [select(header, name, place) for name in names]
    wanted = _keys(selections)
    pieces: dict[tuple[bytes, int], tuple[list[npt.NDArray[np.int64]], list[npt.NDArray[np.uint8]]]]
    pieces = {(c, p): ([], []) for c, positions in wanted.items() for p in positions}
    state = State(path, place)
    for chunk in _chunks(path, header, wanted, state, place, chunk_bytes):
        for key, (token_idx, values) in chunk.picks.items():
            if token_idx.size:
                pieces[key][0].append(chunk.times_of(token_idx))
                pieces[key][1].append(values)
    signals: dict[str, SignalChanges] = {}
    for sel in selections:
        tlist, vlist = pieces[(sel.variable.code.encode("ascii"), sel.position)]
        times = _join(tlist, np.int64)
        values = _join(vlist, np.uint8)
        if state.backwards:
            order = np.argsort(times, kind="stable")
            times, values = times[order], values[order]
            tlist[:] = [times]
            vlist[:] = [values]
        signals[sel.name] = SignalChanges(sel.name, times, values)
    return VcdData(unit, signals, state.time, unit_warnings + _warnings(state, place), assumed,
                   header.sample_rate_hz)


def _warnings(state: State, place: str) -> tuple[str, ...]:
    out: list[str] = []
    if state.backwards:
        out.append(f"{place}: {state.backwards} timestamp(s) go backwards (first at "
                   f"{state.first_backwards}); changes were ordered by time")
    if state.unterminated:
        out.append(f"{place}: the file does not end with a line break; its last value change "
                   "or timestamp may be cut short (truncated?)")
    return tuple(out)


@dataclass
class EventStream:
    """The changes of two signals (sides 0 and 1) merged in file order, chunk by chunk.

    `chunks()` raises UnorderedTimes at the first timestamp that goes backwards; then
    `sorted_chunks()` reads the whole file and yields every change ordered by time in one chunk.
    `end_time` and `warnings` are final once a pass has been read to the end."""

    path: Path
    header: Header
    selections: tuple[Selection, Selection]
    place: str
    chunk_bytes: int = CHUNK_BYTES
    end_time: int = 0
    warnings: tuple[str, ...] = ()
    timescale: Fraction | None = None  # stated by the user
    timescale_assumed: bool = field(init=False, default=False)
    bytes_read: int = field(init=False, default=0)  # of the file, by the pass in progress
    _unit: Fraction = field(init=False, default=Fraction(1))
    _unit_warnings: tuple[str, ...] = field(init=False, default=())

    def __post_init__(self) -> None:
        self._unit, self._unit_warnings, self.timescale_assumed = _timescale(
            self.header, self.timescale, self.place)
        self.warnings = self._unit_warnings

    @property
    def timescale_s(self) -> Fraction:
        return self._unit

    def chunks(self) -> Iterator[tuple[npt.NDArray[np.int64], npt.NDArray[np.uint8],
                                       npt.NDArray[np.uint8]]]:
        """(times, sides, values) per chunk, in file order; at one token side 0 comes first."""
        keys = [(s.variable.code.encode("ascii"), s.position) for s in self.selections]
        wanted = _keys(self.selections)
        state = State(self.path, self.place)
        size = self.path.stat().st_size  # the reader adds one virtual line end at the file's end
        for chunk in _chunks(self.path, self.header, wanted, state, self.place, self.chunk_bytes):
            self.bytes_read = min(state.offset, size)
            if state.backwards:
                raise UnorderedTimes(state.first_backwards)
            tok0, val0 = chunk.picks[keys[0]]
            tok1, val1 = chunk.picks[keys[1]]
            if tok0.size + tok1.size == 0:
                continue
            token_idx = np.concatenate([tok0, tok1])
            order = np.argsort(token_idx, kind="stable")  # two sorted runs: one linear merge
            sides = np.empty(token_idx.size, dtype=np.uint8)
            sides[: tok0.size] = 0
            sides[tok0.size :] = 1
            yield (chunk.times_of(token_idx[order]), sides[order],
                   np.concatenate([val0, val1])[order])
        self.end_time = state.time
        self.bytes_read = min(state.offset, size)
        self.warnings = self._unit_warnings + _warnings(state, self.place)

    def sorted_chunks(self) -> Iterator[tuple[npt.NDArray[np.int64], npt.NDArray[np.uint8],
                                              npt.NDArray[np.uint8]]]:
        names = [s.name for s in self.selections]
        data = read_vcd(self.path, names, chunk_bytes=self.chunk_bytes, where=self.place,
                        timescale=self.timescale)
        first, second = data.signals[names[0]], data.signals[names[1]]
        times = np.concatenate([first.times, second.times])
        order = np.argsort(times, kind="stable")
        sides = np.concatenate([np.zeros(first.times.size, dtype=np.uint8),
                                np.ones(second.times.size, dtype=np.uint8)])
        self.end_time = data.end_time
        self.warnings = data.warnings
        self.bytes_read = self.path.stat().st_size
        yield times[order], sides[order], np.concatenate([first.values, second.values])[order]


def open_events(
    path: Path, first: str, second: str, *, chunk_bytes: int = CHUNK_BYTES, where: str | None = None,
    timescale: Fraction | None = None,
) -> EventStream:
    """Read the header and select two signals; the body is read when the stream is iterated."""
    place = where or str(path)
    header = read_header(path, [first, second])
    selections = (select(header, first, place), select(header, second, place))
    return EventStream(path, header, selections, place, chunk_bytes, timescale=timescale)


def _join(parts: list[npt.NDArray[_T]], dtype: type[_T]) -> npt.NDArray[_T]:
    """Concatenate and free the parts one by one (peak = result + one part)."""
    total = sum(int(p.size) for p in parts)
    out = np.empty(total, dtype=dtype)
    at = 0
    parts.reverse()
    while parts:
        part = parts.pop()
        out[at : at + part.size] = part
        at += part.size
        del part
    parts.append(out)
    return out


def _cut(arr: npt.NDArray[np.uint8]) -> int:
    """Where to end this chunk: just after the last whitespace (the final token may be partial)."""
    tail = min(arr.size, 4096)
    ws = np.flatnonzero(arr[arr.size - tail :] <= 32)
    if ws.size:
        return arr.size - tail + int(ws[-1]) + 1
    ws = np.flatnonzero(arr <= 32)
    return int(ws[-1]) + 1 if ws.size else 0


