"""The one display number style (gapforge.base.display, issue 10).

Prefixes are the SI prefixes (BIPM, The International System of Units, 9th ed., 2019, table 7:
p = 1e-12, n = 1e-9, u = 1e-6, M = 1e6). Significant digits and rounding follow the usual rule
(round half to even for display, as IEEE 754-2019 section 4.3.1 specifies for binary-decimal
conversion by default); the expected strings are worked out by hand beside each case.
"""

from __future__ import annotations

from fractions import Fraction

import pytest
from hypothesis import given
from hypothesis import strategies as st

from gapforge.base.display import (
    both_edges,
    choose_exponent,
    count,
    format_many,
    format_offset,
    format_percent,
    format_range,
    format_register,
    format_si,
    significant,
    verdict_word,
)

F = Fraction


@pytest.mark.parametrize(
    ("value", "unit", "expected"),
    [
        (27.7329e-9, "s", "27.73 ns"),  # 27.7329 -> 4 digits 27.73
        (6.25e-9, "s", "6.25 ns"),  # trailing zeros dropped (6.250)
        (160e6, "Hz", "160 MHz"),
        (F(1, 160_000_000), "s", "6.25 ns"),  # 1/160 MHz = 6.25 ns exactly
        (999.96e-9, "s", "1 us"),  # 999.96 ns rounds to 1000 ns: the prefix steps up
        (-4.9e-9, "s", "-4.9 ns"),
        (0, "s", "0 s"),
        (123456, "Hz", "123.5 kHz"),  # 123.456 k -> 4 digits 123.5 (half up of ...56)
        (0.5, "V", "500 mV"),
    ],
)
def test_four_significant_digits(value: object, unit: str, expected: str) -> None:
    assert format_si(value, unit) == expected  # type: ignore[arg-type]


def test_safe_side_cut_is_exact() -> None:
    # 27.732988 ns: a guaranteed minimum shows 27.73 ns (cut down), a maximum 27.74 ns (cut up);
    # nearest would give 27.73 as well, so also a value whose nearest rounding goes up.
    v = F(277_329_88, 10**15)
    assert format_si(v, "s", toward="down") == "27.73 ns"
    assert format_si(v, "s", toward="up") == "27.74 ns"
    w = F(277_399, 10**13)  # 27.7399 ns
    assert format_si(w, "s") == "27.74 ns"
    assert format_si(w, "s", toward="down") == "27.73 ns"


def test_one_prefix_per_line() -> None:
    # 400 ns and 1.2 us in one line: both in ns so they compare (not 400 ns beside 1.2 us)
    assert format_many([400e-9, 1.2e-6], "s") == ["400 ns", "1200 ns"]
    assert format_range(400e-9, 1.2e-6, "s", cut="nearest") == "400 .. 1200 ns"
    # a range shown without saying its safe side is refused (issue 19 item 13: every limit shown
    # is cut toward its safe side, so no caller may forget to choose)
    with pytest.raises(ValueError):
        format_range(400e-9, 1.2e-6, "s")
    # a window cut inward (minimum up, maximum down), a worst case outward
    assert format_range(F(27_61, 10**11), F(29_687, 10**12), "s", cut="inward") == "27.61 .. 29.68 ns"
    assert format_range(F(27_61, 10**11), F(29_687, 10**12), "s", cut="outward") == (
        "27.61 .. 29.69 ns"
    )
    assert format_range(F(27_61, 10**11), F(29_687, 10**12), "s", safe=True) == "27.61 .. 29.69 ns"
    # 6.25 ns beside 480 ns: ns
    assert format_many([F(1, 160_000_000), 480e-9], "s") == ["6.25 ns", "480 ns"]
    # 2 ns beside 15 us: the largest decides (us), a tiny value keeps its digits
    assert choose_exponent([2e-9, 15e-6]) == -6
    assert format_many([2e-9, 15e-6], "s") == ["0.002 us", "15 us"]


def test_offset_in_words() -> None:
    assert format_offset(-100e-9, "s", "the minimum") == "100 ns below the minimum"
    assert format_offset(F(1, 10**8), "s", "the minimum") == "10 ns above the minimum"
    assert format_offset(0, "s", "the minimum") == "at the minimum"


def test_counts_agree_with_their_number() -> None:
    assert count(1, "clock") == "1 clock"
    assert count(2, "clock") == "2 clocks"
    assert count(1, "sub-step") == "1 sub-step"
    assert count(0, "code") == "0 codes"


def test_percent_never_rounds_onto_a_bound() -> None:
    # four digits would say 100 %, which hides the lost duty: "> 99.99 %" (issue 23)
    assert format_percent(F(999_996, 10**6)) == "> 99.99 %"
    assert format_percent(0.999996) == "> 99.99 %"
    # at most three decimals: 1e-7 % is below the 0.001 % floor, said as such (issue 23: no
    # "0.0000002825 %")
    assert format_percent(F(1, 10**9)) == "< 0.001 %"
    assert format_percent(F(1, 10**5)) == "0.001 %"
    assert format_percent(F(1172, 10**6)) == "0.117 %"  # 0.1172 %: three decimals at most
    assert format_percent(1) == "100 %"
    assert format_percent(F(1, 3)) == "33.33 %"


def test_verdict_words() -> None:
    assert [verdict_word(v) for v in ("ok", "too-short", "empty-window", "inconclusive")] == [
        "ok", "fail", "fail", "inconclusive"]


def test_both_edges_said_once() -> None:
    assert both_edges({"to_high": "ok", "to_low": "ok"}) == ["both edges: ok"]
    assert both_edges({"to_high": "ok", "to_low": "fail"}) == ["to_high: ok", "to_low: fail"]


@given(st.fractions(min_value=F(1, 10**14), max_value=F(10**11)))
def test_cut_brackets_the_exact_value(v: Fraction) -> None:
    # the safe-side cut never crosses the value: down <= v <= up (checked in exact decimals)
    down = significant(v, toward="down")
    up = significant(v, toward="up")
    assert F(down) <= v <= F(up)
    assert len(down.replace(".", "").replace("-", "").lstrip("0").rstrip("0")) <= 4


def test_every_shown_quantity_pastes_back_as_input() -> None:
    # issue 23: a long time was shown as "100 Gs", which parse_quantity refuses as a likely typo
    # (G on a time is mega or more: SPICE reads M as milli). Times, capacitances and charges stay
    # in the base unit at most; what is shown parses back to the value shown.
    from gapforge.base.quantities import parse_quantity

    assert format_si(100e9, "s") == "100000000000 s"
    assert format_si(F(2500), "s") == "2500 s"
    assert format_si(F(1, 1000), "F") == "1 mF"
    assert format_si(5e9, "Hz") == "5 GHz"  # hertz keep their prefixes: "5GHz" parses
    for value, unit in ((100e9, "s"), (F(2500), "s"), (F(123456, 10), "s"), (F(47, 10**12), "F"),
                        (F(3, 10**9), "C"), (F(160 * 10**6), "Hz")):
        back = parse_quantity(format_si(value, unit).replace(" ", ""), unit, "test")
        # four significant digits: within half a unit of the fourth digit (5e-4 relative)
        assert abs(back - F(value)) <= abs(F(value)) * F(5, 10**4)


def test_a_register_word_is_written_one_way() -> None:
    # issue 23: sweep said 0x308C2, build 0x000308c2; one way: lower case, padded to the width
    assert format_register(0x308C2, 32) == "0x000308c2"
    assert format_register(5, 10) == "0x005"  # 10 bits: three hex digits
