"""The report's section on dead time that follows the load current (issue 12): plain parts.

Returns paragraphs, figures (SVG text with a caption) and tables (title, headers, rows, notes)
for `gapforge.outputs.report` to wrap in its own blocks (this module never imports it). The
figure plots, for positive current (out of the switch node; negative current mirrors it), the
dead time of both edges against |I| under both `below_swing` policies, and the reverse-conduction
loss of the table against the fixed dead time that reaches the same transitions. Coordinates are
computed here and written by `svg` with fixed decimals: the same plan gives the same SVG.
"""

from __future__ import annotations

from typing import Any

from gapforge.base.display import format_si
from gapforge.outputs.svg import (
    Axis,
    Figure,
    Style,
    legend,
    nice_range,
    nice_ticks,
    step_points,
    x_axis,
    y_axis,
)
from gapforge.pipeline.adaptive_plan import AdaptivePlan, AdaptiveTable, curve
from gapforge.stage.adaptive import COMMUTATED, SIGNS

Table = tuple[str, tuple[str, ...], tuple[tuple[str, ...], ...], tuple[str, ...]]

CHOSEN = Style("#1f4e8c", "", "none", 2.0)
OTHER = Style("#b35c00", "7 3", "none", 1.8)
# the hard edge may run within a pixel or two of a window line: its square markers (one per
# level) keep it visible there (issue 23: a legend entry with no visible line)
HARD = Style("#55637a", "2 3", "square", 1.5)
FIXED = Style("#5b2a86", "9 3 2 3", "none", 1.6)
WINDOW = Style("#2e7d5b", "4 2", "none", 1.2)


def _steps(
    plan: AdaptivePlan, table: AdaptiveTable, edge: str, right: float
) -> tuple[list[float], list[float]]:
    xs = [float(b.current_min_a) for b in table.bins] + [right]
    ys = [float(b.entries["positive"][edge].achieved_max_s) for b in table.bins]
    return xs, ys


def adaptive_figure(plan: AdaptivePlan, prefix: str, ident: str) -> str:
    """Two panels: dead time and reverse-conduction loss against |I|, positive current."""
    width, height = 620, 640
    right = float(plan.spec.currents[-1]) * 1.5
    soft_edge = COMMUTATED["positive"]
    hard_edge = "to_high"
    tables = [t for t in (plan.table, plan.other) if t is not None]
    title = f"{prefix}: dead time and loss against load current (I > 0)"
    fig = Figure(
        ident,
        width,
        height,
        title,
        "Dead time per edge and reverse-conduction loss against |I| for both policies.",
    )
    fig.text(90, 22, title, size=12, cls="figure-title", weight="bold")
    xa = Axis(0.0, right, 90.0, width - 20.0)
    x_ticks = nice_ticks(0.0, right, 6)

    # panel 1: dead time (slowest clock)
    times = [
        y for t in tables for e in (soft_edge, hard_edge) for y in _steps(plan, t, e, right)[1]
    ]
    lo_w, hi_w = plan.window[soft_edge]
    marks = [float(lo_w)] if lo_w is not None else []
    marks += [float(hi_w)] if hi_w is not None else []
    y_lo, y_hi = nice_range(0.0, max(times + marks), 6)
    ya = Axis(y_lo, y_hi, 270.0, 50.0)
    y_axis(fig, ya, xa.start, nice_ticks(y_lo, y_hi, 6), "s", "dead time", grid_to=xa.end)
    x_axis(fig, xa, ya.start, x_ticks, "A", "|I|")
    for value in marks:
        fig.line(xa.start, ya(value), xa.end, ya(value), WINDOW, "window")
    for t, style in zip(tables, (CHOSEN, OTHER), strict=False):
        xs, ys = _steps(plan, t, soft_edge, right)
        fig.polyline(step_points(xs, ys, xa, ya), style, f"soft-{t.policy}")
    xs, ys = _steps(plan, plan.table, hard_edge, right)
    fig.polyline(step_points(xs, ys, xa, ya), HARD, "hard")
    for x0, x1, y in zip(xs, xs[1:], ys, strict=False):
        fig.marker((xa(x0) + xa(x1)) / 2, ya(y), HARD, "hard-marker", 3.0)

    # panel 2: reverse-conduction loss
    yb_start, yb_end = 560.0, 340.0
    rows = {t.policy: curve(plan, t, "positive") for t in tables}
    losses = [r[3] for rs in rows.values() for r in rs if r[3] is not None]
    losses += [r[4] for rs in rows.values() for r in rs if r[4] is not None]
    if losses:
        l_lo, l_hi = nice_range(0.0, max(losses) or 1.0, 6)
        yb = Axis(l_lo, l_hi, yb_start, yb_end)
        y_axis(
            fig, yb, xa.start, nice_ticks(l_lo, l_hi, 6), "W", "reverse conduction", grid_to=xa.end
        )
        x_axis(fig, xa, yb.start, x_ticks, "A", "|I|")
        for t, style in zip(tables, (CHOSEN, OTHER), strict=False):
            pts = [(xa(r[0]), yb(r[3])) for r in rows[t.policy] if r[3] is not None]
            fig.polyline(pts, style, f"loss-{t.policy}")
        fixed = [(xa(r[0]), yb(r[4])) for r in rows[plan.table.policy] if r[4] is not None]
        fig.polyline(fixed, FIXED, "loss-fixed")
    entries = [
        (f"table, below_swing '{t.policy}'", s, "line")
        for t, s in zip(tables, (CHOSEN, OTHER), strict=False)
    ]
    entries += [
        ("hard edge (to_high)", HARD, "line+marker"),
        ("window min / max", WINDOW, "line"),
        ("fixed dead time, same transitions", FIXED, "line"),
    ]
    legend(fig, 20, height - 26, entries)
    return fig.render()


