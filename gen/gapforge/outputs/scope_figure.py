"""The report's analog capture section: gate-source voltages around the worst gap and the first
overlap, with each gate's threshold and the measured instants marked (issue 21).

Data flows in as plain values (`ScopeView`, built by `scope_views` from an analog capture and its
measurement); `scope_figure` draws one view: the high-side gate above, the low-side gate below,
on one time axis (deskew applied, so the marks sit where the gap engine put them), each with its
threshold (dashed) and, with a hysteresis, the band; the turn-off and turn-on instants as
vertical lines, the gap (or the overlap) dimensioned between them.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from markupsafe import Markup

from gapforge.base.display import format_si
from gapforge.base.records import record
from gapforge.outputs.svg import (
    INK,
    PALETTE,
    Axis,
    Figure,
    Style,
    dimension,
    legend,
    nice_ticks,
    vline,
    x_axis,
    y_axis,
)

if TYPE_CHECKING:
    from gapforge.bench.measure import Measurement
    from gapforge.bench.scope import ScopeCapture
    from gapforge.outputs.report_sections import Section

SIDES = ("high", "low")


@record
class Trace:
    times_s: tuple[float, ...]
    volts: tuple[float, ...]
    threshold_v: float
    hysteresis_v: float


@record
class ScopeView:
    """One event to draw: both traces over [start, stop] and the two instants."""

    ident: str
    title: str
    start_s: float
    stop_s: float
    traces: dict[str, Trace]
    off_s: float  # the gate turning off (for an overlap: the one turning on early)
    on_s: float
    label: str


def scope_views(cap: ScopeCapture, m: Measurement) -> list[ScopeView]:
    """The worst (shortest) gap and the first overlap, each with its traces read again."""
    views: list[ScopeView] = []
    worst = [(s.shortest[0], e) for e in ("to_high", "to_low")
             for s in (m.edge(e),) if s.shortest]
    if worst:
        inst, edge = min(worst, key=lambda x: x[0].gap_s)
        at, gap = float(inst.at_s), float(inst.gap_s)
        text = (f"{edge} gap {format_si(gap, 's')}" if gap >= 0
                else f"{edge} overlap {format_si(-gap, 's')}")
        views.append(_view(cap, "scope-worst", f"The shortest measured gap ({text})", at,
                           at + gap, text))
    if m.overlaps:
        o = m.overlaps[0]
        at, dur = float(o.at_s), float(o.duration_s)
        views.append(_view(cap, "scope-overlap", "The first measured overlap", at, at + dur,
                           f"both on {format_si(dur, 's')}"))
    return views


def _view(cap: ScopeCapture, ident: str, title: str, a: float, b: float, label: str) -> ScopeView:
    from gapforge.bench.scope import trace

    lo, hi = min(a, b), max(a, b)
    pad = max(hi - lo, 20 * float(cap.resolution_s))
    start, stop = lo - pad, hi + pad
    traces = {}
    for side in SIDES:
        skew = float(getattr(cap.settings, f"deskew_{side}_s"))
        t, v = trace(cap.channels[side], start + skew, stop + skew, limit=1500)
        traces[side] = Trace(tuple(float(x) - skew for x in t), tuple(float(x) for x in v),
                             cap.threshold_v(side), float(cap.settings.hysteresis_v))
    return ScopeView(ident, title, start, stop, traces, a, b, label)


def scope_figure(view: ScopeView) -> str:
    width, panel, gap = 640, 130, 30
    top = 50
    height = top + 2 * panel + gap + 80
    xa = Axis(view.start_s, view.stop_s, 80.0, width - 20.0)
    fig = Figure(view.ident, width, height, view.title,
                 "Gate-source voltages of both gates, thresholds dashed, measured instants as "
                 "vertical lines (deskew applied).")
    fig.text(80, 22, view.title, size=12, cls="figure-title", weight="bold")
    styles = {"high": PALETTE["high"], "low": PALETTE["low"]}
    for k, side in enumerate(SIDES):
        tr = view.traces[side]
        y0 = top + k * (panel + gap)
        values = [*tr.volts, tr.threshold_v]
        v_lo, v_hi = min(values), max(values)
        if v_hi - v_lo < 1e-9:
            v_lo, v_hi = v_lo - 1, v_hi + 1
        ticks = nice_ticks(v_lo, v_hi, 4)
        ya = Axis(min(ticks[0], v_lo), max(ticks[-1], v_hi), y0 + panel, y0)
        if tr.hysteresis_v > 0:
            band = PALETTE["threshold"]
            fig.rect(xa.start, ya(tr.threshold_v + tr.hysteresis_v / 2), xa.end - xa.start,
                     ya(tr.threshold_v - tr.hysteresis_v / 2)
                     - ya(tr.threshold_v + tr.hysteresis_v / 2), band.fill, "hysteresis-band",
                     opacity=band.opacity)
        fig.line(xa.start, ya(tr.threshold_v), xa.end, ya(tr.threshold_v), PALETTE["threshold"],
                 f"threshold-{side}")
        y_axis(fig, ya, xa.start, ticks, "V", f"{side} gate", grid_to=xa.end)
        points = [(xa(t), ya(v)) for t, v in zip(tr.times_s, tr.volts, strict=True)
                  if view.start_s <= t <= view.stop_s]
        fig.polyline(points, Style(styles[side].colour, "", "none", 1.5), f"trace-{side}")
    bottom = top + 2 * panel + gap
    x_axis(fig, xa, bottom, nice_ticks(view.start_s, view.stop_s, 6), "s", "time (deskewed)")
    mark = Style(INK, "3 2", "none", 1.0)
    for x in (view.off_s, view.on_s):
        vline(fig, xa(x), top - 6, bottom, mark, "instant")
    colour = PALETTE["overlap"] if view.on_s < view.off_s or "overlap" in view.ident else mark
    dimension(fig, xa(min(view.off_s, view.on_s)), xa(max(view.off_s, view.on_s)), top - 10,
              view.label, Style(colour.colour), "dim-gap")
    legend(fig, 20, height - 20, [("high-side gate", Style(styles["high"].colour), "line"),
                                  ("low-side gate", Style(styles["low"].colour), "line"),
                                  ("threshold", PALETTE["threshold"], "line"),
                                  ("measured instant", mark, "line")])
    return fig.render()


def scope_section(cap: ScopeCapture, m: Measurement) -> Section:
    """The report section (its own function so the report's sections merge cleanly)."""
    from gapforge.outputs.report_sections import FigureBlock, Section

    s = cap.settings
    lines = [
        "Analog capture (oscilloscope export): a gate is on above its threshold; instants by "
        "linear interpolation at the threshold (IEEE 181 reference-level method).",
        f"Thresholds: high side {format_si(cap.threshold_v('high'), 'V')}, low side "
        f"{format_si(cap.threshold_v('low'), 'V')}; hysteresis {format_si(s.hysteresis_v, 'V')}"
        f"; deskew high {format_si(s.deskew_high_s, 's')}, low {format_si(s.deskew_low_s, 's')}"
        f"; resolution {format_si(cap.resolution_s, 's')} ("
        + ("stated" if cap.resolution_stated else "the sample interval around the crossings")
        + ").",
        "What the capture cannot show: anything faster than its sampling (ringing between two "
        "samples, a spike narrower than the interval) and anything the probes' bandwidth filters.",
    ]
    figures = tuple(FigureBlock(Markup(scope_figure(v)), v.title + ".")
                    for v in scope_views(cap, m))
    return Section("scope", "Analog capture", tuple(lines), figures)

