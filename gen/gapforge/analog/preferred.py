"""IEC 60063 preferred values and R/C pairs for a wanted dead time.

The series are the standard's tables (IEC 60063:2015), written out, not computed: E12 and E24
differ from round(10^(i/n)) in places (E24 in eight), so a formula would give values nobody
stocks. E96 happens to equal its formula; the tests check both facts.

`suggest` is for designs that keep an analog fallback: for each capacitor of the chosen series it
finds the resistor that gives the wanted typical dead time and takes the series values either
side. Every candidate carries its worst-case pair range under the network's tolerances; a pair
whose worst-case minimum is not positive (an overlap) or below the wanted minimum is never
proposed, only listed as rejected with the reason. The rest are ranked by the worst case (the
range's farthest end from the target) or by the typical error.
"""

from __future__ import annotations

import bisect
import math
from collections.abc import Mapping
from dataclasses import replace
from fractions import Fraction
from functools import lru_cache

from gapforge.analog.network import PAIR_KEYS, EdgeRange, ReferenceNetwork, edge_range
from gapforge.base.display import format_range, format_si
from gapforge.base.errors import GapforgeError
from gapforge.base.records import record

# Mantissas in units of 0.1 (E6, E12, E24) and 0.01 (E48, E96, E192).
E6: tuple[int, ...] = (10, 15, 22, 33, 47, 68)
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
# E48 is every second E96 value (IEC 60063: the series nest). E192 is round(100 * 10^(i/192))
# but for one value the standard writes 920 where the formula gives 919 (IEC 60063:2015).
E48: tuple[int, ...] = E96[::2]
E192: tuple[int, ...] = tuple(
    920 if round(100 * 10 ** (i / 192)) == 919 else round(100 * 10 ** (i / 192))
    for i in range(192)
)
SERIES: dict[str, tuple[tuple[int, ...], int]] = {
    "E6": (E6, 10), "E12": (E12, 10), "E24": (E24, 10),
    "E48": (E48, 100), "E96": (E96, 100), "E192": (E192, 100),
}
SERIES_NAMES = tuple(SERIES)
# The usual tolerance of each series (IEC 60063 usage; reference-facts), used by `suggest` for a
# part whose tolerance the user left at its default.
SERIES_TOLERANCE: dict[str, Fraction] = {
    "E6": Fraction(20, 100),
    "E12": Fraction(10, 100),
    "E24": Fraction(5, 100),
    "E48": Fraction(2, 100),
    "E96": Fraction(1, 100),
    "E192": Fraction(5, 1000),
}


def series_tolerances(
    net: ReferenceNetwork, r_series: str, c_series: str
) -> ReferenceNetwork:
    """The network with each series' usual tolerance where the user gave none (`r_tol`, `c_tol`
    left at their defaults); a tolerance the user gave stays."""
    r_tol = SERIES_TOLERANCE[r_series] if "r_tol" in net.defaults else net.r_tol
    c_tol = SERIES_TOLERANCE[c_series] if "c_tol" in net.defaults else net.c_tol
    return replace(net, r_tol=r_tol, c_tol=c_tol)


def series_values(series: str, low: Fraction, high: Fraction) -> list[Fraction]:
    """Every value of a series between low and high inclusive, ascending."""
    if series not in SERIES:
        raise GapforgeError(f"unknown series {series!r} (expected one of: {', '.join(SERIES)})")
    mantissas, unit = SERIES[series]
    out: list[Fraction] = []
    # from the decade below `low` (a decade's values all lie within 1x..10x of its scale)
    exponent = max(-15, math.floor(math.log10(float(low))) - 1) if low > 0 else -15
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


@lru_cache(maxsize=256)
def _decade(series: str, exponent: int) -> tuple[Fraction, ...]:
    """One decade of a series, ascending (`series_values`' values for that scale)."""
    mantissas, unit = SERIES[series]
    scale = Fraction(10) ** exponent
    return tuple(Fraction(m, unit) * scale for m in mantissas)


