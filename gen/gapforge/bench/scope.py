"""Analog (volts) captures: gate-source voltages -> gate on/off instants -> the gap engine.

A gate is on above its threshold (`--threshold`, or `--threshold-high`/`--threshold-low` per
gate; there is no default: half a gate's swing is far from its threshold on a bipolar drive).
With a hysteresis H a gate changes state only when it goes above threshold + H/2 (on) or below
threshold - H/2 (off); the instant of that change is the LAST crossing of the threshold itself
before it (the reference-level instant of IEEE 181: linear interpolation between the two
samples around the crossing), so ringing that stays inside the band makes no extra edge and does
not move the instant. With H = 0 a sample exactly at the threshold keeps the state. The level at
the start of the capture is read against the threshold itself (the band only guards changes). `--level`
asks for a reference level between the two state levels found by the histogram method of
IEEE 181 (the mode of the lower and of the upper half of the channel's range).

Each channel is read on its own time axis (one file per channel, or several channels in one
file): crossings are found per channel, chunk by chunk (`scope_csv.blocks`, bounded memory),
with the state, the last sample and the last crossing instants carried across chunks. A
probe's deskew (its extra delay) is subtracted from its channel's instants. The instants become
integer ticks of 1 fs (rounded to the nearest; the sample interval is at least a thousand times
coarser) and feed the same gap engine as logic captures (`measure.measure_capture`).

Resolution: the sample interval (an instant interpolated inside a sample interval may still be
off by less than one interval when the edge is not straight), unless the user states another
(`--resolution`). Precisely: the longest interval around a threshold crossing that made an edge,
which is the sample interval of an evenly sampled capture and, for unevenly spaced samples (a
circuit simulator's own steps), the coarsest step where an instant was taken. Unevenly spaced
samples (the longest interval more than 5 % above the shortest, beyond print rounding) are
reported.

The switch node (`--node NAME --bus 400V`): at every gate turn-on, the node voltage interpolated
at the turn-on instant, as a share of the bus. A high-side turn-on is soft when the node is
within the stated share of the bus rail (share >= 1 - within), a low-side turn-on when it is
within it of the zero rail (share <= within); otherwise hard (common practice: a zero-voltage
turn-on finds the node already at the rail the switch connects it to).
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path

import numpy as np
import numpy.typing as npt

from gapforge.base.errors import GapforgeError, quoted
from gapforge.base.records import record
from gapforge.bench.capture import CaptureStream, stream_of
from gapforge.bench.scope_csv import Block, ScopeFile, blocks, read_layout

TICK_S = Fraction(1, 10**15)  # instants are held as integer femtoseconds
_TICKS_PER_S = 1e15
_MAX_ABS_S = 4.0e3  # |time| up to this fits int64 femtoseconds with room for differences
UNEVEN = 1.05  # longest / shortest sample interval above this: "unevenly spaced"
SIDES = ("high", "low")

Floats = npt.NDArray[np.float64]


@record
class Reference:
    """How one gate's on/off is decided: a threshold in volts, or a percentage reference level
    between the histogram state levels (resolved to volts before the crossings are found)."""

    threshold_v: Fraction | None = None
    level_percent: Fraction | None = None


@record
class ScopeSettings:
    high: Reference
    low: Reference
    hysteresis_v: Fraction = Fraction(0)
    deskew_high_s: Fraction = Fraction(0)
    deskew_low_s: Fraction = Fraction(0)
    resolution_s: Fraction | None = None  # None: the sample interval


@record
class Channel:
    """A channel located: its file layout and its column index."""

    label: str  # as the user named it
    layout: ScopeFile
    index: int

    @property
    def where(self) -> str:
        return f"{self.layout.where} column {quoted(self.layout.columns[self.index].name)}"


@dataclass
class ChannelEdges:
    """One gate's instants (seconds, deskew not yet applied) and levels after them."""

    times: Floats
    levels: npt.NDArray[np.uint8]
    threshold_v: float
    state_levels_v: tuple[float, float] | None  # (low, high) with --level
    min_interval_s: float
    max_interval_s: float
    crossing_interval_s: float  # the longest sample interval around a crossing that made an edge
    samples: int
    first_s: float
    last_s: float


