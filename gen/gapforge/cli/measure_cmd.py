"""`gapforge measure`: dead times, overlaps and glitches in a capture file or a live serial stream."""

from __future__ import annotations

import sys
from fractions import Fraction
from pathlib import Path
from typing import TYPE_CHECKING, Any

import click

from gapforge.base import caution
from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import format_quantity, parse_quantity
from gapforge.cli.options import Quantity, diagram_options, emit_json, json_option

if TYPE_CHECKING:
    from gapforge.bench.capture import CaptureStream, GateCapture
    from gapforge.bench.measure import Limits, Measurement
    from gapforge.bench.serial_stream import SerialResult, StreamStatus

CAUTION = caution.TEXT


def parse_window(text: str) -> tuple[Fraction | None, Fraction | None]:
    """'20ns:80ns', '20ns:' or ':80ns' -> (min, max) in seconds, exact."""
    if ":" not in text:
        raise GapforgeError(f"{text!r} must be MIN:MAX, e.g. 20ns:80ns", "--window")
    low_text, high_text = (part.strip() for part in text.split(":", 1))
    low = parse_quantity(low_text, "s", "--window", allow_zero=True) if low_text else None
    high = parse_quantity(high_text, "s", "--window") if high_text else None
    if low is None and high is None:
        raise GapforgeError("give at least one of MIN and MAX", "--window")
    if low is not None and high is not None and low > high:
        raise GapforgeError(f"minimum {low_text} is above maximum {high_text}", "--window")
    return low, high


def build_limits(
    window: str | None, design: Path | None
) -> dict[str, Limits]:
    from gapforge.bench.measure import EDGES, Limits

    per_edge: dict[str, list[Fraction | None]] = {edge: [None, None, None, None] for edge in EDGES}
    if design is not None:
        from gapforge.pipeline.build import measurement_expectations

        try:
            expected = measurement_expectations(design)
        except GapforgeError as exc:
            raise exc if exc.where and str(design) in exc.where else exc.at(str(design)) from None
        for edge in EDGES:
            if edge in expected:
                per_edge[edge] = list(expected[edge])
    if window is not None:
        low, high = parse_window(window)
        for edge in EDGES:
            per_edge[edge][0], per_edge[edge][1] = low, high
    return {edge: Limits(*values) for edge, values in per_edge.items()}


@click.command()
@click.argument("capture", required=False, type=click.Path(path_type=Path, dir_okay=False))
@click.option("--high", default=None, help="High-side gate signal: hierarchical name (top.gate_h, "
              "top.bus[3]) or CSV column.")
@click.option("--low", default=None, help="Low-side gate signal, named like --high.")
@click.option("--active-low-high", is_flag=True, help="The high-side signal is active low.")
@click.option("--active-low-low", is_flag=True, help="The low-side signal is active low.")
@click.option("--design", type=click.Path(path_type=Path, dir_okay=False), default=None,
              help="Design file: judge against its window and predicted dead time.")
@click.option("--window", default=None, help="Dead-time window MIN:MAX for both edges, e.g. "
              "20ns:80ns (overrides the design's window).")
@click.option("--glitch", type=Quantity("s", allow_zero=True), default="0", show_default=True,
              help="Pulses shorter than this are glitches: listed, never hidden (a gap ends at "
              "the first on-edge, glitch or not); with a window, an on-pulse glitch fails.")
@click.option("--resolution", type=Quantity("s"), default=None,
              help="Widen the capture's resolution to this (e.g. a logic analyser's sample "
              "period when its file states a finer time unit); never narrows it.")
@click.option("--timescale", "timescale_text", default=None,
              help="The time unit of a VCD without $timescale, e.g. 1ns or 10ps (without it "
              "such a file is read in 1 ns and a window cannot be judged: inconclusive).")
@click.option("--percentiles", default="1,5,50,95,99", show_default=True,
              help="Percentiles to report, comma separated.")
@click.option("--bins", type=click.IntRange(1, 1000), default=20, show_default=True,
              help="Histogram bins.")
@click.option("--worst", type=click.IntRange(0, 1000), default=5, show_default=True,
              help="Worst instances to list per edge.")
@click.option("--serial", "serial_url", default=None,
              help="Read a live stream: a port or pyserial URL (loop://, socket://h:p, rfc2217://).")
