"""The report's figures, each built from plain data (no plan, no model): SVG text.

    timing_figure        the pair through one PWM period, dead times dimensioned
    transition_figure    one transition to scale
    analog_figure        the reference's capacitor node against the Schmitt thresholds
    staircase_figure     a layout's quantization staircase around the chosen code

(The histograms - the reference's Monte Carlo, measured gaps - and the overlap figures are in
`histograms`.)

`report` gathers the data (from the build plan, the reference network, the capture) and calls
these; they only place it, with every coordinate computed here in Python and written by `svg`
with fixed decimals, so the same data gives byte-identical SVG.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import replace
from fractions import Fraction

from gapforge.base.display import format_range, format_si
from gapforge.base.records import record
from gapforge.outputs.svg import (
    INK,
    PALETTE,
    Axis,
    Figure,
    Style,
    band_x,
    dimension,
    eng,
    legend,
    nice_range,
    nice_ticks,
    place_labels,
    step_points,
    text_width,
    vline,
    x_axis,
    y_axis,
)

LEFT, RIGHT = 120.0, 30.0  # the timing figure's margins
MC_BINS = 40  # histogram bars
MIN_BAND_PX = 1.0  # a shaded band narrower than a pixel is not drawn (nor listed in a legend)

Window = tuple[Fraction | None, Fraction | None]  # a dead-time window's min and max, if any


# ---------------------------------------------------------------------------------------------
# 1. the pair through one PWM period


@record
class PairTiming:
    """Times (seconds, exact) of one PWM period at 50 % commanded duty."""

    period_s: Fraction
    assumed_period: bool  # True when the design has no [pwm] section
    command_on_s: Fraction  # the PWM command rises
    command_off_s: Fraction  # the PWM command falls
    to_high: tuple[Fraction, Fraction, Fraction]  # achieved, min, max
    to_low: tuple[Fraction, Fraction, Fraction]

    @property
    def high_on_s(self) -> Fraction:
        return self.command_on_s + self.to_high[0]

    @property
    def low_on_s(self) -> Fraction:
        return self.command_off_s + self.to_low[0]

    def turn_off_s(self, edge: str) -> Fraction:
        """When the switch turning off before `edge` turns off (the command edge)."""
        return self.command_on_s if edge == "to_high" else self.command_off_s


def timing_figure(pt: PairTiming, prefix: str, windows: Mapping[str, Window], ident: str) -> str:
    """Command, high-side and low-side gates through one period; gaps dimensioned.

    `windows` maps each edge (to_high, to_low) to its dead-time window.
    """
    width, height = 1000, 330
    xa = Axis(0.0, float(pt.period_s), LEFT, width - RIGHT)
    fig = Figure(ident, width, height, f"Timing of {prefix} through one PWM period",
                 "Command, high-side gate and low-side gate; dead times shaded and dimensioned.")
    rows = {"command": 70.0, "high": 140.0, "low": 210.0}
    amp = 30.0
    period = float(pt.period_s)
    on, off = float(pt.command_on_s), float(pt.command_off_s)
    high_on, low_on = float(pt.high_on_s), float(pt.low_on_s)
    low_wrap = low_on if low_on <= period else period
    levels = {
        "command": [(0.0, 0), (on, 1), (off, 0)],
        "high": [(0.0, 0), (high_on, 1), (off, 0)],
        "low": [(0.0, 1), (on, 0), (low_wrap, 1)],
    }
    styles = {"command": Style(INK, "", "none", 1.2), "high": PALETTE["high"], "low": PALETTE["low"]}
    names = {"command": "PWM command", "high": "high-side gate", "low": "low-side gate"}
    # dead-time intervals shaded (both gates off), tolerance bands, window edges
    drawn_band = drawn_window = False
    for edge, start, dead in (("to_high", on, pt.to_high), ("to_low", off, pt.to_low)):
        end = start + float(dead[0])
        band_x(fig, xa(start), xa(end), rows["high"] - amp - 8, rows["low"] + 8,
               Style(INK, fill="#e9ecf1", opacity=1.0), f"gap-{edge}")
        if wide_enough(xa, start + float(dead[1]), start + float(dead[2])):
            band_x(fig, xa(start + float(dead[1])), xa(start + float(dead[2])),
                   rows["high"] - amp - 8, rows["low"] + 8, PALETTE["tolerance"],
                   f"tolerance-{edge}")
            drawn_band = True
        lo, hi = windows[edge]
        for bound, name in ((lo, "min"), (hi, "max")):
            if bound is not None:
                vline(fig, xa(start + float(bound)), rows["command"] - amp - 10, rows["low"] + 14,
                      PALETTE["window"], f"window-{name}-{edge}")
                drawn_window = True
    for key, y in rows.items():
        pts = wave_points(levels[key], period, xa, y, amp)
        fig.polyline(pts, styles[key], f"gate-{key}")
        fig.text(LEFT - 8, y - amp / 2 + 4, names[key], anchor="end", size=11, cls="row-label")
    ticks = nice_ticks(0.0, period, 8)
    x_axis(fig, xa, rows["low"] + 30, ticks, "s", "time in the PWM period")
    for edge, start, dead in (("to_high", on, pt.to_high), ("to_low", off, pt.to_low)):
        label = f"{edge} {eng(float(dead[0]), 's')}"
        dimension(fig, xa(start), xa(start + float(dead[0])), rows["command"] - amp - 14, label,
                  PALETTE["high"] if edge == "to_high" else PALETTE["low"], f"dim-{edge}")
    entries = [
        ("high-side gate", PALETTE["high"], "line"),
        ("low-side gate", PALETTE["low"], "line"),
        ("dead time", Style(INK, fill="#e9ecf1"), "bar"),
    ]
    if drawn_band:
        entries.append(("clock-tolerance band", PALETTE["tolerance"], "band"))
    if drawn_window:
        entries.append(("window edges", PALETTE["window"], "line"))
    legend(fig, LEFT, height - 14, entries)
    return fig.render()


def wave_points(changes: Sequence[tuple[float, int]], end: float, xa: Axis, y: float,
          amp: float) -> list[tuple[float, float]]:
    """Pixel points of a logic waveform: (time, level) changes, held until `end`."""
    pts: list[tuple[float, float]] = []
    for i, (t, level) in enumerate(changes):
        yy = y - amp * level
        if i > 0:
            pts.append((xa(t), pts[-1][1]))
        pts.append((xa(t), yy))
    pts.append((xa(end), pts[-1][1]))
    return pts


def transition_figure(
    prefix: str,
    edge: str,
    dead: tuple[Fraction, Fraction, Fraction],
    requested: Fraction,
    window: Window,
    ident: str,
) -> str:
    """One transition to scale: the gate turning off at 0, the other turning on after the gap.

    `dead` is the achieved dead time with its worst-case min and max over the clock tolerance.
    """
    achieved, amin, amax = dead
    lo, hi = window
    top = max(x for x in (amax, hi, lo, requested) if x is not None)
    x_lo, x_hi = nice_range(-0.3 * float(top), 1.3 * float(top), 8)
    width, height = 480, 330
    xa = Axis(x_lo, x_hi, 70.0, width - 20.0)
    fig = Figure(ident, width, height, f"{prefix} {edge} to scale",
                 "The gate turning off at time 0, the other gate turning on after the dead time.")
    off_key, on_key = ("low", "high") if edge == "to_high" else ("high", "low")
    rows = {on_key: 120.0, off_key: 190.0}
    amp = 30.0
    if lo is not None:
        band_x(fig, xa(float(lo)), xa(float(hi) if hi is not None else x_hi), 60, 200,
               PALETTE["window"], f"window-{edge}")
    band = wide_enough(xa, amin, amax)
    if band:
        band_x(fig, xa(float(amin)), xa(float(amax)), 60, 200, PALETTE["tolerance"],
               f"tolerance-{edge}")
    labels = []
    for bound, name, side in ((lo, "min", -1), (hi, "max", +1)):
        if bound is not None:
            vline(fig, xa(float(bound)), 56, 204, PALETTE["window"], f"window-{name}")
            # the min label left of its line, the max label right of its line (clear of both
            # lines); place_labels keeps them inside the figure and apart
            half = text_width(f"window {name}", 10) / 2
            labels.append((xa(float(bound)) + side * (half + 4), f"window {name}"))
    place_labels(fig, labels, 70, cls="window-label")
    vline(fig, xa(float(requested)), 56, 204, PALETTE["request"], "request")
    fig.polyline(wave_points([(x_lo, 1), (0.0, 0)], x_hi, xa, rows[off_key], amp), PALETTE[off_key],
                 f"gate-{off_key}")
    fig.polyline(wave_points([(x_lo, 0), (float(achieved), 1)], x_hi, xa, rows[on_key], amp),
                 PALETTE[on_key], f"gate-{on_key}")
    fig.text(66, rows[on_key] - 10, f"{on_key} on", anchor="end", size=10, cls="row-label")
    fig.text(66, rows[off_key] - 10, f"{off_key} off", anchor="end", size=10, cls="row-label")
    x_axis(fig, xa, 214, nice_ticks(x_lo, x_hi, 8), "s", "time from the turn-off edge")
    dimension(fig, xa(0.0), xa(float(achieved)), 34, f"{edge} {eng(float(achieved), 's')}",
              PALETTE[on_key], "dim")
    entries = [("request", PALETTE["request"], "line")]
    if lo is not None:
        entries.append(("window", PALETTE["window"], "band"))
    if band:
        entries.append(("clock-tolerance band", PALETTE["tolerance"], "band"))
    legend(fig, 20, height - 18, entries)
    fig.text(xa(x_lo) + 2, 282,
             f"worst case {format_range(amin, amax, 's', cut='outward')}; "
             f"requested {format_si(requested, 's')}", size=10, cls="note")
    return fig.render()


# ---------------------------------------------------------------------------------------------
# 2. the analog reference's node ramps


@record
class Ramp:
    """The node voltage of one input edge at typical parts."""

    edge: str
    vdd: float
    threshold: tuple[float, float, float]  # min, typ, max volts
    closed_form: tuple[tuple[float, float], ...]  # (time s, volts)
    delay_s: float  # closed form, to the typical threshold
    simulated: tuple[tuple[float, float], ...]  # (time s, volts) the transient waveform, or ()
    delay_sim_s: float | None  # the transient's threshold crossing


def _clip(points: Sequence[tuple[float, float]], x_hi: float) -> list[tuple[float, float]]:
    """Points up to x_hi, the last segment cut at x_hi by linear interpolation."""
    out: list[tuple[float, float]] = []
    for t, v in points:
        if t <= x_hi:
            out.append((t, v))
            continue
        if out:
            t0, v0 = out[-1]
            out.append((x_hi, v0 + (v - v0) * (x_hi - t0) / (t - t0)))
        break
    return out


def _thin(points: Sequence[tuple[float, float]]) -> list[tuple[float, float]]:
    """The points less any that lands on the previous kept one to the written 0.01 px (the
    integrator's first steps are far shorter than a pixel)."""
    out: list[tuple[float, float]] = []
    for x, y in points:
        if out and abs(x - out[-1][0]) < 0.005 and abs(y - out[-1][1]) < 0.005:
            continue
        out.append((x, y))
    return out


def analog_figure(ramp: Ramp, bypassed: bool, ident: str) -> str:
    """Node voltage against time for one input edge, thresholds and the delay marked."""
    delay = ramp.delay_sim_s if ramp.delay_sim_s is not None else ramp.delay_s
    x_lo, x_hi = nice_range(0.0, 2.5 * max(delay, ramp.delay_s), 6)
    width, height = 480, 340
    xa = Axis(x_lo, x_hi, 80.0, width - 20.0)
    ya = Axis(0.0, ramp.vdd, 250.0, 62.0)
    kind = "diode-bypassed edge" if bypassed else "resistor edge"
    title = f"Node voltage, {ramp.edge} input edge ({kind})"
    fig = Figure(ident, width, height, title,
                 "Capacitor node after an ideal input step, against the Schmitt threshold band.")
    fig.text(80, 22, title, size=12, cls="figure-title", weight="bold")
    thr_lo, thr_typ, thr_hi = ramp.threshold
    fig.rect(xa.start, ya(thr_hi), xa.end - xa.start, ya(thr_lo) - ya(thr_hi),
             PALETTE["threshold"].fill, "threshold-band", opacity=PALETTE["threshold"].opacity)
    fig.line(xa.start, ya(thr_typ), xa.end, ya(thr_typ), PALETTE["threshold"], "threshold")
    name = "VT+" if ramp.edge == "rising" else "VT-"
    fig.text(xa.end - 4, ya(thr_typ) - 5, f"{name} typ {format_si(thr_typ, 'V')}", anchor="end",
             size=10, cls="threshold-label")
    y_axis(fig, ya, xa.start, nice_ticks(0.0, ramp.vdd, 5), "V", "node voltage",
           grid_to=xa.end)
    x_axis(fig, xa, ya.start, nice_ticks(x_lo, x_hi, 6), "s", "time from the input step")
    cf = [(xa(t), ya(v)) for t, v in _clip(ramp.closed_form, x_hi)]
    fig.polyline(cf, PALETTE["closed-form"], "ramp-closed-form")
    entries = [("closed form", PALETTE["closed-form"], "line")]
    if ramp.simulated:
        sim = _thin([(xa(t), ya(v)) for t, v in _clip(ramp.simulated, x_hi)])
        fig.polyline(sim, PALETTE["simulated"], "ramp-simulated")
        entries.insert(0, ("simulated (transient)", PALETTE["simulated"], "line"))
    # the delay is dimensioned above the plot, where no curve runs (a label inside crossed them)
    top = ya.end - 10
    vline(fig, xa(delay), top, ya.start, Style(INK, "3 2", "none", 1.0), "delay-mark")
    label = f"delay {eng(delay, 's')}"
    if ramp.delay_sim_s is not None:
        label += f" (closed form {eng(ramp.delay_s, 's')})"
    dimension(fig, xa(0.0), xa(delay), top, label, Style(INK), "dim-delay")
    if ramp.delay_sim_s is not None:  # the simulated node meets the typical threshold here
        fig.marker(xa(delay), ya(thr_typ), replace(PALETTE["simulated"], marker="circle",
                                                    fill="#ffffff"), "crossing", 3.5)
    entries.append((f"{name} min..max", PALETTE["threshold"], "band"))
    legend(fig, 20, height - 30, entries)
    return fig.render()


# ---------------------------------------------------------------------------------------------
# 3. quantization staircases


@record
class Staircase:
    """Achieved dead time as a function of the request, around the chosen code (exact)."""

    values_s: tuple[Fraction, ...]  # representable values shown, increasing
    breaks_s: tuple[Fraction, ...]  # request breakpoints: values_s[i] serves (breaks[i], breaks[i+1]]
    chosen_s: Fraction
    requested_s: Fraction


def staircase_figure(
    sc: Staircase,
    prefix: str,
    field_name: str,
    edges: Sequence[str],
    window: Sequence[Window],
    ident: str,
) -> str:
    """Achieved against requested dead time for one field; `window` holds its edges' windows."""
    x_lo, x_hi = float(sc.breaks_s[0]), float(sc.breaks_s[-1])
    y_vals = [float(v) for v in sc.values_s]
    y_lo, y_hi = nice_range(min(y_vals[0], x_lo), max(y_vals[-1], x_hi), 6)
    width, height = 480, 380
    xa = Axis(y_lo, y_hi, 90.0, width - 20.0)
    ya = Axis(y_lo, y_hi, 290.0, 40.0)
    label = ", ".join(edges)
    title = f"{prefix} field {field_name} ({label})"
    fig = Figure(ident, width, height, title,
                 "Achieved dead time against the requested one at the chosen divider.")
    fig.text(90, 22, title, size=12, cls="figure-title", weight="bold")
    los = [w[0] for w in window if w[0] is not None]
    his = [w[1] for w in window if w[1] is not None]
    if los:
        w_lo = float(max(los))
        w_hi = float(min(his)) if his else y_hi
        fig.rect(xa.start, ya(min(w_hi, y_hi)), xa.end - xa.start,
                 ya(max(w_lo, y_lo)) - ya(min(w_hi, y_hi)), PALETTE["window"].fill, "window",
                 opacity=PALETTE["window"].opacity)
    y_axis(fig, ya, xa.start, nice_ticks(y_lo, y_hi, 6), "s", "achieved at nominal clock",
           grid_to=xa.end)
    x_axis(fig, xa, ya.start, nice_ticks(y_lo, y_hi, 6), "s", "requested")
    fig.line(xa(y_lo), ya(y_lo), xa(y_hi), ya(y_hi), Style("#b8bec8", "1 3", "none", 1.0),
             "identity")
    pts = step_points([float(b) for b in sc.breaks_s], y_vals, xa, ya)
    fig.polyline(pts, Style(INK, "", "none", 1.6), "staircase")
    vline(fig, xa(float(sc.requested_s)), ya.end, ya.start, PALETTE["request"], "request")
    fig.marker(xa(float(sc.requested_s)), ya(float(sc.chosen_s)), PALETTE["chosen"], "chosen", 5)
    # left of and above the chosen point: the rising staircase and the identity line both run
    # below it there, and the request line stays right of the label
    fig.text(xa(float(sc.requested_s)) - 8, ya(float(sc.chosen_s)) - 10,
             f"chosen {eng(float(sc.chosen_s), 's')}", anchor="end", size=10, cls="chosen-label")
    entries = [
        ("achieved (each step a code)", Style(INK, "", "none", 1.6), "line"),
        ("chosen", PALETTE["chosen"], "marker"),
        ("request", PALETTE["request"], "line"),
    ]
    if los:
        entries.append(("window", PALETTE["window"], "band"))
    legend(fig, 20, height - 30, entries)
    return fig.render()


def wide_enough(xa: Axis, lo: Fraction | float, hi: Fraction | float) -> bool:
    """A band at least a pixel wide: a narrower one is neither drawn nor listed in a legend."""
    return abs(xa(float(hi)) - xa(float(lo))) >= MIN_BAND_PX
