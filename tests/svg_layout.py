"""Text boxes of an SVG figure, estimated from font size and length (issue 10's overlap check).

A label's box: width 0.6 em a character (a generous sans-serif average, common practice for
estimating text extents; the same rule `gapforge.outputs.svg.text_width` uses), height from
0.8 em above the baseline to 0.25 em below it (typical ascender/descender proportions of a
sans-serif face, from memory). Rotated labels (rotate(-90 x y)) turn the box about (x, y).
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET
from itertools import pairwise

SVG = "{http://www.w3.org/2000/svg}"
Box = tuple[float, float, float, float]  # x0, y0, x1, y1


def text_boxes(root: ET.Element) -> list[tuple[str, Box]]:
    boxes: list[tuple[str, Box]] = []
    for el in root.iter(SVG + "text"):
        content = "".join(el.itertext())
        if not content.strip():
            continue
        x, y = float(el.get("x", "0")), float(el.get("y", "0"))
        size = float(el.get("font-size", "12"))
        width = 0.6 * size * len(content)
        anchor = el.get("text-anchor", "start")
        x0 = {"start": x, "middle": x - width / 2, "end": x - width}[anchor]
        box: Box = (x0, y - 0.8 * size, x0 + width, y + 0.25 * size)
        if "rotate(-90" in (el.get("transform") or ""):
            # rotate each corner by -90 degrees about (x, y): (dx, dy) -> (dy, -dx)
            xs = [x + (cy - y) for cy in (box[1], box[3])]
            ys = [y - (cx - x) for cx in (box[0], box[2])]
            box = (min(xs), min(ys), max(xs), max(ys))
        boxes.append((content, box))
    return boxes


def view_box(root: ET.Element) -> Box:
    x, y, w, h = (float(v) for v in str(root.get("viewBox")).split())
    return (x, y, x + w, y + h)


def layout_problems(root: ET.Element, slack: float = 0.5) -> list[str]:
    """Every pair of overlapping labels and every label leaving the view box."""
    problems: list[str] = []
    boxes = text_boxes(root)
    vx0, vy0, vx1, vy1 = view_box(root)
    for text, (x0, y0, x1, y1) in boxes:
        if x0 < vx0 - slack or y0 < vy0 - slack or x1 > vx1 + slack or y1 > vy1 + slack:
            problems.append(f"{text!r} leaves the view box ({x0:.0f},{y0:.0f},{x1:.0f},{y1:.0f})")
    for i, (ta, a) in enumerate(boxes):
        for tb, b in boxes[i + 1 :]:
            overlap_x = min(a[2], b[2]) - max(a[0], b[0])
            overlap_y = min(a[3], b[3]) - max(a[1], b[1])
            if overlap_x > slack and overlap_y > slack:
                problems.append(f"{ta!r} overlaps {tb!r}")
    return problems


def svgs(text: str) -> dict[str, ET.Element]:
    found = re.findall(r"<svg .*?</svg>", text, re.S)
    roots = [ET.fromstring(s) for s in found]
    return {str(r.get("id")): r for r in roots}


def curve_crossings(root: ET.Element, step: float = 1.0) -> list[str]:
    """Every label whose box a drawn curve (a polyline) passes through, sampled every `step` px."""
    boxes = text_boxes(root)
    problems: list[str] = []
    for line in root.iter(SVG + "polyline"):
        pts = [tuple(float(v) for v in p.split(",")) for p in str(line.get("points")).split()]
        samples: list[tuple[float, float]] = []
        for (x0, y0), (x1, y1) in pairwise(pts):
            n = max(1, int(max(abs(x1 - x0), abs(y1 - y0)) / step))
            samples += [(x0 + (x1 - x0) * i / n, y0 + (y1 - y0) * i / n) for i in range(n + 1)]
        for text, (bx0, by0, bx1, by1) in boxes:
            if any(bx0 < x < bx1 and by0 < y < by1 for x, y in samples):
                problems.append(f"{line.get('class')} crosses {text!r}")
    return problems


# --- issue 23: legend entries with nothing drawn, labels crossed by straight lines ----------------

LEGEND = ("legend-swatch", "legend-line", "legend-marker")
SHAPES = ("rect", "line", "polyline", "polygon", "circle")


def _tag(el: ET.Element) -> str:
    return el.tag.replace(SVG, "")


def _patterns(root: ET.Element) -> dict[str, str]:
    """Hatch pattern id -> the colour of its stroke."""
    out = {}
    for pat in root.iter(SVG + "pattern"):
        line = pat.find(SVG + "line")
        out[str(pat.get("id"))] = "" if line is None else str(line.get("stroke"))
    return out


def _paint(el: ET.Element, patterns: dict[str, str]) -> tuple[str, ...]:
    """What a swatch or a drawn shape looks like: a fill (hatch colour, or fill and opacity) or a
    stroke (colour, dash pattern, width)."""
    fill = str(el.get("fill", "none"))
    if fill.startswith("url(#"):
        return ("hatch", patterns.get(fill[5:-1], ""))
    if _tag(el) in ("rect", "circle", "polygon") and fill != "none":
        return ("fill", _tag(el) if _tag(el) != "rect" else "area", fill,
                str(el.get("fill-opacity", "1")))
    return ("stroke", str(el.get("stroke")), str(el.get("stroke-dasharray", "")),
            str(el.get("stroke-width", "1")))


def _extent(el: ET.Element) -> float:
    """How big a drawn shape is on screen, in pixels (its longest side; a marker counts 5)."""
    tag = _tag(el)
    if tag == "rect":
        return min(float(el.get("width", "0")), float(el.get("height", "0")))
    if tag == "line":
        return math.hypot(float(el.get("x2", "0")) - float(el.get("x1", "0")),
                          float(el.get("y2", "0")) - float(el.get("y1", "0")))
    if tag == "polyline":
        pts = [tuple(float(v) for v in p.split(",")) for p in str(el.get("points")).split()]
        return sum(math.hypot(b[0] - a[0], b[1] - a[1]) for a, b in pairwise(pts))
    return 5.0


def _ends(el: ET.Element) -> tuple[float, float, float, float]:
    return tuple(float(el.get(k, "0")) for k in ("x1", "y1", "x2", "y2"))  # type: ignore[return-value]


def _covered(el: ET.Element, later: list[ET.Element]) -> bool:
    """A straight line drawn over, end to end, by a later line of another look."""
    if _tag(el) != "line":
        return False
    x1, y1, x2, y2 = _ends(el)
    for other in later:
        if _tag(other) != "line" or other.get("stroke") == el.get("stroke"):
            continue
        a1, b1, a2, b2 = _ends(other)
        vertical = abs(x1 - x2) < 0.5 and abs(a1 - a2) < 0.5 and abs(x1 - a1) < 1.0
        horizontal = abs(y1 - y2) < 0.5 and abs(b1 - b2) < 0.5 and abs(y1 - b1) < 1.0
        if vertical and min(b1, b2) <= min(y1, y2) + 0.5 and max(b1, b2) >= max(y1, y2) - 0.5:
            return True
        if horizontal and min(a1, a2) <= min(x1, x2) + 0.5 and max(a1, a2) >= max(x1, x2) - 0.5:
            return True
    return False


def legend_problems(root: ET.Element) -> list[str]:
    """Every legend entry whose look (fill, hatch or stroke) no drawn shape at least a pixel big
    (and not drawn over end to end by a later line) carries."""
    patterns = _patterns(root)
    body = [el for el in root if _tag(el) in (*SHAPES, "text")]
    drawn = [el for el in body if _tag(el) in SHAPES and el.get("class") not in LEGEND
             and el.get("class") is not None]
    problems: list[str] = []
    swatches: list[ET.Element] = []
    for el in body:
        if el.get("class") in LEGEND:
            swatches.append(el)
        elif el.get("class") == "legend-label":
            label = "".join(el.itertext())
            looks = {_paint(s, patterns) for s in swatches}
            seen = False
            for i, d in enumerate(drawn):
                if _paint(d, patterns) in looks and _extent(d) >= 1.0 and not _covered(
                        d, drawn[i + 1:]):
                    seen = True
                    break
            if not seen:
                problems.append(f"legend entry {label!r} has nothing drawn")
            swatches = []
    return problems


def line_crossings(root: ET.Element, ignore: tuple[str, ...] = ("grid",)) -> list[str]:
    """Every label whose box a straight line (not a grid line, not a legend swatch) runs into."""
    boxes = [(t, (x0 + 0.5, y0 + 0.5, x1 - 0.5, y1 - 0.5)) for t, (x0, y0, x1, y1)
             in text_boxes(root)]
    problems: list[str] = []
    for el in root.iter(SVG + "line"):
        cls = str(el.get("class"))
        if el.get("class") is None or cls in ignore or cls in LEGEND:
            continue
        x1, y1, x2, y2 = _ends(el)
        n = max(1, int(max(abs(x2 - x1), abs(y2 - y1))))
        pts = [(x1 + (x2 - x1) * i / n, y1 + (y2 - y1) * i / n) for i in range(n + 1)]
        for text, (bx0, by0, bx1, by1) in boxes:
            if any(bx0 < x < bx1 and by0 < y < by1 for x, y in pts):
                problems.append(f"{cls} crosses {text!r}")
    return problems
