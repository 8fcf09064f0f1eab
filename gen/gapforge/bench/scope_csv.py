"""Oscilloscope exports in volts: the file's layout and its numbers, chunk by chunk.

An analog capture CSV (what oscilloscopes and simulators export):

    # invented example: two gate-source voltages and the switch node
    Time,gate_h,gate_l,node
    s,V,V,V
    -1.000000e-06,-4.98,15.02,0.3
    -0.999000e-06,-4.97,15.01,0.4

- the first column is time, the others are channels; a header row names the columns;
- an optional units row follows it (`s,V,V`, `second,Volt,Volt`); units may instead sit in the
  header (`time_ns`, `Time (s)`, `CH1 [mV]`); without any, time is in seconds and channels in
  volts;
- lines starting with `#` are comments, blank lines are skipped, `\\r\\n` line ends are read;
- numbers are plain or in exponent notation (`-1.5e-9`); times may be negative; NaN and infinite
  values are refused.

The numbers are read in blocks of whole lines (`CHUNK_BYTES`), so memory stays bounded whatever
the file's length. Each block is first tried on the fast path (`_fixed_column`): scope and
simulator exports print every column in one printf-style format, so the last L bytes of every
field (L the column's shortest field) share one layout of digits, point, exponent letter and
signs; that layout is checked for every row and the digits become numbers by one matrix product
per column (a mantissa of up to 15 digits is exact; scaled by one exact power of ten, it is
rounded once, as a correctly rounded decimal-to-binary conversion does). Any block that does
not fit (spaces, comments, mixed widths) is read by numpy's `loadtxt`; a block that numpy
refuses is read line by line to name the first bad line. Either way a value is the nearest
float64 to the decimal text or within one unit in its last place.
"""

from __future__ import annotations

import io
import math
import re
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import numpy.typing as npt
from numpy.lib.stride_tricks import sliding_window_view

from gapforge.base.errors import GapforgeError, quoted
from gapforge.base.records import record

CHUNK_BYTES = 4 << 20  # bytes of whole lines parsed at once
_NUMBER_BYTES = b"0123456789.,+-eE\n"  # a block of only these may take the fast path
_HEAD_BYTES = 1 << 16  # the header and the units row must lie in the first 64 KiB

TIME_SCALE = {"s": 1.0, "sec": 1.0, "second": 1.0, "seconds": 1.0, "ms": 1e-3, "us": 1e-6,
              "\u00b5s": 1e-6, "ns": 1e-9, "ps": 1e-12, "fs": 1e-15}
VOLT_SCALE = {"v": 1.0, "volt": 1.0, "volts": 1.0, "mv": 1e-3, "kv": 1e3}
_UNIT_IN_NAME = re.compile(r"^(.*?)\s*(?:\(([^()]*)\)|\[([^\[\]]*)\])$")

Floats = npt.NDArray[np.float64]


@record
class Column:
    """One channel column: its name as the header gives it, its unit text and the factor to
    volts (None: not a voltage, e.g. a current probe's A)."""

    name: str
    unit: str
    to_volts: float | None
    raw: str = ""  # the header cell as written ('V(gate_h)', 'CH1 [mV]')


@record
class ScopeFile:
    """The layout of one export: columns, units, where the numbers begin."""

    path: Path
    time_unit: str
    time_scale: float  # factor from the file's time unit to seconds
    columns: tuple[Column, ...]
    data_offset: int  # byte offset of the first line after the header (and units row)
    data_line: int  # its line number

    @property
    def where(self) -> str:
        return str(self.path)


@record
class Block:
    """Consecutive samples: times in seconds, the asked-for channels in volts (one row per
    sample), and the file line of the first sample (for error messages)."""

    first_line: int
    times: Floats
    values: npt.NDArray[np.float64]  # rows x asked columns
    lines: npt.NDArray[np.int64] | None = None  # per-row line numbers when comments intervene

    def line_of(self, row: int) -> int:
        return int(self.lines[row]) if self.lines is not None else self.first_line + row


def _number(text: str) -> float | None:
    # Python's float() also takes other scripts' digits and '_' separators, which loadtxt
    # refuses: such a cell is not a number here either, so the error names it (review rev2)
    if not text.isascii() or "_" in text:
        return None
    try:
        value = float(text)
    except ValueError:
        return None
    return value


def _cells(line: str) -> list[str]:
    return [c.strip().strip('"').strip() for c in line.split(",")]


# Separators other exports use (a decimal-comma locale writes ';'): named in the error.
_OTHER_SEPARATORS = ((";", "';'"), ("\t", "tabs"), ("|", "'|'"))
_OTHER_UNITS = {"a", "ma", "ka", "w", "%", "ohm", "hz"}  # not volts, still units


