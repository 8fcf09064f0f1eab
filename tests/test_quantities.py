"""Engineering notation in and out, exact inside (gapforge.base.quantities).

Expected values are exact fractions worked out by hand from the SI prefixes (BIPM, The
International System of Units, 9th ed., 2019, table 7: p = 1e-12, n = 1e-9, u = 1e-6, m = 1e-3,
k = 1e3, M = 1e6, G = 1e9); 'meg' for mega is the circuit-simulator spelling (common practice).
"""

from __future__ import annotations

import os
import subprocess
import sys
from fractions import Fraction

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from conftest import REPO
from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import (
    format_quantity,
    format_tolerance,
    parse_quantity,
    parse_tolerance,
    picoseconds_ceil,
    picoseconds_floor,
    picoseconds_nearest,
)

F = Fraction


@pytest.mark.parametrize(
    ("text", "unit", "expected"),
    [
        ("160MHz", "Hz", F(160_000_000)),
        ("160e6", "Hz", F(160_000_000)),
        ("160E6", "Hz", F(160_000_000)),
        ("160 MHz", "Hz", F(160_000_000)),
        ("  160MHz  ", "Hz", F(160_000_000)),
        ("1meg", "Hz", F(1_000_000)),
        ("1MEG", "", F(1_000_000)),
        ("1megHz", "Hz", F(1_000_000)),
        ("2.5GHz", "Hz", F(2_500_000_000)),
        ("20kHz", "Hz", F(20_000)),
        ("6.25ns", "s", F(1, 160_000_000)),  # 6.25e-9 = 625/1e11 = 1/160e6
        ("25ns", "s", F(1, 40_000_000)),
        ("+25ns", "s", F(1, 40_000_000)),
        ("1.5us", "s", F(3, 2_000_000)),
        ("1\u00b5s", "s", F(1, 1_000_000)),  # micro sign
        ("1\u03bcs", "s", F(1, 1_000_000)),  # Greek mu
        ("3ms", "s", F(3, 1000)),
        ("2s", "s", F(2)),
        ("0.1e-6s", "s", F(1, 10_000_000)),
        (".5ns", "s", F(1, 2_000_000_000)),
        ("4.7k", "ohm", F(4700)),
        ("4.7kohm", "ohm", F(4700)),
        ("4.7k\u03a9", "ohm", F(4700)),  # Greek capital omega
        ("4.7k", "", F(4700)),
        ("100p", "F", F(1, 10_000_000_000)),  # 100e-12
        ("100pF", "F", F(1, 10_000_000_000)),
        ("1nF", "F", F(1, 1_000_000_000)),
        ("3.3V", "V", F(33, 10)),
        ("250fs", "s", F(1, 4_000_000_000_000)),
        ("1T", "", F(10**12)),
    ],
)
def test_parse_quantity_table(text: str, unit: str, expected: Fraction) -> None:
    value = parse_quantity(text, unit, "where")
    assert isinstance(value, Fraction)
    assert value == expected


def test_decimal_text_is_exact_not_float() -> None:
    # 0.1 has no exact binary float; the parser must keep the decimal: 0.1 ns = 1/1e10 exactly
    assert parse_quantity("0.1ns", "s", "w") == F(1, 10**10)
    assert parse_quantity("0.1ns", "s", "w") != F(0.1e-9)
    # a TOML float is taken by its shortest decimal text
    assert parse_quantity(1.6e8, "Hz", "w") == F(160_000_000)
    assert parse_quantity(0.1, "V", "w") == F(1, 10)
    assert parse_quantity(160000000, "Hz", "w") == F(160_000_000)


