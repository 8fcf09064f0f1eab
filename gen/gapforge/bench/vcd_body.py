"""The body of a value change dump, one chunk at a time, decoded with numpy.

A chunk (it ends with whitespace) is decoded in named steps: token bounds from the whitespace
positions (`_tokens`), each token classified by its first byte, with the identifier code after
a vector or real value recognised as a code (`_classify`), the tokens checked ($comment blocks,
$dumpoff, stray bytes, a value without its code: `_check`), every timestamp decoded eight digits
per unaligned 64-bit load (SWAR, `_timestamps`), and the changes of the wanted identifier codes
picked out (`_picks`). There is no per-line Python loop; line numbers are counted only when an
error is reported (`where_at`).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import numpy.typing as npt

from gapforge.base.errors import GapforgeError
from gapforge.base.records import record

X = 2
Z = 3
PAD = 24  # bytes before the data in the read buffer
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


@dataclass
class State:
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


@record
class Chunk:
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


@dataclass
class _Tokens:
    """The tokens of one chunk: bounds, first-byte class, and what the checks found."""

    starts: npt.NDArray[np.intp]
    ends: npt.NDArray[np.intp]
    first: npt.NDArray[np.uint8]
    cls: npt.NDArray[np.uint8]
    is_code: npt.NDArray[np.bool_] | None = None  # the token after a vector/real value
    ignore: npt.NDArray[np.bool_] | None = None  # inside $comment ... $end
    dumpoff: tuple[int, ...] = ()


def parse_chunk(
    buffer: bytearray,
    arr: npt.NDArray[np.uint8],
    wanted: dict[bytes, list[int]],
    state: State,
    last: bool,
) -> tuple[int, Chunk]:
    """Decode one chunk (which ends with whitespace); returns how many bytes were used (a
    trailing vector value whose code is in the next chunk is left for it) and the changes."""
    prev_time = state.time
    empty = Chunk(prev_time, None, np.zeros(0, np.int64),
                  {(c, p): (np.zeros(0, dtype=np.intp), np.zeros(0, dtype=np.uint8))
                   for c, ps in wanted.items() for p in ps})
    tokens = _tokens(arr)
    if tokens is None:
        return arr.size, empty
    used, tokens = _classify(arr, tokens, state, last)
    if tokens is None:
        return used, empty
    _check(arr, tokens, state, last)
    time_count, times = _timestamps(buffer, arr, tokens, state)
    picks = {key: pick for code, positions in wanted.items()
             for key, pick in _picks(arr, tokens, code, positions, state).items()}
    return used, Chunk(prev_time, time_count, times, picks)


def _tokens(arr: npt.NDArray[np.uint8]) -> _Tokens | None:
    """Token bounds from the whitespace positions: a token lies between two whitespace bytes
    that are not adjacent (arr starts with padding spaces and ends with whitespace)."""
    wpos = np.flatnonzero(arr <= 32)
    gap = np.diff(wpos)
    tok = np.flatnonzero(gap > 1)
    del gap
    starts = wpos[tok] + 1
    ends = wpos[tok + 1]
    del wpos, tok
    if starts.size == 0:
        return None
    first = arr[starts]
    return _Tokens(starts, ends, first, _CLASS[first])


def _classify(
    arr: npt.NDArray[np.uint8], t: _Tokens, state: State, last: bool
) -> tuple[int, _Tokens | None]:
    """A token right after a vector/real value is an identifier code, whatever it starts with;
    a vector value at the very end of the chunk waits for its code in the next chunk."""
    used = arr.size
    if not (np.any(t.cls == _C_VECTOR) or np.any(t.cls == _C_REAL)):
        return used, t
    vec = _resolve_value_chain((t.cls == _C_VECTOR) | (t.cls == _C_REAL))
    if vec[-1]:
        if last:
            raise GapforgeError("vector or real value without an identifier code (truncated?)",
                                where_at(state, int(t.starts[-1])))
        used = int(t.starts[-1])
        t = _Tokens(t.starts[:-1], t.ends[:-1], t.first[:-1], t.cls[:-1])
        vec = vec[:-1]
        if t.starts.size == 0:
            return used, None
    is_code = np.zeros(t.starts.size, dtype=bool)
    is_code[1:] = vec[:-1]
    t.is_code = is_code
    t.cls = np.where(is_code, np.uint8(255), t.cls)
    return used, t


def _check(arr: npt.NDArray[np.uint8], t: _Tokens, state: State, last: bool) -> None:
    """Keywords ($comment blocks ignored, $dumpoff found), stray tokens, and scalar values that
    lost their identifier code."""
    if np.any(t.cls == _C_KEYWORD) or state.in_comment:
        keyword_idx = np.flatnonzero(t.cls == _C_KEYWORD)
        t.ignore, dumpoff = _keywords(arr, t.starts, t.ends, keyword_idx, state)
        t.dumpoff = tuple(dumpoff)
    bad = np.flatnonzero(t.cls == _C_BAD)
    if bad.size and t.ignore is not None:
        bad = bad[~t.ignore[bad]]
    if bad.size:
        pos = int(t.starts[bad[0]])
        token = _shown(bytes(arr[pos : min(int(t.ends[bad[0]]), pos + 20)]))
        raise GapforgeError(f"unexpected token {token!r} in the value changes",
                            where_at(state, pos))
    # a scalar value is followed by its code in the same token: a bare '1' has lost its code
    bare = np.flatnonzero((t.cls == _C_SCALAR) & (t.ends - t.starts == 1))
    if bare.size and t.ignore is not None:
        bare = bare[~t.ignore[bare]]
    if bare.size:
        pos = int(t.starts[bare[0]])
        ends_file = last and int(bare[0]) == t.starts.size - 1
        raise GapforgeError(
            f"value change {chr(arr[pos])!r} without an identifier code"
            + (": the file ends here (truncated?)" if ends_file else ""), where_at(state, pos))


def _timestamps(
    buffer: bytearray, arr: npt.NDArray[np.uint8], t: _Tokens, state: State
) -> tuple[npt.NDArray[np.intp], npt.NDArray[np.int64]]:
    """Every timestamp of the chunk, and per token how many timestamps precede it; a time
    that goes backwards is counted (the reader warns and orders the changes)."""
    is_time = t.cls == _C_TIME
    if t.ignore is not None:
        is_time &= ~t.ignore
    time_idx = np.flatnonzero(is_time)
    time_count = np.cumsum(is_time, dtype=np.intp)
    del is_time
    times = _parse_times(buffer, arr, t.starts[time_idx], t.ends[time_idx], state)
    if times.size:
        back = times[1:] < times[:-1]
        if (state.seen_time and int(times[0]) < state.time) or back.any():
            rel = np.flatnonzero(back) + 1
            if state.seen_time and int(times[0]) < state.time:
                rel = np.concatenate([[0], rel])
            if not state.backwards:
                state.first_backwards = where_at(state, int(t.starts[time_idx[rel[0]]]))
            state.backwards += int(rel.size)
        state.time = int(times[-1])
        state.seen_time = True
    return time_count, times


def _picks(
    arr: npt.NDArray[np.uint8], t: _Tokens, code: bytes, positions: list[int], state: State
) -> dict[tuple[bytes, int], tuple[npt.NDArray[np.intp], npt.NDArray[np.uint8]]]:
    """The change tokens of one identifier code and the level each sets per wanted bit."""
    size = len(code)
    lengths = t.ends - t.starts
    # scalar changes: value byte then the code in the same token
    cand = np.flatnonzero((t.cls == _C_SCALAR) & (lengths == size + 1))
    for k in range(size):
        if cand.size == 0:
            break
        cand = cand[arr[t.starts[cand] + 1 + k] == code[k]]
    # vector changes: the code token follows the value token
    token_idx = cand
    if t.is_code is not None:
        vcand = np.flatnonzero(t.is_code & (lengths == size))
        for k in range(size):
            if vcand.size == 0:
                break
            vcand = vcand[arr[t.starts[vcand] + k] == code[k]]
        if vcand.size:
            vcand = vcand[t.cls[vcand - 1] == _C_VECTOR]
        if vcand.size:
            token_idx = np.concatenate([cand, vcand - 1])
    if t.ignore is not None:
        token_idx = token_idx[~t.ignore[token_idx]]
    if t.dumpoff:
        token_idx = np.concatenate([token_idx, np.asarray(t.dumpoff, dtype=np.intp)])
    only_scalar = token_idx.size == cand.size and not t.dumpoff
    if not only_scalar:
        token_idx = np.sort(token_idx, kind="stable")
    picks = {}
    for position in positions:
        if only_scalar and position == 0:
            values = _VALUE[t.first[token_idx]]  # a scalar token's value is its first byte
        else:
            values = _values(arr, t.starts, t.ends, t.cls, token_idx, position, state)
        picks[(code, position)] = (token_idx, values)
    return picks


def _values(
    arr: npt.NDArray[np.uint8],
    starts: npt.NDArray[np.intp],
    ends: npt.NDArray[np.intp],
    cls: npt.NDArray[np.uint8],
    token_idx: npt.NDArray[np.intp],
    position: int,
    state: State,
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
        raise GapforgeError("empty vector value", where_at(state, bad_at))
    inside = position < ndig
    digit_at = np.where(is_vec, np.where(inside, tok_end - 1 - position, tok_start + 1), tok_start)
    digits = arr[np.minimum(digit_at, arr.size - 1)]
    use_value = np.where(is_vec, inside, position == 0)
    values = np.where(use_value, _VALUE[digits], _EXTEND[digits])
    values = np.where(is_off, np.uint8(X), values).astype(np.uint8)
    if np.any(values == 255):
        bad_at = int(tok_start[np.flatnonzero(values == 255)[0]])
        raise GapforgeError("bad digit in a vector value", where_at(state, bad_at))
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
    state: State,
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
            raise GapforgeError(f"unexpected keyword {_shown(word[:20])!r} in the value changes",
                                where_at(state, int(starts[i])))
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
    state: State,
) -> npt.NDArray[np.int64]:
    """Decimal timestamps '#123', decoded 8 digits per unaligned 8-byte load."""
    if starts.size == 0:
        return np.zeros(0, dtype=np.int64)
    ndig = ends - starts - 1
    longest, shortest = int(ndig.max()), int(ndig.min())
    if longest > _MAX_TIME_DIGITS or shortest < 1:
        bad_i = int(np.flatnonzero((ndig > _MAX_TIME_DIGITS) | (ndig < 1))[0])
        raise GapforgeError("bad timestamp (empty or more than 18 digits)",
                            where_at(state, int(starts[bad_i])))
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
                            where_at(state, int(starts[bad_i])))
    return value.view(np.int64)


def _shown(data: bytes) -> str:
    """Bytes of the file as text for a message (never a Python b'...' literal)."""
    return data.decode("ascii", "backslashreplace")


def where_at(state: State, pos: int) -> str:
    """'file:line' of byte `pos` of the current chunk (counted only when an error is reported)."""
    offset = state.offset + pos - PAD
    with state.path.open("rb") as handle:
        line = handle.read(max(offset, 0)).count(b"\n") + 1
    return f"{state.place}:{line}"
