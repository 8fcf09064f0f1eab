"""The report's histograms and overlap figures, built from plain data: SVG text.

    distribution_figure  a histogram of dead times with the window, the digital value (or the
                         prediction) and the worst-case range; values outside the window
                         coloured with their share written on the plot
    overlap_figure       where in a capture both gates were on
    overlap_zoom_figure  one measured overlap to scale

Split from `figures` (the timing, analog and staircase figures) to keep each module readable.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace
from fractions import Fraction
from typing import Any

from gapforge.base.display import count, format_percent, format_range, format_si
from gapforge.outputs.figures import MC_BINS, Window, wave_points, wide_enough
from gapforge.outputs.svg import (
    INK,
    PALETTE,
    Axis,
    Figure,
    Style,
    band_x,
    histogram,
    legend,
    nice_range,
    nice_ticks,
    place_labels,
    vline,
    x_axis,
    y_axis,
)

# ---------------------------------------------------------------------------------------------
# 4. histograms: the reference's Monte Carlo, measured gaps; overlaps


def value_range(values: Any, marks: Sequence[float]) -> tuple[float, float]:
    """The rounded x range that holds every value and mark (share it between side-by-side plots)."""
    lo = min(float(values.min()), *marks) if marks else float(values.min())
    hi = max(float(values.max()), *marks) if marks else float(values.max())
    return nice_range(lo, hi, 8)


def bin_counts(values: Any, x_range: tuple[float, float]) -> list[int]:
    import numpy as np

    counts, _ = np.histogram(values, bins=MC_BINS, range=x_range)
    return [int(c) for c in counts]


def _bins(
    values: Any, marks: Sequence[float], x_range: tuple[float, float] | None
) -> tuple[list[float], list[int]]:
    import numpy as np

    lo, hi = x_range if x_range is not None else value_range(values, marks)
    counts, edges = np.histogram(values, bins=MC_BINS, range=(lo, hi))
    return [float(e) for e in edges], [int(c) for c in counts]


def outside_counts(values: Any, window: Window) -> tuple[int, int]:
    """How many values lie below the window's minimum and above its maximum."""
    import numpy as np

    arr = np.asarray(values, dtype=float)
    lo, hi = window
    below = int(np.count_nonzero(arr < float(lo))) if lo is not None else 0
    above = int(np.count_nonzero(arr > float(hi))) if hi is not None else 0
    return below, above


