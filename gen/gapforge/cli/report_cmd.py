"""`gapforge report`: write a self-contained HTML design report (inline SVG and CSS, no scripts)."""

from __future__ import annotations

import sys
from fractions import Fraction
from pathlib import Path
from typing import Any

import click

from gapforge.base.errors import GapforgeError
from gapforge.cli.measure_scope import scope_options
from gapforge.cli.options import Quantity


@click.command()
@click.argument("design", type=click.Path(dir_okay=False, path_type=Path))
@click.option("-o", "--output", "output", type=click.Path(dir_okay=False, path_type=Path),
              required=True, help="The HTML file to write, e.g. report.html.")
@click.option("--capture", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="A bench capture (.vcd or gapforge capture .csv) to measure and draw.")
@click.option("--high", default=None, help="High-side gate signal in the capture (top.gate_h).")
@click.option("--low", default=None, help="Low-side gate signal in the capture (top.gate_l).")
@click.option("--active-low-high", is_flag=True, help="The high-side signal is active low.")
@click.option("--active-low-low", is_flag=True, help="The low-side signal is active low.")
@click.option("--glitch", type=Quantity("s", allow_zero=True), default="0", show_default=True,
              help="Pulses shorter than this are glitches: listed, never hidden (a gap ends at "
              "the first on-edge, glitch or not); an on-pulse glitch fails the capture.")
@click.option("--capture-output", "capture_output", default=None,
              help="The output (its prefix) the captured firmware runs: the capture is judged "
              "against its prediction; required when the design has several outputs.")
@click.option("--current", "current_text", default=None,
              help="With a load-indexed table: the operating current of the capture (signed, "
              "e.g. 3.2A); its bin's entry is the prediction.")
@click.option("--parents", is_flag=True,
              help="Create missing folders of --output (without it a missing folder is an error).")
@scope_options  # issue 21: an oscilloscope export (volts) as the capture
def command(
    design: Path,
    output: Path,
    capture: Path | None,
    high: str | None,
    low: str | None,
    active_low_high: bool,
    active_low_low: bool,
    glitch: Fraction,
    capture_output: str | None,
    current_text: str | None,
    parents: bool,
    **scope: Any,
) -> None:
    """Write an HTML design report: timing diagrams, the analog reference's node ramps, the
    quantization staircases, Monte Carlo and capture histograms, tables of inputs, results,
    margins and verdicts, and the caution.

    The report is written even when the design fails its verdict (exit code 1 then, as for
    `build`, and also when a capture shows an overlap or a gap outside the window): a report of
    a failing design shows why it fails. Bad input writes nothing and
    exits 2. Rerunning on the same inputs gives a byte-identical file.
    """
    from gapforge.base import caution
    from gapforge.base.display import count, verdict_word
    from gapforge.base.files import write_files
    from gapforge.outputs.report import (
        capture_word,
        design_warnings,
        render_report,
    )
    from gapforge.pipeline.build import plan_design
    from gapforge.pipeline.design import load_design

    if output.suffix.lower() not in (".html", ".htm"):
        raise GapforgeError("the report is HTML: give a file name ending in .html", "--output")
    if capture is None and (high is not None or low is not None):
        raise GapforgeError("--high and --low name signals in a capture: give --capture too",
                            "--capture")
    if capture is None and (capture_output is not None or current_text is not None):
        raise GapforgeError("--capture-output and --current say what a capture is judged"
                            " against: give --capture too", "--capture")
    plan = plan_design(load_design(design))
    measurement = None
    limits: tuple[Any, str, str] = ({}, "", "")
    if capture is not None:
        limits = _capture_limits(design, capture_output, current_text)
    extra: tuple[Any, ...] = ()
    if capture is not None and capture.is_file() and high is not None and low is not None:
        from gapforge.cli.measure_scope import report_scope, wants_scope

        if wants_scope((capture,), scope):
            measurement, extra = report_scope(capture, high, low, scope, limits, glitch)
    if capture is not None and measurement is None:
        from gapforge.cli.measure_scope import SCOPE_KEYS

        if any(scope.get(k) is not None for k in SCOPE_KEYS):
            raise GapforgeError("analog options apply to oscilloscope exports (volts)", "report")
        if high is None or low is None:
            raise GapforgeError("name both gate signals with --high and --low", "--capture")
        if not capture.is_file():
            raise GapforgeError("no such file", str(capture))
        from gapforge.bench.capture import open_capture
        from gapforge.bench.measure import measure_capture

        # streamed: a VCD is read chunk by chunk (the same measurement as a capture in memory)
        gate = open_capture(capture, high, low, active_low_high=active_low_high,
                            active_low_low=active_low_low)
        measurement = measure_capture(gate, limits=limits[0], glitch_width_s=glitch,
                                      limits_source=limits[1], unjudged=limits[2])
    text = render_report(plan, measurement, extra)
    written = write_files({output: text}, parents=parents)
    # the answer first: the verdicts in the one vocabulary, then what was written
    click.echo(f"report: design {verdict_word(plan.verdict)}"
               + (f" ({plan.reasons[0]})" if plan.verdict == "inconclusive" else "")
               + ("" if measurement is None else f", capture {capture_word(measurement.verdict)}")
               + f" - wrote {', '.join(str(p) for p in written)}")
    warnings = design_warnings(plan)
    if warnings:
        click.echo(f"  {count(len(warnings), 'design warning')} in the report's verdict box")
    click.echo(caution.SHORT)
    if plan.verdict != "ok" or (measurement is not None and measurement.failed):
        sys.exit(1)


def _capture_limits(design: Path, output: str | None,
                    current_text: str | None) -> tuple[Any, str, str]:
    """What a capture in the report is judged against: the same rule as `measure --design`
    (the named output; with a load-indexed table the entry at --current; a design without
    [stage] proves nothing, so the capture verdict is inconclusive)."""
    from gapforge.cli.measure_cmd import _current, build_limits

    return build_limits(None, design, output, _current(current_text),
                        output_option="--capture-output")