def nearest(series: str, value: Fraction) -> tuple[Fraction, Fraction]:
    """The series values just below (or equal) and just above a value.

    Among `series_values(series, value / 20, value * 20)`, found by bisection in the decades
    around the value (each decade made once): `suggest` asks this for every capacitor."""
    if series not in SERIES:
        raise GapforgeError(f"unknown series {series!r} (expected one of: {', '.join(SERIES)})")
    low, high = value / 20, value * 20
    e = math.floor(math.log10(float(value)))  # decades e-3 .. e+2 hold low .. high, with room
    ordered = [v for k in range(max(-15, e - 3), e + 3) for v in _decade(series, k)]
    candidates = ordered[bisect.bisect_left(ordered, low):bisect.bisect_right(ordered, high)]
    at = bisect.bisect_right(candidates, value)  # candidates[:at] <= value
    below = candidates[at - 1] if at else candidates[0]
    at = bisect.bisect_left(candidates, value)  # candidates[at:] >= value
    above = candidates[at] if at < len(candidates) else candidates[-1]
    return below, above


RANKINGS = ("worst-case", "typical")


@record
class Suggestion:
    r: Fraction
    c: Fraction
    typ_s: float  # the wanted dead time's typical value with this pair
    error: float  # typical, relative to the target
    ranges: dict[str, EdgeRange]  # to_high / to_low, worst case over the network's tolerances
    worst_error: float  # the wanted dead time's worst-case range: farthest end from the target
    unsafe: tuple[str, ...] = ()  # why the pair must not be used; empty = safe

    @property
    def safe(self) -> bool:
        return not self.unsafe


@record
class Suggestions:
    pairs: tuple[Suggestion, ...]  # safe pairs, best first (at most `count`)
    rejected: tuple[Suggestion, ...]  # every unsafe pair, smallest typical error first
    candidates: int  # pairs evaluated
    rank: str  # 'worst-case' or 'typical'


def _unsafe_reasons(
    ranges: Mapping[str, EdgeRange], min_dead_s: Fraction | None
) -> tuple[str, ...]:
    reasons: list[str] = []
    for key in PAIR_KEYS:
        low = ranges[key].min_s  # rounded down: the safe side of a minimum
        if low <= 0:
            reasons.append(f"{key} worst-case minimum {format_si(low, 's', toward='down')} is "
                           "not positive (both outputs on together)")
        elif min_dead_s is not None and low < min_dead_s:
            reasons.append(f"{key} worst-case minimum {format_si(low, 's', toward='down')} is "
                           f"below the minimum dead time {format_si(min_dead_s, 's')}")
    return tuple(reasons)


def _make(
    r: Fraction,
    c: Fraction,
    extremes: Mapping[str, tuple[float, float, float]],
    key: str,
    target: float,
    min_dead_s: Fraction | None,
) -> Suggestion:
    ranges = {k: edge_range(*extremes[k]) for k in PAIR_KEYS}
    lo, typ, hi = extremes[key]
    worst = max(target - lo, hi - target) / target
    return Suggestion(r, c, typ, typ / target - 1.0, ranges, worst,
                      _unsafe_reasons(ranges, min_dead_s))


