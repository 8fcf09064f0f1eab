"""Small SVG drawing helpers of our own: axes, ticks, polylines, steps, histograms, dimensions.

No plotting dependency. Every coordinate is written with fixed decimals (`num`) and every element
is emitted in the order it was drawn, so the same input gives byte-identical SVG on every run.
Element ids are prefixed with the figure's id, so several figures can sit inline in one HTML page.

The palette is our own. Series are told apart by line pattern and marker shape as well as colour,
and the colours step in lightness, so a figure still reads printed in greyscale or seen by a
colour-blind reader.

Contributor rules: no global mutable state (a `Figure` is a local builder, rendered once), no
floats in labels without a fixed number of decimals, no scripts, no external references.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from itertools import pairwise
from xml.sax.saxutils import escape, quoteattr

from gapforge.base.display import format_si
from gapforge.base.records import record

INK = "#1d2433"  # text, axes, frames
GRID = "#d5d9e0"
PAPER = "#ffffff"
FONT = "DejaVu Sans, Verdana, Arial, sans-serif"


@record
class Style:
    """How one series looks: colour, line pattern, marker shape, width, area fill."""

    colour: str
    dash: str = ""  # SVG stroke-dasharray; "" = solid
    marker: str = "none"  # none | circle | square | diamond | triangle | triangle-down
    width: float = 1.5
    fill: str = "none"  # area fill for bands and bars
    opacity: float = 1.0  # fill opacity


# Our palette. Lightness steps: high (dark), low (mid), request (dark, dotted), tolerance (light
# grey-blue), window (mid green, hatched), reference bars (light), measured bars (light amber).
PALETTE: dict[str, Style] = {
    "high": Style("#1f4e8c", "", "circle", 2.0),
    "low": Style("#b35c00", "7 3", "square", 2.0),
    "request": Style("#5b2a86", "2 3", "triangle", 1.5),
    "chosen": Style(INK, "", "diamond", 2.0),
    "representable": Style("#6c7686", "", "circle", 1.0, "#ffffff"),
    "window": Style("#2e7d5b", "9 3 2 3", "none", 1.5, "#2e7d5b", 0.14),
    "tolerance": Style("#55637a", "", "none", 1.0, "#8d9bb0", 0.45),
    "threshold": Style("#7a3b69", "5 3", "none", 1.5, "#c9a3bf", 0.35),
    "reference": Style("#1f4e8c", "", "none", 1.0, "#9cc3e6", 1.0),
    "measured": Style("#8a4a00", "", "none", 1.0, "#f0c27a", 1.0),
    "digital": Style(INK, "", "diamond", 2.0, "#8d9bb0", 0.45),
    "outside": Style("#7a1f5c", "", "none", 1.0, "#d98cbf", 1.0),
    "worst": Style("#3c4656", "6 2", "none", 1.4),
    "overlap": Style("#b0143c", "", "triangle-down", 2.0, "#b0143c", 1.0),
    "simulated": Style("#1f4e8c", "", "none", 2.0),
    "closed-form": Style("#b35c00", "7 3", "none", 1.5),
}

_PREFIXES = ((-15, "f"), (-12, "p"), (-9, "n"), (-6, "u"), (-3, "m"), (0, ""), (3, "k"), (6, "M"))


def num(value: float, decimals: int = 2) -> str:
    """Fixed decimals, never '-0.00', never exponent notation."""
    if not math.isfinite(value):
        raise ValueError(f"cannot draw a non-finite value {value!r}")
    text = f"{value:.{decimals}f}"
    if text.lstrip("-").strip("0.") == "":
        text = text.lstrip("-")
    return text


# ---------------------------------------------------------------------------------------------
# scales, ticks, engineering notation


@record
class Axis:
    """A linear map from data values (lo..hi) to pixels (start..end)."""

    lo: float
    hi: float
    start: float
    end: float

    def __call__(self, value: float) -> float:
        if self.hi == self.lo:
            return (self.start + self.end) / 2
        return self.start + (value - self.lo) * (self.end - self.start) / (self.hi - self.lo)


def nice_step(span: float, count: int) -> float:
    """A 1-2-5 step that cuts `span` into about `count` intervals."""
    if span <= 0 or not math.isfinite(span):
        return 1.0
    raw = span / max(1, count)
    power = 10.0 ** math.floor(math.log10(raw))
    for m in (1.0, 2.0, 2.5, 5.0, 10.0):
        if raw <= m * power * (1 + 1e-9):
            return m * power
    return 10.0 * power


def nice_ticks(lo: float, hi: float, count: int = 6) -> list[float]:
    """Tick values at a 1-2-5 step inside lo..hi (inclusive, with a relative slack of 1e-9)."""
    step = nice_step(hi - lo, count)
    first = math.ceil(lo / step - 1e-9)
    last = math.floor(hi / step + 1e-9)
    return [k * step for k in range(first, last + 1)]


def nice_range(lo: float, hi: float, count: int = 6) -> tuple[float, float]:
    """lo..hi widened outward to whole steps of the 1-2-5 step for `count` intervals."""
    if hi <= lo:
        pad = abs(lo) * 0.1 or 1.0
        lo, hi = lo - pad, hi + pad
    step = nice_step(hi - lo, count)
    return math.floor(lo / step + 1e-9) * step, math.ceil(hi / step - 1e-9) * step


@record
class Units:
    """A common engineering prefix and decimals for the labels of one axis."""

    factor: float  # multiply a value by this to get the number shown
    prefix: str
    decimals: int

    def label(self, value: float) -> str:
        return num(value * self.factor, self.decimals)


def units_for(ticks: Sequence[float], scaled: bool = True) -> Units:
    """The prefix that makes the largest tick 1..999, and decimals that tell ticks apart.

    `scaled=False` keeps plain numbers (counts, ratios): no prefix.
    """
    big = max((abs(t) for t in ticks), default=0.0)
    exp3 = 0
    if big > 0 and scaled:
        exp3 = int(math.floor(math.log10(big) / 3) * 3)
        exp3 = max(-15, min(6, exp3))
    factor = 10.0 ** (-exp3)
    prefix = dict(_PREFIXES)[exp3]
    step = min((abs(b - a) for a, b in pairwise(ticks)), default=0.0) * factor
    decimals = 0
    while step > 0 and decimals < 6 and abs(round(step, decimals) - step) > step * 1e-6:
        decimals += 1
    return Units(factor, prefix, decimals)


def eng(value: float, unit: str, digits: int = 4) -> str:
    """A figure label in the one display style (gapforge.base.display): 8.75e-7 -> '875 ns'."""
    if not math.isfinite(value):
        return f"{value} {unit}"
    return format_si(value, unit, digits=digits)


# ---------------------------------------------------------------------------------------------
# the figure builder


class Figure:
    """One SVG drawing. Draw into it, then `render()` once. Coordinates in pixels, y down."""

    def __init__(self, ident: str, width: int, height: int, title: str, desc: str = "") -> None:
        if not ident.replace("-", "").replace("_", "").isalnum():
            raise ValueError(f"figure id {ident!r} must be letters, digits, '-' and '_'")
        self.ident = ident
        self.width = width
        self.height = height
        self.title = title
        self.desc = desc
        self._defs: list[str] = []
        self._body: list[str] = []
        self._patterns: set[str] = set()

    # -- primitives ------------------------------------------------------------------------

    def raw(self, element: str) -> None:
        self._body.append(element)

    def line(self, x1: float, y1: float, x2: float, y2: float, style: Style, cls: str = "") -> None:
        self._body.append(
            f"<line{_cls(cls)} x1=\"{num(x1)}\" y1=\"{num(y1)}\" x2=\"{num(x2)}\" "
            f"y2=\"{num(y2)}\"{_stroke(style)}/>"
        )

    def polyline(self, points: Sequence[tuple[float, float]], style: Style, cls: str = "") -> None:
        if not points:
            return
        text = " ".join(f"{num(x)},{num(y)}" for x, y in points)
        self._body.append(
            f"<polyline{_cls(cls)} points=\"{text}\" fill=\"none\"{_stroke(style)}/>"
        )

    def rect(
        self,
        x: float,
        y: float,
        w: float,
        h: float,
        fill: str,
        cls: str = "",
        *,
        opacity: float = 1.0,
        stroke: Style | None = None,
    ) -> None:
        if w < 0:
            x, w = x + w, -w
        if h < 0:
            y, h = y + h, -h
        extra = f" fill-opacity=\"{num(opacity)}\"" if opacity != 1.0 else ""
        outline = _stroke(stroke) if stroke is not None else ""
        self._body.append(
            f"<rect{_cls(cls)} x=\"{num(x)}\" y=\"{num(y)}\" width=\"{num(w)}\" "
            f"height=\"{num(h)}\" fill=\"{fill}\"{extra}{outline}/>"
        )

    def text(
        self,
        x: float,
        y: float,
        content: str,
        *,
        anchor: str = "start",
        size: float = 12,
        cls: str = "",
        colour: str = INK,
        weight: str = "normal",
        rotate: bool = False,
    ) -> None:
        turn = f" transform=\"rotate(-90 {num(x)} {num(y)})\"" if rotate else ""
        bold = " font-weight=\"bold\"" if weight == "bold" else ""
        self._body.append(
            f"<text{_cls(cls)} x=\"{num(x)}\" y=\"{num(y)}\" font-size=\"{num(size, 1)}\" "
            f"text-anchor=\"{anchor}\" fill=\"{colour}\"{bold}{turn}>{escape(content)}</text>"
        )

    def marker(self, x: float, y: float, style: Style, cls: str = "", size: float = 4.5) -> None:
        """A marker of the style's shape, filled in its colour (hollow for 'representable')."""
        shape = style.marker
        fill = style.fill if style.fill != "none" and shape == "circle" else style.colour
        paint = f" fill=\"{fill}\" stroke=\"{style.colour}\" stroke-width=\"1.2\""
        if shape == "circle":
            self._body.append(
                f"<circle{_cls(cls)} cx=\"{num(x)}\" cy=\"{num(y)}\" r=\"{num(size * 0.8)}\"{paint}/>"
            )
            return
        s = size
        corners = {
            "square": [(-s * 0.8, -s * 0.8), (s * 0.8, -s * 0.8), (s * 0.8, s * 0.8), (-s * 0.8, s * 0.8)],
            "diamond": [(0, -s * 1.2), (s, 0), (0, s * 1.2), (-s, 0)],
            "triangle": [(0, -s), (s, s * 0.8), (-s, s * 0.8)],
            "triangle-down": [(0, s), (s, -s * 0.8), (-s, -s * 0.8)],
        }.get(shape)
        if corners is None:
            return
        pts = " ".join(f"{num(x + dx)},{num(y + dy)}" for dx, dy in corners)
        self._body.append(f"<polygon{_cls(cls)} points=\"{pts}\"{paint}/>")

    def hatch(self, name: str, colour: str) -> str:
        """A diagonal hatch pattern (defined once per figure); returns the fill reference."""
        pid = f"{self.ident}-{name}"
        if pid not in self._patterns:
            self._patterns.add(pid)
            self._defs.append(
                f"<pattern id=\"{pid}\" width=\"6\" height=\"6\" patternUnits=\"userSpaceOnUse\" "
                f"patternTransform=\"rotate(45)\"><line x1=\"0\" y1=\"0\" x2=\"0\" y2=\"6\" "
                f"stroke=\"{colour}\" stroke-width=\"1.5\"/></pattern>"
            )
        return f"url(#{pid})"

    def render(self) -> str:
        defs = f"<defs>{''.join(self._defs)}</defs>" if self._defs else ""
        desc = f"<desc>{escape(self.desc)}</desc>" if self.desc else ""
        return (
            f"<svg xmlns=\"http://www.w3.org/2000/svg\" id={quoteattr(self.ident)} "
            f"viewBox=\"0 0 {self.width} {self.height}\" width=\"{self.width}\" "
            f"height=\"{self.height}\" role=\"img\" font-family=\"{FONT}\">"
            f"<title>{escape(self.title)}</title>{desc}{defs}"
            f"<rect x=\"0\" y=\"0\" width=\"{self.width}\" height=\"{self.height}\" "
            f"fill=\"{PAPER}\"/>\n" + "\n".join(self._body) + "\n</svg>"
        )


