"""The design report: one self-contained HTML page with inline SVG figures and tables.

    plan (build.plan_design) --+--> figures (svg.Figure; Python computes every coordinate)
    capture (measure result) --+--> tables (rows of prepared strings)
                                      --> templates/report.html.j2 (Jinja2, StrictUndefined,
                                          loops only, no arithmetic) --> text

Figures: the complementary pair through one PWM period with both dead times dimensioned, the
clock-tolerance band shaded and the window edges drawn, plus a to-scale zoom of each transition;
the analog reference's node ramps against the Schmitt thresholds with the delay marked; the
quantization staircase of every output's layout around the request; the Monte Carlo histogram
of the reference's dead times with the window and the digital value; with a capture, the
histograms of measured gaps and the overlaps. A section whose input is absent (no [reference],
no [stage], no capture) says so instead of drawing.

Deterministic: no timestamps, a fixed Monte Carlo seed, fixed decimals in every coordinate, so a
rerun is byte-identical. Returns text; only the CLI writes files.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from fractions import Fraction
from typing import TYPE_CHECKING, Any

import jinja2
from markupsafe import Markup

from gapforge import __version__
from gapforge.build import BuildPlan, OutputPlan
from gapforge.layouts import EDGES, Field
from gapforge.quantities import format_quantity, format_tolerance
from gapforge.svg import (
    INK,
    PALETTE,
    Axis,
    Figure,
    Style,
    band_x,
    dimension,
    eng,
    histogram,
    legend,
    nice_range,
    nice_ticks,
    step_points,
    vline,
    x_axis,
    y_axis,
)
from gapforge.views import CAUTION

if TYPE_CHECKING:
    from gapforge.analog import ReferenceNetwork
    from gapforge.measure import Limits, Measurement

REPORT_FORMAT = 1
MC_SAMPLES = 20_000  # Monte Carlo samples drawn for the histogram (uniform over every band)
MC_SEED = 1
MC_BINS = 40
STAIR_STEPS = 6  # representable values shown each side of the chosen one
CURVE_POINTS = 80  # closed-form node ramp points per edge
SIM_LEVELS = 11  # simulated node-ramp points per edge (one threshold crossing each)

EDGE_TEXT = {
    "to_high": "to_high (low side off, then high side on)",
    "to_low": "to_low (high side off, then low side on)",
}


# ---------------------------------------------------------------------------------------------
# what the template receives


@dataclass(frozen=True)
class TableBlock:
    title: str
    headers: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class FigureBlock:
    svg: Markup
    caption: str


@dataclass(frozen=True)
class Section:
    ident: str
    title: str
    paragraphs: tuple[str, ...]
    figures: tuple[FigureBlock, ...] = ()
    tables: tuple[TableBlock, ...] = ()


def _t(value: Fraction | float | None, digits: int = 6) -> str:
    return "-" if value is None else format_quantity(value, "s", digits)


def _pct(value: Fraction | float) -> str:
    return f"{float(value) * 100:.4g} %"


# ---------------------------------------------------------------------------------------------
# geometry shared by the figures

LEFT, RIGHT = 120.0, 30.0


def _window_of(plan: BuildPlan, edge: str) -> tuple[Fraction | None, Fraction | None]:
    if plan.window is None:
        return None, None
    return plan.window[edge]


def _achieved(op: OutputPlan, edge: str) -> tuple[Fraction, Fraction, Fraction]:
    e = op.fit.edges[edge]
    assert e.achieved_s is not None and e.achieved_min_s is not None
    assert e.achieved_max_s is not None
    return e.achieved_s, e.achieved_min_s, e.achieved_max_s


# ---------------------------------------------------------------------------------------------
# 1. the pair through one PWM period


@dataclass(frozen=True)
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


def pair_timing(op: OutputPlan) -> PairTiming:
    """One period, edge-aligned (command on at 0) or centre-aligned (on-time centred)."""
    th, tl = _achieved(op, "to_high"), _achieved(op, "to_low")
    if op.limits is not None:
        period = 1 / op.limits.real_frequency_hz
        centre = op.limits.spec.counting == "center"
        assumed = False
    else:
        period = 20 * max(th[2], tl[2])
        centre, assumed = True, True
    on = period / 4 if centre else Fraction(0)
    return PairTiming(period, assumed, on, on + period / 2, th, tl)


def timing_figure(plan: BuildPlan, op: OutputPlan, ident: str) -> str:
    """Command, high-side and low-side gates through one period; gaps dimensioned."""
    pt = pair_timing(op)
    width, height = 1000, 330
    xa = Axis(0.0, float(pt.period_s), LEFT, width - RIGHT)
    fig = Figure(ident, width, height, f"Timing of {op.output.prefix} through one PWM period",
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
    for edge, start, dead in (("to_high", on, pt.to_high), ("to_low", off, pt.to_low)):
        end = start + float(dead[0])
        band_x(fig, xa(start), xa(end), rows["high"] - amp - 8, rows["low"] + 8,
               Style(INK, fill="#e9ecf1", opacity=1.0), f"gap-{edge}")
        band_x(fig, xa(start + float(dead[1])), xa(start + float(dead[2])),
               rows["high"] - amp - 8, rows["low"] + 8, PALETTE["tolerance"], f"tolerance-{edge}")
        lo, hi = _window_of(plan, edge)
        for bound, name in ((lo, "min"), (hi, "max")):
            if bound is not None:
                vline(fig, xa(start + float(bound)), rows["command"] - amp - 10, rows["low"] + 14,
                      PALETTE["window"], f"window-{name}-{edge}")
    for key, y in rows.items():
        pts = _wave(levels[key], period, xa, y, amp)
        fig.polyline(pts, styles[key], f"gate-{key}")
        fig.text(LEFT - 8, y - amp / 2 + 4, names[key], anchor="end", size=11, cls="row-label")
    ticks = nice_ticks(0.0, period, 8)
    x_axis(fig, xa, rows["low"] + 30, ticks, "s", "time in the PWM period")
    for edge, start, dead in (("to_high", on, pt.to_high), ("to_low", off, pt.to_low)):
        label = f"{edge} {eng(float(dead[0]), 's')}"
        dimension(fig, xa(start), xa(start + float(dead[0])), rows["command"] - amp - 14, label,
                  PALETTE["high"] if edge == "to_high" else PALETTE["low"], f"dim-{edge}")
    legend(fig, LEFT, height - 14, [
        ("high-side gate", PALETTE["high"], "line"),
        ("low-side gate", PALETTE["low"], "line"),
        ("dead time", Style(INK, fill="#e9ecf1"), "bar"),
        ("clock-tolerance band", PALETTE["tolerance"], "band"),
        ("window edges", PALETTE["window"], "line"),
    ])
    return fig.render()


def _wave(changes: Sequence[tuple[float, int]], end: float, xa: Axis, y: float,
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


def transition_figure(plan: BuildPlan, op: OutputPlan, edge: str, ident: str) -> str:
    """One transition to scale: the gate turning off at 0, the other turning on after the gap."""
    achieved, amin, amax = _achieved(op, edge)
    requested = op.fit.edges[edge].requested_s
    lo, hi = _window_of(plan, edge)
    top = max(x for x in (amax, hi, lo, requested) if x is not None)
    x_lo, x_hi = nice_range(-0.3 * float(top), 1.3 * float(top), 8)
    width, height = 480, 330
    xa = Axis(x_lo, x_hi, 70.0, width - 20.0)
    fig = Figure(ident, width, height, f"{op.output.prefix} {edge} to scale",
                 "The gate turning off at time 0, the other gate turning on after the dead time.")
    off_key, on_key = ("low", "high") if edge == "to_high" else ("high", "low")
    rows = {on_key: 120.0, off_key: 190.0}
    amp = 30.0
    if lo is not None:
        band_x(fig, xa(float(lo)), xa(float(hi) if hi is not None else x_hi), 60, 200,
               PALETTE["window"], f"window-{edge}")
    band_x(fig, xa(float(amin)), xa(float(amax)), 60, 200, PALETTE["tolerance"],
           f"tolerance-{edge}")
    for bound, name in ((lo, "min"), (hi, "max")):
        if bound is not None:
            vline(fig, xa(float(bound)), 56, 204, PALETTE["window"], f"window-{name}")
            fig.text(xa(float(bound)), 52, f"window {name}", anchor="middle", size=10,
                     cls="window-label")
    vline(fig, xa(float(requested)), 56, 204, PALETTE["request"], "request")
    fig.polyline(_wave([(x_lo, 1), (0.0, 0)], x_hi, xa, rows[off_key], amp), PALETTE[off_key],
                 f"gate-{off_key}")
    fig.polyline(_wave([(x_lo, 0), (float(achieved), 1)], x_hi, xa, rows[on_key], amp),
                 PALETTE[on_key], f"gate-{on_key}")
    fig.text(66, rows[on_key] - 10, f"{on_key} on", anchor="end", size=10, cls="row-label")
    fig.text(66, rows[off_key] - 10, f"{off_key} off", anchor="end", size=10, cls="row-label")
    x_axis(fig, xa, 214, nice_ticks(x_lo, x_hi, 8), "s", "time from the turn-off edge")
    dimension(fig, xa(0.0), xa(float(achieved)), 34, f"{edge} {eng(float(achieved), 's')}",
              PALETTE[on_key], "dim")
    legend(fig, 20, height - 18, [
        ("request", PALETTE["request"], "line"),
        ("window", PALETTE["window"], "band"),
        ("clock-tolerance band", PALETTE["tolerance"], "band"),
    ])
    fig.text(xa(x_lo) + 2, 282,
             f"worst case {eng(float(amin), 's')} .. {eng(float(amax), 's')}; "
             f"requested {eng(float(requested), 's')}", size=10, cls="note")
    return fig.render()


# ---------------------------------------------------------------------------------------------
# 2. the analog reference's node ramps


@dataclass(frozen=True)
class Ramp:
    """The node voltage of one input edge at typical parts."""

    edge: str
    vdd: float
    threshold: tuple[float, float, float]  # min, typ, max volts
    closed_form: tuple[tuple[float, float], ...]  # (time s, volts)
    delay_s: float  # closed form, to the typical threshold
    simulated: tuple[tuple[float, float], ...]  # (time s, volts) threshold crossings, or ()
    delay_sim_s: float | None


def node_ramps(net: ReferenceNetwork, simulate: bool = True) -> dict[str, Ramp]:
    """Both input edges' node ramps: the model's closed form and, if asked, the simulation.

    The closed-form curve is the model's own delay function evaluated at many threshold levels
    (the time the node needs to reach each level), so it is the very formula the ranges come
    from. The simulated points are separate transient runs, each to one threshold level.
    """
    import numpy as np

    from gapforge.analog import channel_edge_delays, values_at

    vdd = float(net.vdd.typ)
    n = CURVE_POINTS
    levels = vdd * (np.arange(1, n) / n)
    v = dict(values_at(net, {"vdd": np.full(n - 1, 0.5)}))
    v["vt_plus"] = levels
    v["vt_minus"] = levels
    curve = channel_edge_delays(net, v)
    typ = dict(values_at(net, {"vdd": np.full(1, 0.5)}))
    typ_delays = channel_edge_delays(net, typ)
    ramps: dict[str, Ramp] = {}
    for edge in ("rising", "falling"):
        band = net.vt_plus if edge == "rising" else net.vt_minus
        thr = tuple(lv.volts(vdd) for lv in band.levels())
        times = curve["node_" + edge]
        start = 0.0 if edge == "rising" else vdd
        pts = [(0.0, start)] + [(float(t), float(lv)) for t, lv in zip(times, levels, strict=True)]
        if edge == "falling":
            pts = [pts[0], *sorted(pts[1:], key=lambda p: p[0])]
        sim_pts: tuple[tuple[float, float], ...] = ()
        sim_delay = None
        if simulate:
            sim_pts, sim_delay = _simulated_ramp(net, edge, vdd)
        ramps[edge] = Ramp(edge, vdd, (thr[0], thr[1], thr[2]), tuple(pts),
                           float(typ_delays["node_" + edge][0]), sim_pts, sim_delay)
    return ramps


def _simulated_ramp(
    net: ReferenceNetwork, edge: str, vdd: float
) -> tuple[tuple[tuple[float, float], ...], float | None]:
    try:
        from gapforge import simulate
    except ImportError:  # the transient simulation has not landed: closed form only
        return (), None
    circuit = simulate.edge_circuit(net, edge)
    try:
        delay = simulate.simulate_edge(circuit).delay_s
    except simulate.SimulationError:
        return (), None
    start = 0.0 if edge == "rising" else vdd
    pts = [(0.0, start)]
    for k in range(1, SIM_LEVELS + 1):
        level = vdd * k / (SIM_LEVELS + 1)
        try:
            t = simulate.simulate_edge(replace(circuit, threshold=level), tolerance=1e-5).delay_s
        except simulate.SimulationError:
            continue
        pts.append((t, level))
    pts = [pts[0], *sorted(pts[1:])]
    return tuple(pts), delay


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


def analog_figure(ramp: Ramp, bypassed: bool, ident: str) -> str:
    """Node voltage against time for one input edge, thresholds and the delay marked."""
    delay = ramp.delay_sim_s if ramp.delay_sim_s is not None else ramp.delay_s
    x_lo, x_hi = nice_range(0.0, 2.5 * max(delay, ramp.delay_s), 6)
    width, height = 480, 340
    xa = Axis(x_lo, x_hi, 80.0, width - 20.0)
    ya = Axis(0.0, ramp.vdd, 250.0, 50.0)
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
    fig.text(xa.end - 4, ya(thr_typ) - 5, f"{name} typ {thr_typ:.3f} V", anchor="end", size=10,
             cls="threshold-label")
    y_axis(fig, ya, xa.start, nice_ticks(0.0, ramp.vdd, 5), "V", "node voltage",
           grid_to=xa.end)
    x_axis(fig, xa, ya.start, nice_ticks(x_lo, x_hi, 6), "s", "time from the input step")
    cf = [(xa(t), ya(v)) for t, v in _clip(ramp.closed_form, x_hi)]
    fig.polyline(cf, PALETTE["closed-form"], "ramp-closed-form")
    entries = [("closed form", PALETTE["closed-form"], "line")]
    if ramp.simulated:
        sim = [(xa(t), ya(v)) for t, v in _clip(ramp.simulated, x_hi)]
        fig.polyline(sim, PALETTE["simulated"], "ramp-simulated")
        for x, y in sim[1:]:
            fig.marker(x, y, replace(PALETTE["simulated"], marker="circle", fill="#ffffff"),
                       "ramp-point", 3.5)
        entries.insert(0, ("simulated (transient)", replace(PALETTE["simulated"], marker="circle",
                                                             fill="#ffffff"), "line+marker"))
    vline(fig, xa(delay), ya(thr_typ), ya.start, Style(INK, "3 2", "none", 1.0), "delay-mark")
    label = f"delay {eng(delay, 's')}"
    if ramp.delay_sim_s is not None:
        label += f" (closed form {eng(ramp.delay_s, 's')})"
    dimension(fig, xa(0.0), xa(delay), ya.start - 16, label, Style(INK), "dim-delay")
    entries.append((f"{name} min..max", PALETTE["threshold"], "band"))
    legend(fig, 20, height - 30, entries)
    return fig.render()


# ---------------------------------------------------------------------------------------------
# 3. quantization staircases


@dataclass(frozen=True)
class Staircase:
    """Achieved dead time as a function of the request, around the chosen code (exact)."""

    values_s: tuple[Fraction, ...]  # representable values shown, increasing
    breaks_s: tuple[Fraction, ...]  # request breakpoints: values_s[i] serves (breaks[i], breaks[i+1]]
    chosen_s: Fraction
    requested_s: Fraction


def staircase(op: OutputPlan, field: Field, rounding: str) -> Staircase:
    """The rounding rule over the representable values near the chosen code, exactly.

    safe: a request r gets the smallest value v with v / (1 + tol) >= r, so value v_i serves
    requests in (v_(i-1) / (1 + tol), v_i / (1 + tol)]. nearest: v_i serves requests between
    the midpoints to its neighbours (a tie exactly on a midpoint sits on a riser, whichever
    value the fit gives it).
    """
    fit = op.fit
    assert fit.step_s is not None
    step, tol = fit.step_s, fit.request.clock_tol
    edges = [e for e in EDGES if fit.layout.edge_field(e) is field]
    requested = max(fit.request.requested(e) for e in edges)
    chosen_steps = fit.edges[edges[0]].steps
    assert chosen_steps is not None
    table = field.table[0]
    index = table.index(chosen_steps)
    lo, hi = max(0, index - STAIR_STEPS), min(len(table) - 1, index + STAIR_STEPS)

    def value(i: int) -> Fraction:
        return table[i] * step

    def upper(i: int) -> Fraction:
        """The largest request that value i serves."""
        if rounding == "safe":
            return value(i) / (1 + tol)
        return (value(i) + value(i + 1)) / 2 if i + 1 < len(table) else value(i)

    lower = Fraction(0) if lo == 0 else upper(lo - 1)
    breaks = (lower, *(upper(i) for i in range(lo, hi + 1)))
    return Staircase(tuple(value(i) for i in range(lo, hi + 1)), breaks, value(index), requested)


def staircase_figure(plan: BuildPlan, op: OutputPlan, field: Field, ident: str) -> str:
    sc = staircase(op, field, op.fit.request.rounding)
    edges = [e for e in EDGES if op.fit.layout.edge_field(e) is field]
    window = [_window_of(plan, e) for e in edges]
    x_lo, x_hi = float(sc.breaks_s[0]), float(sc.breaks_s[-1])
    y_vals = [float(v) for v in sc.values_s]
    y_lo, y_hi = nice_range(min(y_vals[0], x_lo), max(y_vals[-1], x_hi), 6)
    width, height = 480, 380
    xa = Axis(y_lo, y_hi, 90.0, width - 20.0)
    ya = Axis(y_lo, y_hi, 290.0, 40.0)
    label = ", ".join(edges)
    title = f"{op.output.prefix} field {field.name} ({label})"
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
    y_axis(fig, ya, xa.start, nice_ticks(y_lo, y_hi, 6), "s", "achieved (nominal)",
           grid_to=xa.end)
    x_axis(fig, xa, ya.start, nice_ticks(y_lo, y_hi, 6), "s", "requested")
    fig.line(xa(y_lo), ya(y_lo), xa(y_hi), ya(y_hi), Style("#b8bec8", "1 3", "none", 1.0),
             "identity")
    pts = step_points([float(b) for b in sc.breaks_s], y_vals, xa, ya)
    fig.polyline(pts, Style(INK, "", "none", 1.6), "staircase")
    for v in y_vals:
        fig.marker(xa.start, ya(v), PALETTE["representable"], "representable", 3.5)
    vline(fig, xa(float(sc.requested_s)), ya.end, ya.start, PALETTE["request"], "request")
    fig.marker(xa(float(sc.requested_s)), ya(float(sc.chosen_s)), PALETTE["chosen"], "chosen", 5)
    fig.text(xa(float(sc.requested_s)) + 8, ya(float(sc.chosen_s)) - 8,
             f"chosen {eng(float(sc.chosen_s), 's')}", size=10, cls="chosen-label")
    legend(fig, 20, height - 30, [
        ("representable value", PALETTE["representable"], "marker"),
        ("chosen", PALETTE["chosen"], "marker"),
        ("request", PALETTE["request"], "line"),
        ("window", PALETTE["window"], "band"),
    ])
    return fig.render()


# ---------------------------------------------------------------------------------------------
# 4. Monte Carlo of the reference


def reference_samples(net: ReferenceNetwork, samples: int = MC_SAMPLES,
                      seed: int = MC_SEED) -> dict[str, Any]:
    """Seeded samples of the pair's dead times: every varying part uniform over its band.

    The same distribution as `tolerance.monte_carlo`'s default (uniform positions per
    parameter, both channels' parts independent, supply/temperature/inverter shared).
    """
    import numpy as np

    from gapforge.analog import CHANNEL_PARAMS, SHARED_PARAMS, spread_parameters
    from gapforge.tolerance import evaluate

    rng = np.random.default_rng(seed)
    spread = set(spread_parameters(net))
    shared = {n: rng.random(samples) for n in SHARED_PARAMS if n in spread}
    shared.setdefault("vdd", np.full(samples, 0.5))
    high = {n: rng.random(samples) for n in CHANNEL_PARAMS if n in spread}
    low = {n: rng.random(samples) for n in CHANNEL_PARAMS if n in spread}
    return evaluate(net, shared, high, low)


def _bins(values: Any, marks: Sequence[float]) -> tuple[list[float], list[int]]:
    import numpy as np

    lo = min(float(values.min()), *marks) if marks else float(values.min())
    hi = max(float(values.max()), *marks) if marks else float(values.max())
    lo, hi = nice_range(lo, hi, 8)
    counts, edges = np.histogram(values, bins=MC_BINS, range=(lo, hi))
    return [float(e) for e in edges], [int(c) for c in counts]


def distribution_figure(
    values: Any,
    *,
    edge: str,
    window: tuple[Fraction | None, Fraction | None],
    digital: tuple[Fraction, Fraction, Fraction] | None,
    predicted: tuple[Fraction, Fraction] | None,
    style: Style,
    what: str,
    ident: str,
) -> str:
    """A histogram of dead times with the window and the digital value (or the prediction)."""
    marks = [float(x) for x in window if x is not None]
    if digital is not None:
        marks += [float(digital[1]), float(digital[2])]
    if predicted is not None:
        marks += [float(predicted[0]), float(predicted[1])]
    edges, counts = _bins(values, marks)
    top = max(counts) if counts else 1
    width, height = 480, 340
    xa = Axis(edges[0], edges[-1], 70.0, width - 20.0)
    _, c_hi = nice_range(0.0, 1.1 * float(max(top, 1)), 5)
    ya = Axis(0.0, c_hi, 250.0, 50.0)
    title = f"{what}: {edge}"
    fig = Figure(ident, width, height, title, f"Histogram of {what} with the window.")
    fig.text(70, 22, f"{title} ({len(values)} values)", size=12, cls="figure-title",
             weight="bold")
    if digital is not None:
        band_x(fig, xa(float(digital[1])), xa(float(digital[2])), ya.end, ya.start,
               PALETTE["tolerance"], "digital-band")
    if predicted is not None:
        band_x(fig, xa(float(predicted[0])), xa(float(predicted[1])), ya.end, ya.start,
               PALETTE["tolerance"], "predicted-band")
    histogram(fig, edges, counts, xa, ya, style, "bar")
    y_axis(fig, ya, xa.start, nice_ticks(0.0, c_hi, 5), "", "count", grid_to=xa.end)
    x_axis(fig, xa, ya.start, nice_ticks(edges[0], edges[-1], 6), "s", "dead time")
    for bound, name in zip(window, ("min", "max"), strict=True):
        if bound is not None:
            x = xa(float(bound))
            vline(fig, x, ya.end - 6, ya.start, PALETTE["window"], f"window-{name}")
            # min labelled above the plot, max inside it: close edges keep both labels legible
            fig.text(x + 3, ya.end - 10 if name == "min" else ya.end + 12, f"window {name}",
                     anchor="start", size=10, cls="window-label")
    entries = [(what, style, "bar"), ("window", PALETTE["window"], "line")]
    if digital is not None:
        vline(fig, xa(float(digital[0])), ya.end, ya.start, PALETTE["digital"], "digital")
        fig.marker(xa(float(digital[0])), ya.end, PALETTE["digital"], "digital-marker")
        entries += [("digital value", PALETTE["digital"], "line"),
                    ("clock-tolerance band", PALETTE["tolerance"], "band")]
    if predicted is not None:
        entries.append(("predicted range", PALETTE["tolerance"], "band"))
    legend(fig, 20, height - 30, entries)
    return fig.render()


def overlap_figure(m: Measurement, ident: str) -> str:
    """Where in the capture each overlap (both gates on) happened."""
    width, height = 980, 130
    start = 0.0
    end = float(m.duration_s) if m.duration_s > 0 else 1.0
    times = [float(o.at_s) for o in m.overlaps]
    if times:
        start = min(start, min(times))
        end = max(end, max(times))
    x_lo, x_hi = nice_range(start, end, 10)
    xa = Axis(x_lo, x_hi, 70.0, width - 20.0)
    fig = Figure(ident, width, height, "Overlaps (both gates on) in the capture",
                 "Each marker is one shoot-through event at its time stamp.")
    fig.line(xa.start, 60, xa.end, 60, Style("#b8bec8", width=6.0), "capture-span")
    for t in times:
        fig.marker(xa(t), 48, PALETTE["overlap"], "overlap", 6)
    fig.text(70, 22, f"{len(times)} overlap(s)", size=12, cls="figure-title", weight="bold")
    x_axis(fig, xa, 75, nice_ticks(x_lo, x_hi, 10), "s", "capture time")
    return fig.render()


# ---------------------------------------------------------------------------------------------
# tables


def input_tables(plan: BuildPlan) -> list[TableBlock]:
    d = plan.design
    rows: list[tuple[str, ...]] = [
        ("design file", d.label, ""),
        ("design SHA-256", d.sha256, ""),
        ("timer clock", format_quantity(d.clock_hz, "Hz", 9), "Hz"),
        ("clock tolerance", format_tolerance(d.clock_tol), "relative"),
        ("firmware clock macro", d.clock_macro, ""),
        ("PWM frequency", "-" if d.pwm is None else format_quantity(d.pwm.frequency_hz, "Hz", 9),
         "Hz"),
        ("PWM counting", "-" if d.pwm is None else d.pwm.counting + "-aligned", ""),
        ("dead time source", d.source, ""),
        ("rounding", d.rounding, ""),
    ]
    if d.dead_time is not None:
        rows += [(f"dead time {e} (given)", _t(d.dead_time[e]), "s") for e in EDGES]
    if plan.request is not None:
        rows += [(f"dead time {e} (requested)", _t(plan.request.requested(e)), "s") for e in EDGES]
    tables = [TableBlock("Design inputs", ("input", "value", "unit"), tuple(rows))]
    out_rows = tuple(
        (o.prefix, o.layout.name, o.layout.summary, o.file, "yes" if o.struct else "no")
        for o in d.outputs
    )
    tables.append(TableBlock("Outputs", ("prefix", "layout", "summary", "header file", "struct"),
                             out_rows))
    if d.reference is not None:
        from gapforge.analog import describe_parameters

        ref_rows = tuple(
            (name, value, "default" if is_default else "given", source)
            for name, value, is_default, source in describe_parameters(d.reference)
        )
        tables.append(TableBlock("Analog reference network (one channel)",
                                 ("parameter", "value (min : typ : max)", "", "default's source"),
                                 ref_rows, ("Every default is shown; enter your parts' data.",)))
    if d.stage is not None:
        spec = d.stage
        st_rows: list[tuple[str, ...]] = []
        for side in ("high", "low"):
            s = spec.side(side)
            st_rows += [
                (f"{side}: turn-off delay, max", _t(s.td_off_max), "s"),
                (f"{side}: fall time, max", _t(s.t_fall_max), "s"),
                (f"{side}: turn-on delay, min", _t(s.td_on_min), "s"),
                (f"{side}: rise time", _t(s.t_rise), "s"),
                (f"{side}: driver propagation delay", f"{_t(s.prop_min)} .. {_t(s.prop_max)}",
                 "s"),
            ]
        st_rows += [
            ("channel mismatch", _t(spec.mismatch), "s"),
            ("isolator / level-shifter skew", _t(spec.isolator_skew), "s"),
            ("timer output skew", _t(spec.timer_skew), "s"),
            ("margin factor", f"{float(spec.margin):g}", "x"),
            ("switch kind", spec.kind, ""),
            ("reverse-conduction voltage", format_quantity(spec.reverse_voltage, "V"), "V"),
            ("current at to_high", format_quantity(spec.current_to_high, "A"), "A"),
            ("current at to_low", format_quantity(spec.current_to_low, "A"), "A"),
            ("switching frequency", "-" if spec.fsw is None else format_quantity(spec.fsw, "Hz"),
             "Hz"),
            ("loss budget", "-" if spec.loss_budget is None
             else format_quantity(spec.loss_budget, "W"), "W"),
            ("bus voltage", "-" if spec.bus_voltage is None
             else format_quantity(spec.bus_voltage, "V"), "V"),
        ]
        tables.append(TableBlock("Power stage", ("input", "value", "unit"), tuple(st_rows)))
    return tables


def window_tables(plan: BuildPlan) -> list[TableBlock]:
    tables: list[TableBlock] = []
    rows: list[tuple[str, ...]] = []
    for e in EDGES:
        st = plan.stage_window[e] if plan.stage_window is not None else (None, None)
        ref = plan.reference[e] if plan.reference is not None else None
        win = _window_of(plan, e)
        rows.append((
            e,
            _t(st[0]), _t(st[1]) if st[1] is not None or plan.stage_window is None else "none",
            "-" if ref is None else f"{_t(ref.min_s)} .. {_t(ref.max_s)}",
            _t(win[0]), _t(win[1]) if win[1] is not None or plan.window is None else "none",
        ))
    tables.append(TableBlock(
        "Dead-time window", ("edge", "stage min", "stage max", "reference proven range",
                             "window min", "window max"), tuple(rows),
        ("The window is the power stage's window intersected with the reference's proven "
         "range.",)))
    if plan.stage is not None:
        for e in EDGES:
            terms = plan.stage.edges[e].breakdown
            t_rows = tuple(
                (t.name, _t(t.value) if t.unit == "s" else f"{float(t.value):g}",
                 "counted" if t.counted else "", t.note)
                for t in terms
            )
            tables.append(TableBlock(f"Minimum breakdown, {e} (common practice)",
                                     ("term", "value", "", "note"), t_rows))
        max_terms = plan.stage.edges["to_high"].max_breakdown
        if max_terms:
            tables.append(TableBlock(
                "Maximum (loss budget)", ("term", "value", "", "note"),
                tuple((t.name, _t(t.value) if t.unit == "s" else f"{float(t.value):g} {t.unit}",
                       "", t.note) for t in max_terms),
                (plan.stage.edges["to_high"].max_reason,)))
    return tables


def result_tables(plan: BuildPlan) -> list[TableBlock]:
    rows: list[tuple[str, ...]] = []
    margins: list[tuple[str, ...]] = []
    pwm: list[tuple[str, ...]] = []
    for op in plan.outputs:
        f = op.fit
        for e in EDGES:
            x = f.edges[e]
            rel = x.relative_error
            rows.append((
                op.output.prefix, f.layout.name, e, x.field,
                "-" if x.code is None else str(x.code),
                _t(x.requested_s), _t(x.achieved_s), f"{_t(x.achieved_min_s)} .. {_t(x.achieved_max_s)}",
                "-" if x.error_s is None else (
                    _t(x.error_s) + ("" if rel is None else f" ({float(rel) * 100:+.3g} %)")),
                _t(x.step_s), _t(x.max_s),
            ))
            j = op.judgements.get(e)
            win = _window_of(plan, e)
            margins.append((
                op.output.prefix, e, _t(win[0]), _t(win[1]),
                "-" if j is None else _t(j.margin_low_s),
                "-" if j is None else _t(j.margin_high_s),
                op.verdict if j is None else j.verdict,
            ))
        if op.limits is not None:
            lim = op.limits
            pwm.append((
                op.output.prefix, str(lim.period_counts), format_quantity(lim.real_frequency_hz, "Hz", 9),
                f"{lim.duty_bits:.2f}", f"{_pct(lim.duty_min)} .. {_pct(lim.duty_max)}",
                _pct(lim.edges["to_high"].share), _pct(lim.edges["to_low"].share), lim.verdict,
            ))
    regs = tuple(
        (op.output.prefix, op.fit.layout.name,
         "-" if op.fit.divider is None else f"code {op.fit.divider_code} (/{op.fit.divider})",
         _t(op.fit.step_s), ", ".join(f"{k}={v}" for k, v in op.fit.fields.items()) or "-",
         "-" if op.fit.register is None else f"0x{op.fit.register:0{op.fit.layout.register_bits // 4}x}",
         op.verdict)
        for op in plan.outputs
    )
    tables = [
        TableBlock("Fitted codes", ("output", "layout", "divider", "step", "fields", "register",
                                    "verdict"), regs),
        TableBlock("Dead times per edge", ("output", "layout", "edge", "field", "code", "requested",
                                           "achieved", "worst case (clock tolerance)", "error",
                                           "step", "layout max"), tuple(rows)),
        TableBlock("Margins to the window and verdicts",
                   ("output", "edge", "window min", "window max", "margin low", "margin high",
                    "verdict"), tuple(margins),
                   ("Margins are worst case: achieved minimum over the clock tolerance minus the "
                    "window minimum, window maximum minus the achieved maximum.",)),
    ]
    if pwm:
        tables.append(TableBlock("PWM limits", ("output", "clocks per period", "real frequency",
                                                "duty bits", "usable duty", "to_high share",
                                                "to_low share", "verdict"), tuple(pwm)))
    if plan.design.stage is not None and plan.outputs:
        from gapforge.stage import stage_costs

        cost_rows: list[tuple[str, ...]] = []
        for op in plan.outputs:
            if not op.fit.ok:
                continue
            dead = {e: _achieved(op, e)[0] for e in EDGES}
            c = stage_costs(plan.design.stage, dead)
            cost_rows.append((
                op.output.prefix, format_quantity(c.reverse_conduction_w, "W"),
                format_quantity(c.recovery_w, "W"),
                "-" if c.duty_lost is None else _pct(c.duty_lost),
                "-" if c.voltage_error_v is None else format_quantity(c.voltage_error_v, "V"),
            ))
        tables.append(TableBlock("Costs of the chosen dead times",
                                 ("output", "reverse conduction", "recovery", "duty lost",
                                  "average output-voltage error"), tuple(cost_rows)))
    return tables


# ---------------------------------------------------------------------------------------------
# the sections


def _timing_section(plan: BuildPlan) -> Section:
    figures: list[FigureBlock] = []
    for i, op in enumerate(plan.outputs):
        if not op.fit.ok:
            continue
        pt = pair_timing(op)
        period = ("an illustrative period (the design has no [pwm] section)" if pt.assumed_period
                  else f"one PWM period of {_t(pt.period_s)}")
        figures.append(FigureBlock(Markup(timing_figure(plan, op, f"timing-{i}")),
                                   f"{op.output.prefix} ({op.fit.layout.name}): {period} at 50 % "
                                   "commanded duty. Grey: both gates off; blue-grey: the spread "
                                   "of each turn-on over the clock tolerance; dash-dot: window "
                                   "edges."))
        for e in EDGES:
            figures.append(FigureBlock(Markup(transition_figure(plan, op, e, f"zoom-{i}-{e}")),
                                       f"{op.output.prefix}: {EDGE_TEXT[e]}, to scale."))
    paragraphs: tuple[str, ...] = ("Each output's gates through one PWM period, then each transition to scale.",)
    if not figures:
        paragraphs += ("No output was fitted, so there is no timing to draw.",)
    return Section("timing", "Timing diagrams", paragraphs, tuple(figures))


def _analog_section(plan: BuildPlan) -> Section:
    net = plan.design.reference
    if net is None:
        return Section("analog", "Analog reference",
                       ("Absent: the design has no [reference] section, so there is no analog "
                        "network to draw.",))
    ramps = node_ramps(net)
    figures = [
        FigureBlock(Markup(analog_figure(ramps[e], net.bypass == e, f"analog-{e}")),
                    f"{e} input edge at typical parts: "
                    + ("simulated (transient, threshold crossings as points) and closed form."
                       if ramps[e].simulated else "closed form (no transient simulation)."))
        for e in ("rising", "falling")
    ]
    tables = []
    if plan.reference is not None:
        rows = tuple((e, _t(r.min_s), _t(r.typ_s), _t(r.max_s))
                     for e, r in plan.reference.items())
        tables.append(TableBlock("Reference dead times (worst-case corners, Monte Carlo checked)",
                                 ("edge", "min", "typ", "max"), rows))
    try:
        from gapforge.simulate import slow_edge_over_temperature
    except ImportError:
        slow: list[Any] = []
    else:
        slow = list(slow_edge_over_temperature(net))
    if slow:
        tables.append(TableBlock(
            "Slow edge over temperature (transient simulation, typical parts)",
            ("input edge", "temperature", "node delay", "without diode leakage", "erosion"),
            tuple((p.edge, f"{p.temp_c:g} C", _t(p.delay_s), _t(p.delay_no_leakage_s),
                   f"{p.erosion * 100:.2f} %") for p in slow)))
    return Section("analog", "Analog reference",
                   ("The capacitor node on each input edge against the Schmitt threshold band, "
                    "with the node delay (ideal input step to the threshold crossing) marked.",),
                   tuple(figures), tuple(tables))


def _staircase_section(plan: BuildPlan) -> Section:
    figures: list[FigureBlock] = []
    for i, op in enumerate(plan.outputs):
        if not op.fit.ok:
            continue
        for f in op.fit.layout.dead_time_fields:
            figures.append(FigureBlock(
                Markup(staircase_figure(plan, op, f, f"stair-{i}-{f.name}")),
                f"{op.output.prefix}, {op.fit.layout.name}: {op.fit.request.rounding} rounding at "
                f"divider /{op.fit.divider} (step {_t(op.fit.step_s)}), "
                f"{STAIR_STEPS} representable values each side of the chosen one."))
    paragraphs: tuple[str, ...] = ("How each layout's codes turn a requested dead time into an achieved one.",)
    if not figures:
        paragraphs += ("No output was fitted, so there is no staircase to draw.",)
    return Section("quantization", "Quantization", paragraphs, tuple(figures))


def _monte_carlo_section(plan: BuildPlan) -> Section:
    net = plan.design.reference
    if net is None:
        return Section("monte-carlo", "Monte Carlo of the reference",
                       ("Absent: the design has no [reference] section.",))
    samples = reference_samples(net)
    first = next((op for op in plan.outputs if op.fit.ok), None)
    figures = []
    for e in EDGES:
        digital = _achieved(first, e) if first is not None else None
        figures.append(FigureBlock(
            Markup(distribution_figure(samples[e], edge=e, window=_window_of(plan, e),
                                       digital=digital, predicted=None,
                                       style=PALETTE["reference"], what="reference Monte Carlo",
                                       ident=f"mc-{e}")),
            f"{MC_SAMPLES} seeded samples (seed {MC_SEED}), every part uniform over its band"
            + ("" if first is None else f"; digital value of {first.output.prefix}.")))
    return Section("monte-carlo", "Monte Carlo of the reference",
                   ("The analog network's dead time over its parts' tolerances, against the "
                    "window and the digital value that replaces it.",), tuple(figures))


def _capture_section(plan: BuildPlan, m: Measurement | None) -> Section:
    if m is None:
        return Section("capture", "Bench capture",
                       ("Absent: no capture was given (gapforge report --capture FILE).",))
    figures = []
    first = next((op for op in plan.outputs if op.fit.ok), None)
    for e in EDGES:
        stats = m.edge(e)
        if stats.count == 0:
            continue
        lim = m.limits.get(e)
        predicted = None
        if lim is not None and lim.predicted_min_s is not None and lim.predicted_max_s is not None:
            predicted = (lim.predicted_min_s, lim.predicted_max_s)
        window = (lim.window_min_s, lim.window_max_s) if lim is not None else (None, None)
        figures.append(FigureBlock(
            Markup(distribution_figure(stats.gaps_s, edge=e, window=window, digital=None,
                                       predicted=predicted, style=PALETTE["measured"],
                                       what="measured gaps", ident=f"capture-{e}")),
            f"{stats.count} measured {e} gaps"
            + ("" if first is None else f"; predicted range of {first.output.prefix}.")))
    figures.append(FigureBlock(Markup(overlap_figure(m, "overlaps")),
                               "Overlaps: both gates on at once (shoot-through)."))
    rows = []
    for e in EDGES:
        s = m.edge(e)
        rows.append((e, str(s.count), _t(s.min_s), _t(s.max_s), _t(s.mean_s), _t(s.std_s),
                     str(s.below_window), str(s.above_window)))
    tables = [TableBlock("Measured gaps", ("edge", "count", "min", "max", "mean", "std dev",
                                           "below window", "above window"), tuple(rows))]
    tables.append(TableBlock(
        "Overlaps (first 50)", ("time", "duration"),
        tuple((_t(o.at_s, 9), _t(o.duration_s)) for o in m.overlaps[:50]),
        (f"{len(m.overlaps)} overlap(s) in total." if m.overlaps else "No overlap.",)))
    paragraphs = (f"Capture {m.source}: {_t(m.duration_s)} at a tick of {_t(m.tick_s)}; "
                  f"verdict {m.verdict}.", *m.reasons, *m.notes, *m.warnings)
    return Section("capture", "Bench capture", paragraphs, tuple(figures), tuple(tables))


def capture_limits(plan: BuildPlan) -> dict[str, Limits]:
    """What a capture is judged against: the window and the first fitted output's range."""
    from gapforge.measure import Limits

    first = next((op for op in plan.outputs if op.fit.ok), None)
    out: dict[str, Limits] = {}
    for e in EDGES:
        lo, hi = _window_of(plan, e)
        pmin = pmax = None
        if first is not None:
            _, pmin, pmax = _achieved(first, e)
        out[e] = Limits(lo, hi, pmin, pmax)
    return out