@click.option("--baud", type=click.IntRange(1), default=115200, show_default=True,
              help="Serial baud rate.")
@click.option("--count", "max_transitions", type=click.IntRange(1), default=None,
              help="Stop the stream after this many dead-time transitions (each to_high and "
              "each to_low counts one).")
@click.option("--duration", type=Quantity("s"), default=None,
              help="Stop the stream after this long, e.g. 10s.")
@click.option("--idle-timeout", type=Quantity("s"), default="2s", show_default=True,
              help="Stop the stream when no data arrives for this long.")
@diagram_options
@json_option
def command(capture: Path | None, high: str | None, low: str | None, active_low_high: bool,
            active_low_low: bool, design: Path | None, window: str | None, glitch: Fraction,
            resolution: Fraction | None, timescale_text: str | None, percentiles: str,
            bins: int, worst: int,
            serial_url: str | None, baud: int, max_transitions: int | None,
            duration: Fraction | None, idle_timeout: Fraction,
            no_diagram: bool, ascii_only: bool, as_json: bool) -> None:
    """Measure every dead time in a capture (VCD or gapforge CSV) or a live serial stream.

    Exit 1 on any overlap (both gates on), any possible overlap (one gate x/z while the other
    is on or unknown), or any gap not proven inside the window with the capture's resolution
    (gap - resolution >= min, gap + resolution <= max); with a window, also on an on-pulse
    glitch or missing edges (inconclusive). Exit 2 on bad input. A VCD file is read chunk by
    chunk in constant memory per chunk.
    """
    from gapforge.bench.measure import measure_capture

    pcts = _percentiles(percentiles)
    timescale = None
    if timescale_text is not None:
        from gapforge.bench.vcd_header import parse_timescale

        timescale = parse_timescale([timescale_text], "--timescale")
    limits = build_limits(window, design)
    stream: SerialResult | None = None
    gate: GateCapture | CaptureStream
    if serial_url is not None:
        if capture is not None:
            raise GapforgeError("give a capture file or --serial, not both", "measure")
        if timescale is not None:
            raise GapforgeError("--timescale applies to VCD files, not to --serial", "measure")
        from gapforge.bench.serial_stream import read_serial

        stream = read_serial(
            serial_url, baud, max_transitions=max_transitions,
            max_seconds=None if duration is None else float(duration),
            idle_timeout_s=float(idle_timeout),
            progress=_progress if sys.stderr.isatty() else None,
            active_low_high=active_low_high, active_low_low=active_low_low,
        )
        if sys.stderr.isatty():
            click.echo("", err=True)
        if stream.garbage_stop:
            raise GapforgeError(stream.stop_reason, serial_url)
        if stream.capture is None:
            raise GapforgeError(
                f"no capture header received ({stream.status.lines} lines, stopped: "
                f"{stream.stop_reason})", serial_url)
        gate = stream.capture
    else:
        if capture is None:
            raise GapforgeError("give a capture file (VCD or CSV) or --serial URL", "measure")
        if high is None or low is None:
            raise GapforgeError("name both gate signals with --high and --low", str(capture))
        if not capture.exists():
            raise GapforgeError("no such file", str(capture))
        from gapforge.bench.capture import open_capture

        gate = open_capture(capture, high, low, active_low_high=active_low_high,
                            active_low_low=active_low_low, timescale=timescale)
    try:
        result = measure_capture(gate, limits=limits, glitch_width_s=glitch, percentiles=pcts,
                                 bins=bins, worst=worst, resolution_s=resolution)
    except GapforgeError as exc:
        if stream is not None:
            raise GapforgeError(f"{exc.message} (stream stopped: {stream.stop_reason})",
                                exc.where) from None
        raise
    if as_json:
        emit_json(measurement_json(result, stream))
    else:
        click.echo(measurement_text(result, stream, diagram=not no_diagram,
                                    ascii_only=ascii_only))
    sys.exit(1 if result.failed else 0)


def _percentiles(text: str) -> tuple[float, ...]:
    out: list[float] = []
    for part in text.split(","):
        if not part.strip():
            continue
        try:
            value = float(part)
        except ValueError:
            raise GapforgeError(f"{part.strip()!r} is not a number", "--percentiles") from None
        if not 0 <= value <= 100:
            raise GapforgeError(f"{value:g} must be between 0 and 100", "--percentiles")
        out.append(value)
    return tuple(out)