def _cls(cls: str) -> str:
    return f" class=\"{cls}\"" if cls else ""


def _stroke(style: Style) -> str:
    dash = f" stroke-dasharray=\"{style.dash}\"" if style.dash else ""
    return f" stroke=\"{style.colour}\" stroke-width=\"{num(style.width)}\"{dash}"


# ---------------------------------------------------------------------------------------------
# plot parts


def x_axis(
    fig: Figure,
    axis: Axis,
    y: float,
    ticks: Sequence[float],
    unit: str,
    title: str,
    *,
    grid_to: float | None = None,
) -> Units:
    """A horizontal axis at pixel row y with tick labels in one engineering prefix of `unit`."""
    units = units_for(ticks, scaled=bool(unit))
    fig.line(axis.start, y, axis.end, y, Style(INK, width=1.0), "axis")
    for t in ticks:
        x = axis(t)
        if grid_to is not None:
            fig.line(x, grid_to, x, y, Style(GRID, width=1.0), "grid")
        fig.line(x, y, x, y + 5, Style(INK, width=1.0), "tick")
        fig.text(x, y + 18, units.label(t), anchor="middle", size=11, cls="tick-label")
    label = f"{title} ({units.prefix}{unit})" if unit else title
    fig.text((axis.start + axis.end) / 2, y + 36, label, anchor="middle", size=12, cls="axis-title")
    return units


