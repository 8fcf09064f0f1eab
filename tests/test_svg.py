"""The SVG helpers: well-formed XML, coordinates proportional to values, fixed formatting."""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET

import pytest

from gapforge.outputs.svg import (
    PALETTE,
    Axis,
    Figure,
    Style,
    dimension,
    eng,
    histogram,
    legend,
    nice_ticks,
    num,
    step_points,
    units_for,
    x_axis,
    y_axis,
)

NS = {"svg": "http://www.w3.org/2000/svg"}


def parse(text: str) -> ET.Element:
    return ET.fromstring(text)


def by_class(root: ET.Element, tag: str, cls: str) -> list[ET.Element]:
    return [e for e in root.iter(f"{{{NS['svg']}}}{tag}") if e.get("class") == cls]


def test_num_is_fixed_and_never_negative_zero() -> None:
    assert num(1.0) == "1.00"
    assert num(-0.0001) == "0.00"
    assert num(-0.004, 2) == "0.00"
    assert num(2.675, 1) == "2.7"
    assert num(1e-7, 3) == "0.000"  # never exponent notation
    assert num(-12.5, 0) == "-12"  # round half to even, as Python formats
    with pytest.raises(ValueError):
        num(math.nan)


@pytest.mark.parametrize(
    ("lo", "hi", "count", "expected"),
    [
        (0.0, 10.0, 5, [0, 2, 4, 6, 8, 10]),
        (0.0, 1e-5, 8, [0, 2e-6, 4e-6, 6e-6, 8e-6, 1e-5]),
        (-50e-9, 200e-9, 8, [-50e-9, 0, 50e-9, 100e-9, 150e-9, 200e-9]),
        (3.0, 3.3, 5, [3.0, 3.1, 3.2, 3.3]),
    ],
)
def test_nice_ticks_are_1_2_5_steps(lo: float, hi: float, count: int,
                                    expected: list[float]) -> None:
    ticks = nice_ticks(lo, hi, count)
    assert len(ticks) == len(expected)
    for got, want in zip(ticks, expected, strict=True):
        assert got == pytest.approx(want, abs=1e-12 * max(1.0, abs(hi)))


def test_engineering_labels() -> None:
    # 875 ns written with four significant digits, the prefix chosen by magnitude
    # the one display style (issue 10): four significant digits, trailing zeros dropped
    assert eng(875e-9, "s") == "875 ns"
    assert eng(93.75e-9, "s") == "93.75 ns"
    assert eng(2.5e-6, "s") == "2.5 us"
    assert eng(999.99e-9, "s") == "1 us"  # rounding carries into the next prefix
    assert eng(0.0, "s") == "0 s"
    units = units_for([0.0, 50e-9, 100e-9, 150e-9])
    assert (units.prefix, units.decimals) == ("n", 0)
    assert [units.label(t) for t in (0.0, 50e-9, 150e-9)] == ["0", "50", "150"]
    units = units_for([3.0, 3.1, 3.2])
    assert units.decimals == 1 and units.label(3.1) == "3.1"


def test_axis_ticks_sit_at_positions_proportional_to_values() -> None:
    fig = Figure("t1", 600, 200, "axis test")
    axis = Axis(0.0, 1e-6, 100.0, 500.0)
    ticks = nice_ticks(0.0, 1e-6, 5)
    x_axis(fig, axis, 150.0, ticks, "s", "time")
    root = parse(fig.render())
    tick_lines = by_class(root, "line", "tick")
    labels = [t.text for t in by_class(root, "text", "tick-label")]
    # the largest tick is 1 us, so the axis counts in microseconds with one decimal
    assert labels == ["0.0", "0.2", "0.4", "0.6", "0.8", "1.0"]
    # independent: 100 px + t / 1 us x 400 px
    for line, label in zip(tick_lines, labels, strict=True):
        expected = 100.0 + float(label) * 1e-6 / 1e-6 * 400.0
        assert float(line.get("x1", "nan")) == pytest.approx(expected, abs=0.006)
    title = by_class(root, "text", "axis-title")[0].text
    assert title == "time (us)"


def test_y_axis_runs_upward_and_counts_keep_plain_numbers() -> None:
    fig = Figure("t2", 300, 300, "y axis")
    axis = Axis(0.0, 2000.0, 250.0, 50.0)
    y_axis(fig, axis, 60.0, nice_ticks(0.0, 2000.0, 4), "", "count")
    root = parse(fig.render())
    labels = [t.text for t in by_class(root, "text", "tick-label")]
    assert labels == ["0", "500", "1000", "1500", "2000"]  # no 'k' prefix on a count
    ys = [float(e.get("y1", "nan")) for e in by_class(root, "line", "tick")]
    assert ys == pytest.approx([250.0, 200.0, 150.0, 100.0, 50.0], abs=0.006)


