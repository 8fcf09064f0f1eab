"""The gapforge capture CSV: two gate signals as edge events or sampled levels, read exactly.

CSV format (gapforge capture CSV, version 1)
-------------------------------------------
Lines starting with '#' are comments, except directive lines `# key: value`. Blank lines are
skipped. The first other line is the header; its columns choose one of two layouts:

Edge events - header `time_<unit>,signal,level`::

    time_ns,signal,level
    0,gate_h,0
    0,gate_l,1
    100,gate_l,0
    131.25,gate_h,1

Sampled levels - header `time_<unit>,<name>,<name>...` (a time column), or only signal names with
a directive `# sample_period: 10ns` before the header (row k is at k * period)::

    # sample_period: 2ns
    gate_h,gate_l
    0,1
    0,0
    1,0

<unit> is s, ms, us, ns, ps or fs; times are decimal numbers, read exactly. Levels are 0, 1, x or
z. In the sampled layout an edge is placed at the first sample that shows the new level, so a
measured gap is accurate to one sample period.

Sample rate: a directive `# samplerate: 16 MHz` (any letter case, as a logic analyser's CSV
export writes it when its comment character is '#') gives the sample period 1 / rate, exact.

Times are decimal numbers with an optional sign and exponent (`0E+0`, `-998.000E-06`, as scopes
and numpy write them), read exactly (never through a float); negative times (a trigger at 0) are
normal.
"""

from __future__ import annotations

import math
import re
from decimal import Decimal
from fractions import Fraction
from pathlib import Path

import numpy as np
import numpy.typing as npt

from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import TIME_UNITS
from gapforge.base.records import record

_LEVELS = {"0": 0, "1": 1, "x": 2, "X": 2, "z": 3, "Z": 3}
# a decimal number with an optional sign and exponent ("0E+0", "-998.000E-06"), read exactly
# ASCII digits only (issue 20 item 4): \d would also take other scripts' digits
_DECIMAL = re.compile(r"^[+-]?([0-9]+(\.[0-9]*)?|\.[0-9]+)([eE][+-]?[0-9]{1,2})?$")
_LONG_EXPONENT = re.compile(r"^[+-]?([0-9]+(\.[0-9]*)?|\.[0-9]+)[eE][+-]?[0-9]{3,}$")


Signals = dict[str, tuple[npt.NDArray[np.int64], npt.NDArray[np.uint8]]]


@record
class CsvData:
    """A capture CSV read: the tick, {name: (times, levels)}, the end tick, the resolution."""

    tick_s: Fraction
    signals: Signals
    end: int
    resolution_ticks: int
    warnings: tuple[str, ...] = ()
    resolution_origin: str = "one tick"


_SEMICOLON = (
    "the file seems to be a logic analyser's CSV export with ';' comment lines; gapforge reads "
    "its own capture CSV: '#' comment lines, then a header of signal names (with a "
    "'# samplerate: 16 MHz' or '# sample_period: 62.5ns' line before it) or time_<unit>,<names>; "
    "export with '#' as the comment character and channel names as column labels, without "
    "a time column (README, \"Capture CSV\")")