def y_axis(
    fig: Figure,
    axis: Axis,
    x: float,
    ticks: Sequence[float],
    unit: str,
    title: str,
    *,
    grid_to: float | None = None,
) -> Units:
    """A vertical axis at pixel column x (labels to its left)."""
    units = units_for(ticks, scaled=bool(unit))
    fig.line(x, axis.start, x, axis.end, Style(INK, width=1.0), "axis")
    for t in ticks:
        y = axis(t)
        if grid_to is not None:
            fig.line(x, y, grid_to, y, Style(GRID, width=1.0), "grid")
        fig.line(x - 5, y, x, y, Style(INK, width=1.0), "tick")
        fig.text(x - 8, y + 4, units.label(t), anchor="end", size=11, cls="tick-label")
    label = f"{title} ({units.prefix}{unit})" if unit else title
    mid = (axis.start + axis.end) / 2
    fig.text(x - 48, mid, label, anchor="middle", size=12, cls="axis-title", rotate=True)
    return units


def step_points(
    xs: Sequence[float], ys: Sequence[float], x_axis_: Axis, y_axis_: Axis
) -> list[tuple[float, float]]:
    """Pixel points of a step function: value ys[i] holds from xs[i] to xs[i + 1].

    len(xs) == len(ys) + 1 (the breakpoints around every level).
    """
    if len(xs) != len(ys) + 1:
        raise ValueError("a step plot needs one more breakpoint than levels")
    points: list[tuple[float, float]] = []
    for i, level in enumerate(ys):
        y = y_axis_(level)
        points.append((x_axis_(xs[i]), y))
        points.append((x_axis_(xs[i + 1]), y))
    return points


