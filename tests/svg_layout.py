"""Text boxes of an SVG figure, estimated from font size and length (issue 10's overlap check).

A label's box: width 0.6 em a character (a generous sans-serif average, common practice for
estimating text extents; the same rule `gapforge.outputs.svg.text_width` uses), height from
0.8 em above the baseline to 0.25 em below it (typical ascender/descender proportions of a
sans-serif face, from memory). Rotated labels (rotate(-90 x y)) turn the box about (x, y).
"""

from __future__ import annotations

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