@record
class NodeEdge:
    """The node at each turn-on of one edge (to_high: high side turning on)."""

    shares: Floats  # node / bus at each turn-on instant measured (NaN outside the node capture)
    hard: int

    @property
    def count(self) -> int:
        return int(np.count_nonzero(~np.isnan(self.shares)))


@record
class NodeResult:
    name: str
    bus_v: Fraction
    within: Fraction
    edges: dict[str, NodeEdge]


@record
class ScopeCapture:
    """What the analog reading hands on: the stream for the gap engine and what it used."""

    stream: CaptureStream
    settings: ScopeSettings
    high: ChannelEdges
    low: ChannelEdges
    channels: dict[str, Channel]
    resolution_s: Fraction
    resolution_stated: bool
    warnings: tuple[str, ...] = field(default=())

    def threshold_v(self, side: str) -> float:
        return (self.high if side == "high" else self.low).threshold_v


def locate(files: list[Path], name: str, option: str) -> Channel:
    """A channel by its column name, `FILE-STEM:COLUMN`, or a file's stem when that file holds
    one channel."""
    layouts = [read_layout(p) for p in files]
    found: list[Channel] = []
    stem, _, column = name.rpartition(":")
    for lay in layouts:
        names = [c.name for c in lay.columns]
        raws = [c.raw for c in lay.columns]
        if stem and lay.path.stem == stem and (column in names or column in raws):
            found.append(Channel(name, lay, (names if column in names else raws).index(column)))
        elif not stem and (name in names or name in raws):
            found.append(Channel(name, lay, (names if name in names else raws).index(name)))
        elif not stem and lay.path.stem == name and len(names) == 1:
            found.append(Channel(name, lay, 0))
    if len(found) > 1:
        raise GapforgeError(f"{quoted(name)} names a column in several files; write "
                            "FILE-STEM:COLUMN", option)
    if not found:
        present = [f"{lay.path.stem}:{c.name}" for lay in layouts for c in lay.columns]
        raise GapforgeError(f"no channel {quoted(name)} in the capture; it has "
                            f"{', '.join(present[:12])}", option)
    chan = found[0]
    if chan.layout.columns[chan.index].to_volts is None:
        raise GapforgeError(f"channel {quoted(name)} is in {quoted(chan.layout.columns[chan.index].unit)}"
                            ", not volts", option)
    return chan


def _samples(chan: Channel) -> Iterator[tuple[Block, Floats]]:
    for block in blocks(chan.layout, [chan.index]):
        yield block, block.values[:, 0]


_Found = tuple[npt.NDArray[np.intp], Floats, Floats]