def _is_unit(text: str) -> bool:
    low = text.lower()
    return low in TIME_SCALE or low in VOLT_SCALE or low in _OTHER_UNITS or text in TIME_SCALE


def _split_unit(cell: str) -> tuple[str, str | None]:
    """'Time (s)' -> ('Time', 's'); 'time_ns' -> ('time', 'ns'); 'CH1' -> ('CH1', None);
    'V(gate_h)' stays whole (what is in the parentheses is not a unit)."""
    match = _UNIT_IN_NAME.match(cell)
    if match and match.group(1).strip() and _is_unit((match.group(2) or match.group(3) or "")
                                                      .strip()):
        return match.group(1).strip(), (match.group(2) or match.group(3) or "").strip()
    if "_" in cell:
        head, tail = cell.rsplit("_", 1)
        if tail.lower() in TIME_SCALE or tail.lower() in VOLT_SCALE:
            return head, tail
    return cell, None


def read_layout(path: Path) -> ScopeFile:
    """The header, the optional units row and where the numbers start."""
    where = str(path)
    try:
        with path.open("rb") as handle:
            head = handle.read(_HEAD_BYTES)
    except OSError as exc:
        raise GapforgeError(f"cannot read: {exc.strerror}", where) from None
    if b"\x00" in head:
        raise GapforgeError("not a text file (binary data)", where)
    offset = 0
    header: tuple[int, list[str]] | None = None
    bom = head.startswith(b"\xef\xbb\xbf")
    offset = 3 if bom else 0
    number = 0
    units: list[str] | None = None
    while True:
        end = head.find(b"\n", offset)
        if end < 0:
            if len(head) >= _HEAD_BYTES:
                raise GapforgeError("no data within the first 64 KiB (header too long)", where)
            raise GapforgeError("no data rows after the header" if header else
                                "empty capture (no header row)", where)
        number += 1
        try:
            line = head[offset:end].decode("utf-8").strip()
        except UnicodeDecodeError:
            raise GapforgeError("not a text file (not UTF-8)", f"{where}:{number}") from None
        if not line or line.startswith("#"):
            offset = end + 1
            continue
        cells = _cells(line)
        if header is None:
            if all(_number(c) is not None for c in cells):
                raise GapforgeError("no header row: the first line holds numbers; name the "
                                    "columns, e.g. time,gate_h,gate_l", f"{where}:{number}")
            if len(cells) < 2:
                other = next((name for sep, name in _OTHER_SEPARATORS if sep in line), None)
                raise GapforgeError(
                    f"columns separated by {other}, not commas: export comma-separated values "
                    "with a decimal point" if other else
                    "the header needs a time column and at least one channel",
                    f"{where}:{number}")
            header = (number, cells)
            offset = end + 1
            continue
        if units is None and all(c and _number(c) is None for c in cells):
            if len(cells) != len(header[1]):
                raise GapforgeError(f"units row has {len(cells)} columns, the header "
                                    f"{len(header[1])}", f"{where}:{number}")
            units = cells
            offset = end + 1
            continue
        return _layout(path, header, units, offset, number)


def _layout(path: Path, header: tuple[int, list[str]], units: list[str] | None, offset: int,
            data_line: int) -> ScopeFile:
    where = f"{path}:{header[0]}"
    names_units = [_split_unit(c) for c in header[1]]
    time_unit = (units[0] if units else names_units[0][1]) or "s"
    if time_unit.lower() not in TIME_SCALE and time_unit not in TIME_SCALE:
        raise GapforgeError(f"time unit {quoted(time_unit)} must be one of s, ms, us, ns, ps, fs",
                            where)
    scale = TIME_SCALE.get(time_unit, TIME_SCALE.get(time_unit.lower(), 1.0))
    columns = []
    seen: set[str] = set()
    for k, (name, unit_in_name) in enumerate(names_units[1:], start=1):
        unit = (units[k] if units else unit_in_name) or "V"
        if not name:
            raise GapforgeError(f"column {k + 1} has no name", where)
        if name in seen:
            raise GapforgeError(f"two columns are named {quoted(name)}", where)
        seen.add(name)
        columns.append(Column(name, unit, VOLT_SCALE.get(unit.lower()), header[1][k]))
    return ScopeFile(path, time_unit, scale, tuple(columns), offset, data_line)