@pytest.mark.parametrize(
    ("text", "unit", "message"),
    [
        ("160MHzz", "Hz", "where: unknown unit 'MHzz' in '160MHzz' (expected an SI prefix and Hz)"),
        ("6.25ns", "Hz", "where: unknown unit 'ns' in '6.25ns' (expected an SI prefix and Hz)"),
        ("160MHz", "s", "where: unknown unit 'MHz' in '160MHz' (expected an SI prefix and s)"),
        ("5x", "", "where: unknown unit 'x' in '5x' (expected an SI prefix and no unit)"),
        ("abc", "s", "where: 'abc' is not a number with an optional unit"),
        ("", "s", "where: '' is not a number with an optional unit"),
        ("nan", "s", "where: 'nan' is not a finite number"),
        ("NaN", "Hz", "where: 'NaN' is not a finite number"),
        ("inf", "Hz", "where: 'inf' is not a finite number"),
        ("-inf", "s", "where: '-inf' is not a finite number"),
        ("Infinity", "s", "where: 'Infinity' is not a finite number"),
        ("-5ns", "s", "where: '-5ns' must not be negative"),
        ("0", "Hz", "where: '0' must be greater than zero"),
        ("0ns", "s", "where: '0ns' must be greater than zero"),
    ],
)
def test_parse_quantity_errors(text: str, unit: str, message: str) -> None:
    with pytest.raises(GapforgeError) as info:
        parse_quantity(text, unit, "where")
    assert info.value.line() == message
    assert "\n" not in info.value.line()


@pytest.mark.parametrize(
    ("value", "message"),
    [
        (float("nan"), "w: nan is not a finite number"),
        (float("inf"), "w: inf is not a finite number"),
        (True, "w: expected a quantity in s, got True"),
        ([1], "w: expected a quantity in s, got [1]"),
        (-1, "w: -1 what? did you mean -1ns? (a bare number is refused here)"),
        (0, "w: 0 must be greater than zero"),
    ],
)
def test_parse_quantity_rejects_non_text_values(value: object, message: str) -> None:
    with pytest.raises(GapforgeError) as info:
        parse_quantity(value, "s", "w")
    assert info.value.line() == message


def test_zero_and_negative_only_where_allowed() -> None:
    assert parse_quantity("0ns", "s", "w", allow_zero=True) == 0
    assert parse_quantity("-3ns", "s", "w", allow_negative=True) == F(-3, 10**9)


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("50ppm", F(50, 10**6)),
        ("50 ppm", F(1, 20_000)),
        ("2%", F(1, 50)),
        ("2 %", F(1, 50)),
        ("0.5%", F(1, 200)),
        ("5ppb", F(5, 10**9)),
        ("0", F(0)),
        (0, F(0)),
        ("\u00b12%", F(1, 50)),  # the forms people type (issue 9)
        ("+/-2%", F(1, 50)),
        ("+/- 50ppm", F(50, 10**6)),
    ],
)
def test_parse_tolerance_table(text: object, expected: Fraction) -> None:
    assert parse_tolerance(text, "w") == expected


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("100%", "w: tolerance '100%' must be below 100 %"),
        ("150%", "w: tolerance '150%' must be below 100 %"),
        ("abc", "w: 'abc' is not a number with an optional unit"),
        ("nanppm", "w: 'nan' is not a finite number"),
        (True, "w: expected a tolerance such as '50ppm' or '2%', got True"),
    ],
)
def test_parse_tolerance_errors(text: object, message: str) -> None:
    with pytest.raises(GapforgeError) as info:
        parse_tolerance(text, "w")
    assert info.value.line() == message


def test_negative_tolerance_is_refused() -> None:
    with pytest.raises(GapforgeError) as info:
        parse_tolerance("-5ppm", "w")
    assert "must not be negative" in info.value.line()


@pytest.mark.parametrize(
    ("value", "unit", "text"),
    [
        (F(1, 160_000_000), "s", "6.25 ns"),
        (F(1, 32_000_000), "s", "31.25 ns"),
        (F(160_000_000), "Hz", "160 MHz"),
        (F(0), "s", "0 s"),
        (F(-3, 10**9), "s", "-3 ns"),
        (F(390625, 10**15), "s", "390.6 ps"),  # 4 significant digits by default (issue 23)
        (F(4700), "ohm", "4.7 kohm"),
        (F(1, 10**16), "s", "0.1 fs"),  # below the smallest prefix stays in fs
        (F(999_999_9, 10**13), "s", "1 us"),  # 999.9999 ns rounds to 1000 ns: prefix steps up
    ],
)
def test_format_quantity_table(value: Fraction, unit: str, text: str) -> None:
    assert format_quantity(value, unit) == text


def test_format_quantity_digits() -> None:
    assert format_quantity(F(390625, 10**15), "s", 6) == "390.625 ps"


@pytest.mark.parametrize(
    ("value", "text"),
    [(F(0), "0"), (F(50, 10**6), "50 ppm"), (F(1, 50), "2 %"), (F(1, 1000), "0.1 %")],
)
def test_format_tolerance_table(value: Fraction, text: str) -> None:
    assert format_tolerance(value) == text