def _env() -> jinja2.Environment:
    return jinja2.Environment(
        loader=jinja2.PackageLoader("gapforge", "templates"),
        undefined=jinja2.StrictUndefined,
        autoescape=True,
        keep_trailing_newline=True,
        trim_blocks=True,
        lstrip_blocks=True,
    )


def render_report(plan: BuildPlan, capture: Measurement | None = None) -> str:
    """The whole report as HTML text (self-contained: inline CSS and SVG, no scripts)."""
    d = plan.design
    warnings = [f"{op.output.prefix}: {w}" for op in plan.outputs for w in op.warnings]
    sections = [
        Section("results", "Results, margins and verdicts",
                (f"Verdict: {plan.verdict}.", *plan.reasons, *warnings),
                (), tuple(result_tables(plan))),
        _timing_section(plan),
        _analog_section(plan),
        _staircase_section(plan),
        _monte_carlo_section(plan),
        _capture_section(plan, capture),
        Section("window", "Window", (
            "Absent: the design has neither a [stage] nor a [reference] section, so there is no "
            "window; margins are not judged.",) if plan.window is None else (),
            (), tuple(window_tables(plan)) if plan.window is not None else ()),
        Section("inputs", "Inputs", ("Every input the numbers come from, with its unit.",), (),
                tuple(input_tables(plan))),
    ]
    verdict_class = "ok" if plan.verdict == "ok" and (capture is None or not capture.failed) \
        else "fail"
    return _env().get_template("report.html.j2").render(
        title=f"gapforge design report: {d.name}",
        design=d.label,
        description=d.description,
        version=__version__,
        report_format=REPORT_FORMAT,
        verdict=plan.verdict,
        capture_verdict="-" if capture is None else capture.verdict,
        verdict_class=verdict_class,
        caution=CAUTION,
        sections=sections,
        toc=[(s.ident, s.title) for s in sections],
    )
