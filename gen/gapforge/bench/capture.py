"""Two gate signals in one exact time base, from a VCD file or a CSV file of our own.

In memory a capture is a `GateCapture`: for the high-side and the low-side gate, the change times
as int64 counts of one tick (`tick_s`, an exact Fraction of a second) and the levels after the
polarity is applied (1 = gate on, 0 = off, 2 = unknown x, 3 = high impedance z).

The CSV format is described in `capture_csv`.

Resolution
----------
Every capture carries its resolution: how far a measured gap may be from the true one (less than
this either way). The measurement judges a gap conservatively with it (measure.py).
- sampled CSV: one sample period (`sample_period`); with a time column, the longest spacing
  before any sample where a chosen signal changes (an edge lies somewhere in that spacing);
- edge CSV: one tick, the finest decimal step of the times in the file (as written; writers
  drop trailing zeros, so the finest step is the precision of every row);
- VCD: one tick of the $timescale (the finest time the file can state);
- serial stream: one counter tick (both edges of a gap are latched by the same counter).
A logic analyser may sample more coarsely than its file's time unit: `gapforge measure
--resolution` widens the resolution (it never narrows it).
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from dataclasses import field
from fractions import Fraction
from pathlib import Path

import numpy as np
import numpy.typing as npt

from gapforge.base.errors import GapforgeError
from gapforge.base.records import record
from gapforge.bench.capture_csv import CsvData, read_csv


@record
class GateCapture:
    """Both gate signals, polarity applied (1 = on). Times are int64 ticks of `tick_s` seconds."""

    tick_s: Fraction
    high_times: npt.NDArray[np.int64]
    high_levels: npt.NDArray[np.uint8]
    low_times: npt.NDArray[np.int64]
    low_levels: npt.NDArray[np.uint8]
    end: int
    source: str
    warnings: tuple[str, ...] = field(default=())
    # levels before the first change (2 = unknown); an edge stream implies them
    high_initial: int = 2
    low_initial: int = 2
    resolution_ticks: int = 1  # a measured gap is within this many ticks of the true gap
    lost_events: int = 0  # edges known to be missing (a serial stream's sequence gaps)
    time_unit_assumed: bool = False  # the file states no time unit (a VCD without $timescale)
    # every change is an edge report (a serial stream): a level reported twice means a lost edge;
    # elsewhere (a VCD's vectors and $dumpall, sampled levels) a level may be restated
    edge_events: bool = False
    resolution_origin: str = "one tick"  # where the resolution comes from, in words
    # a coarser resolution the file implies (bench.resolution), (ticks, origin); None: none
    inferred: tuple[int, str] | None = None


# one chunk of change events of both gates in time order: times (ticks), sides (0 = high side,
# 1 = low side) and levels (polarity applied)
Events = tuple[npt.NDArray[np.int64], npt.NDArray[np.uint8], npt.NDArray[np.uint8]]


class UnorderedTimes(Exception):
    """A stream met a timestamp that goes backwards; read it again with `sorted_chunks()`."""


class CaptureStream:
    """Both gate signals as change events in time order, chunk by chunk (constant memory per
    chunk). `end` and `warnings` are final once a pass has been read to the end."""

    def __init__(
        self,
        tick_s: Fraction,
        source: str,
        chunks: Callable[[], Iterator[Events]],
        sorted_chunks: Callable[[], Iterator[Events]],
        finished: Callable[[], tuple[int, tuple[str, ...]]],
        *,
        high_initial: int = 2,
        low_initial: int = 2,
        resolution_ticks: int = 1,
        lost_events: int = 0,
        time_unit_assumed: bool = False,
        position: Callable[[], int] | None = None,
        edge_events: bool = False,
        resolution_origin: str = "one tick",
        inferred: Callable[[], tuple[int, str] | None] | None = None,
    ) -> None:
        if resolution_ticks < 1:
            raise ValueError("resolution_ticks must be at least 1")
        self.time_unit_assumed = time_unit_assumed
        self.edge_events = edge_events
        self.resolution_origin = resolution_origin
        # a coarser resolution the file implies (its stated sample rate, or the common step of
        # its change times), final once a pass has been read to the end
        self.inferred = inferred if inferred is not None else (lambda: None)
        self.position = position  # bytes of the source read so far (None: not a file stream)
        self.tick_s = tick_s
        self.source = source
        self.high_initial = high_initial
        self.low_initial = low_initial
        self.resolution_ticks = resolution_ticks
        self.lost_events = lost_events
        self._chunks = chunks
        self._sorted = sorted_chunks
        self._finished = finished

    def chunks(self) -> Iterator[Events]:
        """Events chunk by chunk; raises UnorderedTimes where a timestamp goes backwards."""
        return self._chunks()

    def sorted_chunks(self) -> Iterator[Events]:
        """Every event ordered by time (stable in file order), read whole."""
        return self._sorted()

    def observed(self, seen: Callable[[int], None]) -> CaptureStream:
        """The same stream, calling `seen(position())` after every chunk (for a progress
        display; the bench itself never draws one)."""
        position = self.position
        if position is None:
            return self

        def watch(source: Callable[[], Iterator[Events]]) -> Callable[[], Iterator[Events]]:
            def run() -> Iterator[Events]:
                for chunk in source():
                    seen(position())
                    yield chunk
                seen(position())
            return run

        return CaptureStream(self.tick_s, self.source, watch(self._chunks), watch(self._sorted),
                             self._finished, high_initial=self.high_initial,
                             low_initial=self.low_initial, resolution_ticks=self.resolution_ticks,
                             lost_events=self.lost_events, time_unit_assumed=self.time_unit_assumed,
                             position=position, edge_events=self.edge_events,
                             resolution_origin=self.resolution_origin, inferred=self.inferred)

    @property
    def end(self) -> int:
        return self._finished()[0]

    @property
    def warnings(self) -> tuple[str, ...]:
        return self._finished()[1]


_WINDOW = 1 << 16  # events per side and chunk when a capture in memory is streamed


def stream_of(capture: GateCapture) -> CaptureStream:
    """A capture held in memory (each side sorted by time) as a stream of time windows, both
    sides merged in each (the high side first at equal times)."""

    def windows() -> Iterator[Events]:
        ht, lt = capture.high_times, capture.low_times
        h0 = l0 = 0
        while h0 < ht.size or l0 < lt.size:
            # up to the time of the window-th next change of either side, every change at it
            ends = [int(t[i + _WINDOW]) for t, i in ((ht, h0), (lt, l0)) if i + _WINDOW < t.size]
            if ends:
                h1 = int(np.searchsorted(ht, min(ends), side="right"))
                l1 = int(np.searchsorted(lt, min(ends), side="right"))
            else:
                h1, l1 = ht.size, lt.size
            yield _merge(ht[h0:h1], capture.high_levels[h0:h1], lt[l0:l1],
                         capture.low_levels[l0:l1])
            h0, l0 = h1, l1

    return CaptureStream(capture.tick_s, capture.source, windows, windows,
                         lambda: (capture.end, capture.warnings),
                         high_initial=capture.high_initial, low_initial=capture.low_initial,
                         resolution_ticks=capture.resolution_ticks,
                         lost_events=capture.lost_events,
                         time_unit_assumed=capture.time_unit_assumed,
                         edge_events=capture.edge_events,
                         resolution_origin=capture.resolution_origin,
                         inferred=lambda: capture.inferred)


def _merge(
    ht: npt.NDArray[np.int64], hv: npt.NDArray[np.uint8], lt: npt.NDArray[np.int64],
    lv: npt.NDArray[np.uint8],
) -> Events:
    times = np.concatenate([ht, lt])
    order = np.argsort(times, kind="stable")  # two sorted runs: one merge
    sides = np.concatenate([np.zeros(ht.size, dtype=np.uint8), np.ones(lt.size, dtype=np.uint8)])
    return times[order], sides[order], np.concatenate([hv, lv])[order]


_INVERT = np.array([1, 0, 2, 3], dtype=np.uint8)


def open_capture(
    path: Path,
    high: str,
    low: str,
    *,
    active_low_high: bool = False,
    active_low_low: bool = False,
    chunk_bytes: int | None = None,
    timescale: Fraction | None = None,
) -> CaptureStream:
    """Open a .vcd or .csv capture as a stream: a VCD body is read chunk by chunk when the
    stream is iterated (the header and the signal names are checked now); a CSV is read whole.
    `timescale` states a VCD's time unit when the file has no $timescale."""
    if _kind(path) != "vcd":
        return stream_of(load_capture(path, high, low, active_low_high=active_low_high,
                                      active_low_low=active_low_low, timescale=timescale))
    from gapforge.bench.vcd import CHUNK_BYTES, open_events
    from gapforge.bench.vcd import UnorderedTimes as VcdUnordered

    if high == low:
        raise GapforgeError("--high and --low name the same signal", str(path))
    events = open_events(path, high, low, chunk_bytes=chunk_bytes or CHUNK_BYTES,
                         timescale=timescale)

    def polarity(chunk: Events) -> Events:
        times, sides, levels = chunk
        if active_low_high and active_low_low:
            levels = _INVERT[levels]
        elif active_low_high or active_low_low:
            levels = np.where(sides == (0 if active_low_high else 1), _INVERT[levels], levels)
        return times, sides, levels

    from gapforge.base.display import format_si
    from gapforge.bench.resolution import StepWatch

    watch = StepWatch()

    def ordered() -> Iterator[Events]:
        watch.reset()  # a new pass
        try:
            for chunk in events.chunks():
                watch.see(chunk[0])
                yield polarity(chunk)
        except VcdUnordered as exc:
            raise UnorderedTimes(str(exc)) from None

    def whole() -> Iterator[Events]:
        watch.reset()
        for chunk in events.sorted_chunks():
            watch.see(chunk[0])
            yield polarity(chunk)

    unit = format_si(events.timescale_s, "s")
    # resolution: one tick of the $timescale, or the sample period the file implies
    return CaptureStream(events.timescale_s, str(path), ordered, whole,
                         lambda: (events.end_time, events.warnings), resolution_ticks=1,
                         time_unit_assumed=events.timescale_assumed,
                         position=lambda: events.bytes_read,
                         resolution_origin=f"one tick of the file's $timescale ({unit})",
                         inferred=lambda: watch.inferred(events.header.sample_rate_hz,
                                                         events.timescale_s, unit))