def _outside_bins(values: Any, window: Window, edges: Sequence[float]) -> list[int]:
    """Per bin, the values outside the window (a bin across a window edge holds both kinds)."""
    import numpy as np

    arr = np.asarray(values, dtype=float)
    lo, hi = window
    mask = np.zeros(arr.shape, dtype=bool)
    if lo is not None:
        mask |= arr < float(lo)
    if hi is not None:
        mask |= arr > float(hi)
    counts, _ = np.histogram(arr[mask], bins=len(edges) - 1, range=(edges[0], edges[-1]))
    return [int(c) for c in counts]


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
    x_range: tuple[float, float] | None = None,
    count_top: int | None = None,
    worst: tuple[Fraction, Fraction] | None = None,
) -> str:
    """A histogram of dead times with the window and the digital value (or the prediction).

    The x axis holds every value, the window, the digital value's band and the worst-case range
    (`worst`, bracketed and labelled "worst case"). Values outside the window are drawn in their
    own colour and their share is written on the plot. Side-by-side histograms pass one
    `x_range` and `count_top` so their axes compare.
    """
    marks = [float(x) for x in window if x is not None]
    if digital is not None:
        marks += [float(digital[1]), float(digital[2])]
    if predicted is not None:
        marks += [float(predicted[0]), float(predicted[1])]
    if worst is not None:
        marks += [float(worst[0]), float(worst[1])]
    edges, counts = _bins(values, marks, x_range)
    top = max(counts) if counts else 1
    if count_top is not None:
        top = max(top, count_top)
    width, height = 480, 390
    xa = Axis(edges[0], edges[-1], 70.0, width - 20.0)
    _, c_hi = nice_range(0.0, 1.1 * float(max(top, 1)), 5)
    ya = Axis(0.0, c_hi, 300.0, 104.0)
    title = f"{what}: {edge}"
    fig = Figure(ident, width, height, title, f"Histogram of {what} with the window.")
    fig.text(20, 22, f"{title} ({len(values)} values)", size=12, cls="figure-title",
             weight="bold")
    entries: list[tuple[str, Style, str]] = []
    has_window = any(x is not None for x in window)
    below = above = 0
    if has_window:
        below, above = outside_counts(values, window)
        n = max(1, len(values))
        fig.text(20, 40, f"outside the window: {format_percent(Fraction(below, n))} below, "
                 f"{format_percent(Fraction(above, n))} above", size=11, cls="outside-share")
    if digital is not None and wide_enough(xa, digital[1], digital[2]):
        band_x(fig, xa(float(digital[1])), xa(float(digital[2])), ya.end, ya.start,
               PALETTE["tolerance"], "digital-band")
    if predicted is not None and wide_enough(xa, predicted[0], predicted[1]):
        band_x(fig, xa(float(predicted[0])), xa(float(predicted[1])), ya.end, ya.start,
               PALETTE["tolerance"], "predicted-band")
    overlap = edges[0] < 0.0
    if overlap:  # dead times at or below zero: both outputs on together
        band_x(fig, xa.start, xa(min(0.0, edges[-1])), ya.end, ya.start, PALETTE["overlap"],
               "overlap-region", hatched=True)
    histogram(fig, edges, counts, xa, ya, style, "bar")
    if not has_window:
        entries.append((what, style, "bar"))
    elif below + above < len(values):  # some bars (or parts of bars) stay in the base colour
        entries.append((f"{what}, inside the window", style, "bar"))
    if has_window and _outside_bars(fig, _outside_bins(values, window, edges), edges, xa, ya):
        entries.append(("outside the window", PALETTE["outside"], "bar"))
    _overlap_bars(fig, edges, counts, xa, ya)
    y_axis(fig, ya, xa.start, nice_ticks(0.0, c_hi, 5), "", "count", grid_to=xa.end)
    x_axis(fig, xa, ya.start, nice_ticks(edges[0], edges[-1], 6), "s", "dead time")
    if worst is not None:
        _worst_bracket(fig, xa, ya, worst)
        entries.append(("worst case", PALETTE["worst"], "line"))
    labels = []
    for bound, name in zip(window, ("min", "max"), strict=True):
        if bound is not None:
            x = xa(float(bound))
            vline(fig, x, ya.end - 6, ya.start, PALETTE["window"], f"window-{name}")
            labels.append((x, f"window {name}"))
    # labels that would touch stack upward (a row down would run into the lines they name)
    place_labels(fig, labels, ya.end - 10, cls="window-label", left=xa.start, row=-12.0)
    if labels:
        entries.append(("window", PALETTE["window"], "line"))
    if overlap:
        entries.append(("at or below zero: overlap", PALETTE["overlap"], "hatch"))
    if digital is not None:
        vline(fig, xa(float(digital[0])), ya.end, ya.start, PALETTE["digital"], "digital")
        fig.marker(xa(float(digital[0])), ya.end, PALETTE["digital"], "digital-marker")
        entries.append(("digital value", PALETTE["digital"], "line"))
        if wide_enough(xa, digital[1], digital[2]):
            entries.append(("clock-tolerance band", PALETTE["tolerance"], "band"))
    if predicted is not None and wide_enough(xa, predicted[0], predicted[1]):
        entries.append(("predicted range", PALETTE["tolerance"], "band"))
    legend(fig, 20, height - 30, entries)
    return fig.render()


def _worst_bracket(fig: Figure, xa: Axis, ya: Axis, worst: tuple[Fraction, Fraction]) -> None:
    """The worst-case range as a bracket above the plot, labelled, with dotted lines down."""
    style = PALETTE["worst"]
    x0, x1 = xa(float(worst[0])), xa(float(worst[1]))
    y = ya.end - 36
    fig.line(x0, y, x1, y, style, "worst-case")
    fig.line(x0, y - 4, x0, y + 4, style, "worst-case-end")
    fig.line(x1, y - 4, x1, y + 4, style, "worst-case-end")
    for x, name in ((x0, "min"), (x1, "max")):
        fig.line(x, ya.end, x, ya.start, Style(style.colour, "1 3", "none", 1.0),
                 f"worst-case-{name}")
    label = f"worst case {format_range(worst[0], worst[1], 's', cut='outward')}"
    place_labels(fig, [((x0 + x1) / 2, label)], y - 7, cls="worst-case-label", left=xa.start)


