"""A compact text timing diagram of the complementary pair through one PWM period.

One line per output, the two dead times marked and labelled. Dead times are usually a tiny share
of the period, so each gap gets at least a few columns; the diagram says when it is not to scale.
"""

from __future__ import annotations

from fractions import Fraction

from gapforge.base.quantities import format_quantity
from gapforge.timer.fit import FitResult
from gapforge.timer.limits import PwmLimits

WIDTH = 64
MIN_GAP = 4


def pair_diagram(
    to_high_s: Fraction,
    to_low_s: Fraction,
    period_s: Fraction | None,
    duty: Fraction = Fraction(1, 2),
    ascii_only: bool = False,
) -> str:
    """Text lines: the high-side and low-side outputs with both gaps marked."""
    lo_c, hi_c = ("_", "-") if ascii_only else ("\u2581", "\u2594")
    bar = "|" if ascii_only else "\u2502"
    inner = WIDTH - 2
    if period_s is not None and period_s > 0:
        scale = Fraction(inner) / period_s
        g1 = max(MIN_GAP, round(to_high_s * scale))
        g2 = max(MIN_GAP, round(to_low_s * scale))
        to_scale = g1 == round(to_high_s * scale) and g2 == round(to_low_s * scale)
    else:
        g1 = g2 = MIN_GAP * 2
        to_scale = False
    on_total = inner - g1 - g2
    head = max(1, round(on_total * (1 - duty) / 2))
    high_on = max(1, round(on_total * duty))
    tail = max(1, on_total - head - high_on)
    # columns: [low on: head] [gap g1] [high on] [gap g2] [low on: tail]
    high = lo_c * (head + g1) + hi_c * high_on + lo_c * (g2 + tail)
    low = hi_c * head + lo_c * (g1 + high_on + g2) + hi_c * tail
    marks = [" "] * len(high)
    for start, width in ((head, g1), (head + g1 + high_on, g2)):
        marks[start] = bar
        marks[start + width - 1] = bar
        for k in range(start + 1, start + width - 1):
            marks[k] = "-" if ascii_only else "\u2500"
    label = [" "] * (len(high) + 40)
    t1 = f"to_high {format_quantity(to_high_s, 's', 4)}"
    t2 = f"to_low {format_quantity(to_low_s, 's', 4)}"
    label[head : head + len(t1)] = list(t1)
    start2 = max(head + g1 + high_on, head + len(t1) + 2)
    label[start2 : start2 + len(t2)] = list(t2)
    note = "" if to_scale else "  (gaps widened: not to scale)"
    return "\n".join(
        [
            f"high  {high}",
            f"low   {low}",
            f"      {''.join(marks).rstrip()}",
            f"      {''.join(label).rstrip()}{note}",
        ]
    )


def pair_diagram_for_fit(result: FitResult, limits: PwmLimits | None, ascii_only: bool) -> str:
    th = result.edges["to_high"].achieved_s
    tl = result.edges["to_low"].achieved_s
    assert th is not None and tl is not None
    period = None if limits is None else 1 / limits.real_frequency_hz
    return pair_diagram(th, tl, period, ascii_only=ascii_only)