def _progress(status: StreamStatus) -> None:
    click.echo(
        f"\r{status.transitions} transitions, {status.edges} edges, {status.lines} lines, {status.garbage} garbage, "
        f"{status.lost_lines} lost, {status.elapsed_s:.1f} s   ",
        err=True, nl=False,
    )


def _f(value: Fraction | None) -> float | None:
    return None if value is None else float(value)


def measurement_json(m: Measurement, stream: SerialResult | None = None) -> dict[str, Any]:
    edges: dict[str, Any] = {}
    for name, stats in (("to_high", m.to_high), ("to_low", m.to_low)):
        lim = m.limits.get(name)
        edges[name] = {
            "count": stats.count,
            "min_s": _f(stats.min_s),
            "max_s": _f(stats.max_s),
            "mean_s": stats.mean_s,
            "std_s": stats.std_s,
            "percentiles_s": {f"p{p:g}": v for p, v in stats.percentiles},
            "histogram": {"edges_s": list(stats.histogram_edges_s),
                          "counts": list(stats.histogram_counts)},
            "shortest": [{"at_s": float(i.at_s), "gap_s": float(i.gap_s)} for i in stats.shortest],
            "longest": [{"at_s": float(i.at_s), "gap_s": float(i.gap_s)} for i in stats.longest],
            "below_window": stats.below_window,
            "above_window": stats.above_window,
            "window_min_s": _f(lim.window_min_s) if lim else None,
            "window_max_s": _f(lim.window_max_s) if lim else None,
            "predicted_min_s": _f(lim.predicted_min_s) if lim else None,
            "predicted_max_s": _f(lim.predicted_max_s) if lim else None,
        }
    doc: dict[str, Any] = {
        "source": m.source,
        "tick_s": float(m.tick_s),
        "resolution_s": float(m.resolution_s),
        "duration_s": float(m.duration_s),
        "edges": edges,
        "overlaps": len(m.overlaps),
        "overlap_events": [{"at_s": float(o.at_s), "duration_s": float(o.duration_s)}
                           for o in m.overlaps[:100]],
        "possible_overlaps": len(m.possible_overlaps),
        "possible_overlap_events": [{"at_s": float(o.at_s), "duration_s": float(o.duration_s)}
                                    for o in m.possible_overlaps[:100]],
        "glitches": m.glitch_count,
        "glitch_events": [{"signal": g.signal, "level": g.level, "at_s": float(g.at_s),
                           "width_s": float(g.width_s), "in_dead_time": g.in_dead_time}
                          for g in m.glitches[:100]],
        "missing_edges": m.missing_edge_count,
        "missing_edge_events": [{"at_s": float(f.at_s), "text": f.text}
                                for f in m.missing_edges[:100]],
        "unknown_intervals": m.unknown_intervals,
        "verdict": m.verdict,
        "reasons": list(m.reasons),
        "notes": list(m.notes),
        "warnings": list(m.warnings),
    }
    if stream is not None:
        s = stream.status
        doc["stream"] = {"stop_reason": stream.stop_reason, "lines": s.lines, "edges": s.edges,
                         "transitions": s.transitions,
                         "garbage": s.garbage, "partial": s.partial, "lost_lines": s.lost_lines,
                         "clock_hz": s.clock_hz, "counter_bits": s.counter_bits,
                         "elapsed_s": s.elapsed_s}
    doc["caution"] = CAUTION
    return doc


def _q(value: Fraction | float | None) -> str:
    return "-" if value is None else format_quantity(value, "s")


def measurement_diagram(m: Measurement, ascii_only: bool = False) -> str:
    """The pair drawn with the shortest measured gap of each edge, over the measured mean
    period when known (a sketch to look at; the numbers above are the measurement)."""
    from gapforge.outputs.diagram import pair_diagram

    to_high, to_low = m.to_high.min_s, m.to_low.min_s
    if to_high is None or to_low is None:
        missing = "to_high" if to_high is None else "to_low"
        return f"(no timing diagram: no {missing} transitions measured)"
    text = pair_diagram(to_high, to_low, m.mean_period_s, ascii_only=ascii_only)
    lines = ["Timing (shortest measured gaps"
             + (f", mean period {_q(m.mean_period_s)}):" if m.mean_period_s else "):"), text]
    if to_high <= 0 or to_low <= 0:
        lines.append("      a gap of zero or less means the gates overlap: drawn at minimum width")
    return "\n".join(lines)


