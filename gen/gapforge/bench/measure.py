"""Dead times, overlaps, glitches and missing edges measured in a two-gate capture.

Every time is an integer count of capture ticks; the tick length is an exact Fraction, so a gap
is compared with a window limit exactly. Floats appear only in statistics and plotting arrays.

Transitions are read from the joint state of the two gates (high side, low side) at each change
(several changes at one time stamp are simultaneous: the state after all of them counts):
- `to_high`: low side turns off, both are off (the dead time), high side turns on. The gap is the
  time both are off; 0 if one turns off as the other turns on; negative (minus the overlap
  duration) if the high side turns on before the low side is off. The gap always ends at the
  first on-edge, even the on-edge of a glitch: a glitch never lengthens a gap.
- `to_low`: the same from high side on to low side on.
- an overlap is any interval with both gates on (shoot-through), reported with its start time.
- a possible overlap is any interval where one gate is unknown (x or z) while the other is on or
  also unknown: it may be a shoot-through, so it fails like one. The one exception is the
  capture's start while both gates are still unknown (a simulator's $dumpvars x before any
  level is known): nothing is observed yet, as if the capture started later (noted).
- a glitch is a pulse on one gate shorter than the set width (`--glitch`; a pulse of zero width,
  two changes at one time stamp, always is one). Glitches are listed; they stay in the
  measurement (every gap and overlap is measured on the signals as captured). An on-pulse
  glitch fails the verdict when a window is set (inside a dead time it ends the dead time early
  and then leaves both gates off again). A missing-edge finding that a glitch explains (a gate
  on for a glitch and off again, or off for a glitch and on again) is not listed.
- a missing edge: a dead time that ends with the same gate turning on again (the other gate never
  turned on), in a stream of edge reports (the serial stream) a level reported twice in a row
  (an edge between them was lost), or an edge the capture itself reports lost (a serial
  stream's sequence gap). A VCD restates levels (a vector is written whole when any of its
  bits changes, `$dumpall` writes every value again) and a sampled CSV repeats them: a
  restated level is no evidence of a lost edge there and changes nothing. With a window set, a capture
  with missing edges, or with an unknown level after the first known levels (a dead time
  through x/z cannot be measured), cannot prove the dead time: the verdict is "inconclusive"
  (exit 1) unless something fails outright.

Judgement with the capture's resolution r (ticks; capture.py): a measured gap g may be off by
less than r either way, so it passes a window minimum only if g - r >= min and a maximum only if
g + r <= max (exact integers), and a transition with g < r has no proven dead time at all.

The measurement is one incremental engine (`measure_engine`) over the events of both gates in
time order, fed chunk by chunk, so a chunk boundary never changes a result. It keeps every gap
(int32 ticks where they fit, `measure_stats`) but time stamps only for the worst instances and
the (possible) overlaps. The values returned are in `measure_model`. `measure_capture` runs the
engine, then judges in named steps: each edge against its window (`_judge_edges`), the
findings that fail or leave the capture inconclusive (`_findings`), and the verdict.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import ceil_fraction, floor_fraction
from gapforge.bench.capture import CaptureStream, Events, GateCapture, UnorderedTimes, stream_of
from gapforge.bench.measure_engine import Engine
from gapforge.bench.measure_model import (
    DEFAULT_PERCENTILES,
    EDGES,
    EdgeStats,
    Finding,
    Glitch,
    Instance,
    Limits,
    Measurement,
    Overlap,
    Overlaps,
)
from gapforge.bench.measure_stats import GapStore as _GapStore
from gapforge.bench.measure_stats import edge_stats

__all__ = ["DEFAULT_PERCENTILES", "EDGES", "EdgeStats", "Finding", "Glitch", "Instance", "Limits",
           "Measurement", "Overlap", "Overlaps", "measure_capture"]
_ = _GapStore  # the block size is patched through this module in tests


def measure_capture(
    capture: GateCapture | CaptureStream,
    *,
    limits: Mapping[str, Limits] | None = None,
    glitch_width_s: Fraction = Fraction(0),
    percentiles: Sequence[float] = DEFAULT_PERCENTILES,
    bins: int = 20,
    worst: int = 5,
    resolution_s: Fraction | None = None,
    limits_source: str = "",
    unjudged: str = "",
) -> Measurement:
    """Measure every dead time, overlap, glitch and missing edge; judge against `limits`.

    A CaptureStream (capture.open_capture) is measured chunk by chunk: only the gaps (int32
    where they fit), the overlaps and the worst instances are kept, not the edges.
    `resolution_s` widens the capture's own resolution (a coarser instrument); it is rounded
    up to whole ticks and never narrows it. `unjudged` (why the limits prove nothing, e.g. a
    design without a power stage) turns an ok into inconclusive (issue 19 item 2)."""
    stream = capture if isinstance(capture, CaptureStream) else stream_of(capture)
    tick = stream.tick_s
    for p in percentiles:
        if not 0 <= p <= 100:
            raise GapforgeError(f"percentile {p} must be between 0 and 100", "--percentiles")
    if resolution_s is not None and resolution_s <= 0:
        raise GapforgeError("the resolution must be above zero", "--resolution")
    width = ceil_fraction(glitch_width_s / tick) if glitch_width_s > 0 else 0
    try:
        raw = _run(stream, stream.chunks(), worst, width)
    except UnorderedTimes:
        raw = _run(stream, stream.sorted_chunks(), worst, width)
    resolution, origin = _resolution(stream, resolution_s)
    _require_transitions(raw, stream.source or "capture")
    limits = dict(limits or {})
    has_window = any(
        lim.window_min_s is not None or lim.window_max_s is not None for lim in limits.values()
    )
    judged = _judge_edges(raw, limits, tick, resolution, percentiles, bins)
    found = _findings(raw, stream, has_window)
    if unjudged:
        found.inconclusive.insert(0, unjudged)
    reasons = found.fail + judged.reasons
    if found.glitch_fail:
        reasons.append(found.glitch_fail)
    if reasons:
        verdict = "fail"
    elif found.inconclusive:
        verdict = "inconclusive"
    else:
        verdict = "ok"
    start = raw.first_time if raw.first_time is not None else 0
    return Measurement(
        source=stream.source,
        tick_s=tick,
        duration_s=tick * (raw.end - start),
        to_high=judged.stats["to_high"],
        to_low=judged.stats["to_low"],
        overlaps=found.overlaps,
        glitches=tuple(sorted(raw.glitch.glitches, key=lambda g: (g.at_s, g.signal))),
        missing_edges=tuple(sorted(raw.repeats + raw.lost, key=lambda f: f.at_s)),
        unknown_intervals=max(found.unknown, 0),
        limits=limits,
        verdict=verdict,
        reasons=tuple(reasons + found.inconclusive),
        notes=tuple(judged.notes + found.notes),
        warnings=stream.warnings,
        mean_period_s=raw.record.mean_period(tick),
        resolution_s=tick * resolution,
        resolution_origin=origin,
        limits_source=limits_source,
        possible_overlaps=found.possible,
        glitch_count=raw.glitch.total,
        missing_edge_count=found.missing_count,
        window_judged=has_window,
    )


def _resolution(stream: CaptureStream, resolution_s: Fraction | None) -> tuple[int, str]:
    """The resolution in ticks and where it comes from (read after a pass): the capture's own
    floor, the coarser one its file implies (a stated sample rate, the common step of its
    change times), or `resolution_s` instead of the implied one (never below the floor)."""
    floor, origin = stream.resolution_ticks, stream.resolution_origin
    if resolution_s is not None:
        given = ceil_fraction(resolution_s / stream.tick_s)  # up: safe
        if given >= floor:
            return given, "--resolution"
        return floor, f"{origin} (--resolution is finer than the capture can state)"
    inferred = stream.inferred()
    if inferred is not None and inferred[0] > floor:
        return inferred
    return floor, origin


def _require_transitions(raw: Engine, where: str) -> None:
    if raw.count[0] == 0:
        raise GapforgeError("the high-side signal never changes in the capture (no edges)", where)
    if raw.count[1] == 0:
        raise GapforgeError("the low-side signal never changes in the capture (no edges)", where)
    if (all(raw.record.count_of(e) == 0 for e in EDGES) and not raw.overlaps_found()
            and not raw.possible_found()):
        raise GapforgeError(
            "no dead-time transitions found (no edges where one gate hands over to the other)", where
        )


@dataclass
class _Judged:
    stats: dict[str, EdgeStats] = field(default_factory=dict)
    reasons: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def _judge_edges(raw: Engine, limits: Mapping[str, Limits], tick: Fraction, resolution: int,
                 percentiles: Sequence[float], bins: int) -> _Judged:
    """Each edge's gaps against its window, conservatively with the resolution: the true gap
    is above g - resolution and below g + resolution; and against the prediction (notes)."""
    out = _Judged()
    for name in EDGES:
        g = raw.record.gaps_of(name)
        lim = limits.get(name, Limits())
        below = above = 0
        if g.size and lim.window_min_s is not None:
            lowest = ceil_fraction(lim.window_min_s / tick)  # g - resolution >= lowest passes
            below = int(np.count_nonzero(g < lowest + resolution))
        if g.size and lim.window_max_s is not None:
            highest = floor_fraction(lim.window_max_s / tick)  # g + resolution <= highest passes
            above = int(np.count_nonzero(g > highest - resolution))
        st = edge_stats(name, g, raw.record.worst_of(name), tick, percentiles, bins, below, above)
        out.stats[name] = st
        if below:
            out.reasons.append(f"{name}: {below} gap(s) not proven above the window minimum "
                               "(gap - resolution < minimum)")
        if above:
            out.reasons.append(f"{name}: {above} gap(s) not proven below the window maximum "
                               "(gap + resolution > maximum)")
        unproven = int(np.count_nonzero(g < resolution)) if g.size else 0
        if unproven and not below:
            out.reasons.append(f"{name}: {unproven} transition(s) with no dead time proven "
                               "(gap less than the capture resolution)")
        r = tick * resolution  # a gap is proven outside the prediction only beyond r
        if lim.predicted_min_s is not None and st.min_s is not None and (
            st.min_s + r < lim.predicted_min_s
        ):
            out.notes.append(f"{name}: shortest measured gap is below the predicted minimum "
                             "by more than the resolution")
        if lim.predicted_max_s is not None and st.max_s is not None and (
            st.max_s - r > lim.predicted_max_s
        ):
            out.notes.append(f"{name}: longest measured gap is above the predicted maximum "
                             "by more than the resolution")
    return out


@dataclass
class _Found:
    overlaps: Overlaps
    possible: Overlaps
    missing_count: int
    unknown: int
    fail: list[str] = field(default_factory=list)  # listed before the edges' reasons
    glitch_fail: str = ""  # listed after them
    inconclusive: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def _findings(raw: Engine, stream: CaptureStream, has_window: bool) -> _Found:
    """Overlaps and possible overlaps fail; with a window, an on-pulse glitch fails, and
    missing edges, an assumed time unit or an unknown level leave the capture inconclusive."""
    found = _Found(raw.overlaps_found(), raw.possible_found(),
                   raw.repeat_total + raw.lost_total + stream.lost_events,
                   raw.unknown - (1 if raw.first_unknown else 0))  # after the first known levels
    if found.overlaps:
        found.fail.append(f"{len(found.overlaps)} overlap(s): both gates on (shoot-through)")
    if found.possible:
        found.fail.append(f"{len(found.possible)} possible overlap(s): one gate unknown (x/z) "
                          "while the other is on or unknown")
    if raw.glitch.on_total and has_window:
        found.glitch_fail = (f"{raw.glitch.on_total} on-pulse glitch(es): a gate briefly on "
                             "(inside a dead time it ends the dead time early)")
    if found.missing_count and has_window:
        found.inconclusive.append(f"{found.missing_count} missing edge(s): the capture cannot "
                                  "prove every dead time")
    elif found.missing_count:
        found.notes.append(f"{found.missing_count} missing edge(s)")
    if raw.glitch.total:
        found.notes.append(f"{raw.glitch.total} glitch(es) shorter than the set width")
    if raw.leading_unknown:
        found.notes.append("both gates unknown (x/z) at the start of the capture, before their "
                           "first known levels: not measured")
    if stream.time_unit_assumed and has_window:
        found.inconclusive.append("the capture states no time unit (a VCD without $timescale): "
                                  "state it with --timescale to judge the window")
    if found.unknown > 0 and has_window:
        found.inconclusive.append(f"{found.unknown} interval(s) with an unknown (x/z) gate "
                                  "level: a dead time there cannot be measured")
    elif found.unknown > 0:
        found.notes.append(f"{found.unknown} interval(s) with an unknown (x/z) gate level")
    return found


def _run(stream: CaptureStream, chunks: Iterator[Events], worst: int, width: int) -> Engine:
    """One pass over the events."""
    engine = Engine(stream.tick_s, (stream.high_initial, stream.low_initial), worst, width,
                    edge_events=stream.edge_events)
    for chunk in chunks:
        engine.feed(*chunk)
    engine.finish(stream.end)
    return engine