def _w(value: Any) -> str:
    return "-" if value is None else format_si(value, "W")


def _table(plan: AdaptivePlan, prefix: str) -> Table:
    rows = []
    for b in plan.table.bins:
        top = "up" if b.current_max_a is None else format_si(b.current_max_a, "A")
        for sign in SIGNS:
            soft = b.entries[sign][COMMUTATED[sign]]
            hard = b.entries[sign]["to_high" if COMMUTATED[sign] == "to_low" else "to_low"]
            c = None if b.costs is None else b.costs[sign]
            state = "soft" if soft.soft else ("below swing" if soft.below_swing else "hard")
            rows.append(
                (
                    f"{format_si(b.current_min_a, 'A')} .. {top}"
                    if sign == "positive"
                    else "",
                    sign,
                    f"{soft.edge} {soft.code}",
                    format_si(soft.achieved_min_s, "s", toward="down"),
                    "-"
                    if soft.swing_needed_s is None
                    else format_si(soft.swing_needed_s, "s"),
                    state,
                    f"{hard.edge} {hard.code}",
                    _w(None if c is None else c.fixed_w),
                    _w(None if c is None else c.adaptive_w),
                    _w(None if c is None else c.adaptive_hard_w),
                )
            )
    notes = (
        "Worst case: the fastest clock, cut toward shorter. Swing: (Qoss,high + Qoss,low) / |I| at "
        "the bin's smallest current (less the current error), rounded up (common practice).",
        "Loss: Vsd x |I| x reverse-conduction time x fsw at the bin's largest current (top bin: its "
        "lower edge), slowest clock; the fixed dead time is the table's longest entry per edge "
        "(common practice). Hard turn-on: at most (Qoss,high + Qoss,low) x Vbus x fsw where the "
        "swing does not finish (Eoss <= Qoss x V; common practice).",
    )
    headers = (
        "|I| bin",
        "sign",
        "soft edge code",
        "worst case",
        "swing",
        "state",
        "hard edge code",
        "loss fixed",
        "loss table",
        "hard turn-on",
    )
    return (f"{prefix}: dead time by load current", headers, tuple(rows), notes)


def adaptive_parts(
    outputs: list[tuple[str, AdaptivePlan]],
) -> tuple[tuple[str, ...], list[tuple[str, str]], list[Table]]:
    """(paragraphs, [(svg, caption)], tables) for every output with a table."""
    paragraphs = (
        "With current flowing out of the switch node the load swings the node down by itself when "
        "the high side turns off (to_low is soft, to_high hard); negative current mirrors it. The "
        "soft edge needs the stage minimum plus the swing, (Qoss,high + Qoss,low) / |I| (common "
        "practice); below the current where that no longer fits the window, the chosen "
        "below_swing policy applies.",
        "Verify adaptive dead time on the bench at every bin, every temperature and both current "
        "signs, at reduced voltage with current limiting first.",
    )
    figures = []
    tables = []
    for i, (prefix, plan) in enumerate(outputs):
        figures.append(
            (
                adaptive_figure(plan, prefix, f"adaptive-{i}"),
                f"{prefix}: dead time of each edge (slowest clock) and reverse-conduction loss against "
                "|I| for positive current, both below_swing policies.",
            )
        )
        tables.append(_table(plan, prefix))
    return paragraphs, figures, tables