def histogram(
    fig: Figure,
    edges: Sequence[float],
    counts: Sequence[int],
    x_axis_: Axis,
    y_axis_: Axis,
    style: Style,
    cls: str = "bar",
) -> None:
    """Bars from bin edges (len(counts) + 1) and counts; empty bins draw nothing."""
    if len(edges) != len(counts) + 1:
        raise ValueError("a histogram needs one more edge than counts")
    base = y_axis_(0)
    for i, c in enumerate(counts):
        if c <= 0:
            continue
        x0, x1 = x_axis_(edges[i]), x_axis_(edges[i + 1])
        top = y_axis_(c)
        fig.rect(x0, top, x1 - x0, base - top, style.fill, cls, opacity=style.opacity,
                 stroke=Style(style.colour, width=0.8))


def dimension(
    fig: Figure, x1: float, x2: float, y: float, label: str, style: Style, cls: str = "dimension"
) -> None:
    """A horizontal dimension line from x1 to x2 at row y with arrowheads and a label above.

    Narrower than 24 px, the arrows sit outside pointing in (the drafting convention for small
    dimensions) and the label moves right of the mark; a label wider than the dimension moves
    right of it too (never across the extension ticks).
    """
    a, b = min(x1, x2), max(x1, x2)
    head = 6.0
    s = Style(style.colour, "", "none", 1.2)
    fig.line(a, y - 8, a, y + 8, s, cls + "-ext")
    fig.line(b, y - 8, b, y + 8, s, cls + "-ext")
    if b - a >= 24:
        fig.line(a, y, b, y, s, cls)
        _arrowhead(fig, a, y, +1, head, style.colour, cls)
        _arrowhead(fig, b, y, -1, head, style.colour, cls)
        if text_width(label, 11) <= b - a - 4:
            fig.text((a + b) / 2, y - 6, label, anchor="middle", size=11, cls=cls + "-label")
        else:  # a label wider than the dimension sits right of it, clear of its end ticks
            fig.text(b + 6, y + 4, label, anchor="start", size=11, cls=cls + "-label")
    else:
        fig.line(a - 3 * head, y, b + 3 * head, y, s, cls)
        _arrowhead(fig, a, y, -1, head, style.colour, cls)
        _arrowhead(fig, b, y, +1, head, style.colour, cls)
        fig.text(b + 3 * head + 4, y + 4, label, anchor="start", size=11, cls=cls + "-label")