def _candidates(
    net: ReferenceNetwork,
    targets: list[float],
    key: str,
    r_series: str,
    c_series: str,
    r_limits: tuple[Fraction, Fraction],
    c_limits: tuple[Fraction, Fraction],
) -> dict[tuple[Fraction, Fraction], None]:
    """For each capacitor of the series and each target typical dead time, the series resistors
    either side of the one that gives it (a secant step: the typical dead time is close to affine
    in R). Raises when no pair within the series limits reaches any target."""
    from gapforge.analog.tolerance import typical_for_parts

    caps = series_values(c_series, *c_limits)
    r1, r2 = Fraction(1000), Fraction(100000)
    t1 = typical_for_parts(net, [(r1, c) for c in caps])[key]
    t2 = typical_for_parts(net, [(r2, c) for c in caps])[key]
    candidates: dict[tuple[Fraction, Fraction], None] = {}
    for target in targets:
        for c, a, b in zip(caps, t1, t2, strict=True):
            if not b > a:
                continue
            r_est = float(r1) + (target - float(a)) * float(r2 - r1) / float(b - a)
            if not float(r_limits[0]) / 2 <= r_est <= float(r_limits[1]) * 2:
                continue
            for r in nearest(r_series, Fraction(r_est).limit_denominator(10**6)):
                if r_limits[0] <= r <= r_limits[1]:
                    candidates[(r, c)] = None
    if not candidates:
        raise GapforgeError(
            "no resistor/capacitor pair within the series limits reaches that dead time",
            "--suggest",
        )
    return candidates


def _series_net(net: ReferenceNetwork, r_series: str, c_series: str) -> ReferenceNetwork:
    """The network with the series' usual tolerances where the user left the default (both
    series checked first: an unknown one is a usage error naming its option)."""
    for name, where in ((r_series, "--series"), (c_series, "--c-series")):
        if name not in SERIES:
            raise GapforgeError(f"unknown series {name!r}", where)
    return series_tolerances(net, r_series, c_series)


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
    rank: str = "worst-case",
    min_dead_s: Fraction | None = None,
) -> Suggestions:
    """Safe R/C pairs from the series giving the wanted typical dead time, best first.

    For each capacitor the resistor giving the target (a secant step: the typical dead time is
    close to affine in R) and the series values either side are the candidates. Every
    candidate's worst-case pair range comes from the corners (all candidates in one vectorised
    evaluation); a pair is unsafe when either dead time's worst-case minimum is <= 0 or below
    `min_dead_s`, and unsafe pairs are never proposed (they are returned in `rejected`).
    `rank` 'worst-case' orders by the farthest end of the wanted dead time's worst-case range
    from the target (the pair whose whole range hugs the target first), 'typical' by the typical
    error. A tolerance the user left at its default is the series' usual one (E6 20 % .. E192
    0.5 %, `SERIES_TOLERANCE`). The pairs proposed are then checked like `analog.reference_dead_times` (corners
    against the finer grid); a pair the check widens into unsafe is rejected too.
    """
    from gapforge.analog.tolerance import corner_extremes_for_parts, worst_case

    if key not in PAIR_KEYS:
        raise GapforgeError(f"unknown dead time {key!r}", "--suggest")
    if rank not in RANKINGS:
        raise GapforgeError(f"unknown ranking {rank!r} (expected one of: {', '.join(RANKINGS)})",
                            "--suggest-rank")
    if target_s <= 0:
        raise GapforgeError("the wanted dead time must be greater than zero", "--suggest")
    net = _series_net(net, r_series, c_series)
    target = float(target_s)
    candidates = _candidates(net, [target], key, r_series, c_series, r_limits, c_limits)
    parts = list(candidates)
    extremes = corner_extremes_for_parts(net, parts)
    made = [_make(r, c, ext, key, target, min_dead_s)
            for (r, c), ext in zip(parts, extremes, strict=True)]

    def order(s: Suggestion) -> tuple[float, float, Fraction]:
        first = s.worst_error if rank == "worst-case" else abs(s.error)
        second = abs(s.error) if rank == "worst-case" else s.worst_error
        return (first, second, s.c)

    made.sort(key=order)
    chosen: list[Suggestion] = []
    rejected: list[Suggestion] = []
    for s in made:
        if not s.safe or len(chosen) >= count:
            if not s.safe:
                rejected.append(s)
            continue
        checked = worst_case(replace(net, r=s.r, c=s.c))
        confirmed = _make(s.r, s.c, checked.floats, key, target, min_dead_s)
        (chosen if confirmed.safe else rejected).append(confirmed)
    chosen.sort(key=order)
    # the rejected closest to the target first: the ones a typical ranking would have offered
    rejected.sort(key=lambda s: (abs(s.error), s.c))
    return Suggestions(tuple(chosen), tuple(rejected), len(parts), rank)