def test_picoseconds_round_toward_the_safe_side() -> None:
    # 14.0625 ns = 14062.5 ps: a minimum rounds up, a maximum or an achieved value rounds down
    v = F(140625, 10**13)
    assert picoseconds_floor(v) == 14062
    assert picoseconds_ceil(v) == 14063
    assert picoseconds_nearest(v) == 14063
    # an exact whole number of ps stays put either way
    assert picoseconds_floor(F(1, 40_000_000)) == picoseconds_ceil(F(1, 40_000_000)) == 25_000


def test_absurd_exponent_is_refused_quickly() -> None:
    # run in a child process so a hang costs 3 s, not the suite
    code = (
        "from gapforge.base.errors import GapforgeError\n"
        "from gapforge.base.quantities import parse_quantity\n"
        "try:\n    parse_quantity('1e999999999', 'Hz', 'w')\n"
        "except GapforgeError as exc:\n    print(exc.line())\n"
    )
    env = dict(os.environ)
    env["PYTHONPATH"] = str(REPO / "gen")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          env=env, timeout=3)
    assert proc.stdout.startswith("w: ")


@pytest.mark.parametrize("text", ["160mhz", "160mHz", "10m"])
def test_milli_before_hertz_is_refused(text: str) -> None:
    # 'm' is milli: a lower-case '160mhz' would silently mean 0.16 Hz and give a header whose
    # dead time is far too short on the real timer, so hertz refuse the milli prefix outright
    with pytest.raises(GapforgeError) as info:
        parse_quantity(text, "Hz", "--clock")
    assert info.value.where == "--clock"
    assert "write M for mega" in info.value.message


def test_limits_are_displayed_cut_toward_the_safe_side() -> None:
    from gapforge.base.quantities import format_bound

    # 27.732988 ns as a guaranteed minimum shows 27.7329 ns (cut down), never 27.733 ns;
    # as a maximum it shows 27.733 ns (cut up); exact values stay as they are
    v = Fraction(27732988, 10**15)
    assert format_bound(v, "s", "down") == "27.7329 ns"
    assert format_bound(v, "s", "up") == "27.733 ns"
    assert format_bound(Fraction(852, 10**9), "s", "down") == "852 ns"
    assert format_bound(Fraction(1, 3 * 10**6), "s", "up") == "333.334 ns"
    assert format_bound(Fraction(1, 3 * 10**6), "s", "down") == "333.333 ns"


# ---------------------------------------------------------------------------------------------
# Issue 9, section 3: inputs that silently meant something else. Each row failed on the old
# parser (it read "400" as 400 s, "2" as a tolerance of 200 %, "1.2uS" as 1.2 us).


@pytest.mark.parametrize(
    ("value", "unit", "words"),
    [
        ("400", "s", "400 what? did you mean 400ns?"),
        (400, "s", "400 what? did you mean 400ns?"),
        (" 25 ", "s", "25 what? did you mean 25ns?"),
        ("100", "F", "100 what? did you mean 100pF?"),
        (150, "C", "150 what? did you mean 150nC?"),
        (4e-7, "s", "4e-07 what? write the unit, e.g. 4e-07s"),
    ],
)
def test_bare_numbers_are_refused_for_times_capacitances_and_charges(
    value: object, unit: str, words: str
) -> None:
    with pytest.raises(GapforgeError) as info:
        parse_quantity(value, unit, "dead_time.value")
    assert info.value.line().startswith(f"dead_time.value: {words}")


@pytest.mark.parametrize(
    ("value", "unit", "expected"),
    [
        ("48", "V", F(48)),
        (10, "ohm", F(10)),
        ("20", "A", F(20)),
        ("160e6", "Hz", F(160_000_000)),
        ("1.2", "", F(6, 5)),
        ("0", "s", F(0)),  # zero needs no unit
    ],
)
def test_bare_numbers_stay_where_natural(value: object, unit: str, expected: Fraction) -> None:
    assert parse_quantity(value, unit, "w", allow_zero=True) == expected


def test_a_model_card_keeps_its_own_bare_base_units() -> None:
    # SPICE model cards take CJO=2e-11 in farads (SPICE 3 user's manual, model parameters)
    assert parse_quantity("2e-11", "F", "w", allow_bare=True) == F(2, 10**11)


