"""IEC 60063 preferred values and R/C pairs for a wanted dead time.

The series are the standard's tables (IEC 60063:2015), written out, not computed: E12 and E24
differ from round(10^(i/n)) in places (E24 in eight), so a formula would give values nobody
stocks. E96 happens to equal its formula; the tests check both facts.

`suggest` is for designs that keep an analog fallback: for each capacitor of the chosen series it
finds the resistor that gives the wanted typical dead time, takes the series values either side,
ranks the pairs by their error and shows each pair's range under the network's tolerances.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from fractions import Fraction

from gapforge.analog import PAIR_KEYS, EdgeRange, ReferenceNetwork, edge_range
from gapforge.errors import GapforgeError

# Mantissas in units of 0.1 (E12, E24) and 0.01 (E96).
E12: tuple[int, ...] = (10, 12, 15, 18, 22, 27, 33, 39, 47, 56, 68, 82)
E24: tuple[int, ...] = (
    10, 11, 12, 13, 15, 16, 18, 20, 22, 24, 27, 30,
    33, 36, 39, 43, 47, 51, 56, 62, 68, 75, 82, 91,
)
E96: tuple[int, ...] = (
    100, 102, 105, 107, 110, 113, 115, 118, 121, 124, 127, 130,
    133, 137, 140, 143, 147, 150, 154, 158, 162, 165, 169, 174,
    178, 182, 187, 191, 196, 200, 205, 210, 215, 221, 226, 232,
    237, 243, 249, 255, 261, 267, 274, 280, 287, 294, 301, 309,
    316, 324, 332, 340, 348, 357, 365, 374, 383, 392, 402, 412,
    422, 432, 442, 453, 464, 475, 487, 499, 511, 523, 536, 549,
    562, 576, 590, 604, 619, 634, 649, 665, 681, 698, 715, 732,
    750, 768, 787, 806, 825, 845, 866, 887, 909, 931, 953, 976,
)
SERIES: dict[str, tuple[tuple[int, ...], int]] = {"E12": (E12, 10), "E24": (E24, 10), "E96": (E96, 100)}
# The usual tolerance of each series (IEC 60063 usage; reference-facts).
SERIES_TOLERANCE: dict[str, Fraction] = {
    "E12": Fraction(10, 100),
    "E24": Fraction(5, 100),
    "E96": Fraction(1, 100),
}


def series_values(series: str, low: Fraction, high: Fraction) -> list[Fraction]:
    """Every value of a series between low and high inclusive, ascending."""
    if series not in SERIES:
        raise GapforgeError(f"unknown series {series!r} (expected one of: {', '.join(SERIES)})")
    mantissas, unit = SERIES[series]
    out: list[Fraction] = []
    exponent = -15
    while True:
        scale = Fraction(10) ** exponent
        if scale > high:
            break
        for m in mantissas:
            v = Fraction(m, unit) * scale
            if low <= v <= high:
                out.append(v)
        exponent += 1
    return out


def nearest(series: str, value: Fraction) -> tuple[Fraction, Fraction]:
    """The series values just below (or equal) and just above a value."""
    candidates = series_values(series, value / 20, value * 20)
    below = max((v for v in candidates if v <= value), default=candidates[0])
    above = min((v for v in candidates if v >= value), default=candidates[-1])
    return below, above


@dataclass(frozen=True)
class Suggestion:
    r: Fraction
    c: Fraction
    typ_s: float  # the wanted dead time's typical value with this pair
    error: float  # relative to the target
    ranges: dict[str, EdgeRange]  # to_high / to_low over the network's tolerances


def suggest(
    net: ReferenceNetwork,
    target_s: Fraction,
    *,
    key: str = "to_high",
    r_series: str = "E96",
    c_series: str = "E12",
    r_limits: tuple[Fraction, Fraction] = (Fraction(100), Fraction(10**6)),
    c_limits: tuple[Fraction, Fraction] = (Fraction(10, 10**12), Fraction(100, 10**9)),
    count: int = 6,
) -> list[Suggestion]:
    """R/C pairs from the series giving the wanted typical dead time, best first."""
    from gapforge.tolerance import corner_extremes, typical

    if key not in PAIR_KEYS:
        raise GapforgeError(f"unknown dead time {key!r}", "--suggest")
    if target_s <= 0:
        raise GapforgeError("the wanted dead time must be greater than zero", "--suggest")

    def typ_of(r: Fraction, c: Fraction) -> float:
        return typical(replace(net, r=r, c=c))[key]

    pairs: dict[tuple[Fraction, Fraction], float] = {}
    target = float(target_s)
    for c in series_values(c_series, *c_limits):
        # typ is close to affine in R: two evaluations and a secant step find the resistor
        r1, r2 = Fraction(1000), Fraction(100000)
        t1, t2 = typ_of(r1, c), typ_of(r2, c)
        if t2 <= t1:
            continue
        r_est = float(r1) + (target - t1) * float(r2 - r1) / (t2 - t1)
        if not float(r_limits[0]) / 2 <= r_est <= float(r_limits[1]) * 2:
            continue
        for r in nearest(r_series, Fraction(r_est).limit_denominator(10**6)):
            if r_limits[0] <= r <= r_limits[1]:
                pairs[(r, c)] = typ_of(r, c)
    if not pairs:
        raise GapforgeError(
            "no resistor/capacitor pair within the series limits reaches that dead time",
            "--suggest",
        )
    ranked = sorted(pairs.items(), key=lambda kv: (abs(kv[1] / target - 1.0), kv[0][1]))[:count]
    out: list[Suggestion] = []
    for (r, c), typ in ranked:
        extremes = corner_extremes(replace(net, r=r, c=c))
        ranges = {k: edge_range(*extremes[k]) for k in PAIR_KEYS}
        out.append(Suggestion(r, c, typ, typ / target - 1.0, ranges))
    return out