def measurement_text(m: Measurement, stream: SerialResult | None = None, *, diagram: bool = True,
                     ascii_only: bool = False) -> str:
    lines = [f"Capture: {m.source} (tick {_q(m.tick_s)}, resolution {_q(m.resolution_s)}, "
             f"{_q(m.duration_s)} long)"]
    if stream is not None:
        s = stream.status
        lines.append(f"Stream stopped: {stream.stop_reason}; {s.transitions} transitions, "
                     f"{s.edges} edges, {s.lines} lines, "
                     f"{s.garbage} garbage, {s.partial} partial, {s.lost_lines} lost")
    for warning in m.warnings:
        lines.append(f"Warning: {warning}")
    lines.append("")
    lines.append(f"{'edge':<8} {'count':>8} {'min':>11} {'mean':>11} {'max':>11} {'std':>11}"
                 f"  window")
    for name in ("to_high", "to_low"):
        st = m.edge(name)
        lim = m.limits.get(name)
        win = "-" if lim is None or (lim.window_min_s is None and lim.window_max_s is None) else (
            f"{_q(lim.window_min_s)} .. {_q(lim.window_max_s)}")
        lines.append(f"{name:<8} {st.count:>8} {_q(st.min_s):>11} {_q(st.mean_s):>11} "
                     f"{_q(st.max_s):>11} {_q(st.std_s):>11}  {win}")
    for name in ("to_high", "to_low"):
        st = m.edge(name)
        if st.percentiles:
            text = ", ".join(f"p{p:g} {_q(v)}" for p, v in st.percentiles)
            lines.append(f"{name} percentiles: {text}")
        if st.shortest:
            worst = ", ".join(f"{_q(i.gap_s)} at {_q(i.at_s)}" for i in st.shortest)
            lines.append(f"{name} shortest: {worst}")
        if st.below_window or st.above_window:
            lines.append(f"{name}: {st.below_window} below, {st.above_window} above the window")
    if any(lim.window_min_s is not None or lim.window_max_s is not None
           for lim in m.limits.values()):
        lines.append(f"Judged with the resolution {_q(m.resolution_s)}: a gap passes only if "
                     "gap - resolution >= min and gap + resolution <= max.")
    lines.append("")
    if diagram:
        lines.append(measurement_diagram(m, ascii_only))
        lines.append("")
    if m.overlaps:
        lines.append(f"OVERLAPS (shoot-through): {len(m.overlaps)}")
        for o in m.overlaps[:10]:
            lines.append(f"  both gates on at {_q(o.at_s)} for {_q(o.duration_s)}")
    else:
        lines.append("Overlaps (shoot-through): none")
    if m.possible_overlaps:
        lines.append(f"POSSIBLE OVERLAPS (one gate x/z, the other on or unknown): "
                     f"{len(m.possible_overlaps)}")
        for o in m.possible_overlaps[:10]:
            lines.append(f"  unknown gate level at {_q(o.at_s)} for {_q(o.duration_s)}")
    lines.append(f"Glitches: {m.glitch_count}; missing edges: {m.missing_edge_count}")
    for g in m.glitches[:5]:
        kind = "on-pulse" if g.level == 1 else "off-pulse"
        where = ", inside a dead time" if g.in_dead_time else ""
        lines.append(f"  glitch ({kind}) on the {g.signal} side at {_q(g.at_s)}, "
                     f"{_q(g.width_s)} wide{where}")
    for f in m.missing_edges[:5]:
        lines.append(f"  at {_q(f.at_s)}: {f.text}")
    for note in m.notes:
        lines.append(f"Note: {note}")
    lines.append("")
    verdict = {"pass": "PASS", "fail": "FAIL",
               "inconclusive": "INCONCLUSIVE (the capture cannot prove every dead time)",
               "measured": "MEASURED (no window to judge against)"}
    lines.append(f"Verdict: {verdict[m.verdict]}")
    for reason in m.reasons:
        lines.append(f"  {reason}")
    lines.append(CAUTION)
    return "\n".join(lines)
