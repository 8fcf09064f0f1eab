"""`gapforge measure`: dead times, overlaps and glitches in a capture file or a live serial stream."""

from __future__ import annotations

import sys
from fractions import Fraction
from pathlib import Path
from typing import TYPE_CHECKING, Any

import click

from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import parse_quantity
from gapforge.cli.measure_scope import logic_capture, run_scope, scope_options, wants_scope
from gapforge.cli.measure_text import measurement_diagram, measurement_json, measurement_text
from gapforge.cli.options import Quantity, diagram_options, emit_json, json_option

if TYPE_CHECKING:
    from gapforge.bench.capture import CaptureStream, GateCapture
    from gapforge.bench.measure import Limits
    from gapforge.bench.serial_stream import SerialResult, StreamStatus

__all__ = ["build_limits", "command", "measurement_diagram", "measurement_json",
           "measurement_text", "parse_window"]


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
    window: str | None, design: Path | None, output: str | None = None,
    current: Fraction | None = None, output_option: str = "--output",
) -> tuple[dict[str, Limits], str, str]:
    """Per-edge limits, what they come from, in words, and why they prove nothing (a design
    without [stage] and no --window; else ""): the design's window and the prediction of one
    output (its table entry at `current`), then `window` over both edges."""
    from gapforge.bench.measure import EDGES, Limits

    per_edge: dict[str, list[Fraction | None]] = {edge: [None, None, None, None] for edge in EDGES}
    source = unjudged = ""
    if design is None and (output is not None or current is not None):
        raise GapforgeError("--output and --current select what a design predicts: give --design",
                            "--output" if output is not None else "--current")
    if design is not None:
        from gapforge.pipeline.expectations import design_expectation

        try:
            expected = design_expectation(design, output, current, output_option)
        except GapforgeError as exc:
            raise exc if exc.where and (str(design) in exc.where or exc.where.startswith("--")
                                        ) else exc.at(str(design)) from None
        for edge in EDGES:
            if edge in expected.per_edge:
                per_edge[edge] = list(expected.per_edge[edge])
        source = f"design {design.name}, {expected.source}"
        unjudged = expected.unjudged
    if window is not None:
        low, high = parse_window(window)
        for edge in EDGES:
            per_edge[edge][0], per_edge[edge][1] = low, high
        source = f"--window {window}" + (f" (prediction: {source})" if source else "")
        unjudged = ""  # a window stated by the user is judged
    return {edge: Limits(*values) for edge, values in per_edge.items()}, source, unjudged


def _current(text: str | None) -> Fraction | None:
    """--current: the operating current, a signed quantity in A."""
    if text is None:
        return None
    return parse_quantity(text, "A", "--current", allow_zero=True, allow_negative=True)


@click.command()
@click.argument("captures", nargs=-1, type=click.Path(path_type=Path, dir_okay=False))
@click.option("--high", default=None, help="High-side gate signal: hierarchical name (top.gate_h, "
              "top.bus[3]) or CSV column.")
@click.option("--low", default=None, help="Low-side gate signal, named like --high.")
@click.option("--active-low-high", is_flag=True, help="The high-side signal is active low.")
@click.option("--active-low-low", is_flag=True, help="The low-side signal is active low.")
@click.option("--design", type=click.Path(path_type=Path, dir_okay=False), default=None,
              help="Design file: judge against its window and predicted dead time.")
@click.option("--output", "output_name", default=None,
              help="With --design: the output (its prefix) the capture runs; required when the "
              "design has several.")
@click.option("--current", "current_text", default=None,
              help="With --design and a load-indexed table ([adaptive]): the operating current "
              "(e.g. 5A, -5A); the capture is compared with the entry of its bin.")
@click.option("--window", default=None, help="Dead-time window MIN:MAX for both edges, e.g. "
              "20ns:80ns (overrides the design's window).")
@click.option("--glitch", type=Quantity("s", allow_zero=True), default="0", show_default=True,
              help="Pulses shorter than this are glitches: listed, never hidden (a gap ends at "
              "the first on-edge, glitch or not); with a window, an on-pulse glitch fails.")