@pytest.mark.parametrize("text", ["2", 2, "0.5", 0.02])
def test_a_bare_tolerance_is_refused_with_the_percent_hint(text: object) -> None:
    with pytest.raises(GapforgeError) as info:
        parse_tolerance(text, "timer.tolerance")
    assert f"{str(text).strip()} what? did you mean {text}%?" in info.value.line()


@pytest.mark.parametrize("text", ["1.2uS", "1.2US", "5nS", "3S"])
def test_siemens_is_not_seconds(text: str) -> None:
    with pytest.raises(GapforgeError) as info:
        parse_quantity(text, "s", "w")
    assert "S is siemens" in info.value.line()


def _case_mixes(word: str) -> list[str]:
    import itertools

    return ["".join(c) for c in itertools.product(*((ch.lower(), ch.upper()) for ch in word))]


@pytest.mark.parametrize("suffix", [s for s in _case_mixes("mhz") if s[0] == "m"] + ["m"])
def test_every_case_mix_of_milli_hertz_is_refused(suffix: str) -> None:
    # issue 14 item 2: '160mHZ' was read as 0.16 Hz while '160mHz' was refused
    with pytest.raises(GapforgeError) as info:
        parse_quantity(f"160{suffix}", "Hz", "--clock")
    assert "'m' means milli" in info.value.line()


@pytest.mark.parametrize("suffix", [s for s in _case_mixes("mhz") if s[0] == "M"])
def test_mega_hertz_in_any_case_is_mega(suffix: str) -> None:
    assert parse_quantity(f"160{suffix}", "Hz", "w") == 160_000_000


@pytest.mark.parametrize(("text", "unit"), [("1Ms", "s"), ("2MEGs", "s"), ("1MF", "F"),
                                            ("3GC", "C"), ("1M", "s")])
def test_mega_on_a_time_capacitance_or_charge_is_a_typo(text: str, unit: str) -> None:
    with pytest.raises(GapforgeError) as info:
        parse_quantity(text, unit, "w")
    assert "typo" in info.value.line()


@pytest.mark.parametrize(
    "value",
    ["1" * 5000, "1" * 400, "9" * 65, 10**400, 10**40, 1e300, "1e-30f", "1e30T", 1e-300],
)
def test_huge_and_tiny_quantities_are_clean_errors(value: object) -> None:
    # issue 14 item 9: 4300+ digits raised ValueError, ~400 digits OverflowError later on
    with pytest.raises(GapforgeError) as info:
        parse_quantity(value, "V", "timer.clock")
    line = info.value.line()
    assert "range" in line or "too long" in line
    assert len(line) < 200 and "\n" not in line


def test_an_error_quotes_a_long_value_cut_short() -> None:
    # issue 14 item 18: a 10 MB value once gave a 10 MB error line
    with pytest.raises(GapforgeError) as info:
        parse_tolerance("x" * 10_000_000, "timer.tolerance")
    assert len(info.value.line()) < 200 and "10000000 characters" in info.value.line()


def test_an_error_line_is_capped_whatever_the_message() -> None:
    line = GapforgeError("bad " + "y" * 100_000, "k" * 100_000).line()
    assert len(line) < 700 and "characters cut" in line


quantity_text = st.text(alphabet=st.sampled_from(list("0123456789.eE+-kKmMunpfGTs Hzohm%\u00b5\u00b1/SFCVA")),
                        max_size=30)


@settings(max_examples=300, deadline=None, derandomize=True)
@given(text=st.one_of(quantity_text, st.text(max_size=80), st.integers(), st.floats()),
       unit=st.sampled_from(["s", "Hz", "ohm", "F", "V", "A", "W", "C", ""]))
def test_fuzz_the_quantity_parser_gives_a_value_or_one_clean_error(text: object, unit: str) -> None:
    # the promise of issue 14: any input gives an exact value in range or one GapforgeError line
    try:
        value = parse_quantity(text, unit, "w", allow_zero=True, allow_negative=True)
    except GapforgeError as exc:
        line = exc.line()
        assert "\n" not in line and len(line) < 700
    else:
        assert isinstance(value, Fraction)
        assert value == 0 or F(1, 10**30) <= abs(value) <= 10**30
    try:
        tol = parse_tolerance(text, "w")
    except GapforgeError as exc:
        assert "\n" not in exc.line()
    else:
        assert 0 <= tol < 1