def test_histogram_bar_heights_are_proportional_to_counts() -> None:
    fig = Figure("h", 400, 300, "histogram")
    xa = Axis(0.0, 4.0, 0.0, 400.0)
    ya = Axis(0.0, 10.0, 250.0, 50.0)
    histogram(fig, [0.0, 1.0, 2.0, 3.0, 4.0], [2, 0, 10, 5], xa, ya, PALETTE["reference"])
    bars = by_class(parse(fig.render()), "rect", "bar")
    assert len(bars) == 3  # the empty bin draws nothing
    got = [(float(b.get("x", "nan")), float(b.get("height", "nan"))) for b in bars]
    # 100 px per bin; 20 px per count
    # flattened: newer pytest refuses approx over nested tuples
    flat = [v for pair in got for v in pair]
    assert flat == pytest.approx([0.0, 40.0, 200.0, 200.0, 300.0, 100.0], abs=0.006)
    with pytest.raises(ValueError):
        histogram(fig, [0.0, 1.0], [1, 2], xa, ya, PALETTE["reference"])


def test_step_points_hold_each_level_between_breakpoints() -> None:
    xa = Axis(0.0, 10.0, 0.0, 100.0)
    ya = Axis(0.0, 10.0, 100.0, 0.0)
    pts = step_points([0.0, 2.0, 5.0], [3.0, 7.0], xa, ya)
    flat = [v for pair in pts for v in pair]
    assert flat == pytest.approx([0.0, 70.0, 20.0, 70.0, 20.0, 30.0, 50.0, 30.0])
    with pytest.raises(ValueError):
        step_points([0.0, 1.0], [1.0, 2.0], xa, ya)


def test_dimension_arrows_end_on_the_marked_times() -> None:
    fig = Figure("d", 500, 100, "dimension")
    dimension(fig, 100.0, 300.0, 50.0, "to_high 93.75 ns", PALETTE["high"], "dim")
    dimension(fig, 400.0, 410.0, 50.0, "tiny", PALETTE["low"], "small")
    root = parse(fig.render())
    heads = by_class(root, "polygon", "dim-head")
    tips = sorted(float(h.get("points", "").split()[0].split(",")[0]) for h in heads)
    assert tips == [100.0, 300.0]
    label = by_class(root, "text", "dim-label")[0]
    assert label.text == "to_high 93.75 ns"
    # a narrow dimension puts its arrows outside, pointing in; the label moves to the right
    small = by_class(root, "text", "small-label")[0]
    assert float(small.get("x", "nan")) > 410.0


def test_figure_ids_are_scoped_and_text_is_escaped() -> None:
    fig = Figure("fig-a", 100, 100, "a < b & c")
    ref = fig.hatch("win", "#000000")
    fig.rect(0, 0, 10, 10, ref, "band")
    fig.text(5, 5, "<script>")
    text = fig.render()
    root = parse(text)
    assert root.get("id") == "fig-a"
    assert ref == "url(#fig-a-win)"
    assert "<script>" not in text
    assert root.find("svg:title", NS) is not None
    with pytest.raises(ValueError):
        Figure("bad id", 10, 10, "x")


def test_legend_wraps_at_the_figure_edge() -> None:
    fig = Figure("l", 200, 100, "legend")
    legend(fig, 10, 20, [("first long label", PALETTE["high"], "line"),
                         ("second long label", PALETTE["low"], "line")])
    labels = by_class(parse(fig.render()), "text", "legend-label")
    assert [float(t.get("y", "nan")) for t in labels] == [23.0, 41.0]


# --- the palette --------------------------------------------------------------------------------


def relative_luminance(colour: str) -> float:
    """WCAG 2.1 relative luminance of an sRGB colour (W3C, WCAG 2.1, 'relative luminance')."""
    channels = [int(colour[i : i + 2], 16) / 255 for i in (1, 3, 5)]
    linear = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in channels]
    return 0.2126 * linear[0] + 0.7152 * linear[1] + 0.0722 * linear[2]


def contrast(a: str, b: str) -> float:
    la, lb = sorted((relative_luminance(a), relative_luminance(b)), reverse=True)
    return (la + 0.05) / (lb + 0.05)


def test_palette_lines_contrast_with_the_page_and_differ_without_colour() -> None:
    # WCAG 2.1 success criterion 1.4.11 (non-text contrast): graphical objects need 3:1 against
    # adjacent colours (W3C Recommendation, 2018; from memory). Every line series meets it on white.
    lines = ["high", "low", "request", "chosen", "window", "threshold", "overlap", "closed-form"]
    for name in lines:
        assert contrast(PALETTE[name].colour, "#ffffff") >= 3.0, name
    # Series drawn together are told apart by pattern or marker as well as by colour, so a
    # greyscale print or a colour-blind reader still separates them.
    together = [("high", "low"), ("request", "window"), ("simulated", "closed-form"),
                ("representable", "chosen")]
    for a, b in together:
        sa, sb = PALETTE[a], PALETTE[b]
        assert (sa.dash, sa.marker) != (sb.dash, sb.marker), (a, b)
    # Bars of the two histograms differ in lightness, not only in hue.
    ref, meas = PALETTE["reference"].fill, PALETTE["measured"].fill
    assert abs(relative_luminance(ref) - relative_luminance(meas)) > 0.05
    assert isinstance(PALETTE["high"], Style)