def blocks(sf: ScopeFile, wanted: list[int], chunk_bytes: int | None = None) -> Iterator[Block]:
    """Blocks of samples of the channel columns `wanted` (indexes into sf.columns), read
    `chunk_bytes` (default CHUNK_BYTES) at a time."""
    chunk_bytes = chunk_bytes or CHUNK_BYTES
    ncols = len(sf.columns) + 1
    scales = np.array([sf.columns[k].to_volts or 1.0 for k in wanted])
    picks = [0] + [k + 1 for k in wanted]
    line = sf.data_line
    try:
        handle = sf.path.open("rb")
    except OSError as exc:
        raise GapforgeError(f"cannot read: {exc.strerror}", sf.where) from None
    with handle:
        handle.seek(sf.data_offset)
        rest = b""
        while True:
            data = handle.read(chunk_bytes)
            if not data and not rest:
                return
            text = rest + data
            cut = text.rfind(b"\n") + 1 if data else len(text)
            if cut == 0:  # one line longer than a chunk
                if len(text) > 64 * chunk_bytes:
                    raise GapforgeError("a line longer than 256 MiB", f"{sf.where}:{line}")
                rest = text
                continue
            body, rest = text[:cut], text[cut:]
            if not body.endswith(b"\n"):
                body += b"\n"
            block = _parse(body, ncols, picks, line, sf.where)
            line += body.count(b"\n")
            if block is None:
                continue
            block = Block(block.first_line, block.times * sf.time_scale,
                          block.values * scales if wanted else block.values, block.lines)
            bad = ~np.isfinite(block.times)
            if block.values.size:
                bad |= ~np.isfinite(block.values).all(axis=1)
            if bad.any():
                raise GapforgeError("a value that is not a finite number (NaN, infinite or "
                                    "out of range)", f"{sf.where}:{block.line_of(int(np.argmax(bad)))}")
            yield block


def _parse(body: bytes, ncols: int, picks: list[int], line: int, where: str) -> Block | None:
    if b"\r" in body:
        body = body.replace(b"\r", b"")
    if b"\x00" in body:
        raise GapforgeError("not a text file (binary data)", f"{where}:{line}")
    plain = not body.translate(None, _NUMBER_BYTES) and b"\n\n" not in body and (
        not body.startswith(b"\n"))
    if plain:
        got = _fast(body, ncols, picks)
        if got is not None:
            return Block(line, got[0], got[1])
    return _general(body, ncols, picks, line, where)


def _fast(body: bytes, ncols: int, picks: list[int]) -> tuple[Floats, Floats] | None:
    b = np.frombuffer(body, dtype=np.uint8)
    stops = np.flatnonzero((b == 44) | (b == 10))
    if stops.size % ncols:
        return None
    kinds = b[stops].reshape(-1, ncols)
    if not (kinds[:, -1] == 10).all() or (ncols > 1 and not (kinds[:, :-1] == 44).all()):
        return None
    ends = stops.reshape(-1, ncols)
    flat = np.empty_like(stops)
    flat[0] = 0
    flat[1:] = stops[:-1] + 1
    starts = flat.reshape(-1, ncols)
    out = []
    for c in picks:
        col = _fixed_column(b, starts[:, c], ends[:, c])
        if col is None:
            return None
        out.append(col)
    values = np.stack(out[1:], axis=1) if len(out) > 1 else np.zeros((out[0].size, 0))
    return out[0], values


with np.errstate(over="ignore"):
    _P10 = 10.0 ** np.arange(0, 330)  # exact up to 1e22; beyond, one rounding (or inf)


def _fixed_column(b: npt.NDArray[np.uint8], s: npt.NDArray[np.int64],
                  e: npt.NDArray[np.int64]) -> Floats | None:
    """Numbers of one column whose fields share one right-aligned layout (module docstring);
    None when they do not (the caller falls back to loadtxt)."""
    lens = e - s
    width = int(lens.min())
    extra = int(lens.max()) - width
    if width < 1 or extra > 1 or width > 40 or e[0] < width:
        return None
    m = sliding_window_view(b, width)[e - width]  # rows x width: each field's last bytes
    digits = m - np.uint8(48)
    is_digit = digits < 10
    pattern = is_digit[0]
    if not (is_digit == pattern).all():
        return None
    layout = _layout_of(m, pattern)
    if layout is None:
        return None
    mantissa_at, exponent_at, frac, lead_sign, exp_sign_at = layout
    if extra and lead_sign is not None:
        return None
    mantissa = _horner(digits, mantissa_at).astype(np.float64)  # exact below 2**53
    scale = np.full(mantissa.size, -frac, dtype=np.int64)
    if exponent_at:
        exponent = _horner(digits, exponent_at)
        if exp_sign_at is not None:
            exponent = np.where(m[:, exp_sign_at] == 45, -exponent, exponent)
        scale += exponent
    power = _P10[np.minimum(np.abs(scale), _P10.size - 1)]
    with np.errstate(over="ignore"):
        value = np.where(scale >= 0, mantissa * power, mantissa / power)
    negative = m[:, 0] == 45 if lead_sign is not None else np.zeros(value.size, dtype=bool)
    if extra:
        longer = np.flatnonzero(lens > width)
        first = b[s[longer]]
        if not ((first == 43) | (first == 45)).all():
            return None
        negative[longer[first == 45]] = True
    return np.where(negative, -value, value)