def read_csv(path: Path, names: list[str]) -> CsvData:
    """Read a gapforge capture CSV (either layout, see the module docstring)."""
    where = str(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise GapforgeError(f"cannot read: {exc.strerror}", where) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise GapforgeError("not a text file (binary data)", where) from None
    if "\x00" in text:
        raise GapforgeError("not a text file (binary data)", where)
    directives: dict[str, str] = {}
    header: list[str] | None = None
    rows: list[tuple[int, list[str]]] = []
    for number, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith("#"):
            match = re.match(r"#\s*([A-Za-z_]+)\s*:\s*(.+)$", stripped)
            if match and header is None:
                directives.setdefault(match.group(1).lower(), match.group(2).strip())
            continue
        if header is None and stripped.startswith(";"):
            raise GapforgeError(_SEMICOLON, f"{where}:{number}")
        cells = [c.strip() for c in stripped.split(",")]
        if header is None:
            header = cells
            header_line = number
            continue
        if len(cells) != len(header):
            raise GapforgeError(
                f"{len(cells)} columns, the header has {len(header)}", f"{where}:{number}"
            )
        rows.append((number, cells))
    if header is None:
        raise GapforgeError("empty capture (no header line)", where)
    if not rows:
        raise GapforgeError("no data rows (no edges)", where)
    time_unit: Fraction | None = None
    if header[0].lower() in ("time", "nanoseconds", "microseconds", "milliseconds", "seconds"):
        raise GapforgeError(
            f"time column {header[0]!r} is not read: gapforge needs time_<unit> (e.g. time_ns) "
            "with exact times, or no time column and a '# samplerate: 16 MHz' or "
            "'# sample_period: 62.5ns' line (a logic analyser's rounded time column cannot "
            "place an edge exactly)", f"{where}:{header_line}")
    if header[0].startswith("time_"):
        unit = header[0][5:]
        if unit not in TIME_UNITS:
            raise GapforgeError(
                f"time column {header[0]!r}: unit must be one of {', '.join(TIME_UNITS)}",
                f"{where}:{header_line}",
            )
        time_unit = TIME_UNITS[unit]
    if time_unit is not None and header[1:] == ["signal", "level"]:
        return _edges(rows, names, time_unit, where)
    return _samples(rows, header, header_line, names, time_unit, directives, where)


_MAX_TIME_TEXT = 60  # characters of one time cell
_TICK_LIMIT = 2**62  # ticks held in int64 with room for differences


def _exact_times(texts: list[tuple[int, str]], where: str) -> tuple[list[Fraction], int]:
    values: list[Fraction] = []
    denominator = 1
    for number, cell in texts:
        if len(cell) > _MAX_TIME_TEXT:
            raise GapforgeError(f"time {cell[:24]!r}... is longer than {_MAX_TIME_TEXT} characters",
                                f"{where}:{number}")
        if not _DECIMAL.match(cell):
            if _LONG_EXPONENT.match(cell):
                raise GapforgeError(f"time {cell!r}: the exponent has more than 2 digits (no "
                                    "capture spans such a range)", f"{where}:{number}")
            raise GapforgeError(f"time {cell!r} is not a decimal number", f"{where}:{number}")
        value = Fraction(Decimal(cell))  # exact: a decimal text is a decimal fraction
        denominator = math.lcm(denominator, value.denominator)
        values.append(value)
    return values, denominator


@record
class _Ticks:
    """Times as integer ticks that numpy's int64 holds: `tick` (in the file's unit), the ticks,
    the resolution in ticks and what had to change to fit."""

    tick: Fraction
    ticks: list[int]
    resolution: int
    warnings: tuple[str, ...]


def _fit_ticks(values: list[Fraction], denominator: int, unit: Fraction, where: str) -> _Ticks:
    """The finest decimal step as the tick when every time fits in int64 ticks. Otherwise the
    times count from the first row; and when even the span does not fit (many decimals over a
    long capture) the tick is coarsened by powers of ten, each time rounded down, and the
    resolution becomes two ticks (the rounding and the writer's precision, each under one)."""
    ticks = [int(v * denominator) for v in values]
    if max(abs(t) for t in ticks) < _TICK_LIMIT // 2:  # any difference fits too
        return _Ticks(unit / denominator, ticks, 1, ())
    origin = min(ticks)
    ticks = [t - origin for t in ticks]
    start = f"{float(values[ticks.index(0)] * unit):g} s"
    if max(ticks) < _TICK_LIMIT:
        return _Ticks(unit / denominator, ticks, 1, (
            f"{where}: times are counted from the first time ({start}): the absolute times do "
            "not fit 64-bit ticks",))
    factor = 10 ** (len(str(max(ticks) // _TICK_LIMIT)) )
    while max(ticks) // factor >= _TICK_LIMIT:
        factor *= 10
    tick = unit * factor / denominator
    return _Ticks(tick, [t // factor for t in ticks], 2, (
        f"{where}: times are counted from the first time ({start}) and rounded down to "
        f"{float(tick):g} s to fit 64-bit ticks; the resolution is two such steps",))


def _level(cell: str, where: str) -> int:
    if cell not in _LEVELS:
        raise GapforgeError(f"level {cell!r} must be 0, 1, x or z", where)
    return _LEVELS[cell]


def _check_names(names: list[str], present: list[str], where: str) -> None:
    """Every name must be in the file as written; otherwise say which names it has."""
    for name in names:
        if name not in present:
            shown = ", ".join(repr(p) for p in present[:24])
            more = f" and {len(present) - 24} more" if len(present) > 24 else ""
            raise GapforgeError(f"no signal {name[:60]!r} in the capture; the file has {shown}"
                                f"{more}", where)


def _edges(
    rows: list[tuple[int, list[str]]], names: list[str], unit: Fraction, where: str
) -> CsvData:
    times, denominator = _exact_times([(n, cells[0]) for n, cells in rows], where)
    present = sorted({cells[1] for _, cells in rows})
    _check_names(names, present, where)
    out: Signals = {}
    for i in range(1, len(times)):
        if times[i] < times[i - 1]:
            raise GapforgeError("times must not go backwards", f"{where}:{rows[i][0]}")
    fitted = _fit_ticks(times, denominator, unit, where)
    ticks = fitted.ticks
    for name in names:
        sel = [(ticks[i], _level(cells[2], f"{where}:{n}")) for i, (n, cells) in enumerate(rows)
               if cells[1] == name]
        out[name] = (
            np.array([t for t, _ in sel], dtype=np.int64),
            np.array([v for _, v in sel], dtype=np.uint8),
        )
    # resolution: one tick, the finest decimal step of the times as written (two when coarsened)
    return CsvData(fitted.tick, out, ticks[-1], fitted.resolution, fitted.warnings,
                   _tick_origin(fitted))


def _samples(
    rows: list[tuple[int, list[str]]],
    header: list[str],
    header_line: int,
    names: list[str],
    unit: Fraction | None,
    directives: dict[str, str],
    where: str,
) -> CsvData:
    from gapforge.base.quantities import parse_quantity

    first_signal = 1 if unit is not None else 0
    columns = header[first_signal:]
    _check_names(names, columns, f"{where}:{header_line}")
    warnings: tuple[str, ...] = ()
    resolution = 1  # with a sample period: one tick is one sample period
    if unit is not None:
        times, denominator = _exact_times([(n, cells[0]) for n, cells in rows], where)
        for i in range(1, len(times)):
            if times[i] <= times[i - 1]:
                raise GapforgeError("sample times must increase", f"{where}:{rows[i][0]}")
        fitted = _fit_ticks(times, denominator, unit, where)
        ticks, tick, warnings = fitted.ticks, fitted.tick, fitted.warnings
        resolution = fitted.resolution
        origin = _tick_origin(fitted)
    else:
        if "sample_period" in directives:
            tick = parse_quantity(directives["sample_period"], "s", f"{where}: sample_period")
            origin = "one sample period (the file's sample_period)"
        elif "samplerate" in directives or "sample_rate" in directives:
            key = "samplerate" if "samplerate" in directives else "sample_rate"
            rate = parse_quantity(directives[key], "Hz", f"{where}: {key}")
            tick = 1 / rate
            origin = f"one sample period (the file's sample rate, {directives[key]})"
        else:
            raise GapforgeError(
                "sampled levels need a time_<unit> column or a '# sample_period: 10ns' (or "
                "'# samplerate: 16 MHz') line (edge events need the header "
                "time_<unit>,signal,level)",
                f"{where}:{header_line}",
            )
        ticks = list(range(len(rows)))
    out: Signals = {}
    t = np.array(ticks, dtype=np.int64)
    spacing = np.diff(t)  # spacing[k - 1]: from sample k - 1 to sample k
    rounding = resolution - 1  # a coarsened tick adds one tick of rounding
    for name in names:
        col = first_signal + columns.index(name)
        levels = np.array([_level(cells[col], f"{where}:{n}") for n, cells in rows], dtype=np.uint8)
        keep = np.ones(levels.size, dtype=bool)
        keep[1:] = levels[1:] != levels[:-1]
        out[name] = (t[keep], levels[keep])
        changed = np.flatnonzero(keep[1:])  # sample k = changed + 1 shows a new level
        if unit is not None and changed.size:
            # the edge lies somewhere after the sample before: the longest such spacing
            longest = int(spacing[changed].max()) + rounding
            if longest > resolution:
                resolution = longest
                origin = "the longest sample spacing before a change (the file's time column)"
    return CsvData(tick, out, ticks[-1], resolution, warnings, origin)


def _tick_origin(fitted: _Ticks) -> str:
    from gapforge.base.display import format_si

    step = format_si(fitted.tick, "s")
    if fitted.resolution > 1:
        return f"two steps of {step} (times rounded to fit 64-bit ticks)"
    return f"one tick, the finest time step written in the file ({step})"