@dataclass
class _Crossings:
    """The streaming state machine of one gate (module docstring)."""

    threshold: float
    upper: float
    lower: float
    where: str
    state: int = 0  # 0 unknown (no sample off the threshold yet), 1 on, -1 off
    last_t: float | None = None
    last_v: float = 0.0
    # the latest threshold crossings seen: (instant, the sample interval around it)
    last_up: tuple[float, float] | None = None
    last_down: tuple[float, float] | None = None
    crossing_dt: float = 0.0  # the longest sample interval around a crossing that made an edge
    min_dt: float = math.inf
    max_dt: float = 0.0
    samples: int = 0
    first_t: float | None = None
    times: list[Floats] = field(default_factory=list)
    levels: list[npt.NDArray[np.uint8]] = field(default_factory=list)

    def feed(self, block: Block, v: Floats) -> None:
        t = block.times
        if t.size == 0:
            return
        self._check_times(block, t)
        if self.last_t is not None:
            t = np.concatenate((np.array([self.last_t]), t))
            v = np.concatenate((np.array([self.last_v]), v))
        if self.state == 0 and not self._first_level(t, v):
            self.last_t, self.last_v = float(t[-1]), float(v[-1])
            return
        decided = np.zeros(v.size, dtype=np.int8)
        decided[v > self.upper] = 1
        decided[v < self.lower] = -1
        at = np.flatnonzero(decided)
        crossings = self._instants(t, v)
        if at.size:
            now = decided[at]
            before = np.empty_like(now)
            before[0] = self.state
            before[1:] = now[:-1]
            change = at[now != before]
            to = decided[change]
            out_t = np.empty(change.size)
            for direction, found, last in zip((1, -1), crossings, (self.last_up, self.last_down),
                                              strict=True):
                sel = to == direction
                idx = np.searchsorted(found[0], change[sel], side="right") - 1
                here = idx >= 0
                inst = np.full(idx.size, np.nan if last is None else last[0])
                spans = np.full(idx.size, 0.0 if last is None else last[1])
                inst[here] = found[1][idx[here]]
                spans[here] = found[2][idx[here]]
                out_t[sel] = inst
                if spans.size:  # the interval around each crossing used
                    self.crossing_dt = max(self.crossing_dt, float(spans.max()))
            self.times.append(out_t)
            self.levels.append(np.where(to > 0, 1, 0).astype(np.uint8))
            self.state = int(now[-1])
        ups, downs = crossings
        if ups[1].size:
            self.last_up = (float(ups[1][-1]), float(ups[2][-1]))
        if downs[1].size:
            self.last_down = (float(downs[1][-1]), float(downs[2][-1]))
        self.last_t, self.last_v = float(t[-1]), float(v[-1])

    def _first_level(self, t: Floats, v: Floats) -> bool:
        """The level before any state change is read against the threshold itself (a gate is
        on above it): an event at the first sample off the threshold. False: none yet."""
        off_threshold = np.flatnonzero(v != self.threshold)
        if off_threshold.size == 0:
            return False
        k = int(off_threshold[0])
        self.state = 1 if v[k] > self.threshold else -1
        self.times.append(np.array([t[k]]))
        self.levels.append(np.array([1 if self.state > 0 else 0], dtype=np.uint8))
        return True

    def _check_times(self, block: Block, t: Floats) -> None:
        if self.first_t is None:
            self.first_t = float(t[0])
        if float(np.abs(t[[0, -1]]).max()) > _MAX_ABS_S:
            raise GapforgeError(f"times beyond {_MAX_ABS_S:g} s are not supported",
                                block_where(self.where, block, 0))
        carried = self.last_t is not None
        dt = np.diff(np.concatenate((np.array([self.last_t or 0.0]), t)) if carried else t)
        if dt.size:
            bad = dt <= 0
            if bad.any():
                row = int(np.argmax(bad)) + (0 if carried else 1)  # the row whose time fell
                raise GapforgeError("sample times must increase", block_where(self.where, block,
                                                                              row))
            self.min_dt = min(self.min_dt, float(dt.min()))
            self.max_dt = max(self.max_dt, float(dt.max()))
        self.samples += t.size

    def _instants(self, t: Floats, v: Floats) -> tuple[_Found, _Found]:
        """Every upward and downward crossing of the threshold: (sample index after, instant,
        the sample interval around it)."""
        th = self.threshold
        a, b = v[:-1], v[1:]
        out = []
        for hits in ((a <= th) & (b > th), (a >= th) & (b < th)):
            k = np.flatnonzero(hits)
            span = t[k + 1] - t[k]
            out.append((k + 1, t[k] + (th - a[k]) / (b[k] - a[k]) * span, span))
        return out[0], out[1]

    def result(self, levels_v: tuple[float, float] | None) -> ChannelEdges:
        times = np.concatenate(self.times) if self.times else np.zeros(0)
        levels = np.concatenate(self.levels) if self.levels else np.zeros(0, dtype=np.uint8)
        return ChannelEdges(times, levels, self.threshold, levels_v,
                            self.min_dt if self.samples > 1 else 0.0, self.max_dt,
                            self.crossing_dt, self.samples,
                            self.first_t or 0.0, self.last_t or 0.0)


def block_where(where: str, block: Block, row: int) -> str:
    """'file:line' of a block's row (`where` is a channel's 'file column NAME')."""
    return f"{where.partition(' column ')[0]}:{block.line_of(row)}"


