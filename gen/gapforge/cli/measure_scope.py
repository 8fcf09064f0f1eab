"""`gapforge measure` on oscilloscope exports (volts): the options, the run and what it adds to
the text and the JSON. `measure_cmd` only dispatches here (bench.scope holds the reading).

An analog capture is chosen when any threshold option is given, or when the file holds volts
(a level that is a number other than 0 and 1, or a units row); then a threshold is required.
"""

from __future__ import annotations

import re
import sys
from collections.abc import Callable
from fractions import Fraction
from pathlib import Path
from typing import TYPE_CHECKING, Any, TypeVar

import click

from gapforge.base.display import format_si
from gapforge.base.errors import GapforgeError, quoted
from gapforge.base.quantities import parse_quantity, parse_tolerance

if TYPE_CHECKING:
    from gapforge.bench.measure import Measurement
    from gapforge.bench.scope import NodeResult, ScopeCapture, ScopeSettings

F = TypeVar("F", bound=Callable[..., Any])

THRESHOLD_OPTIONS = "--threshold, --threshold-high/--threshold-low or --level"
SCOPE_KEYS = ("threshold", "threshold_high", "threshold_low", "level", "hysteresis",
              "deskew_high", "deskew_low", "node", "bus", "soft_within")


def scope_options(f: F) -> F:
    """The analog capture options (strings, parsed in `settings_from`)."""
    opts = [
        ("--threshold", "Analog capture: the gate-source voltage above which either gate is "
         "on, e.g. 3V (required for volts: there is no default)."),
        ("--threshold-high", "Analog capture: the high-side gate's threshold (overrides "
         "--threshold)."),
        ("--threshold-low", "Analog capture: the low-side gate's threshold (overrides "
         "--threshold)."),
        ("--level", "Analog capture of logic-level signals: a reference level between the two "
         "state levels (IEEE 181 histogram method), e.g. 50%; only on request."),
        ("--hysteresis", "Analog capture: a gate changes state only beyond threshold +/- H/2; "
         "the instant is the last threshold crossing before it, e.g. 0.4V."),
        ("--deskew-high", "Analog capture: the high-side probe's extra delay, subtracted from "
         "its times, e.g. 2ns (may be negative)."),
        ("--deskew-low", "Analog capture: the low-side probe's extra delay, e.g. -1.5ns."),
        ("--node", "Analog capture: the switch-node channel; with --bus, report the node "
         "voltage at every turn-on."),
        ("--bus", "The bus voltage the node swings to, e.g. 400V."),
        ("--soft-within", "A turn-on is soft when the node is within this share of the rail "
         "the switch connects it to [default: 10%]."),
    ]
    for name, text in reversed(opts):
        f = click.option(name, default=None, help=text)(f)
    return f


def _signed(text: str, unit: str, where: str) -> Fraction:
    body = text.strip()
    negative = body.startswith("-")
    value = parse_quantity(body.lstrip("+-").strip(), unit, where, allow_zero=True)
    return -value if negative else value


def _percent(text: str, where: str) -> Fraction:
    return parse_tolerance(text, where)


def wants_scope(files: tuple[Path, ...], scope: dict[str, Any]) -> bool:
    """An analog capture: threshold options given, or the file holds volts."""
    if any(scope.get(k) is not None for k in ("threshold", "threshold_high", "threshold_low",
                                                "level")):
        return True
    return any(_looks_analog(p) for p in files)


_LOGIC = {"0", "1", "x", "X", "z", "Z"}


def _looks_analog(path: Path) -> bool:
    """A units row, or a level cell that is a number other than 0/1 (a logic CSV has none)."""
    from gapforge.bench.capture import looks_like_vcd

    if path.suffix.lower() == ".vcd" or not path.is_file():
        return False
    try:
        with path.open("rb") as handle:
            raw = handle.read(1 << 14)
    except OSError:
        return False
    # binary (an FST waveform, junk) or a VCD under another name, with a byte order mark or a
    # line in front (review rev3b: once taken for volts): the logic reader says what it is
    if b"\x00" in raw or (path.suffix.lower() != ".csv" and looks_like_vcd(raw[:256])):
        return False
    head = raw.decode("utf-8", errors="replace")
    rows = [r.strip() for r in head.splitlines()[:60]]
    rows = [r for r in rows if r and not r.startswith("#")]
    if len(rows) < 2 or rows[0].startswith(("$", ";")):  # a VCD; a logic analyser's own CSV
        return False
    header = rows[0].split(",")
    if header[1:] == ["signal", "level"]:
        return False
    for k, row in enumerate(rows[1:20]):
        cells = [c.strip() for c in row.split(",")]
        if k == 0 and len(cells) == len(header) and all(c and not _is_number(c) for c in cells):
            return True  # a units row
        for cell in cells[1:]:
            if cell not in _LOGIC and _is_number(cell):
                return True
    return False


