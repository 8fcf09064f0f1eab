"""Value change dump (VCD, IEEE 1364-2005 clause 18) reader for gate captures.

The header (declarations) is small and read token by token in Python. The body, which can be
hundreds of megabytes, is read in fixed-size chunks into one reused buffer and decoded with numpy:
whitespace positions -> token bounds -> classification by first byte -> every timestamp decoded
eight digits per unaligned 64-bit load (SWAR) -> only the changes of the requested identifier
codes are decoded. There is no per-line Python loop over the body; the few keyword tokens
($dumpvars, $dumpoff, $comment, ...) are handled one by one, and line numbers are counted only
when an error is reported. `read_vcd` returns whole arrays per signal; `open_events` streams the
changes of two signals merged in file order, chunk by chunk, for the measurement.

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

import difflib
import re
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path
from typing import TypeVar

import numpy as np
import numpy.typing as npt

from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import TIME_UNITS

X = 2
Z = 3
_T = TypeVar("_T", bound=np.generic)

CHUNK_BYTES = 1 << 20
_PAD = 24  # bytes before the data in the read buffer
_MAX_TIME_DIGITS = 18


# first-byte classes of body tokens
_C_BAD, _C_SCALAR, _C_VECTOR, _C_REAL, _C_TIME, _C_KEYWORD = 0, 1, 2, 3, 4, 5
_CLASS = np.zeros(256, dtype=np.uint8)
for _ch in b"01xXzZ":
    _CLASS[_ch] = _C_SCALAR
_CLASS[ord("b")] = _CLASS[ord("B")] = _C_VECTOR
_CLASS[ord("r")] = _CLASS[ord("R")] = _C_REAL
_CLASS[ord("#")] = _C_TIME
_CLASS[ord("$")] = _C_KEYWORD

# value of a scalar or vector digit; 255 = not a value digit
_VALUE = np.full(256, 255, dtype=np.uint8)
_VALUE[ord("0")] = 0
_VALUE[ord("1")] = 1
_VALUE[ord("x")] = _VALUE[ord("X")] = X
_VALUE[ord("z")] = _VALUE[ord("Z")] = Z
# value of the bits left of a short vector: 0/1 extend with 0, x with x, z with z
_EXTEND = _VALUE.copy()
_EXTEND[ord("1")] = 0

_BODY_KEYWORDS = {b"$dumpvars", b"$dumpall", b"$dumpon", b"$dumpoff", b"$end", b"$comment"}


@dataclass(frozen=True)
class Variable:
    """One $var declaration."""

    path: str  # hierarchical name without range, e.g. "top.bus"
    var_type: str
    width: int
    code: str
    msb: int | None
    lsb: int | None

    def bit_position(self, bit: int | None) -> int | None:
        """Position of `bit` counted from the rightmost digit, or None if out of range."""
        if bit is None:
            return 0 if self.width == 1 else None
        msb = self.width - 1 if self.msb is None else self.msb
        lsb = 0 if self.lsb is None else self.lsb
        if msb >= lsb:
            return bit - lsb if lsb <= bit <= msb else None
        return lsb - bit if msb <= bit <= lsb else None

    def display(self) -> str:
        if self.msb is None:
            return self.path
        if self.lsb is None or self.lsb == self.msb:
            return f"{self.path}[{self.msb}]"
        return f"{self.path}[{self.msb}:{self.lsb}]"


@dataclass(frozen=True)
class Header:
    timescale_s: Fraction
    variables: tuple[Variable, ...]
    body_offset: int


@dataclass(frozen=True)
class SignalChanges:
    """Every change of one selected signal: times in timescale units and values 0/1/X/Z."""

    name: str
    times: npt.NDArray[np.int64]
    values: npt.NDArray[np.uint8]


@dataclass(frozen=True)
class VcdData:
    timescale_s: Fraction
    signals: dict[str, SignalChanges]
    end_time: int
    warnings: tuple[str, ...] = field(default=())


# ---------------------------------------------------------------------------------------------
# header


def _parse_timescale(words: list[str], where: str) -> Fraction:
    text = "".join(words)
    match = re.fullmatch(r"(1|10|100)(s|ms|us|ns|ps|fs)", text)
    if not match:
        raise GapforgeError(
            f"bad $timescale {' '.join(words)!r} (expected 1, 10 or 100 and s, ms, us, ns, ps, fs)",
            where,
        )
    return int(match.group(1)) * TIME_UNITS[match.group(2)]


_REF = re.compile(r"^(?P<name>[^\[]+?)(?:\[(?P<msb>-?\d+)(?::(?P<lsb>-?\d+))?\])?$")


def read_header(path: Path) -> Header:
    """Read the declarations up to $enddefinitions $end."""
    where = str(path)
    try:
        with path.open("rb") as handle:
            data = b""
            while True:
                block = handle.read(1 << 20)
                data += block
                end = re.search(rb"\$enddefinitions\s+\$end", data)
                if end is not None:
                    break
                if not block:
                    raise GapforgeError("no '$enddefinitions $end': not a VCD file or truncated", where)
    except OSError as exc:
        raise GapforgeError(f"cannot read: {exc.strerror}", where) from None
    head = data[: end.start()]
    try:
        text = head.decode("ascii")
    except UnicodeDecodeError:
        bad = next(i for i, b in enumerate(head) if b > 126)
        line = head[:bad].count(b"\n") + 1
        raise GapforgeError("binary data in the VCD header", f"{where}:{line}") from None
    tokens = text.split()
    timescale: Fraction | None = None
    scopes: list[str] = []
    variables: list[Variable] = []
    i = 0
    n = len(tokens)

    def until_end(start: int) -> tuple[list[str], int]:
        j = start
        while j < n and tokens[j] != "$end":
            j += 1
        if j >= n:
            raise GapforgeError(f"{tokens[start - 1]} without $end", where)
        return tokens[start:j], j + 1

    while i < n:
        word = tokens[i]
        if not word.startswith("$"):
            raise GapforgeError(f"unexpected {word[:40]!r} in the VCD header", where)
        args, i = until_end(i + 1)
        if word == "$timescale":
            timescale = _parse_timescale(args, f"{where}: $timescale")
        elif word == "$scope":
            if not args:
                raise GapforgeError("$scope without a name", where)
            scopes.append(args[-1])
        elif word == "$upscope":
            if not scopes:
                raise GapforgeError("$upscope without an open $scope", where)
            scopes.pop()
        elif word == "$var":
            variables.append(_parse_var(args, scopes, where))
        # $comment, $date, $version and unknown header commands carry only text
    if timescale is None:
        timescale = Fraction(1, 10**9)  # not given: IEEE 1364 leaves it to the tool; 1 ns usual
    if not variables:
        raise GapforgeError("no $var declarations", where)
    return Header(timescale, tuple(variables), end.end())


def _parse_var(args: list[str], scopes: list[str], where: str) -> Variable:
    if len(args) < 4:
        raise GapforgeError(f"$var needs type, size, code and name, got {' '.join(args)!r}", where)
    var_type, size_text, code = args[0], args[1], args[2]
    if not size_text.isdigit() or int(size_text) < 1:
        raise GapforgeError(f"$var {' '.join(args)!r}: size must be a positive integer", where)
    ref = "".join(args[3:])
    match = _REF.match(ref)
    if not match:
        raise GapforgeError(f"$var {' '.join(args)!r}: cannot read the reference", where)
    msb = int(match.group("msb")) if match.group("msb") is not None else None
    lsb = int(match.group("lsb")) if match.group("lsb") is not None else msb
    name = ".".join([*scopes, match.group("name")])
    return Variable(name, var_type, int(size_text), code, msb, lsb)


@dataclass(frozen=True)
class _Selection:
    name: str
    variable: Variable
    position: int  # bit position from the rightmost digit


_SELECT = re.compile(r"^(?P<name>.+?)\s*\[\s*(?P<bit>-?\d+)\s*\]$")


def select(header: Header, name: str, where: str) -> _Selection:
    """Find a signal by hierarchical name ('top.gate_h', 'top.bus[3]' or a unique leaf name)."""
    wanted = name.strip()
    match = _SELECT.match(wanted)
    base, bit = (match.group("name"), int(match.group("bit"))) if match else (wanted, None)
    candidates = [v for v in header.variables if v.path == base]
    if not candidates:
        candidates = [v for v in header.variables if v.path.endswith("." + base)]
    # several names on one code are one signal; distinct codes are ambiguous
    codes = {v.code for v in candidates}
    if len(codes) > 1:
        shown = ", ".join(sorted(v.display() for v in candidates))
        raise GapforgeError(f"signal {name!r} is ambiguous: {shown}", where)
    if not candidates:
        names = sorted({v.display() for v in header.variables})
        hint = difflib.get_close_matches(wanted, names, n=1) or [
            v.display() for v in header.variables
            if v.path.rsplit(".", 1)[-1] in difflib.get_close_matches(
                base.rsplit(".", 1)[-1], [w.path.rsplit(".", 1)[-1] for w in header.variables], n=1)
        ][:1]
        more = f"; did you mean {hint[0]!r}?" if hint else f"; the file has {', '.join(names[:12])}"
        raise GapforgeError(f"no signal {name!r} in the capture{more}", where)
    variable = candidates[0]
    if variable.var_type.lower() in ("real", "realtime", "string", "event"):
        raise GapforgeError(f"signal {name!r} is a {variable.var_type} variable, not a logic level", where)
    position = variable.bit_position(bit)
    if position is None:
        if bit is None:
            raise GapforgeError(
                f"signal {name!r} is {variable.width} bits wide ({variable.display()}): "
                f"select one bit, e.g. {variable.path}[0]",
                where,
            )
        raise GapforgeError(f"bit {bit} is outside {variable.display()}", where)
    if position >= variable.width:
        raise GapforgeError(f"bit {bit} is outside {variable.display()}", where)
    return _Selection(name, variable, position)


# ---------------------------------------------------------------------------------------------
# body


class UnorderedTimes(Exception):
    """Raised by an ordered event stream at the first timestamp that goes backwards."""


@dataclass
class _State:
    """What one chunk hands to the next."""

    path: Path
    place: str
    time: int = 0
    seen_time: bool = False
    in_comment: bool = False
    backwards: int = 0
    first_backwards: str = ""
    unterminated: bool = False  # the file does not end with whitespace
    offset: int = 0  # file offset of the first byte of the current chunk


@dataclass(frozen=True)
class _Chunk:
    """The decoded part of one chunk: every timestamp and the changes of each wanted key."""

    prev_time: int  # the time in force before the chunk's first timestamp
    time_count: npt.NDArray[np.intp] | None  # per token: how many timestamps up to it
    times: npt.NDArray[np.int64]
    picks: dict[tuple[bytes, int], tuple[npt.NDArray[np.intp], npt.NDArray[np.uint8]]]

    def times_of(self, token_idx: npt.NDArray[np.intp]) -> npt.NDArray[np.int64]:
        """The time in force at each token (the last timestamp before it)."""
        if self.time_count is None or self.times.size == 0:
            return np.full(token_idx.size, self.prev_time, dtype=np.int64)
        ext = np.empty(self.times.size + 1, dtype=np.int64)
        ext[0] = self.prev_time
        ext[1:] = self.times
        return ext[self.time_count[token_idx]]


def _keys(selections: Sequence[_Selection]) -> dict[bytes, list[int]]:
    wanted: dict[bytes, list[int]] = {}
    for sel in selections:
        positions = wanted.setdefault(sel.variable.code.encode("ascii"), [])
        if sel.position not in positions:
            positions.append(sel.position)
    return wanted


def _chunks(
    path: Path, header: Header, wanted: dict[bytes, list[int]], state: _State, place: str,
    chunk_bytes: int,
) -> Iterator[_Chunk]:
    """Decode the body chunk by chunk into one reused buffer (constant memory per chunk)."""
    try:
        handle = path.open("rb")
    except OSError as exc:
        raise GapforgeError(f"cannot read: {exc.strerror}", place) from None
    with handle:
        handle.seek(header.body_offset)
        state.offset = header.body_offset
        # _PAD spaces before the data: a virtual separator, and room for 8-byte loads that end
        # at a short token near the start; one spare byte for a separator after the last token
        buffer = bytearray(b" " * _PAD) + bytearray(chunk_bytes + 1)
        carry = 0
        while True:
            requested = len(buffer) - 1 - _PAD - carry
            with memoryview(buffer) as whole, whole[_PAD + carry : len(buffer) - 1] as view:
                got = handle.readinto(view) or 0
            eof = got < requested
            filled = _PAD + carry + got
            if filled == _PAD:
                break
            if eof:
                state.unterminated = filled > _PAD and buffer[filled - 1] > 32
                buffer[filled] = 0x0A  # the final token may run to the end of the file
                filled += 1
            arr = np.frombuffer(buffer, dtype=np.uint8, count=filled)
            cut = filled if eof else _cut(arr)
            if cut <= _PAD:
                del arr
                buffer.extend(bytes(len(buffer)))  # one token longer than a chunk
                carry = filled - _PAD
                continue
            used, chunk = _parse_chunk(buffer, arr[:cut], wanted, state, eof)
            del arr
            yield chunk
            rest = filled - used
            state.offset += used - _PAD
            if eof:
                if rest:
                    raise GapforgeError("cannot read the end of the file", place)
                break
            buffer[_PAD : _PAD + rest] = buffer[used:filled]
            carry = rest


def read_vcd(
    path: Path, names: Sequence[str], *, chunk_bytes: int = CHUNK_BYTES, where: str | None = None
) -> VcdData:
    """Read every change of the named signals. Raises GapforgeError on malformed input."""
    place = where or str(path)
    header = read_header(path)
    selections = [select(header, name, place) for name in names]
    wanted = _keys(selections)
    pieces: dict[tuple[bytes, int], tuple[list[npt.NDArray[np.int64]], list[npt.NDArray[np.uint8]]]]
    pieces = {(c, p): ([], []) for c, positions in wanted.items() for p in positions}
    state = _State(path, place)
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
    return VcdData(header.timescale_s, signals, state.time, _warnings(state, place))


def _warnings(state: _State, place: str) -> tuple[str, ...]:
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
    selections: tuple[_Selection, _Selection]
    place: str
    chunk_bytes: int = CHUNK_BYTES
    end_time: int = 0
    warnings: tuple[str, ...] = ()

    @property
    def timescale_s(self) -> Fraction:
        return self.header.timescale_s

    def chunks(self) -> Iterator[tuple[npt.NDArray[np.int64], npt.NDArray[np.uint8],
                                       npt.NDArray[np.uint8]]]:
        """(times, sides, values) per chunk, in file order; at one token side 0 comes first."""
        keys = [(s.variable.code.encode("ascii"), s.position) for s in self.selections]
        wanted = _keys(self.selections)
        state = _State(self.path, self.place)
        for chunk in _chunks(self.path, self.header, wanted, state, self.place, self.chunk_bytes):
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
        self.warnings = _warnings(state, self.place)

    def sorted_chunks(self) -> Iterator[tuple[npt.NDArray[np.int64], npt.NDArray[np.uint8],
                                              npt.NDArray[np.uint8]]]:
        names = [s.name for s in self.selections]
        data = read_vcd(self.path, names, chunk_bytes=self.chunk_bytes, where=self.place)
        first, second = data.signals[names[0]], data.signals[names[1]]
        times = np.concatenate([first.times, second.times])
        order = np.argsort(times, kind="stable")
        sides = np.concatenate([np.zeros(first.times.size, dtype=np.uint8),
                                np.ones(second.times.size, dtype=np.uint8)])
        self.end_time = data.end_time
        self.warnings = data.warnings
        yield times[order], sides[order], np.concatenate([first.values, second.values])[order]


def open_events(
    path: Path, first: str, second: str, *, chunk_bytes: int = CHUNK_BYTES, where: str | None = None
) -> EventStream:
    """Read the header and select two signals; the body is read when the stream is iterated."""
    place = where or str(path)
    header = read_header(path)
    selections = (select(header, first, place), select(header, second, place))
    return EventStream(path, header, selections, place, chunk_bytes)


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


def _parse_chunk(
    buffer: bytearray,
    arr: npt.NDArray[np.uint8],
    wanted: dict[bytes, list[int]],
    state: _State,
    last: bool,
) -> tuple[int, _Chunk]:
    """Decode one chunk (which ends with whitespace); returns how many bytes were used (a
    trailing vector value whose code is in the next chunk is left for it) and the changes."""
    # token bounds from the whitespace positions: a token lies between two whitespace bytes
    # that are not adjacent (arr starts with padding spaces and ends with whitespace)
    wpos = np.flatnonzero(arr <= 32)
    gap = np.diff(wpos)
    tok = np.flatnonzero(gap > 1)
    del gap
    starts = wpos[tok] + 1
    ends = wpos[tok + 1]
    del wpos, tok
    used = arr.size
    empty_picks = {(c, p): (np.zeros(0, dtype=np.intp), np.zeros(0, dtype=np.uint8))
                   for c, ps in wanted.items() for p in ps}
    prev_time = state.time
    if starts.size == 0:
        return used, _Chunk(prev_time, None, np.zeros(0, np.int64), empty_picks)
    first = arr[starts]
    cls = _CLASS[first]
    counts = np.bincount(cls, minlength=6)
    is_code: npt.NDArray[np.bool_] | None = None
    if counts[_C_VECTOR] or counts[_C_REAL]:
        # a token right after a vector/real value is an identifier code, whatever it starts with
        vec = _resolve_value_chain((cls == _C_VECTOR) | (cls == _C_REAL))
        if vec[-1]:
            if last:
                raise GapforgeError("vector or real value without an identifier code (truncated?)",
                                    _where_at(state, int(starts[-1])))
            used = int(starts[-1])
            starts, ends, cls, vec, first = starts[:-1], ends[:-1], cls[:-1], vec[:-1], first[:-1]
            if starts.size == 0:
                return used, _Chunk(prev_time, None, np.zeros(0, np.int64), empty_picks)
        is_code = np.zeros(starts.size, dtype=bool)
        is_code[1:] = vec[:-1]
        cls = np.where(is_code, np.uint8(255), cls)
        counts = np.bincount(cls, minlength=256)
    ignore: npt.NDArray[np.bool_] | None = None
    dumpoff: list[int] = []
    if counts[_C_KEYWORD] or state.in_comment:
        keyword_idx = np.flatnonzero(cls == _C_KEYWORD)
        ignore, dumpoff = _keywords(arr, starts, ends, keyword_idx, state)
    if counts[_C_BAD]:
        bad = np.flatnonzero(cls == _C_BAD)
        if ignore is not None:
            bad = bad[~ignore[bad]]
        if bad.size:
            pos = int(starts[bad[0]])
            token = bytes(arr[pos : min(int(ends[bad[0]]), pos + 20)])
            raise GapforgeError(f"unexpected token {token!r} in the value changes",
                                _where_at(state, pos))
    lengths = ends - starts
    is_scalar = cls == _C_SCALAR
    # a scalar value is followed by its code in the same token: a bare '1' has lost its code
    bare = np.flatnonzero(is_scalar & (lengths == 1))
    if bare.size and ignore is not None:
        bare = bare[~ignore[bare]]
    if bare.size:
        pos = int(starts[bare[0]])
        ends_file = last and int(bare[0]) == starts.size - 1
        raise GapforgeError(
            f"value change {chr(arr[pos])!r} without an identifier code"
            + (": the file ends here (truncated?)" if ends_file else ""), _where_at(state, pos))
    # timestamps
    is_time = cls == _C_TIME
    if ignore is not None:
        is_time &= ~ignore
    time_idx = np.flatnonzero(is_time)
    time_count = np.cumsum(is_time, dtype=np.intp)
    del is_time
    times = _parse_times(buffer, arr, starts[time_idx], ends[time_idx], state)
    if times.size:
        back = times[1:] < times[:-1]
        if (state.seen_time and int(times[0]) < state.time) or back.any():
            rel = np.flatnonzero(back) + 1
            if state.seen_time and int(times[0]) < state.time:
                rel = np.concatenate([[0], rel])
            if not state.backwards:
                state.first_backwards = _where_at(state, int(starts[time_idx[rel[0]]]))
            state.backwards += int(rel.size)
        state.time = int(times[-1])
        state.seen_time = True
    picks: dict[tuple[bytes, int], tuple[npt.NDArray[np.intp], npt.NDArray[np.uint8]]] = {}
    scalar_by_size: dict[int, tuple[npt.NDArray[np.intp], npt.NDArray[np.uint8]]] = {}
    for code, positions in wanted.items():
        size = len(code)
        # scalar changes: value byte then the code in the same token
        if size not in scalar_by_size:
            near = np.flatnonzero(is_scalar & (lengths == size + 1))
            scalar_by_size[size] = near, arr[starts[near] + 1]
        cand, second = scalar_by_size[size]
        cand = cand[second == code[0]]
        for k in range(1, size):
            if cand.size == 0:
                break
            cand = cand[arr[starts[cand] + 1 + k] == code[k]]
        # vector changes: the code token follows the value token
        token_idx = cand
        if is_code is not None:
            vcand = np.flatnonzero(is_code & (lengths == size))
            for k in range(size):
                if vcand.size == 0:
                    break
                vcand = vcand[arr[starts[vcand] + k] == code[k]]
            if vcand.size:
                vcand = vcand[cls[vcand - 1] == _C_VECTOR]
            if vcand.size:
                token_idx = np.concatenate([cand, vcand - 1])
        if ignore is not None:
            token_idx = token_idx[~ignore[token_idx]]
        if dumpoff:
            token_idx = np.concatenate([token_idx, np.asarray(dumpoff, dtype=np.intp)])
        only_scalar = token_idx.size == cand.size and not dumpoff
        if not only_scalar:
            token_idx = np.sort(token_idx, kind="stable")
        for position in positions:
            if only_scalar and position == 0:
                values = _VALUE[first[token_idx]]  # a scalar token's value is its first byte
            else:
                values = _values(arr, starts, ends, cls, token_idx, position, state)
            picks[(code, position)] = (token_idx, values)
    return used, _Chunk(prev_time, time_count, times, picks)


def _values(
    arr: npt.NDArray[np.uint8],
    starts: npt.NDArray[np.intp],
    ends: npt.NDArray[np.intp],
    cls: npt.NDArray[np.uint8],
    token_idx: npt.NDArray[np.intp],
    position: int,
    state: _State,
) -> npt.NDArray[np.uint8]:
    """The level of bit `position` (from the right) set by each change token."""
    tok_start = starts[token_idx]
    kind = cls[token_idx]
    tok_end = ends[token_idx]
    is_vec = kind == _C_VECTOR
    is_off = kind == _C_KEYWORD
    ndig = tok_end - tok_start - 1
    if np.any(is_vec & (ndig < 1)):
        bad_at = int(tok_start[np.flatnonzero(is_vec & (ndig < 1))[0]])
        raise GapforgeError("empty vector value", _where_at(state, bad_at))
    inside = position < ndig
    digit_at = np.where(is_vec, np.where(inside, tok_end - 1 - position, tok_start + 1), tok_start)
    digits = arr[np.minimum(digit_at, arr.size - 1)]
    use_value = np.where(is_vec, inside, position == 0)
    values = np.where(use_value, _VALUE[digits], _EXTEND[digits])
    values = np.where(is_off, np.uint8(X), values).astype(np.uint8)
    if np.any(values == 255):
        bad_at = int(tok_start[np.flatnonzero(values == 255)[0]])
        raise GapforgeError("bad digit in a vector value", _where_at(state, bad_at))
    return values


def _resolve_value_chain(vec: npt.NDArray[np.bool_]) -> npt.NDArray[np.bool_]:
    """In a run of tokens that all start with b/B/r/R, values and codes alternate."""
    idx = np.arange(vec.size)
    run_start = np.where(vec & ~np.concatenate([[False], vec[:-1]]), idx, 0)
    run_start = np.maximum.accumulate(run_start)
    even: npt.NDArray[np.bool_] = (idx - run_start) % 2 == 0
    return vec & even


def _keywords(
    arr: npt.NDArray[np.uint8],
    starts: npt.NDArray[np.intp],
    ends: npt.NDArray[np.intp],
    keyword_idx: npt.NDArray[np.intp],
    state: _State,
) -> tuple[npt.NDArray[np.bool_], list[int]]:
    """Mark tokens inside $comment ... $end as ignored; find $dumpoff tokens."""
    marks = np.zeros(starts.size + 1, dtype=np.int32)
    dumpoff: list[int] = []
    open_at: int | None = 0 if state.in_comment else None
    for i in keyword_idx.tolist():
        word = bytes(arr[starts[i] : ends[i]])
        if open_at is not None:
            if word == b"$end":
                marks[open_at] += 1
                marks[i + 1] -= 1
                open_at = None
            continue
        if word == b"$comment":
            open_at = i
        elif word == b"$dumpoff":
            dumpoff.append(i)
        elif word not in _BODY_KEYWORDS:
            raise GapforgeError(f"unexpected keyword {word[:20]!r} in the value changes",
                                _where_at(state, int(starts[i])))
    if open_at is not None:
        marks[open_at] += 1
        state.in_comment = True
    else:
        state.in_comment = False
    ignore = np.cumsum(marks[:-1]) > 0
    return ignore, dumpoff


_ALL = 0xFFFF_FFFF_FFFF_FFFF
# keep the top k bytes of a little-endian 8-byte load (the k digits that end the token)
_TOP_BYTES = [0] + [_ALL ^ ((1 << (8 * (8 - k))) - 1) for k in range(1, 9)]
# per lane (last 8 digits, the 8 before, the rest) and per digit count 0..18: the mask
_KEEP = np.array([[_TOP_BYTES[min(max(n - 8 * lane, 0), 8)] for n in range(19)]
                  for lane in range(3)], dtype=np.uint64)
_ZEROS = np.uint64(0x3030_3030_3030_3030)
_HIGH_BITS = np.uint64(0x8080_8080_8080_8080)
_TO_HIGH_BIT = np.uint64(0x7676_7676_7676_7676)  # a byte above 9 reaches bit 7


def _eight_digits(
    words: npt.NDArray[np.uint64], keep: npt.NDArray[np.uint64]
) -> tuple[npt.NDArray[np.uint64], npt.NDArray[np.bool_]]:
    """SWAR decimal: the bytes of each 8-byte word that `keep` keeps (the last 0..8) as a
    number; and which words hold a byte that is not a digit."""
    y = (words ^ _ZEROS) & keep  # digits become 0..9; bytes before the number 0
    bad = ((y | (y + _TO_HIGH_BIT)) & _HIGH_BITS) != 0
    # the first digit is in the lowest byte: combine pairs, then pairs of pairs, then halves
    y = ((y * np.uint64(10)) + (y >> np.uint64(8))) & np.uint64(0x00FF_00FF_00FF_00FF)
    y = ((y * np.uint64(100)) + (y >> np.uint64(16))) & np.uint64(0x0000_FFFF_0000_FFFF)
    y = ((y * np.uint64(10000)) + (y >> np.uint64(32))) & np.uint64(0xFFFF_FFFF)
    return y, bad


def _parse_times(
    buffer: bytearray,
    arr: npt.NDArray[np.uint8],
    starts: npt.NDArray[np.intp],
    ends: npt.NDArray[np.intp],
    state: _State,
) -> npt.NDArray[np.int64]:
    """Decimal timestamps '#123', decoded 8 digits per unaligned 8-byte load."""
    if starts.size == 0:
        return np.zeros(0, dtype=np.int64)
    ndig = ends - starts - 1
    longest, shortest = int(ndig.max()), int(ndig.min())
    if longest > _MAX_TIME_DIGITS or shortest < 1:
        bad_i = int(np.flatnonzero((ndig > _MAX_TIME_DIGITS) | (ndig < 1))[0])
        raise GapforgeError("bad timestamp (empty or more than 18 digits)",
                            _where_at(state, int(starts[bad_i])))
    # every byte of the buffer as the first byte of an unaligned little-endian 8-byte word
    words = np.ndarray((arr.size - 7,), dtype="<u8", buffer=buffer, strides=(1,))
    value, bad = _eight_digits(words[ends - 8], _KEEP[0][ndig])
    if longest > 8:
        mid, bad_mid = _eight_digits(words[ends - 16], _KEEP[1][ndig])
        value += mid * np.uint64(10**8)
        bad |= bad_mid
        if longest > 16:
            top, bad_top = _eight_digits(words[ends - 24], _KEEP[2][ndig])
            value += top * np.uint64(10**16)
            bad |= bad_top
    if bad.any():
        bad_i = int(np.flatnonzero(bad)[0])
        raise GapforgeError("bad timestamp (not a decimal number)",
                            _where_at(state, int(starts[bad_i])))
    return value.view(np.int64)


def _where_at(state: _State, pos: int) -> str:
    """'file:line' of byte `pos` of the current chunk (counted only when an error is reported)."""
    offset = state.offset + pos - _PAD
    with state.path.open("rb") as handle:
        line = handle.read(max(offset, 0)).count(b"\n") + 1
    return f"{state.place}:{line}"
