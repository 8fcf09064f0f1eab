"""Engineering notation in and out, exact inside.

`parse_quantity("6.25ns", "s")` gives `Fraction(1, 160000000)`: decimal text becomes an exact
fraction, so no float rounding can move a code across a boundary. Floats appear only when a
value is formatted for display or handed to statistics.
"""

from __future__ import annotations

import math
import re
from fractions import Fraction

from gapforge.base.errors import GapforgeError, quoted

# SI prefixes accepted on input. 'M' is mega and 'm' is milli; 'meg' is accepted for mega too.
PREFIXES: dict[str, Fraction] = {
    "f": Fraction(1, 10**15),
    "p": Fraction(1, 10**12),
    "n": Fraction(1, 10**9),
    "u": Fraction(1, 10**6),
    "\u00b5": Fraction(1, 10**6),
    "\u03bc": Fraction(1, 10**6),
    "m": Fraction(1, 10**3),
    "": Fraction(1),
    "k": Fraction(10**3),
    "K": Fraction(10**3),
    "meg": Fraction(10**6),
    "M": Fraction(10**6),
    "G": Fraction(10**9),
    "T": Fraction(10**12),
}

# Unit spellings accepted for each kind of quantity (lower-cased forms are compared).
UNITS: dict[str, tuple[str, ...]] = {
    "s": ("s",),
    "Hz": ("hz",),
    "ohm": ("ohm", "ohms", "\u03c9", "\u2126", "r"),
    "F": ("f",),
    "V": ("v",),
    "A": ("a",),
    "W": ("w",),
    "C": ("c",),
    "": (),
}

# Time units written in capture files (VCD timescales, CSV time columns), exactly.
TIME_UNITS: dict[str, Fraction] = {
    "s": Fraction(1),
    "ms": Fraction(1, 10**3),
    "us": Fraction(1, 10**6),
    "ns": Fraction(1, 10**9),
    "ps": Fraction(1, 10**12),
    "fs": Fraction(1, 10**15),
}

_NUMBER = re.compile(r"^\s*([+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)\s*(.*?)\s*$")

_OUT_PREFIXES = [
    (-15, "f"),
    (-12, "p"),
    (-9, "n"),
    (-6, "u"),
    (-3, "m"),
    (0, ""),
    (3, "k"),
    (6, "M"),
    (9, "G"),
    (12, "T"),
]


def _split_suffix(suffix: str, unit: str) -> Fraction | None:
    """The multiplier meant by a suffix such as 'ns', 'MHz', 'k', 'p', or None if not understood."""
    if suffix in PREFIXES:
        return PREFIXES[suffix]
    spellings = UNITS.get(unit, ())
    low = suffix.lower()
    for spelling in sorted(spellings, key=len, reverse=True):
        if low.endswith(spelling):
            head = suffix[: len(suffix) - len(spelling)]
            if head in PREFIXES:
                return PREFIXES[head]
            if head.lower() == "meg":
                return PREFIXES["meg"]
    if suffix.lower() == "meg":
        return PREFIXES["meg"]
    return None


# Kinds where a bare number is almost never meant in the base unit ("400" for 400 ns, not 400 s):
# a bare non-zero number is refused with a hint naming the unit probably meant.
BARE_REFUSED: dict[str, str] = {"s": "ns", "F": "pF", "C": "nC"}
# Prefixes refused for those kinds: mega and above are almost surely a typo (in SPICE, M is milli).
_LARGE_PREFIXES = ("M", "meg", "G", "T")
# Longest quantity text read (a datasheet value is a few characters); larger magnitudes are out
# of range for every quantity this program reads.
MAX_TEXT = 64
MAX_MAGNITUDE = Fraction(10**30)