def _is_number(text: str) -> bool:
    return re.fullmatch(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?", text) is not None


def settings_from(scope: dict[str, Any], resolution: Fraction | None) -> ScopeSettings:
    from gapforge.bench.scope import Reference, ScopeSettings

    def threshold(key: str) -> Fraction | None:
        text = scope.get(key)
        if text is None:
            return None
        return _signed(text, "V", f"--{key.replace('_', '-')}")

    both = threshold("threshold")
    level = None
    if scope.get("level") is not None:
        level = _percent(scope["level"], "--level") * 100
        if not 0 < level < 100:
            raise GapforgeError("the reference level must be between 0 % and 100 %", "--level")
    refs = {}
    for side in ("high", "low"):
        own = threshold(f"threshold_{side}")
        th = own if own is not None else both
        if th is None and level is None:
            raise GapforgeError(f"an analog capture (volts) needs a threshold for the {side}-side "
                                f"gate: give {THRESHOLD_OPTIONS}", "measure")
        refs[side] = Reference(th, None if th is not None else level)
    if level is not None and all(r.level_percent is None for r in refs.values()):
        # issue 21: a reference level that no gate uses would be ignored without a word
        raise GapforgeError("--level applies only to a gate without a threshold, and both gates "
                            "have one: give --level or the threshold options, not both", "--level")
    hyst = Fraction(0)
    if scope.get("hysteresis") is not None:
        hyst = parse_quantity(scope["hysteresis"], "V", "--hysteresis", allow_zero=True)
    deskew = {side: (_signed(scope[f"deskew_{side}"], "s", f"--deskew-{side}")
                     if scope.get(f"deskew_{side}") is not None else Fraction(0))
              for side in ("high", "low")}
    return ScopeSettings(refs["high"], refs["low"], hyst, deskew["high"], deskew["low"],
                         resolution)


def _bus(scope: dict[str, Any], design: Path | None) -> tuple[Fraction, str] | None:
    """The bus voltage for --node and where it comes from: --bus, else the design's
    `[stage] bus_voltage` (None without --node)."""
    if scope.get("node") is None:
        if scope.get("bus") is not None:
            raise GapforgeError("--node and --bus go together: --bus needs --node", "--bus")
        if scope.get("soft_within") is not None:
            raise GapforgeError("--soft-within needs --node and --bus", "--soft-within")
        return None
    stated = None  # the design's bus, and why there is none
    why = ""
    if design is not None:
        from gapforge.pipeline.design import load_window_sections

        stage = load_window_sections(design).stage
        stated = None if stage is None else stage.bus_voltage
        why = (f" ({design.name} has no [stage])" if stage is None else
               f" ({design.name}'s [stage] states no bus_voltage)" if stated is None else "")
    if scope.get("bus") is not None:
        # --bus wins; a design that states another bus is named beside it (review rev3b)
        bus = parse_quantity(scope["bus"], "V", "--bus")
        if stated is not None and stated != bus and design is not None:
            return bus, (f"--bus, not the {_v(stated)} [stage] bus_voltage of "
                         f"{design.name}")
        return bus, "--bus"
    if stated is not None and design is not None:
        return stated, f"[stage] bus_voltage of {design.name}"
    raise GapforgeError("--node and --bus go together: give --bus, or a --design whose [stage] "
                        f"states bus_voltage{why}", "--node")


def logic_capture(files: tuple[Path, ...], scope: dict[str, Any]) -> Path | None:
    """The one file of a logic capture (analog options and several files refused)."""
    if len(files) > 1:
        raise GapforgeError("several files are read only as an analog capture (one channel "
                            "per file)", "measure")
    if any(scope.get(k) is not None for k in SCOPE_KEYS):
        raise GapforgeError("analog options apply to oscilloscope exports (volts)", "measure")
    return files[0] if files else None


def run_scope(files: tuple[Path, ...], high: str | None, low: str | None, scope: dict[str, Any],
              *, design: Path | None, limits: tuple[Any, str, str], current: Fraction | None,
              glitch: Fraction, percentiles: tuple[float, ...], bins: int, worst: int,
              resolution: Fraction | None, flags: tuple[bool, bool, bool, bool, bool]) -> None:
    """Read, measure, check the node, print, exit (0 ok, 1 not ok). `limits`: the judged
    limits and what they come from; `flags`: --timescale given, --json, --no-diagram,
    --ascii, an --active-low-* option given."""
    timescale_given, as_json, no_diagram, ascii_only, active_low = flags
    from gapforge.bench.capture import vcd_named_csv
    from gapforge.bench.measure import measure_capture
    from gapforge.bench.scope import node_shares, read_scope
    from gapforge.cli.measure_text import measurement_json, measurement_text
    from gapforge.cli.options import emit_json

    if high is None or low is None:
        raise GapforgeError("name both gate channels with --high and --low", str(files[0]))
    if timescale_given:
        raise GapforgeError("--timescale applies to VCD files only", "--timescale")
    if active_low:
        raise GapforgeError("an analog gate is on above its threshold: --active-low-* applies "
                            "to logic captures only", "measure")
    for path in files:
        if not path.exists():
            raise GapforgeError("no such file", str(path))
        if path.suffix.lower() == ".vcd":
            raise GapforgeError("thresholds apply to oscilloscope exports (CSV in volts); a VCD "
                                "holds logic levels", str(path))
        vcd_named_csv(path)
    settings = settings_from(scope, resolution)
    bus = _bus(scope, design)
    if bus is not None and scope["node"] in (high, low):
        # review rev3b: a gate read as the switch node counted "hard" turn-ons of nothing
        raise GapforgeError(f"--node {quoted(scope['node'])} is a gate channel (--high/--low): "
                            "name the switch-node probe's channel", "--node")
    cap = read_scope(list(files), high, low, settings)
    result = measure_capture(cap.stream, limits=limits[0], glitch_width_s=glitch,
                             percentiles=percentiles, bins=bins, worst=worst,
                             limits_source=limits[1], unjudged=limits[2])
    node = None
    if bus is not None:
        within = (_percent(scope["soft_within"], "--soft-within")
                  if scope.get("soft_within") is not None else Fraction(1, 10))
        node = node_shares(list(files), scope["node"], bus[0], within, cap)
    extra = soft_check(design, current, node)
    if extra:
        result = _failed(result, extra)
    if as_json:
        doc = measurement_json(result)
        doc["analog"] = analog_json(cap)
        doc["node"] = node_json(node, current, bus)
        caution = doc.pop("caution")
        doc["caution"] = caution
        emit_json(doc)
    else:
        text = measurement_text(result, diagram=not no_diagram, ascii_only=ascii_only)
        head, _, tail = text.rpartition("\n")
        click.echo("\n".join([head, *analog_lines(cap), *node_lines(node, bus), tail]))
    sys.exit(1 if result.failed else 0)


def report_scope(capture: Path, high: str, low: str, scope: dict[str, Any], limits: Any,
                 glitch: Fraction) -> tuple[Measurement, tuple[Any, ...]]:
    """`report --capture` on an oscilloscope export: the measurement and its report section."""
    from gapforge.bench.measure import measure_capture
    from gapforge.bench.scope import read_scope
    from gapforge.outputs.scope_figure import scope_section

    if any(scope.get(k) is not None for k in ("node", "bus", "soft_within")):
        raise GapforgeError("the switch-node check is made by `gapforge measure`", "report")
    from gapforge.bench.capture import vcd_named_csv

    vcd_named_csv(capture)
    cap = read_scope([capture], high, low, settings_from(scope, None))
    result = measure_capture(cap.stream, limits=limits[0], glitch_width_s=glitch,
                             limits_source=limits[1], unjudged=limits[2])
    return result, (scope_section(cap, result),)


def soft_check(design: Path | None, current: Fraction | None,
               node: NodeResult | None) -> list[str]:
    """With --design, --current and --node: the edges the table calls soft, measured hard."""
    if current is None or design is None:
        return []
    if node is None:
        raise GapforgeError("--current with --design checks soft turn-ons at the switch node: "
                            "give --node and --bus", "--current")
    from gapforge.pipeline.scope_check import soft_edges

    reasons = []
    for edge, soft in sorted(soft_edges(design, current).items()):
        measured = node.edges[edge]
        if soft and measured.hard:
            reasons.append(f"{edge}: the table calls this edge soft at {format_si(current, 'A')}"
                           f", but {measured.hard} of {measured.count} turn-on(s) were hard "
                           f"(node not within {float(node.within) * 100:g} % of the rail)")
        if soft and measured.count == 0:
            reasons.append(f"{edge}: the table calls this edge soft at "
                           f"{format_si(current, 'A')}, but no turn-on was measured at the node")
    return reasons


def _failed(result: Measurement, reasons: list[str]) -> Measurement:
    from dataclasses import replace

    return replace(result, verdict="fail", reasons=tuple(reasons) + result.reasons)


def _v(value: Fraction | float) -> str:
    return format_si(value, "V")


def _reference_json(cap: ScopeCapture, side: str) -> dict[str, Any]:
    edges = cap.high if side == "high" else cap.low
    ref = cap.settings.high if side == "high" else cap.settings.low
    chan = cap.channels[side]
    return {
        "channel": chan.layout.columns[chan.index].name,
        "file": chan.layout.path.name,
        "threshold_v": edges.threshold_v,
        "level_percent": None if ref.level_percent is None else float(ref.level_percent),
        "state_levels_v": None if edges.state_levels_v is None else list(edges.state_levels_v),
        "deskew_s": float(getattr(cap.settings, f"deskew_{side}_s")),
        "samples": edges.samples,
        "sample_interval_min_s": edges.min_interval_s,
        "sample_interval_max_s": edges.max_interval_s,
        "crossing_interval_max_s": edges.crossing_interval_s,
    }


def analog_json(cap: ScopeCapture) -> dict[str, Any]:
    return {
        "high": _reference_json(cap, "high"),
        "low": _reference_json(cap, "low"),
        "hysteresis_v": float(cap.settings.hysteresis_v),
        "resolution_s": float(cap.resolution_s),
        "resolution_basis": "stated" if cap.resolution_stated else "sample interval",
    }


def node_json(node: NodeResult | None, current: Fraction | None,
              bus: tuple[Fraction, str] | None) -> dict[str, Any] | None:
    if node is None or bus is None:
        return None
    import numpy as np

    out: dict[str, Any] = {"channel": node.name, "bus_v": float(node.bus_v),
                           "bus_source": bus[1],
                           "soft_within": float(node.within),
                           "current_a": None if current is None else float(current)}
    for edge, e in node.edges.items():
        known = e.shares[~np.isnan(e.shares)]
        out[edge] = {"turn_ons": e.count, "hard": e.hard,
                     "min_share": float(known.min()) if known.size else None,
                     "max_share": float(known.max()) if known.size else None,
                     "shares": [round(float(v), 6) for v in known[:1000]]}
    return out


def analog_lines(cap: ScopeCapture) -> list[str]:
    lines = ["Analog capture:"]
    for side in ("high", "low"):
        e = cap.high if side == "high" else cap.low
        ref = cap.settings.high if side == "high" else cap.settings.low
        chan = cap.channels[side]
        how = f"threshold {_v(e.threshold_v)}"
        if ref.level_percent is not None and e.state_levels_v is not None:
            lo, hi = e.state_levels_v
            how += (f" ({float(ref.level_percent):g} % between the state levels {_v(lo)} and "
                    f"{_v(hi)}, IEEE 181 histogram method)")
        skew = getattr(cap.settings, f"deskew_{side}_s")
        lines.append(f"  {side} side: {quoted(chan.layout.columns[chan.index].name)} in "
                     f"{chan.layout.path.name}, {how}, deskew {format_si(skew, 's')}, "
                     f"{e.samples} samples {_spacing(e.min_interval_s, e.max_interval_s)}")
    basis = "stated" if cap.resolution_stated else "the sample interval around the crossings"
    lines.append(f"  hysteresis {_v(cap.settings.hysteresis_v)}; resolution "
                 f"{format_si(cap.resolution_s, 's')} ({basis}); instants by linear "
                 "interpolation at the threshold (IEEE 181)")
    return lines


def node_lines(node: NodeResult | None, bus: tuple[Fraction, str] | None) -> list[str]:
    if node is None or bus is None:
        return []
    lines = [f"Switch node {quoted(node.name)} at each turn-on, as a share of the "
             f"{_v(node.bus_v)} bus (from {bus[1]}; soft within {float(node.within) * 100:g} % "
             "of the rail):"]
    for edge, e in node.edges.items():
        rail = "the bus" if edge == "to_high" else "zero"
        if e.count == 0:
            lines.append(f"  {edge}: no turn-on inside the node capture")
            continue
        import numpy as np

        known = e.shares[~np.isnan(e.shares)]
        lines.append(f"  {edge} (node moves to {rail}): {e.count} turn-on(s), share "
                     f"{float(known.min()) * 100:.1f} % to {float(known.max()) * 100:.1f} %, "
                     f"{e.hard} hard")
    return lines


__all__ = ["SCOPE_KEYS", "THRESHOLD_OPTIONS", "logic_capture", "run_scope", "scope_options",
           "wants_scope"]


def _spacing(shortest: float, longest: float) -> str:
    """'every 500 ps', or 'at intervals of 1 .. 2 ns' when the samples are unevenly spaced."""
    from gapforge.base.display import format_range, format_si
    from gapforge.bench.scope import UNEVEN

    if longest > UNEVEN * shortest:
        return f"at intervals of {format_range(shortest, longest, 's', cut='nearest')}"
    return f"every {format_si(longest, 's')}"