# Typical dead times tried across a window when looking for pairs whose worst case fits in it:
# the window cut into this many equal parts, each inner point a target (a worst-case range
# spreads around its typical value, so the pairs that fit have typical values inside).
WINDOW_TARGETS = 8


def _window_unsafe(s: Suggestion, key: str, low: Fraction, high: Fraction) -> Suggestion:
    """The suggestion, with its wanted dead time's worst-case range outside the window named."""
    rng = s.ranges[key]
    if rng.min_s >= low and rng.max_s <= high:
        return s
    why = (f"{key} worst-case range {format_range(rng.min_s, rng.max_s, 's', cut='outward')} "
           f"is not inside {format_range(low, high, 's', cut='inward')}")
    return replace(s, unsafe=(*s.unsafe, why))


def suggest_window(
    net: ReferenceNetwork,
    low_s: Fraction,
    high_s: Fraction,
    *,
    key: str = "to_high",
    r_series: str = "E96",
    c_series: str = "E12",
    r_limits: tuple[Fraction, Fraction] = (Fraction(100), Fraction(10**6)),
    c_limits: tuple[Fraction, Fraction] = (Fraction(10, 10**12), Fraction(100, 10**9)),
    count: int = 6,
    min_dead_s: Fraction | None = None,
) -> Suggestions:
    """Preferred R/C pairs whose worst-case range of the wanted dead time lies inside
    low_s .. high_s (and whose other dead time is positive and at least `min_dead_s`), best
    centred first: the range's middle nearest the window's middle, then the larger margin on
    its tighter side. Each proposed pair is confirmed like `suggest`'s (corners against the
    finer grid); a pair the check widens out of the window is rejected too.
    """
    from gapforge.analog.tolerance import corner_extremes_for_parts, worst_case

    if key not in PAIR_KEYS:
        raise GapforgeError(f"unknown dead time {key!r}", "--suggest")
    if not 0 < low_s < high_s:
        raise GapforgeError("the window must be MIN:MAX with 0 < MIN < MAX (e.g. 114ns:300ns)",
                            "--suggest")
    net = _series_net(net, r_series, c_series)
    lo, hi = float(low_s), float(high_s)
    middle = (lo + hi) / 2
    targets = [lo + (hi - lo) * k / WINDOW_TARGETS for k in range(1, WINDOW_TARGETS)]
    parts = list(_candidates(net, targets, key, r_series, c_series, r_limits, c_limits))
    extremes = corner_extremes_for_parts(net, parts)

    def judged(r: Fraction, c: Fraction, ext: Mapping[str, tuple[float, float, float]]
               ) -> Suggestion:
        return _window_unsafe(_make(r, c, ext, key, middle, min_dead_s), key, low_s, high_s)

    def order(s: Suggestion) -> tuple[float, float, Fraction]:
        rng = s.ranges[key]
        centre = abs((float(rng.min_s) + float(rng.max_s)) / 2 - middle) / middle
        room = min(float(rng.min_s) - lo, hi - float(rng.max_s))
        return (centre, -room, s.c)

    made = sorted((judged(r, c, ext) for (r, c), ext in zip(parts, extremes, strict=True)),
                  key=order)
    chosen: list[Suggestion] = []
    rejected: list[Suggestion] = []
    for s in made:
        if not s.safe:
            rejected.append(s)
        elif len(chosen) < count:
            checked = worst_case(replace(net, r=s.r, c=s.c))
            confirmed = judged(s.r, s.c, checked.floats)
            (chosen if confirmed.safe else rejected).append(confirmed)
    chosen.sort(key=order)
    rejected.sort(key=order)
    return Suggestions(tuple(chosen), tuple(rejected), len(parts), "centred")