def _arrowhead(fig: Figure, x: float, y: float, direction: int, size: float, colour: str,
               cls: str) -> None:
    """A filled arrowhead whose tip is at (x, y), pointing left (-1) or right (+1) from its base."""
    tip = x
    back = x + direction * size
    pts = f"{num(tip)},{num(y)} {num(back)},{num(y - size / 2)} {num(back)},{num(y + size / 2)}"
    fig.raw(f"<polygon class=\"{cls}-head\" points=\"{pts}\" fill=\"{colour}\"/>")


def band_x(
    fig: Figure,
    x1: float,
    x2: float,
    top: float,
    bottom: float,
    style: Style,
    cls: str,
    *,
    hatched: bool = False,
) -> None:
    """A vertical band between x1 and x2 (shaded, or hatched in the style's colour)."""
    fill = fig.hatch(cls, style.colour) if hatched else style.fill
    fig.rect(x1, top, x2 - x1, bottom - top, fill, cls,
             opacity=style.opacity if not hatched else 1.0)


def vline(fig: Figure, x: float, top: float, bottom: float, style: Style, cls: str) -> None:
    fig.line(x, top, x, bottom, style, cls)


def legend(
    fig: Figure, x: float, y: float, entries: Sequence[tuple[str, Style, str]], *, across: bool = True
) -> None:
    """Legend entries (label, style, kind): 'line', 'line+marker', 'band', 'bar', 'hatch', 'marker'.

    Each entry shows the same pattern and marker as the series, so the legend reads in greyscale.
    Entries run across and wrap onto a new row 18 px lower at the figure's right edge; the
    figure grows taller when a wrapped row would leave it.
    """
    cx, cy = x, y
    for label, style, kind in entries:
        needed = 34 + text_width(label, 11)
        if across and cx > x and cx + needed > fig.width:
            cx, cy = x, cy + 18
        if kind == "band":
            fig.rect(cx, cy - 7, 22, 12, style.fill, "legend-swatch", opacity=style.opacity,
                     stroke=Style(style.colour, style.dash, width=1.0))
        elif kind == "hatch":
            fig.rect(cx, cy - 7, 22, 12, fig.hatch("legend-" + style.colour.strip("#"), style.colour),
                     "legend-swatch", stroke=Style(style.colour, width=0.8))
        elif kind == "bar":
            fig.rect(cx, cy - 7, 22, 12, style.fill, "legend-swatch",
                     stroke=Style(style.colour, width=0.8))
        else:
            if kind in ("line", "line+marker"):
                fig.line(cx, cy - 1, cx + 22, cy - 1, style, "legend-line")
            if kind in ("marker", "line+marker") and style.marker != "none":
                fig.marker(cx + 11, cy - 1, style, "legend-marker", 4.0)
        fig.text(cx + 28, cy + 3, label, size=11, cls="legend-label")
        # a wrapped row never leaves the drawing: the figure grows to hold it
        fig.height = max(fig.height, int(cy + 12))
        if across:
            cx += needed + 12
        else:
            cy += 18


def place_labels(
    fig: Figure,
    labels: Sequence[tuple[float, str]],
    y: float,
    *,
    size: float = 10,
    cls: str = "",
    left: float = 2.0,
    right: float | None = None,
    row: float = 12.0,
) -> None:
    """Labels centred over their x where room allows, kept inside [left, right] and moved down
    a row when they would touch a label already placed (so no two collide or leave the figure)."""
    right = fig.width - 2.0 if right is None else right
    placed: list[tuple[float, float, float]] = []  # x0, x1, y
    for x, text in sorted(labels):
        w = text_width(text, size)
        x0 = min(max(x - w / 2, left), right - w)
        ty = y
        while any(ty == py and x0 < px1 + 4 and x0 + w > px0 - 4 for px0, px1, py in placed):
            ty += row
        placed.append((x0, x0 + w, ty))
        fig.text(x0, ty, text, anchor="start", size=size, cls=cls)


def text_width(text: str, size: float) -> float:
    """A generous estimate of a label's width in pixels (sans-serif, about 0.6 em a character)."""
    return 0.6 * size * len(text)
