"""The one number style for human-facing text (terminal, report); exact values stay in JSON/headers.

Rules (issue 10):

- four significant digits for display (`format_si(27.7329e-9, "s")` -> "27.73 ns");
- one engineering prefix per quantity in a line, chosen so the values compare
  (`format_many([400e-9, 1.2e-6], "s")` -> ["400 ns", "1200 ns"], not "400 ns" beside "1.2 us");
- a signed difference is said in words: "100 ns below the minimum", never "-100 ns above";
- counts agree with their number: "1 clock", "2 clocks", "1 sub-step";
- a share shows four significant digits and at most three decimals; one that is not exactly
  0 % or 100 % is never shown as one ("< 0.001 %", "> 99.99 %");
- every quantity can be pasted back as input: times, capacitances and charges never take a
  prefix above the base unit (the parser refuses "100 Gs" as a likely typo), so a long time is
  "100000000000 s";
- a register word is "0x" and lower-case hex digits, zero-padded to the register's width.

A value that bounds safety may be cut toward its safe side with `toward="down"` (a guaranteed
minimum) or `toward="up"` (a maximum); the cut is done exactly on Fractions. Everything else rounds
to the nearest. Nothing here is ever used to compute a limit.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from decimal import ROUND_CEILING, ROUND_FLOOR, ROUND_HALF_EVEN, Context, Decimal
from fractions import Fraction

DIGITS = 4
# The smallest share a percentage shows (0.001 %); a smaller non-zero share is "< 0.001 %".
PERCENT_FLOOR = Fraction(1, 1000)
PERCENT_FLOOR_TEXT = "0.001"

VERDICT_OK = "ok"
VERDICT_FAIL = "fail"
VERDICT_INCONCLUSIVE = "inconclusive"
VERDICTS = (VERDICT_OK, VERDICT_FAIL, VERDICT_INCONCLUSIVE)


def verdict_word(detail: str) -> str:
    """The one verdict word for a detailed outcome: "ok" stays, "inconclusive" stays, any
    other ("too-short", "too-long", "empty-window", "unreachable", ...) is "fail"."""
    return detail if detail in (VERDICT_OK, VERDICT_INCONCLUSIVE) else VERDICT_FAIL

# Units whose quantities the parser refuses with a prefix above the base unit (mega and above:
# gapforge.base.quantities BARE_REFUSED): shown in the base unit at most, so they paste back.
BASE_UNIT_CAP = ("s", "F", "C")

_PREFIX = {-15: "f", -12: "p", -9: "n", -6: "u", -3: "m", 0: "", 3: "k", 6: "M", 9: "G", 12: "T"}
_ROUNDING = {"nearest": ROUND_HALF_EVEN, "down": ROUND_FLOOR, "up": ROUND_CEILING}

Number = Fraction | float | int


def _decimal(value: Number) -> Decimal:
    """An exact decimal for ints and floats; a Fraction to 60 significant digits."""
    if isinstance(value, Fraction):
        return Context(prec=60).divide(Decimal(value.numerator), Decimal(value.denominator))
    return Decimal(value)


def _exact_round(value: Number, quantum_exp: int, toward: str) -> Decimal:
    """value rounded to a multiple of 10**quantum_exp, exactly (Fractions stay exact)."""
    if isinstance(value, Fraction) and toward != "nearest":
        steps = value / Fraction(10) ** quantum_exp
        n = steps.numerator // steps.denominator
        if toward == "up" and n != steps:
            n += 1
        return Decimal(n).scaleb(quantum_exp)
    return _decimal(value).quantize(
        Decimal(1).scaleb(quantum_exp), rounding=_ROUNDING[toward], context=Context(prec=80)
    )


def _magnitude(value: Number) -> int:
    """floor(log10(|value|)) computed without float overflow or rounding surprises."""
    d = abs(_decimal(value))
    return d.adjusted()


def significant(
    value: Number, digits: int = DIGITS, *, toward: str = "nearest", min_exp: int | None = None
) -> str:
    """A plain number to `digits` significant digits, trailing zeros dropped, no exponent."""
    if value == 0:
        return "0"
    quantum = _magnitude(value) - digits + 1
    if min_exp is not None:
        quantum = max(quantum, min_exp)
    rounded = _exact_round(value, quantum, toward)
    # rounding may carry into one more digit (9.9996 -> 10.00): re-quantize at the new magnitude
    if rounded != 0 and rounded.adjusted() > _magnitude(value):
        quantum = rounded.adjusted() - digits + 1
        rounded = _exact_round(value, max(quantum, min_exp or quantum), toward)
    text = format(rounded, "f")
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text


def choose_exponent(values: Iterable[Number]) -> int:
    """The engineering exponent (multiple of 3) that shows every value of one line comparably.

    The largest magnitude decides, so no value needs more than three integer digits; if that would
    show the smallest non-zero value below 1 ("0.4 us"), the next smaller prefix is used as long as
    the largest still fits in four integer digits ("400 ns .. 1200 ns").
    """
    mags = [_magnitude(v) for v in values if v != 0 and math.isfinite(float(v))]
    if not mags:
        return 0
    top = max(mags)
    exp3 = (top // 3) * 3
    if min(mags) < exp3 and top - (exp3 - 3) <= 3:
        exp3 -= 3
    return max(-15, min(12, exp3))


def format_si(
    value: Number,
    unit: str,
    *,
    digits: int = DIGITS,
    exponent: int | None = None,
    toward: str = "nearest",
) -> str:
    """Engineering notation for display: 6.25e-9, "s" -> "6.25 ns"; 160e6, "Hz" -> "160 MHz".

    `exponent` forces the prefix (from `choose_exponent` over a line); `toward` cuts exactly
    toward a safe side ("down" for a guaranteed minimum, "up" for a maximum).
    """
    x = float(value)
    if not math.isfinite(x):
        return f"{x} {unit}".strip()
    if value == 0:
        exp3 = 0 if exponent is None else exponent
        return f"0 {_PREFIX[exp3]}{unit}".strip()
    if exponent is None:
        exp3 = choose_exponent([value])
        if unit in BASE_UNIT_CAP:
            exp3 = min(exp3, 0)
        # rounding may reach 1000 (999.96 ns -> 1000 ns): step the prefix up
        scaled = Fraction(value) / Fraction(10) ** exp3
        if (abs(Decimal(significant(scaled, digits, toward=toward))) >= 1000 and exp3 < 12
                and not (unit in BASE_UNIT_CAP and exp3 >= 0)):
            exp3 += 3
    else:
        exp3 = min(exponent, 0) if unit in BASE_UNIT_CAP else exponent
    scaled = Fraction(value) / Fraction(10) ** exp3
    # with a forced prefix, never round away below the last digit a 4-digit number would keep
    text = significant(scaled, digits, toward=toward, min_exp=-digits - 2 if exponent else None)
    return f"{text} {_PREFIX[exp3]}{unit}".strip()


def format_many(values: Sequence[Number], unit: str, *, digits: int = DIGITS) -> list[str]:
    """Several values of one quantity in one line, all with the same prefix."""
    exp3 = choose_exponent(values)
    return [format_si(v, unit, digits=digits, exponent=exp3) for v in values]


def format_range(
    low: Number,
    high: Number,
    unit: str,
    *,
    digits: int = DIGITS,
    cut: str | None = None,
    safe: bool = False,
) -> str:
    """ "400 .. 1200 ns": one prefix, the unit written once.

    Every caller states how the range is cut (a range shown without a safe side is refused):
    "nearest" only for values that bound nothing.

    cut="outward" widens a worst-case range (the low end down, the high end up), "inward"
    narrows a window (the minimum up, the maximum down); both exactly. `safe=True` is
    cut="outward" (kept for callers written against the first version).
    """
    if safe:
        cut = "outward"
    if cut is None:
        raise ValueError("format_range: say how the range is cut (outward, inward or nearest)")
    exp3 = choose_exponent([low, high])
    down, up = {"outward": ("down", "up"), "inward": ("up", "down")}.get(cut, (cut, cut))
    lo = format_si(low, unit, digits=digits, exponent=exp3, toward=down).rsplit(" ", 1)[0]
    hi = format_si(high, unit, digits=digits, exponent=exp3, toward=up)
    return f"{lo} .. {hi}"


def format_register(value: int, bits: int) -> str:
    """A register word the one way everywhere: "0x000308c2" (lower case, padded to the width)."""
    return f"0x{value:0{max(1, (bits + 3) // 4)}x}"


def format_offset(delta: Number, unit: str, reference: str, *, digits: int = DIGITS) -> str:
    """A signed difference in words: (-100e-9, "s", "the minimum") -> "100 ns below the minimum"."""
    if delta == 0:
        return f"at {reference}"
    side = "above" if delta > 0 else "below"
    return f"{format_si(abs(Fraction(delta)), unit, digits=digits)} {side} {reference}"


def count(n: int, singular: str, plural: str | None = None) -> str:
    """ "1 clock", "2 clocks", "1 sub-step", "0 codes"."""
    word = singular if n == 1 else (plural or singular + "s")
    return f"{n} {word}"


def format_percent(share: Number, *, digits: int = DIGITS) -> str:
    """A share of one as a percentage: four significant digits and at most three decimals
    (0.001 % resolution), never rounded onto 0 % or 100 % unless exactly there.

    0.42 % stays "0.42 %"; 0.0000002944 % is "< 0.001 %" (a share nobody can use to more
    digits); 0.999996 is "> 99.99 %" (four digits would say 100 %, which hides the lost duty).
    """
    pct = Fraction(share) * 100 if not isinstance(share, float) else Fraction(repr(share)) * 100
    if pct in (0, 100):
        return f"{int(pct)} %"
    sign = "-" if pct < 0 else ""
    mag = abs(pct)
    if mag < PERCENT_FLOOR:
        return f"> -{PERCENT_FLOOR_TEXT} %" if sign else f"< {PERCENT_FLOOR_TEXT} %"
    text = significant(mag, digits, min_exp=-3)
    if not sign and Decimal(text) == 100:
        # below 100 %: cut down to the last digit shown, and say it is below
        return f"> {significant(mag, digits, toward='down')} %"
    return f"{sign}{text} %"


def both_edges(per_edge: dict[str, str]) -> list[str]:
    """Lines per edge, said once as "both edges: ..." when every edge says the same."""
    texts = list(per_edge.values())
    if len(texts) > 1 and all(t == texts[0] for t in texts):
        return [f"both edges: {texts[0]}"]
    return [f"{edge}: {text}" for edge, text in per_edge.items()]