def parse_quantity(
    text: object,
    unit: str,
    where: str,
    *,
    allow_zero: bool = False,
    allow_negative: bool = False,
    allow_bare: bool = False,
) -> Fraction:
    """Parse engineering notation exactly: '160MHz', '160e6', '6.25ns', '4.7k', '100p'.

    `unit` names the kind ('s', 'Hz', 'ohm', 'F', 'V', 'A', 'W', 'C' for coulomb,
    '' for a plain number). Numbers in TOML files (int or float) are accepted too; a float is taken
    by its shortest decimal text, which is what the user wrote. A bare non-zero number is refused
    for times, capacitances and charges (see BARE_REFUSED); the magnitude of every value is
    checked after parsing (at most 1e30, at least 1e-30 unless zero). `allow_bare` is for text
    whose own syntax takes bare numbers in base units (a SPICE model card).
    """
    if isinstance(text, bool):
        raise GapforgeError(
            f"expected a quantity in {unit or 'plain numbers'}, got {text!r}", where
        )
    bare = True
    if isinstance(text, int):
        if text.bit_length() > 128:
            raise GapforgeError(f"{quoted(text)} is out of range (at most 1e30)", where)
        value = Fraction(text)
    elif isinstance(text, float):
        if not math.isfinite(text):
            raise GapforgeError(f"{text!r} is not a finite number", where)
        value = Fraction(repr(text))
    elif isinstance(text, str):
        value, bare = _parse_text(text, unit, where)
    else:
        raise GapforgeError(
            f"expected a quantity in {unit or 'plain numbers'}, got {quoted(text)}", where
        )
    if value != 0 and not Fraction(1) / MAX_MAGNITUDE <= abs(value) <= MAX_MAGNITUDE:
        raise GapforgeError(f"{quoted(text)} is out of range (1e-30 .. 1e30 in magnitude)", where)
    if bare and not allow_bare and value != 0 and unit in BARE_REFUSED:
        shown = str(text).strip()
        hint = (
            f"did you mean {shown}{BARE_REFUSED[unit]}?"
            if abs(value) >= 1
            else f"write the unit, e.g. {shown}{unit}"
        )
        raise GapforgeError(f"{shown} what? {hint} (a bare number is refused here)", where)
    if value < 0 and not allow_negative:
        raise GapforgeError(f"{quoted(text)} must not be negative", where)
    if value == 0 and not allow_zero:
        raise GapforgeError(f"{quoted(text)} must be greater than zero", where)
    return value


def _parse_text(text: str, unit: str, where: str) -> tuple[Fraction, bool]:
    """The value of a quantity's text, and whether it was a bare number (no unit, no prefix)."""
    if len(text) > MAX_TEXT:
        raise GapforgeError(
            f"{quoted(text)} is too long for a quantity (at most {MAX_TEXT} characters)", where
        )
    stripped = text.strip()
    low = stripped.lower()
    if low.lstrip("+-") in ("nan", "inf", "infinity"):
        raise GapforgeError(f"{text!r} is not a finite number", where)
    match = _NUMBER.match(stripped)
    if not match:
        raise GapforgeError(f"{text!r} is not a number with an optional unit", where)
    number, suffix = match.groups()
    _check_case(text, suffix, unit, where)
    exponent = re.search(r"[eE]([+-]?\d+)$", number)
    if exponent and abs(int(exponent.group(1))) > 30:
        raise GapforgeError(f"the exponent in {text!r} is out of range (at most 1e30)", where)
    multiplier = _split_suffix(suffix, unit)
    if multiplier is None:
        expected = f"{unit}" if unit else "no unit"
        raise GapforgeError(
            f"unknown unit {suffix!r} in {text!r} (expected an SI prefix and {expected})", where
        )
    return Fraction(number) * multiplier, suffix == ""


def _check_case(text: str, suffix: str, unit: str, where: str) -> None:
    """Refuse unit spellings whose letter case more likely hides a typo than a meaning."""
    if unit == "Hz" and suffix[:1] == "m" and suffix.lower() in ("m", "mhz"):
        # 'mHz', 'mHZ', 'mhz', 'mhZ', 'm': milli-hertz is never a timer or PWM frequency
        raise GapforgeError(f"{text!r}: 'm' means milli; write M for mega (e.g. 160MHz)", where)
    if unit == "s" and suffix.endswith("S"):
        raise GapforgeError(
            f"{text!r}: S is siemens; seconds are a lower-case s (e.g. 1.2us)", where
        )
    if unit in BARE_REFUSED:
        head = suffix[: -len(unit)] if suffix.lower().endswith(unit.lower()) else suffix
        if head in _LARGE_PREFIXES or head.lower() == "meg":
            raise GapforgeError(
                f"{text!r}: {head!r} is mega or more here, almost surely a typo "
                "(SPICE reads M as milli): write m for milli, u for micro",
                where,
            )