def invert(levels: npt.NDArray[np.uint8]) -> npt.NDArray[np.uint8]:
    """Active-low: 0 <-> 1; x and z stay."""
    out = levels.copy()
    out[levels == 0] = 1
    out[levels == 1] = 0
    return out


def make_capture(
    tick_s: Fraction,
    high: tuple[npt.NDArray[np.int64], npt.NDArray[np.uint8]],
    low: tuple[npt.NDArray[np.int64], npt.NDArray[np.uint8]],
    *,
    end: int | None = None,
    source: str = "",
    active_low_high: bool = False,
    active_low_low: bool = False,
    warnings: tuple[str, ...] = (),
    edges_only: bool = False,
    resolution_ticks: int = 1,
    lost_events: int = 0,
    time_unit_assumed: bool = False,
    resolution_origin: str = "one tick",
) -> GateCapture:
    """Build a capture from raw levels (as recorded), applying the polarity options.

    `edges_only`: every change is an edge, so each signal's level before its first change is
    the opposite of that change (a stream of edge reports), and a level reported twice means an
    edge in between was lost. `resolution_ticks`: a measured gap
    is within this many ticks of the true one (1 = one tick)."""
    if resolution_ticks < 1:
        raise ValueError("resolution_ticks must be at least 1")
    ht, hv = np.asarray(high[0], dtype=np.int64), np.asarray(high[1], dtype=np.uint8)
    lt, lv = np.asarray(low[0], dtype=np.int64), np.asarray(low[1], dtype=np.uint8)
    if active_low_high:
        hv = invert(hv)
    if active_low_low:
        lv = invert(lv)
    last = max(int(ht[-1]) if ht.size else 0, int(lt[-1]) if lt.size else 0)
    hi0 = int(1 - hv[0]) if edges_only and hv.size and hv[0] <= 1 else 2
    lo0 = int(1 - lv[0]) if edges_only and lv.size and lv[0] <= 1 else 2
    return GateCapture(tick_s, ht, hv, lt, lv, max(last, end or 0), source, warnings, hi0, lo0,
                       resolution_ticks, lost_events, time_unit_assumed, edge_events=edges_only,
                       resolution_origin=resolution_origin)