def state_levels(chan: Channel, bins: int = 1000) -> tuple[float, float]:
    """IEEE 181 histogram method: the modes of the lower and the upper half of the range."""
    low, high = math.inf, -math.inf
    for _, v in _samples(chan):
        if v.size:
            low, high = min(low, float(v.min())), max(high, float(v.max()))
    if not high > low:
        raise GapforgeError("the channel never changes: no state levels", chan.where)
    counts = np.zeros(bins, dtype=np.int64)
    for _, v in _samples(chan):
        counts += np.histogram(v, bins=bins, range=(low, high))[0]
    centres = low + (np.arange(bins) + 0.5) * (high - low) / bins
    half = bins // 2
    return (float(centres[int(np.argmax(counts[:half]))]),
            float(centres[half + int(np.argmax(counts[half:]))]))


def _machine(chan: Channel, ref: Reference, hysteresis: float) -> tuple[_Crossings,
                                                                        tuple[float, float] | None]:
    levels = None
    if ref.threshold_v is not None:
        th = float(ref.threshold_v)
    else:
        assert ref.level_percent is not None
        levels = state_levels(chan)
        th = levels[0] + float(ref.level_percent) / 100 * (levels[1] - levels[0])
    return _Crossings(th, th + hysteresis / 2, th - hysteresis / 2, chan.where), levels


def _edges(chans: dict[str, Channel], settings: ScopeSettings) -> dict[str, ChannelEdges]:
    """Both gates' edges; channels that share a file are read in one pass."""
    hyst = float(settings.hysteresis_v)
    made = {side: _machine(chans[side], getattr(settings, side), hyst) for side in SIDES}
    files: dict[Path, list[str]] = {}
    for side in SIDES:
        files.setdefault(chans[side].layout.path, []).append(side)
    for sides in files.values():
        layout = chans[sides[0]].layout
        for block in blocks(layout, [chans[side].index for side in sides]):
            for j, side in enumerate(sides):
                made[side][0].feed(block, block.values[:, j])
    for side in SIDES:
        if made[side][0].samples < 2:
            raise GapforgeError("fewer than two samples", chans[side].where)
    return {side: made[side][0].result(made[side][1]) for side in SIDES}


def read_scope(files: list[Path], high: str, low: str, settings: ScopeSettings) -> ScopeCapture:
    """Both gates' instants from the files, as a capture stream for the gap engine."""
    if settings.hysteresis_v < 0:
        raise GapforgeError("the hysteresis must not be negative", "--hysteresis")
    chans = {"high": locate(files, high, "--high"), "low": locate(files, low, "--low")}
    if (chans["high"].layout.path == chans["low"].layout.path
            and chans["high"].index == chans["low"].index):
        raise GapforgeError("--high and --low name the same channel", "--low")
    got = _edges(chans, settings)
    warnings = []
    for side in SIDES:
        e = got[side]
        if e.max_interval_s > UNEVEN * e.min_interval_s:
            warnings.append(f"{chans[side].layout.where}: samples are unevenly spaced "
                            f"({e.min_interval_s:.4g} s to {e.max_interval_s:.4g} s): the "
                            "resolution is the longest interval around a crossing")
    # the instants' uncertainty: the longest interval around a crossing that made an edge (the
    # sample interval of an evenly sampled capture); without such crossings, the longest one
    spacing = max(got["high"].crossing_interval_s, got["low"].crossing_interval_s) or max(
        got["high"].max_interval_s, got["low"].max_interval_s)
    stated = settings.resolution_s is not None
    if settings.resolution_s is not None:
        if settings.resolution_s <= 0:
            raise GapforgeError("the resolution must be above zero", "--resolution")
        resolution = settings.resolution_s
    else:
        # the interval as printed (nine significant digits: float noise of the differences
        # of printed times is far below), then whole femtoseconds rounded up
        resolution = Fraction(f"{spacing:.9g}")
    res_ticks = max(1, math.ceil(resolution / TICK_S))
    ticks = {side: _ticks(got[side].times, getattr(settings, f"deskew_{side}_s")) for side in SIDES}
    end = max(_tick(got["high"].last_s), _tick(got["low"].last_s))
    from gapforge.bench.capture import GateCapture

    gate = GateCapture(TICK_S, ticks["high"], got["high"].levels, ticks["low"], got["low"].levels,
                       end, ", ".join(sorted({str(c.layout.path) for c in chans.values()})),
                       tuple(warnings), 2, 2, res_ticks,
                       resolution_origin="--resolution" if stated
                       else "the sample interval around the crossings")
    return ScopeCapture(stream_of(gate), settings, got["high"], got["low"], chans,
                        TICK_S * res_ticks, stated, tuple(warnings))