def _horner(digits: npt.NDArray[np.uint8], at: list[int]) -> npt.NDArray[np.int64]:
    """The integer the digit columns `at` spell, most significant first (17 digits at most)."""
    total = digits[:, at[0]].astype(np.int64)
    for j in at[1:]:
        total *= 10
        total += digits[:, j]
    return total


def _layout_of(m: npt.NDArray[np.uint8], pattern: npt.NDArray[np.bool_]) -> (
        tuple[list[int], list[int], int, int | None, int | None] | None):
    """[sign] digits [. digits] [e [sign] digits], the same in every row: the columns of the
    mantissa and exponent digits, the number of fraction digits, the sign positions."""
    kinds: list[str] = []
    for j in range(pattern.size):
        if pattern[j]:
            kinds.append("d")
            continue
        col = m[:, j]
        if (col == 46).all():
            kinds.append(".")
        elif ((col == 101) | (col == 69)).all():
            kinds.append("e")
        elif ((col == 43) | (col == 45)).all():
            kinds.append("s")
        else:
            return None
    match = re.fullmatch(r"(s?)(d*)(\.?)(d*)(?:e(s?)(d{1,3}))?", "".join(kinds))
    if match is None or not (match.group(2) or match.group(4)):
        return None
    mantissa_at = [j for j in range(match.end(4)) if kinds[j] == "d"]
    if len(mantissa_at) > 17:
        return None
    exponent_at = list(range(match.start(6), match.end(6))) if match.group(6) else []
    exp_sign_at = match.start(5) if match.group(5) else None
    return (mantissa_at, exponent_at, len(match.group(4)), 0 if match.group(1) else None,
            exp_sign_at)


def _general(body: bytes, ncols: int, picks: list[int], line: int, where: str) -> Block | None:
    """Comments, blank lines, spaces: keep the data lines (with their numbers), let loadtxt
    parse them, and name the first bad line if it refuses."""
    rows = body.split(b"\n")[:-1]
    keep = [(line + i, r) for i, r in enumerate(rows)
            if r.strip() and not r.lstrip().startswith(b"#")]
    if not keep:
        return None
    numbers = np.array([n for n, _ in keep], dtype=np.int64)
    try:
        data = np.loadtxt(io.BytesIO(b"\n".join(r for _, r in keep)), delimiter=",",
                          usecols=picks, ndmin=2, dtype=np.float64, comments=None)
        ok = data.shape == (len(keep), len(picks))
        if ok:
            _same_width(keep, ncols, where)
    except ValueError:
        ok = False
    if not ok:
        _locate(keep, ncols, where)
        raise GapforgeError("cannot read these lines as numbers", f"{where}:{keep[0][0]}")
    contiguous = int(numbers[-1] - numbers[0]) == numbers.size - 1
    return Block(int(numbers[0]), data[:, 0].copy(), data[:, 1:].copy(),
                 None if contiguous else numbers)


def _same_width(keep: list[tuple[int, bytes]], ncols: int, where: str) -> None:
    for n, r in keep:
        if r.count(b",") != ncols - 1:
            raise GapforgeError(f"{r.count(b',') + 1} columns, the header has {ncols}",
                                f"{where}:{n}")


def _locate(keep: list[tuple[int, bytes]], ncols: int, where: str) -> None:
    """Raise the error of the first line that is not ncols numbers."""
    for n, r in keep:
        try:
            text = r.decode("utf-8")
        except UnicodeDecodeError:
            raise GapforgeError("not a text file (not UTF-8)", f"{where}:{n}") from None
        cells = text.split(",")
        if len(cells) != ncols:
            raise GapforgeError(f"{len(cells)} columns, the header has {ncols}", f"{where}:{n}")
        for k, cell in enumerate(cells):
            value = _number(cell.strip())
            if value is None:
                raise GapforgeError(f"column {k + 1}: {quoted(cell.strip())} is not a number",
                                    f"{where}:{n}")
            if not math.isfinite(value):
                raise GapforgeError(f"column {k + 1}: {quoted(cell.strip())} is not a finite "
                                    "number", f"{where}:{n}")
