"""Value change dump (VCD, IEEE 1364-2005 clause 18) reader for gate captures.

The header (declarations) is small and read token by token in Python. The body, which can be
hundreds of megabytes, is read in fixed-size chunks into one reused buffer and tokenised with
numpy: whitespace mask -> token starts/ends -> classification by first byte -> only the changes of
the requested identifier codes are decoded. There is no per-line Python loop over the body; the
few keyword tokens ($dumpvars, $dumpoff, $comment, ...) are handled one by one.

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
from collections.abc import Sequence
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path
from typing import TypeVar

import numpy as np
import numpy.typing as npt

from gapforge.errors import GapforgeError

X = 2
Z = 3
_T = TypeVar("_T", bound=np.generic)

CHUNK_BYTES = 1 << 21
_MAX_TIME_DIGITS = 18

_UNITS: dict[str, Fraction] = {
    "s": Fraction(1),
    "ms": Fraction(1, 10**3),
    "us": Fraction(1, 10**6),
    "ns": Fraction(1, 10**9),
    "ps": Fraction(1, 10**12),
    "fs": Fraction(1, 10**15),
}

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
    return int(match.group(1)) * _UNITS[match.group(2)]


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


@dataclass
class _State:
    """What one chunk hands to the next."""

    time: int = 0
    seen_time: bool = False
    in_comment: bool = False
    line: int = 1
    backwards: int = 0
    first_backwards: str = ""
    offset: int = 0


@dataclass
class _Collector:
    code: bytes
    positions: list[int]
    times: list[npt.NDArray[np.int64]] = field(default_factory=list)
    values: list[npt.NDArray[np.uint8]] = field(default_factory=list)


def read_vcd(
    path: Path, names: Sequence[str], *, chunk_bytes: int = CHUNK_BYTES, where: str | None = None
) -> VcdData:
    """Read the changes of the named signals. Raises GapforgeError on malformed input."""
    place = where or str(path)
    header = read_header(path)
    selections = [select(header, name, place) for name in names]
    collectors: dict[bytes, _Collector] = {}
    for sel in selections:
        code = sel.variable.code.encode("ascii")
        col = collectors.setdefault(code, _Collector(code, []))
        if sel.position not in col.positions:
            col.positions.append(sel.position)
    # per (code, position) the output pieces
    pieces: dict[tuple[bytes, int], tuple[list[npt.NDArray[np.int64]], list[npt.NDArray[np.uint8]]]]
    pieces = {(c, p): ([], []) for c, col in collectors.items() for p in col.positions}
    state = _State(offset=header.body_offset)
    try:
        handle = path.open("rb")
    except OSError as exc:
        raise GapforgeError(f"cannot read: {exc.strerror}", place) from None
    with handle:
        handle.seek(header.body_offset)
        head_lines = _count_header_lines(path, header.body_offset)
        state.line = head_lines
        buffer = bytearray(chunk_bytes + 1)
        buffer[0] = 0x0A  # a virtual separator before the first token
        carry = 0
        while True:
            requested = len(buffer) - 1 - carry
            with memoryview(buffer) as whole, whole[1 + carry :] as view:
                got = handle.readinto(view) or 0
            eof = got < requested
            filled = 1 + carry + got
            if filled == 1:
                break
            arr = np.frombuffer(buffer, dtype=np.uint8, count=filled)
            cut = filled if eof else _cut(arr)
            if cut <= 1:
                del arr
                buffer.extend(bytes(len(buffer)))  # one token longer than a chunk
                carry = filled - 1
                continue
            used = _parse_chunk(arr[:cut], collectors, pieces, state, place, eof)
            state.line += int(np.count_nonzero(arr[1:used] == 0x0A))
            state.offset += used - 1
            del arr
            rest = filled - used
            buffer[1 : 1 + rest] = buffer[used:filled]
            carry = rest
            if eof:
                if rest:
                    raise GapforgeError("cannot read the end of the file", place)
                break
    warnings: list[str] = []
    if state.backwards:
        warnings.append(
            f"{place}: {state.backwards} timestamp(s) go backwards (first at {state.first_backwards});"
            " changes were ordered by time"
        )
    signals: dict[str, SignalChanges] = {}
    for sel in selections:
        key = (sel.variable.code.encode("ascii"), sel.position)
        tlist, vlist = pieces[key]
        times = _join(tlist, np.int64)
        values = _join(vlist, np.uint8)
        if state.backwards:
            order = np.argsort(times, kind="stable")
            times, values = times[order], values[order]
            tlist[:] = [times]
            vlist[:] = [values]
        signals[sel.name] = SignalChanges(sel.name, times, values)
    return VcdData(header.timescale_s, signals, state.time, tuple(warnings))


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


def _count_header_lines(path: Path, body_offset: int) -> int:
    with path.open("rb") as handle:
        return handle.read(body_offset).count(b"\n") + 1


def _cut(arr: npt.NDArray[np.uint8]) -> int:
    """Where to end this chunk: just after the last whitespace (the final token may be partial)."""
    tail = min(arr.size, 4096)
    ws = np.flatnonzero(arr[arr.size - tail :] <= 32)
    if ws.size:
        return arr.size - tail + int(ws[-1]) + 1
    ws = np.flatnonzero(arr <= 32)
    return int(ws[-1]) + 1 if ws.size else 0


def _parse_chunk(
    arr: npt.NDArray[np.uint8],
    collectors: dict[bytes, _Collector],
    pieces: dict[tuple[bytes, int], tuple[list[npt.NDArray[np.int64]], list[npt.NDArray[np.uint8]]]],
    state: _State,
    where: str,
    last: bool,
) -> int:
    """Decode one chunk; returns how many bytes were used (a trailing vector value whose code is
    in the next chunk is left for it)."""
    ws = arr <= 32
    step = np.diff(ws.view(np.int8))
    starts = np.flatnonzero(step == -1) + 1
    ends = np.flatnonzero(step == 1) + 1
    del step
    if ends.size < starts.size:  # the final token runs to the end of the data
        ends = np.append(ends, arr.size)
    if starts.size == 0:
        return arr.size
    first = arr[starts]
    cls = _CLASS[first]
    # a token right after a vector/real value is an identifier code, whatever it starts with
    vec = (cls == _C_VECTOR) | (cls == _C_REAL)
    if vec.any():
        vec = _resolve_value_chain(vec)
    used = arr.size
    if vec[-1]:
        if last:
            raise GapforgeError("vector or real value without an identifier code (truncated?)",
                                _where_at(arr, int(starts[-1]), state, where))
        used = int(starts[-1])
        starts, ends, cls, vec = starts[:-1], ends[:-1], cls[:-1], vec[:-1]
        if starts.size == 0:
            return used
    is_code = np.zeros(starts.size, dtype=bool)
    is_code[1:] = vec[:-1]
    cls = np.where(is_code, np.uint8(255), cls)
    keyword_idx = np.flatnonzero(cls == _C_KEYWORD)
    ignore: npt.NDArray[np.bool_] | None = None
    dumpoff: list[int] = []
    if keyword_idx.size or state.in_comment:
        ignore, dumpoff = _keywords(arr, starts, ends, keyword_idx, state, where)
    bad = np.flatnonzero(cls == _C_BAD)
    if bad.size:
        if ignore is not None:
            bad = bad[~ignore[bad]]
        if bad.size:
            pos = int(starts[bad[0]])
            token = bytes(arr[pos : min(int(ends[bad[0]]), pos + 20)])
            raise GapforgeError(f"unexpected token {token!r} in the value changes",
                                _where_at(arr, pos, state, where))
    # timestamps
    time_idx = np.flatnonzero(cls == _C_TIME)
    if ignore is not None and time_idx.size:
        time_idx = time_idx[~ignore[time_idx]]
    times = _parse_times(arr, starts[time_idx], ends[time_idx], state, where)
    if times.size:
        previous = np.empty_like(times)
        previous[0] = state.time if state.seen_time else times[0]
        previous[1:] = times[:-1]
        back = np.flatnonzero(times < previous)
        if back.size:
            if not state.backwards:
                state.first_backwards = _where_at(arr, int(starts[time_idx[back[0]]]), state, where)
            state.backwards += int(back.size)
    lengths = ends - starts
    scalar = cls == _C_SCALAR
    for code, col in collectors.items():
        size = len(code)
        # scalar changes: value byte then the code in the same token
        cand = np.flatnonzero(scalar & (lengths == size + 1))
        for k in range(size):
            if cand.size == 0:
                break
            cand = cand[arr[starts[cand] + 1 + k] == code[k]]
        # vector changes: the code token follows the value token
        vcand = np.flatnonzero(is_code & (lengths == size))
        for k in range(size):
            if vcand.size == 0:
                break
            vcand = vcand[arr[starts[vcand] + k] == code[k]]
        if vcand.size:
            vcand = vcand[cls[vcand - 1] == _C_VECTOR]
        if ignore is not None:
            cand = cand[~ignore[cand]]
            vcand = vcand[~ignore[vcand]]
        token_idx = np.concatenate([cand, vcand - 1]) if vcand.size else cand
        if dumpoff:
            token_idx = np.concatenate([token_idx, np.asarray(dumpoff, dtype=np.intp)])
        if token_idx.size == 0:
            continue
        order = np.argsort(token_idx, kind="stable") if (vcand.size or dumpoff) else None
        if order is not None:
            token_idx = token_idx[order]
        slot = np.searchsorted(time_idx, token_idx) - 1
        if times.size:
            at = np.where(slot >= 0, times[np.maximum(slot, 0)], state.time)
        else:
            at = np.full(token_idx.size, state.time, dtype=np.int64)
        at = at.astype(np.int64, copy=False)
        tok_start = starts[token_idx]
        tok_end = ends[token_idx]
        is_vec = cls[token_idx] == _C_VECTOR
        is_off = cls[token_idx] == _C_KEYWORD
        ndig = tok_end - tok_start - 1
        if np.any(is_vec & (ndig < 1)):
            bad_at = int(tok_start[np.flatnonzero(is_vec & (ndig < 1))[0]])
            raise GapforgeError("empty vector value", _where_at(arr, bad_at, state, where))
        for position in col.positions:
            inside = position < ndig
            digit_at = np.where(inside, tok_end - 1 - position, tok_start + 1)
            # scalar tokens carry their value in the first byte
            digit_at = np.where(is_vec, digit_at, tok_start)
            digits = arr[np.minimum(digit_at, arr.size - 1)]
            scalar_inside = position == 0
            use_value = np.where(is_vec, inside, scalar_inside)
            values = np.where(use_value, _VALUE[digits], _EXTEND[digits])
            values = np.where(is_off, np.uint8(X), values).astype(np.uint8)
            if np.any(values == 255):
                bad_at = int(tok_start[np.flatnonzero(values == 255)[0]])
                raise GapforgeError("bad digit in a vector value", _where_at(arr, bad_at, state, where))
            tlist, vlist = pieces[(code, position)]
            tlist.append(at.copy())
            vlist.append(values)
    if times.size:
        state.time = int(times[-1])
        state.seen_time = True
    return used


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
    where: str,
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
                                _where_at(arr, int(starts[i]), state, where))
    if open_at is not None:
        marks[open_at] += 1
        state.in_comment = True
    else:
        state.in_comment = False
    ignore = np.cumsum(marks[:-1]) > 0
    return ignore, dumpoff


def _parse_times(
    arr: npt.NDArray[np.uint8],
    starts: npt.NDArray[np.intp],
    ends: npt.NDArray[np.intp],
    state: _State,
    where: str,
) -> npt.NDArray[np.int64]:
    ndig = ends - starts - 1
    if starts.size == 0:
        return np.zeros(0, dtype=np.int64)
    width = int(ndig.max())
    if width > _MAX_TIME_DIGITS or int(ndig.min()) < 1:
        bad = int(np.flatnonzero((ndig > _MAX_TIME_DIGITS) | (ndig < 1))[0])
        raise GapforgeError("bad timestamp (empty or more than 18 digits)",
                            _where_at(arr, int(starts[bad]), state, where))
    value = np.zeros(starts.size, dtype=np.int64)
    ok = np.ones(starts.size, dtype=bool)
    for k in range(width):
        live = k < ndig
        digit = arr[np.where(live, starts + 1 + k, starts)].astype(np.int64) - 48
        ok &= ~live | ((digit >= 0) & (digit <= 9))
        value = np.where(live, value * 10 + digit, value)
    if not ok.all():
        bad = int(np.flatnonzero(~ok)[0])
        raise GapforgeError("bad timestamp (not a decimal number)",
                            _where_at(arr, int(starts[bad]), state, where))
    return value


def _where_at(arr: npt.NDArray[np.uint8], pos: int, state: _State, where: str) -> str:
    line = state.line + int(np.count_nonzero(arr[1:pos] == 0x0A))
    return f"{where}:{line}"