@click.option("--resolution", type=Quantity("s"), default=None,
              help="The capture's resolution (e.g. a logic analyser's sample period); instead "
              "of the one the file implies (its stated sample rate or the common step of its "
              "change times), never below one tick of the file.")
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
@scope_options  # issue 21: analog (volts) captures, cli/measure_scope.py
def command(captures: tuple[Path, ...], high: str | None, low: str | None, active_low_high: bool,
            active_low_low: bool, design: Path | None, output_name: str | None,
            current_text: str | None, window: str | None, glitch: Fraction,
            resolution: Fraction | None, timescale_text: str | None, percentiles: str,
            bins: int, worst: int,
            serial_url: str | None, baud: int, max_transitions: int | None,
            duration: Fraction | None, idle_timeout: Fraction,
            no_diagram: bool, ascii_only: bool, as_json: bool, **scope: Any) -> None:
    """Measure every dead time in a capture (VCD or gapforge CSV) or a live serial stream.

    Oscilloscope exports in volts need --threshold (README, "Oscilloscope captures").

    Exit 1 on any overlap (both gates on), any possible overlap (one gate x/z while the other
    is on or unknown), or any gap not proven inside the window with the capture's resolution
    (gap - resolution >= min, gap + resolution <= max); with a window, also on an on-pulse
    glitch or missing edges (inconclusive). Exit 2 on bad input. A VCD file is read chunk by
    chunk in constant memory per chunk.
    """
    from gapforge.bench.measure import measure_capture

    pcts = _percentiles(percentiles)
    if serial_url is None and captures and wants_scope(captures, scope):  # issue 21: volts
        current = _current(current_text)
        run_scope(captures, high, low, scope, design=design, current=current,
                  limits=build_limits(window, design, output_name, current), glitch=glitch,
                  percentiles=pcts, bins=bins, worst=worst, resolution=resolution,
                  flags=(timescale_text is not None, as_json, no_diagram, ascii_only,
                         active_low_high or active_low_low))
    capture = logic_capture(captures, scope)
    timescale = None
    if timescale_text is not None:
        from gapforge.bench.vcd_header import parse_timescale

        timescale = parse_timescale([timescale_text], "--timescale")
    limits, limits_source, unjudged = build_limits(window, design, output_name,
                                                   _current(current_text))
    stream: SerialResult | None = None
    bar: Any = None
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
            progress=_progress if _at_terminal(as_json) else None,
            active_low_high=active_low_high, active_low_low=active_low_low,
        )
        if _at_terminal(as_json):
            click.echo("", err=True)
        if stream.garbage_stop:
            raise GapforgeError(stream.stop_reason, serial_url)
        if stream.capture is None:
            from gapforge.bench.serial_stream import HEADER_EVERY

            raise GapforgeError(
                f"no capture header received ({stream.status.lines} lines, stopped: "
                f"{stream.stop_reason}); the capture firmware must repeat its header line every "
                f"{HEADER_EVERY} lines (gfcap_header_due in `gapforge firmware`'s helper)",
                serial_url)
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
        size = capture.stat().st_size
        if _at_terminal(as_json) and size >= PROGRESS_BYTES:
            bar = click.progressbar(length=size, label=f"reading {capture.name}", file=sys.stderr)
            gate = gate.observed(lambda done: bar.update(max(done - bar.pos, 0)))
    try:
        result = measure_capture(gate, limits=limits, glitch_width_s=glitch, percentiles=pcts,
                                 bins=bins, worst=worst, resolution_s=resolution,
                                 limits_source=limits_source, unjudged=unjudged)
    except GapforgeError as exc:
        if bar is not None:
            bar.render_finish()
        if stream is not None:
            raise GapforgeError(f"{exc.message} (stream stopped: {stream.stop_reason})",
                                exc.where) from None
        raise
    if bar is not None:
        bar.render_finish()
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


PROGRESS_BYTES = 64 << 20  # a capture file this large shows a progress bar at a terminal


def _at_terminal(as_json: bool) -> bool:
    """Progress is for a person at a terminal: never with --json, never in piped output."""
    return not as_json and sys.stdout.isatty() and sys.stderr.isatty()


def _progress(status: StreamStatus) -> None:
    if status.clock_hz is None:
        from gapforge.bench.serial_stream import HEADER_EVERY

        click.echo(f"\rwaiting for the next capture header (the firmware repeats it every "
                   f"{HEADER_EVERY} lines): {status.lines} lines so far, "
                   f"{status.elapsed_s:.1f} s   ", err=True, nl=False)
        return
    click.echo(
        f"\r{status.transitions} transitions, {status.edges} edges, {status.lines} lines, {status.garbage} garbage, "
        f"{status.lost_lines} lost, {status.elapsed_s:.1f} s   ",
        err=True, nl=False,
    )