def parse_tolerance(text: object, where: str, *, limit: Fraction = Fraction(1)) -> Fraction:
    """A relative tolerance: '50ppm', '2%', '±2%', '+/-2%', '50ppb'. Returns a fraction of one
    (0.02 for 2 %). A bare non-zero number is refused ('2' is more likely 2 % than 200 %)."""
    if isinstance(text, bool) or not isinstance(text, int | float | str):
        raise GapforgeError(
            f"expected a tolerance such as '50ppm' or '2%', got {quoted(text)}", where
        )
    s = str(text).strip() if not isinstance(text, str) else text.strip()
    if len(s) > MAX_TEXT:
        raise GapforgeError(
            f"{quoted(s)} is too long for a tolerance (at most {MAX_TEXT} characters)", where
        )
    for sign in ("\u00b1", "+/-", "+-"):
        if s.startswith(sign):
            s = s[len(sign) :].strip()
            break
    low = s.lower()
    if low.endswith("ppm"):
        value = parse_quantity(s[:-3], "", where, allow_zero=True) / 10**6
    elif low.endswith("ppb"):
        value = parse_quantity(s[:-3], "", where, allow_zero=True) / 10**9
    elif s.endswith("%"):
        value = parse_quantity(s[:-1], "", where, allow_zero=True) / 100
    else:
        value = parse_quantity(text if not isinstance(text, str) else s, "", where, allow_zero=True)
        if value != 0:
            raise GapforgeError(
                f"{s} what? did you mean {s}%? (a tolerance needs %, ppm or ppb)", where
            )
    if value >= limit:
        raise GapforgeError(
            f"tolerance {quoted(text)} must be below {format_tolerance(limit)}", where
        )
    return value


def format_tolerance(value: Fraction | float) -> str:
    v = Fraction(value) if not isinstance(value, Fraction) else value
    if v == 0:
        return "0"
    if v < Fraction(1, 1000):
        return f"{_trim(float(v * 10**6), 4)} ppm"
    return f"{_trim(float(v * 100), 4)} %"


def _trim(x: float, digits: int) -> str:
    text = f"{x:.{digits}g}"
    if "e" in text:
        text = f"{x:.{digits}f}".rstrip("0").rstrip(".")
    return text


def format_quantity(value: Fraction | float | int, unit: str, digits: int = 4) -> str:
    """Engineering notation for display: 6.25e-9 -> '6.25 ns'. Never used for a safety limit.

    Four significant digits by default (the one display rule, gapforge.base.display); times,
    capacitances and charges never take a prefix above the base unit, so the text parses back.
    """
    x = float(value)
    if not math.isfinite(x):
        return f"{x} {unit}".strip()
    if x == 0:
        return f"0 {unit}".strip()
    exp3 = int(math.floor(math.log10(abs(x)) / 3) * 3)
    exp3 = max(-15, min(0 if unit in BARE_REFUSED else 12, exp3))
    scaled = x / 10.0**exp3
    # rounding may push 999.995 to 1000: step the prefix up
    if abs(float(f"{scaled:.{digits}g}")) >= 1000 and exp3 < (0 if unit in BARE_REFUSED else 12):
        exp3 += 3
        scaled = x / 10.0**exp3
    prefix = dict(_OUT_PREFIXES)[exp3]
    return f"{_trim(scaled, digits)} {prefix}{unit}".strip()


def format_bound(value: Fraction, unit: str, toward: str, digits: int = 6) -> str:
    """A limit for display, cut to `digits` significant digits toward the safe side, exactly.

    toward="down" for a guaranteed minimum (27.732988 ns shows as 27.7329 ns, never 27.733 ns),
    "up" for a maximum.
    """
    if value == 0:
        return f"0 {unit}".strip()
    exp3 = int(math.floor(math.log10(abs(float(value))) / 3) * 3)
    exp3 = max(-15, min(12, exp3))
    scaled = value / Fraction(10) ** exp3
    whole = len(str(abs(floor_fraction(scaled)))) if abs(scaled) >= 1 else 1
    decimals = max(0, digits - whole)
    steps = scaled * 10**decimals
    cut = floor_fraction(steps) if toward == "down" else ceil_fraction(steps)
    sign = "-" if cut < 0 else ""
    whole_part, frac_part = divmod(abs(cut), 10**decimals)
    text = f"{sign}{whole_part}"
    if decimals and frac_part:
        text += "." + f"{frac_part:0{decimals}d}".rstrip("0")
    prefix = dict(_OUT_PREFIXES)[exp3]
    return f"{text} {prefix}{unit}".strip()


def fraction_json(value: Fraction) -> float:
    """A seconds value as a JSON number (display only; exact values stay in Fractions)."""
    return float(value)


def ceil_fraction(value: Fraction) -> int:
    return -((-value.numerator) // value.denominator)


def floor_fraction(value: Fraction) -> int:
    return value.numerator // value.denominator


def picoseconds_floor(seconds: Fraction) -> int:
    return floor_fraction(seconds * 10**12)


def picoseconds_ceil(seconds: Fraction) -> int:
    return ceil_fraction(seconds * 10**12)


def picoseconds_nearest(seconds: Fraction) -> int:
    return floor_fraction(seconds * 10**12 + Fraction(1, 2))