def _tick(t: float) -> int:
    return round(t * _TICKS_PER_S)


def _ticks(times: Floats, deskew: Fraction) -> npt.NDArray[np.int64]:
    if np.isnan(times).any():
        raise GapforgeError("a state change without a threshold crossing (report this)",
                            "capture")
    # a deskew is one constant shift per channel: the channel's order stays
    return np.rint(times * _TICKS_PER_S).astype(np.int64) - round(deskew / TICK_S)


def turn_ons_s(edges: ChannelEdges, deskew: Fraction) -> Floats:
    """Instants (s, deskewed) where this gate turned on (not the first known level)."""
    on = np.flatnonzero(edges.levels == 1)
    on = on[on > 0]
    return edges.times[on] - float(deskew)


def node_shares(files: list[Path], name: str, bus_v: Fraction, within: Fraction,
                cap: ScopeCapture) -> NodeResult:
    """The node voltage at every turn-on as a share of the bus (module docstring)."""
    if bus_v <= 0:
        raise GapforgeError("the bus voltage must be above zero", "--bus")
    if not 0 <= within < 1:
        raise GapforgeError("the share must be at least 0 % and below 100 %", "--soft-within")
    chan = locate(files, name, "--node")
    at = {"to_high": turn_ons_s(cap.high, cap.settings.deskew_high_s),
          "to_low": turn_ons_s(cap.low, cap.settings.deskew_low_s)}
    values = {edge: np.full(t.size, np.nan) for edge, t in at.items()}
    last: tuple[float, float] | None = None
    for block, v in _samples(chan):
        t = block.times
        if last is not None:
            t = np.concatenate((np.array([last[0]]), t))
            v = np.concatenate((np.array([last[1]]), v))
        fell = np.flatnonzero(np.diff(t) <= 0)
        if fell.size:
            row = int(fell[0]) + (0 if last is not None else 1)
            raise GapforgeError("sample times must increase", block_where(chan.where, block, row))
        for edge, inst in at.items():
            lo = int(np.searchsorted(inst, t[0], side="left"))
            hi = int(np.searchsorted(inst, t[-1], side="right"))
            if hi > lo:
                values[edge][lo:hi] = np.interp(inst[lo:hi], t, v)
        last = (float(t[-1]), float(v[-1]))
    bus = float(bus_v)
    out = {}
    for edge, vals in values.items():
        shares = vals / bus
        known = shares[~np.isnan(shares)]
        if edge == "to_high":
            hard = int(np.count_nonzero(known < 1 - float(within)))
        else:
            hard = int(np.count_nonzero(known > float(within)))
        out[edge] = NodeEdge(shares, hard)
    return NodeResult(name, bus_v, within, out)


def trace(chan: Channel, start_s: float, stop_s: float, limit: int = 4000) -> tuple[Floats, Floats]:
    """The samples of one channel between two times (for a figure), at most `limit` of them
    (evenly thinned, keeping each stretch's minimum and maximum would hide nothing faster than
    the thinning; the figure says how many samples it shows)."""
    ts: list[Floats] = []
    vs: list[Floats] = []
    for block, v in _samples(chan):
        t = block.times
        if t[-1] < start_s:
            continue
        if t[0] > stop_s:
            break
        sel = (t >= start_s) & (t <= stop_s)
        ts.append(t[sel])
        vs.append(v[sel])
    t_all = np.concatenate(ts) if ts else np.zeros(0)
    v_all = np.concatenate(vs) if vs else np.zeros(0)
    if t_all.size > limit:
        step = math.ceil(t_all.size / limit)
        t_all, v_all = t_all[::step], v_all[::step]
    return t_all, v_all