def _outside_bars(fig: Figure, outside: Sequence[int], edges: Sequence[float], xa: Axis,
                  ya: Axis) -> bool:
    """Values outside the window drawn in their own colour over the bars, at least 3 px tall so
    a rare one stays visible (bins at or below zero are the overlap's red bars). True if any."""
    style = PALETTE["outside"]
    base = ya(0)
    drawn = False
    for i, c in enumerate(outside):
        if c <= 0 or edges[i] < 0.0:
            continue
        top = min(ya(c), base - 3.0)
        fig.rect(xa(edges[i]), top, xa(edges[i + 1]) - xa(edges[i]), base - top, style.fill,
                 "outside-bar", stroke=Style(style.colour, width=0.8))
        drawn = True
    return drawn


def _overlap_bars(fig: Figure, edges: Sequence[float], counts: Sequence[int], xa: Axis,
                  ya: Axis) -> None:
    """Bars at or below zero dead time (an overlap) redrawn in red, tall enough that a single
    overlap among many gaps stays visible (5 px at least)."""
    red = PALETTE["overlap"]
    base = ya(0)
    for i, c in enumerate(counts):
        if c > 0 and edges[i] < 0.0:
            top = min(ya(c), base - 5.0)
            fig.rect(xa(edges[i]), top, xa(edges[i + 1]) - xa(edges[i]), base - top, red.fill,
                     "overlap-bar", stroke=Style(red.colour, width=0.8))


def overlap_figure(duration_s: Fraction, overlaps_at_s: Sequence[Fraction], ident: str) -> str:
    """Where in the capture (`duration_s` long) each overlap (both gates on) happened."""
    width, height = 980, 130
    start = 0.0
    end = float(duration_s) if duration_s > 0 else 1.0
    times = [float(t) for t in overlaps_at_s]
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
    fig.text(70, 22, count(len(times), "overlap"), size=12, cls="figure-title", weight="bold")
    x_axis(fig, xa, 75, nice_ticks(x_lo, x_hi, 10), "s", "capture time")
    return fig.render()


def overlap_zoom_figure(at_s: Fraction, duration_s: Fraction, ident: str) -> str:
    """One measured overlap to scale: the gate still on, the other turning on early, and the
    interval when both are on, in red."""
    d = float(duration_s)
    span = max(d, 1e-12)
    x_lo, x_hi = nice_range(-1.5 * span, 2.5 * span, 8)
    width, height = 480, 250
    xa = Axis(x_lo, x_hi, 90.0, width - 20.0)
    fig = Figure(ident, width, height, "A measured overlap to scale",
                 "Both gates on together (shoot-through), from the capture's time stamps.")
    fig.text(20, 22, f"overlap at {format_si(at_s, 's')}: both gates on for "
             f"{format_si(duration_s, 's')}", size=12, cls="figure-title", weight="bold")
    rows = {"early": 80.0, "late": 150.0}
    amp = 30.0
    fig.rect(xa(0.0), rows["early"] - amp - 8, xa(d) - xa(0.0), rows["late"] - rows["early"] + amp + 16,
             PALETTE["overlap"].fill, "overlap-interval", opacity=0.35)
    fig.polyline(wave_points([(x_lo, 0), (0.0, 1)], x_hi, xa, rows["early"], amp), PALETTE["overlap"],
                 "gate-turning-on")
    fig.polyline(wave_points([(x_lo, 1), (d, 0)], x_hi, xa, rows["late"], amp), Style(INK, width=1.5),
                 "gate-still-on")
    fig.text(84, rows["early"] - 10, "turning on", anchor="end", size=10, cls="row-label")
    fig.text(84, rows["late"] - 10, "still on", anchor="end", size=10, cls="row-label")
    x_axis(fig, xa, 172, nice_ticks(x_lo, x_hi, 8), "s", "time from the overlap's start")
    legend(fig, 20, height - 14, [("both gates on", replace(PALETTE["overlap"], opacity=0.35),
                                   "band")])
    return fig.render()