def load_capture(
    path: Path,
    high: str,
    low: str,
    *,
    active_low_high: bool = False,
    active_low_low: bool = False,
    timescale: Fraction | None = None,
) -> GateCapture:
    """Read a .vcd or .csv capture (by suffix; otherwise by the first bytes)."""
    kind = _kind(path)
    if kind == "vcd":
        from gapforge.bench.vcd import read_vcd

        if high == low:
            raise GapforgeError("--high and --low name the same signal", str(path))
        from dataclasses import replace

        from gapforge.base.display import format_si
        from gapforge.bench.resolution import StepWatch
        data = read_vcd(path, [high, low], timescale=timescale)
        h, lo = data.signals[high], data.signals[low]
        watch = StepWatch()
        watch.see(np.sort(np.concatenate([h.times, lo.times])))
        unit = format_si(data.timescale_s, "s")
        return replace(make_capture(
            data.timescale_s,
            (h.times, h.values),
            (lo.times, lo.values),
            end=data.end_time,
            source=str(path),
            active_low_high=active_low_high,
            active_low_low=active_low_low,
            warnings=data.warnings,
            time_unit_assumed=data.timescale_assumed,
            resolution_origin=f"one tick of the file's $timescale ({unit})",
        ), inferred=watch.inferred(data.sample_rate_hz, data.timescale_s, unit))
    if timescale is not None:
        raise GapforgeError("--timescale applies to VCD files only (a CSV names its unit in the "
                            "time column)", str(path))
    csv = read_csv(path, [high, low])
    return make_capture(
        csv.tick_s,
        csv.signals[high],
        csv.signals[low],
        end=csv.end,
        source=str(path),
        active_low_high=active_low_high,
        active_low_low=active_low_low,
        resolution_ticks=csv.resolution_ticks,
        warnings=csv.warnings,
        resolution_origin=csv.resolution_origin,
    )


# an FST waveform (a simulator's binary trace format) begins with its header block: type 0,
# then the block length 329 as 8 bytes big-endian (as verilator --trace-fst writes it)
_FST_START = b"\x00" + (329).to_bytes(8, "big")


_VCD_WORDS = (b"$date", b"$version", b"$timescale", b"$scope", b"$var", b"$comment")


def vcd_named_csv(path: Path) -> None:
    """Refuse a VCD saved under a .csv name (read as CSV it would fail on its first line with a
    message about columns): one line that says what the file is."""
    try:
        with path.open("rb") as handle:
            start = handle.read(256).lstrip(b"\xef\xbb\xbf \t\r\n")
    except OSError:
        return  # the reader says why it cannot read the file
    word = next((w for w in _VCD_WORDS if start.startswith(w)), None)
    if word is not None:
        named = path.suffix or "without a suffix"  # review rev3b: a .txt was said to be .csv
        raise GapforgeError(f"a VCD file (it begins with {word.decode()}) named {named}: rename "
                            "it .vcd", str(path))


def _kind(path: Path) -> str:
    try:
        with path.open("rb") as handle:
            head = handle.read(256)
    except OSError as exc:
        raise GapforgeError(f"cannot read: {exc.strerror}", str(path)) from None
    if head.startswith(_FST_START):
        raise GapforgeError("an FST waveform (binary), not a VCD: have the simulator write VCD "
                            "text (e.g. verilator --trace instead of --trace-fst)", str(path))
    suffix = path.suffix.lower()
    if suffix == ".vcd":
        return "vcd"
    if suffix == ".csv":
        vcd_named_csv(path)
        return "csv"
    return "vcd" if looks_like_vcd(head) else "csv"


def looks_like_vcd(head: bytes) -> bool:
    """The first bytes of a VCD, or of one with another tool's line (or a byte order mark) in
    front: the VCD reader then says what it found."""
    start = head.lstrip(b"\xef\xbb\xbf \t\r\n")
    return start.startswith(b"$") or any(word in start for word in _VCD_WORDS[:5])


__all__ = ["CaptureStream", "CsvData", "Events", "GateCapture", "UnorderedTimes", "invert",
           "load_capture", "make_capture", "open_capture", "read_csv", "stream_of"]
