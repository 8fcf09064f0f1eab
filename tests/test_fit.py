"""The quantization engine (gapforge.timer.fit): worked examples with the arithmetic beside them, and
properties checked against an independent brute-force enumeration.

Dead time from N steps is N x divider / (sub_steps x f_clk); the fast clock, f_clk x (1 + tol),
gives the shortest gap N x divider / (sub_steps x f_clk x (1 + tol)) (common practice;
reference-facts.md "Clock tolerance"). `safe` rounding must keep that shortest gap >= the request.
"""

from __future__ import annotations

import json
import math
import re
from dataclasses import replace
from fractions import Fraction
from functools import cache

import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st

from conftest import BUILTINS, run_cli
from gapforge.timer.fit import FitRequest, FitResult, fit, unreachable_edges
from gapforge.timer.layouts import EDGES, Layout, load_layout

F = Fraction
NS = F(1, 10**9)
US = F(1, 10**6)
MHZ = F(10**6)
ZERO = F(0)


@cache
def layout_named(name: str) -> Layout:
    """Built-in layouts, loaded once (load_layout re-reads the file to check its hash)."""
    return load_layout(name)


def request(clock: Fraction, dead: Fraction, tol: Fraction = ZERO, rounding: str = "safe",
            to_low: Fraction | None = None) -> FitRequest:
    return FitRequest(clock, tol, dead, dead if to_low is None else to_low, rounding)


# ---------------------------------------------------------------------------------------------
# worked examples


def test_whole_clock_layout_with_tolerance_rounds_up() -> None:
    lay = load_layout("shared-8bit-linear")
    r = fit(lay, request(160 * MHZ, 25 * NS, F(50, 10**6)))
    # 25e-9 x 160e6 x (1 + 50e-6) = 4.0002 counts -> ceil 5 counts = 5 / 160 MHz = 31.25 ns
    e = r.edges["to_high"]
    assert r.ok and e.code == 5 and e.steps == 5
    assert e.achieved_s == F(3125, 10**11)  # 31.25 ns
    assert e.achieved_min_s == F(3125, 10**11) / (1 + F(50, 10**6))  # 31.2484 ns >= 25 ns
    assert e.achieved_max_s == F(3125, 10**11) / (1 - F(50, 10**6))
    assert e.error_s == F(625, 10**11)  # 31.25 - 25 = 6.25 ns
    assert e.relative_error == F(1, 4)  # 6.25 / 25
    assert e.step_s == F(625, 10**11)  # one count = 6.25 ns
    assert (e.lower_s, e.higher_s) == (25 * NS, F(375, 10**10))  # 4 and 6 counts
    assert e.max_s == 255 * F(1, 160 * 10**6)  # 255 counts = 1593.75 ns
    assert r.fields == {"gap": 5} and r.register == 0x0005
    assert r.edges["to_low"] == replace(e, edge="to_low")  # one shared field: the same numbers


def test_exact_hit_without_tolerance_is_not_rounded_up() -> None:
    # 25 ns x 160 MHz = 4 counts exactly, tolerance 0: 4 counts is >= the request, so 4
    r = fit(load_layout("shared-8bit-linear"), request(160 * MHZ, 25 * NS))
    assert r.edges["to_high"].code == 4
    assert r.edges["to_high"].achieved_s == 25 * NS
    assert r.edges["to_high"].achieved_min_s == 25 * NS


def test_segmented_code_inside_the_third_range() -> None:
    lay = load_layout("shared-8bit-segmented")
    r = fit(lay, request(320 * MHZ, 850 * NS, F(2, 100)))
    # 850e-9 x 320e6 x 1.02 = 277.44 steps -> at least 278. Range 1 tops out at 64 + 63 x 2 = 190,
    # range 2 is 192 + low x 4: low = ceil((278 - 192) / 4) = 22 -> 280 steps,
    # code = (2 << 6) | 22 = 150 = 0x96; 280 / 320 MHz = 875 ns
    e = r.edges["to_high"]
    assert (e.code, e.steps, e.achieved_s) == (150, 280, 875 * NS)
    assert e.step_s == 4 * F(1, 320 * 10**6)  # 12.5 ns: the local step in range 2
    assert e.lower_s == 276 * F(1, 320 * 10**6)  # 862.5 ns
    assert r.register == 0x0096


@pytest.mark.parametrize(
    ("steps_wanted", "code", "steps"),
    [
        (63, 63, 63),  # last value of range 0 (0 + 63 x 1)
        (F(127, 2), 64, 64),  # 63.5 -> first value of range 1, code 0x40
        (191, 128, 192),  # 190 is the top of range 1; 191 -> 192 = code 0x80 (range 2, low 0)
        (445, 192, 448),  # 444 tops range 2; 445 -> 448 = code 0xC0
        (952, 255, 952),  # the very top: 448 + 63 x 8
    ],
)
def test_segmented_range_boundaries(steps_wanted: Fraction, code: int, steps: int) -> None:
    # at 100 MHz, tol 0: one step = 10 ns, so a request of k steps is k x 10 ns
    lay = load_layout("shared-8bit-segmented")
    r = fit(lay, request(100 * MHZ, F(steps_wanted) * 10 * NS))
    assert (r.edges["to_high"].code, r.edges["to_high"].steps) == (code, steps)


def test_segmented_beyond_the_top_is_unreachable() -> None:
    lay = load_layout("shared-8bit-segmented")
    r = fit(lay, request(100 * MHZ, 9521 * NS))  # 952.1 steps > 952
    assert r.verdict == "unreachable" and r.register is None and r.fields == {}
    assert r.edges["to_high"].max_s == 9520 * NS
    assert unreachable_edges(r) == ["to_high", "to_low"]


def test_plus_one_layout() -> None:
    lay = load_layout("shared-16bit-plus-one")
    # 100 MHz: 10 ns per count; 50 ns = 5 counts = code 4 (the hardware adds one)
    r = fit(lay, request(100 * MHZ, 50 * NS))
    assert (r.edges["to_high"].code, r.edges["to_high"].steps) == (4, 5)
    # a request of 0.5 ns still gets code 0 = one whole count: the gap cannot be switched off
    r = fit(lay, request(100 * MHZ, F(1, 2) * NS))
    assert (r.edges["to_high"].code, r.edges["to_high"].achieved_s) == (0, 10 * NS)
    assert r.edges["to_high"].lower_s is None
    # the top: code 65535 -> 65536 counts = 655.36 us; 10 ps more is unreachable
    top = 65536 * 10 * NS
    assert fit(lay, request(100 * MHZ, top)).edges["to_high"].code == 65535
    assert fit(lay, request(100 * MHZ, top + F(1, 10**11))).verdict == "unreachable"
    # with tolerance the worst-case top is 655.36 us / (1 + tol)
    tol = F(1, 100)
    assert fit(lay, request(100 * MHZ, top / (1 + tol), tol)).ok
    assert not fit(lay, request(100 * MHZ, top / (1 + tol) + F(1, 10**15), tol)).ok


def test_reserved_codes_are_never_chosen() -> None:
    lay = load_layout("split-6bit-div2-reserved")
    # 100 MHz: 10 ns = 1 count, but codes 0 and 1 are reserved -> code 2 = 20 ns on divider 1
    r = fit(lay, request(100 * MHZ, 10 * NS))
    assert r.divider == 1 and r.edges["to_high"].code == 2
    assert r.edges["to_high"].achieved_s == 20 * NS
    assert r.edges["to_high"].lower_s is None  # nothing below code 2
    r0 = fit(lay, request(100 * MHZ, F(0)))
    assert r0.edges["to_low"].code == 2


def test_divider_choice_and_tie_break_on_finer_step() -> None:
    lay = load_layout("split-6bit-div2-reserved")
    # 700 ns at 100 MHz = 70 counts: above 63 on divider 1; divider 2 gives 35 x 20 ns = 700 ns
    r = fit(lay, request(100 * MHZ, 700 * NS))
    assert (r.divider_code, r.divider, r.edges["to_high"].code) == (1, 2, 35)
    assert r.fields == {"half": 1, "to_high_count": 35, "to_low_count": 35}
    # packed: 35 | 35 << 6 | 1 << 15 = 35 + 2240 + 32768 = 35043
    assert r.register == 35043
    # 600 ns: divider 1 gives 60 x 10 ns, divider 2 gives 30 x 20 ns: equal, the finer step wins
    r = fit(lay, request(100 * MHZ, 600 * NS))
    assert (r.divider_code, r.edges["to_high"].code) == (0, 60)
    assert r.edges["to_high"].step_s == 10 * NS
    # the layout's longest at the divider in use (issue 23): 63 x 1 x 10 ns = 630 ns (at the
    # largest divider it would be 63 x 2 x 10 ns = 1.26 us)
    assert r.edges["to_high"].max_s == 630 * NS


def test_split_10bit_needs_a_coarser_divider_for_long_gaps() -> None:
    lay = load_layout("split-10bit-div1-8")
    # 10 us at 160 MHz = 1600 counts > 1023; /2: 800 counts; 800 x 2 / 160 MHz = 10 us exactly
    r = fit(lay, request(160 * MHZ, 10 * US))
    assert (r.divider, r.edges["to_high"].code, r.edges["to_high"].achieved_s) == (2, 800, 10 * US)
    # forcing divider code 0 makes it unreachable; the maximum then is 1023 / 160 MHz
    forced = fit(lay, request(160 * MHZ, 10 * US), divider_code=0)
    assert forced.verdict == "unreachable"
    assert forced.edges["to_high"].max_s == F(1023, 160 * 10**6)


def test_subclock_layout_brief_example() -> None:
    lay = load_layout("split-10bit-tenths")
    r = fit(lay, request(160 * MHZ, 25 * NS, F(50, 10**6)))
    # 25e-9 x 160e6 x 10 = 40 sub-steps; x 1.00005 = 40.002 -> 41 sub-steps on divider 1
    # = 41 / (10 x 160 MHz) = 25.625 ns
    assert r.divider == 1
    assert r.edges["to_high"].code == r.edges["to_low"].code == 41
    assert r.edges["to_high"].achieved_s == F(41, 10 * 160 * 10**6)
    # register: to_high at bit 10, to_low at bit 0, divider code 0 at bit 20:
    # 41 x 1024 + 41 = 42025 = 0x0000a429
    assert r.register == 0x0000A429


def test_nearest_versus_safe() -> None:
    lay = load_layout("shared-8bit-linear")
    # 28 ns at 160 MHz = 4.48 counts: safe -> 5 (31.25 ns), nearest -> 4 (25 ns, 3 ns short)
    safe = fit(lay, request(160 * MHZ, 28 * NS))
    near = fit(lay, request(160 * MHZ, 28 * NS, rounding="nearest"))
    assert safe.edges["to_high"].code == 5 and near.edges["to_high"].code == 4
    assert near.edges["to_high"].error_s == -3 * NS
    assert near.edges["to_high"].below_request_worst_case
    assert not safe.edges["to_high"].below_request_worst_case
    # 29 ns = 4.64 counts: nearest -> 5
    assert fit(lay, request(160 * MHZ, 29 * NS, rounding="nearest")).edges["to_high"].code == 5
    # nearest with a tolerance: 25 ns is exactly 4 counts nominal, but at +50 ppm it is shorter
    n = fit(lay, request(160 * MHZ, 25 * NS, F(50, 10**6), rounding="nearest"))
    assert n.edges["to_high"].code == 4 and n.edges["to_high"].below_request_worst_case


def test_nearest_tie_rounds_toward_the_longer_safe_value() -> None:
    # regression: an exact tie first went to the shorter value (found by this suite, fixed)
    # 28.125 ns at 160 MHz = 4.5 counts: 4 and 5 are equally near; the rules say ties go to the
    # safe side, i.e. the longer gap (5 counts = 31.25 ns)
    near = fit(load_layout("shared-8bit-linear"), request(160 * MHZ, F(28125, 10**12),
                                                          rounding="nearest"))
    assert near.edges["to_high"].code == 5


def test_shared_field_serves_the_longer_edge() -> None:
    lay = load_layout("shared-8bit-linear")
    # to_high 30 ns, to_low 50 ns at 100 MHz: one field, so both get ceil(50 / 10) = 5 counts
    r = fit(lay, request(100 * MHZ, 30 * NS, to_low=50 * NS))
    assert r.edges["to_high"].code == r.edges["to_low"].code == 5
    assert r.edges["to_high"].achieved_s == r.edges["to_low"].achieved_s == 50 * NS
    assert r.edges["to_high"].requested_s == 30 * NS
    assert r.edges["to_high"].error_s == 20 * NS  # 50 - 30, measured against its own request
    assert r.edges["to_low"].error_s == 0


def test_split_layout_fits_each_edge_separately() -> None:
    lay = load_layout("split-10bit-tenths")
    # 14 ns and 11 ns at 160 MHz +/- 50 ppm: 14e-9 x 1.6e9 x 1.00005 = 22.4011 -> 23;
    # 11e-9 x 1.6e9 x 1.00005 = 17.6009 -> 18 sub-steps
    r = fit(lay, request(160 * MHZ, 14 * NS, F(50, 10**6), to_low=11 * NS))
    assert (r.edges["to_high"].code, r.edges["to_low"].code) == (23, 18)


def test_fit_json_from_the_command_line() -> None:
    code, out, _ = run_cli([
        "fit", "--clock", "160MHz", "--clock-tol", "0ppm", "--clock-tol", "50ppm", "--dead-time", "25ns",
        "--target", "split-10bit-tenths", "--pwm", "500kHz", "--counting", "center", "--json",
    ])
    assert code == 0
    doc = json.loads(out)
    assert doc["target"] == "split-10bit-tenths"
    assert doc["clock_hz"] == 160e6
    assert doc["verdict"] == "ok"
    assert doc["fields"] == {"scale": 0, "to_high_count": 41, "to_low_count": 41}
    assert doc["register"] == 0x0000A429
    for edge in EDGES:
        e = doc["edges"][edge]
        assert e["requested_s"] == pytest.approx(25e-9, rel=1e-15)
        assert e["achieved_s"] == pytest.approx(41 / 1.6e9, rel=1e-15)
        assert e["achieved_min_s"] == pytest.approx(41 / 1.6e9 / 1.00005, rel=1e-15)
        assert e["achieved_max_s"] == pytest.approx(41 / 1.6e9 / 0.99995, rel=1e-15)
        assert e["error_s"] == pytest.approx(1 / 1.6e9, rel=1e-12)  # 25.625 - 25 ns
        assert e["step_s"] == pytest.approx(1 / 1.6e9, rel=1e-15)
        # the layout's longest at the divider in use, /1 (issue 23: it was the largest, /8)
        assert e["layout_max_s"] == pytest.approx(1023 * 1 / 1.6e9, rel=1e-15)
        assert e["layout_max_worst_case_s"] == pytest.approx(1023 / 1.6e9 / 1.00005, rel=1e-15)


def test_unreachable_from_the_command_line_exits_1() -> None:
    code, out, _ = run_cli([
        "fit", "--clock", "160MHz", "--clock-tol", "0ppm", "--dead-time", "2us", "--target", "shared-8bit-linear",
        "--json",
    ])
    # 2 us x 160 MHz = 320 counts > 255
    assert code == 1
    doc = json.loads(out)
    # issue 19: fit speaks the one vocabulary; the reason says why in words
    assert doc["verdict"] == "fail" and "above the most the layout can guarantee" in doc["reason"]
    assert doc["register"] is None
    assert doc["edges"]["to_high"]["achieved_s"] is None
    assert doc["edges"]["to_high"]["layout_max_s"] == pytest.approx(255 / 160e6, rel=1e-15)
    code, out, _ = run_cli([
        "fit", "--clock", "160MHz", "--clock-tol", "0ppm", "--dead-time", "2us", "--target", "shared-8bit-linear",
    ])
    assert code == 1
    # 255 / 160 MHz = 1.59375 us exactly; four digits cut toward the safe side (down) show 1.593
    assert ("fail: to_high request 2 us is longer than the layout can guarantee: at most "
            "1.593 us at the fast clock") in out
    assert "reduced voltage" in out  # the caution is always printed


# ---------------------------------------------------------------------------------------------
# brute-force reference, independent of Field.table / Field.at_least / bisect


@cache
def _reference_tables(name: str, edge: str) -> tuple[tuple[tuple[int, int] | None, ...], int]:
    """For one edge's field: next_ge[t] = (steps, code) of the smallest allowed value >= t
    steps (smaller code on equal steps), for every t in 0..max+1; and the largest value.

    Built by enumerating every code of the field's whole code space through Field.decode.
    """
    f = layout_named(name).edge_field(edge)
    best: dict[int, int] = {}
    for code in range(f.mask + 1):
        if not (f.min_code <= code <= f.max_code) or code in f.reserved:
            continue
        s = f.decode(code)
        if s not in best or code < best[s]:
            best[s] = code
    top = max(best)
    nxt: list[tuple[int, int] | None] = [None] * (top + 2)
    running: tuple[int, int] | None = None
    for t in range(top, -1, -1):
        if t in best:
            running = (t, best[t])
        nxt[t] = running
    return tuple(nxt), top


def _brute_safe(layout: Layout, clock: Fraction, tol: Fraction, dead: Fraction,
                edge: str) -> list[tuple[Fraction, int, int]]:
    """Every divider's smallest safe (value, divider, code) for one edge."""
    nxt, top = _reference_tables(layout.name, edge)
    out = []
    for div in layout.dividers:
        unit = F(div) / (layout.sub_steps * clock)  # seconds per step
        t = math.ceil(dead * (1 + tol) / unit)
        if t <= top:
            hit = nxt[max(t, 0)]
            assert hit is not None
            out.append((hit[0] * unit, div, hit[1]))
    return out


def _worst_case_max(layout: Layout, clock: Fraction, tol: Fraction, edge: str) -> Fraction:
    _, top = _reference_tables(layout.name, edge)
    return top * F(max(layout.dividers)) / (layout.sub_steps * clock) / (1 + tol)


clocks = st.one_of(
    st.integers(1_000_000, 500_000_000).map(F),
    st.tuples(st.integers(1_000_000, 499_999_999), st.integers(1, 999)).map(
        lambda t: F(t[0]) + F(t[1], 1000)),  # a non-integer clock in Hz
    st.sampled_from([F(10**6), 160 * MHZ, 320 * MHZ, 500 * MHZ, F(72 * 10**6), F(170 * 10**6)]),
)
# dead times 0.5 ns .. 50 us, roughly log-uniform: m x 10^k femtoseconds
dead_times = st.tuples(st.integers(5_000, 50_000), st.integers(2, 6)).map(
    lambda t: F(t[0] * 10 ** t[1], 10**15))  # 5000e2 fs = 0.5 ns .. 50000e6 fs = 50 us
tolerances = st.one_of(
    st.just(F(0)),
    st.integers(0, 50_000_000).map(lambda ppb: F(ppb, 10**9)),  # 0 .. 5 %
    st.sampled_from([F(50, 10**6), F(1, 100), F(2, 100), F(5, 100)]),
)
layouts = st.sampled_from(BUILTINS)


@st.composite
def boundary_requests(draw: st.DrawFn) -> tuple[str, Fraction, Fraction, Fraction]:
    """A request sitting exactly on (or a hair either side of) a representable worst case."""
    name = draw(layouts)
    layout = layout_named(name)
    clock = draw(clocks)
    tol = draw(tolerances)
    steps = _reference_values(name, "to_high")
    value = steps[draw(st.integers(0, len(steps) - 1))]
    div = draw(st.sampled_from(layout.dividers))
    exact = value * F(div) / (layout.sub_steps * clock) / (1 + tol)
    nudge = draw(st.sampled_from([F(0), F(1, 10**18), -F(1, 10**18)]))
    return name, clock, tol, max(exact + nudge, F(0))


plain_requests = st.tuples(layouts, clocks, tolerances, dead_times)


def _check_safe(name: str, clock: Fraction, tol: Fraction, dead: Fraction) -> FitResult:
    layout = layout_named(name)
    result = fit(layout, FitRequest(clock, tol, dead, dead, "safe"))
    for edge in EDGES:
        candidates = _brute_safe(layout, clock, tol, dead, edge)
        worst_max = _worst_case_max(layout, clock, tol, edge)
        # unreachable exactly when the request exceeds the worst-case maximum
        assert (not candidates) == (dead > worst_max)
        if result.verdict == "unreachable":
            assert result.edges[edge].max_min_s == worst_max
        else:  # a fitted result gives the longest at the divider in use (issue 23)
            assert result.divider is not None
            assert result.edges[edge].max_min_s == worst_max * result.divider / max(
                layout.dividers)
        if not candidates:
            assert result.verdict == "unreachable"
            assert result.edges[edge].code is None
            continue
        assert result.ok
        e = result.edges[edge]
        assert e.achieved_s is not None and e.achieved_min_s is not None
        # safe never gives a worst case below the request
        assert e.achieved_min_s >= dead
        assert e.achieved_min_s == e.achieved_s / (1 + tol)
        # the smallest such value; ties go to the finer step (smaller divider), then smaller code
        value, div, code = min(candidates)
        assert (e.achieved_s, result.divider, e.code) == (value, div, code)
        assert layout.edge_field(edge).decode(code) * F(div) / (
            layout.sub_steps * clock) == e.achieved_s
    if result.ok:
        assert result.register is not None
        assert layout.unpack(result.register) == {
            f.name: result.fields[f.name] for f in layout.fields
        }
    return result


@settings(max_examples=10_000, deadline=None)
@given(st.one_of(plain_requests, boundary_requests()))
@example(("shared-8bit-linear", 160 * MHZ, F(50, 10**6), 25 * NS))
@example(("shared-16bit-plus-one", F(10**6), F(0), 50 * US))
@example(("split-6bit-div2-reserved", 500 * MHZ, F(5, 100), F(1, 2) * NS))
def test_safe_fit_matches_brute_force(req: tuple[str, Fraction, Fraction, Fraction]) -> None:
    _check_safe(*req)


@cache
def _reference_values(name: str, edge: str) -> tuple[int, ...]:
    """Every allowed steps value of one edge's field, ascending (from the enumeration)."""
    nxt, _ = _reference_tables(name, edge)
    return tuple(sorted({x[0] for x in nxt if x is not None}))


@cache
def _reference_below(name: str, edge: str) -> tuple[int | None, ...]:
    """prev_le[t] = the largest allowed steps value <= t (None below the smallest), from the
    same enumeration as _reference_tables."""
    nxt, top = _reference_tables(name, edge)
    present = {x[0] for x in nxt if x is not None}
    out: list[int | None] = []
    running: int | None = None
    for t in range(top + 1):
        if t in present:
            running = t
        out.append(running)
    return tuple(out)


@st.composite
def midpoint_requests(draw: st.DrawFn) -> tuple[str, Fraction, Fraction, Fraction]:
    """A request exactly halfway between two neighbouring values of one divider (a tie)."""
    name = draw(layouts)
    layout = layout_named(name)
    clock = draw(clocks)
    steps = _reference_values(name, "to_high")
    i = draw(st.integers(0, len(steps) - 2))
    div = draw(st.sampled_from(layout.dividers))
    mid = F(steps[i] + steps[i + 1], 2) * F(div) / (layout.sub_steps * clock)
    return name, clock, draw(tolerances), mid


@given(st.one_of(st.tuples(layouts, clocks, tolerances, dead_times), midpoint_requests()))
def test_nearest_is_nearest_by_brute_force(req: tuple[str, Fraction, Fraction, Fraction]) -> None:
    name, clock, tol, dead = req
    layout = layout_named(name)
    result = fit(layout, FitRequest(clock, tol, dead, dead, "nearest"))
    for edge in EDGES:
        nxt, top = _reference_tables(name, edge)
        below = _reference_below(name, edge)
        top_nominal = top * F(max(layout.dividers)) / (layout.sub_steps * clock)
        if dead > top_nominal:
            # nearest is unreachable when the request is above the nominal maximum
            assert result.verdict == "unreachable"
            continue
        values = []
        for div in layout.dividers:
            unit = F(div) / (layout.sub_steps * clock)
            x = dead / unit  # the request in steps of this divider
            lo = below[min(math.floor(x), top)]
            hi = nxt[math.ceil(x)] if math.ceil(x) <= top else None
            values += [s * unit for s in (lo, hi[0] if hi else None) if s is not None]
        e = result.edges[edge]
        assert e.achieved_s is not None
        best = min(abs(v - dead) for v in values)
        assert abs(e.achieved_s - dead) == best
        # an exact tie goes to the longer value (the safe side)
        assert e.achieved_s == max(v for v in values if abs(v - dead) == best)


@given(layouts, clocks, tolerances, dead_times, dead_times)
def test_safe_with_two_requests(
    name: str, clock: Fraction, tol: Fraction, high: Fraction, low: Fraction
) -> None:
    layout = layout_named(name)
    result = fit(layout, FitRequest(clock, tol, high, low, "safe"))
    # a shared field serves the longer request on both edges
    want = {"to_high": high, "to_low": low}
    if layout.shared:
        want = {e: max(high, low) for e in EDGES}
    per_div: dict[int, dict[str, tuple[Fraction, int, int]]] = {}
    for edge in EDGES:
        for value, div, code in _brute_safe(layout, clock, tol, want[edge], edge):
            per_div.setdefault(div, {})[edge] = (value, div, code)
    complete = {d: c for d, c in per_div.items() if len(c) == 2}
    if not complete:
        assert result.verdict == "unreachable"
        assert unreachable_edges(result)
        return
    # dividers compared by total excess over the requests, then finer step, then codes
    def key(d: int) -> tuple[Fraction, int, tuple[int, ...]]:
        c = complete[d]
        excess = sum((c[e][0] - (high if e == "to_high" else low) for e in EDGES), F(0))
        return excess, d, tuple(c[e][2] for e in EDGES)

    d = min(complete, key=key)
    assert result.ok and result.divider == d
    for edge in EDGES:
        e = result.edges[edge]
        assert e.achieved_min_s is not None and e.achieved_min_s >= want[edge]
        assert (e.achieved_s, e.code) == (complete[d][edge][0], complete[d][edge][2])


def test_reference_tables_agree_with_hand_counts() -> None:
    # a check on the checker: the brute force knows the built-ins' ranges
    assert _reference_tables("shared-8bit-segmented", "to_high")[1] == 952
    assert _reference_tables("shared-16bit-plus-one", "to_low")[1] == 65536
    nxt, top = _reference_tables("split-6bit-div2-reserved", "to_high")
    assert top == 63 and nxt[0] == (2, 2)
    nxt, _ = _reference_tables("shared-8bit-segmented", "to_high")
    assert nxt[191] == (192, 128)


# ---------------------------------------------------------------------------------------------
# user layouts: random linear and segmented fields, validated, then fitted against brute force


@st.composite
def user_layouts(draw: st.DrawFn) -> tuple[str, bool]:
    """TOML text of a random one-field layout, and whether it should load (by our own rules:
    ranges in select order, each starting above the previous one's last value, by at most
    the larger of the two steps; at least one allowed code)."""
    width = draw(st.integers(2, 8))
    lines = ["# invented test layout", "format = 1", 'summary = "random"', "register_bits = 16"]
    dividers = draw(st.lists(st.integers(1, 16), min_size=1, max_size=4))
    lines += ["[clock]", f"sub_steps = {draw(st.integers(1, 32))}", f"dividers = {dividers}"]
    if len(dividers) > 1:
        lines.append('divider_field = "div"')
    lines += ["[[field]]", 'name = "gap"', 'role = "both"', "offset = 0", f"width = {width}"]
    reserved = draw(st.lists(st.integers(0, (1 << width) - 1), max_size=4))
    lines.append(f"reserved = {sorted(set(reserved))}")
    ok = len(set(reserved)) < (1 << width)
    if draw(st.booleans()):
        add = draw(st.integers(0, 3))
        lines += ['encoding = "linear"', f"add = {add}"]
    else:
        bits = draw(st.integers(1, min(2, width - 1)))
        low_count = 1 << (width - bits)
        segs = []
        last = -1
        prev_mult = 0
        for sel in range(1 << bits):
            mult = draw(st.integers(1, 4))
            jump = draw(st.integers(-1, 5))
            base = max(0, last + jump) if sel else draw(st.integers(0, 3))
            if sel:
                first_ok = base > last and base - last <= max(prev_mult, mult)
                ok = ok and first_ok
            segs.append(f"{{select = {sel}, base = {base}, multiplier = {mult}}}")
            last = base + (low_count - 1) * mult
            prev_mult = mult
        lines += ['encoding = "segmented"', f"select_bits = {bits}",
                  f"segment = [{', '.join(segs)}]"]
    if len(dividers) > 1:
        div_bits = max(1, (len(dividers) - 1).bit_length())
        lines += ["[[field]]", 'name = "div"', 'role = "divider"', "offset = 12",
                  f"width = {div_bits}"]
    return "\n".join(lines) + "\n", ok


@given(user_layouts(), clocks, tolerances, dead_times)
def test_user_layouts_validate_and_fit_like_brute_force(
    spec: tuple[str, bool], clock: Fraction, tol: Fraction, dead: Fraction
) -> None:
    import tomllib

    from gapforge.base.errors import GapforgeError
    from gapforge.timer.layouts import parse_layout

    text, ok = spec
    try:
        layout = parse_layout(tomllib.loads(text), text.encode(), "random.toml", "random")
    except GapforgeError as exc:
        assert not ok, f"{exc.line()}\n{text}"
        assert exc.line().startswith("random.toml: ")
        return
    assert ok, text
    # brute force over every divider and every allowed code, through Field.decode only
    f = layout.field_named("gap")
    candidates = []
    for div in layout.dividers:
        unit = F(div) / (layout.sub_steps * clock)
        for code in range(f.mask + 1):
            if code in f.reserved or not f.min_code <= code <= f.max_code:
                continue
            value = f.decode(code) * unit
            if value / (1 + tol) >= dead:
                candidates.append((value, div, code))
    result = fit(layout, FitRequest(clock, tol, dead, dead, "safe"))
    if not candidates:
        assert result.verdict == "unreachable"
        return
    value, div, code = min(candidates)
    e = result.edges["to_high"]
    assert (e.achieved_s, result.divider, e.code) == (value, div, code)


def test_register_is_written_one_way_and_the_max_column_is_at_the_divider_in_use() -> None:
    # issue 23: sweep printed 0x308C2 where build printed 0x000308c2; and the fit table's max
    # column showed the largest divider's reach, not the divider in use.
    # 25 ns at 1.6 GHz (160 MHz x 10 sub-steps) on split-10bit-tenths: 41 steps at /1, the
    # field's longest 1023 steps x 625 ps = 639.4 ns at /1 (5.115 us would be /8)
    code, out, _ = run_cli(["fit", "--clock", "160MHz", "--clock-tol", "50ppm", "--dead-time",
                            "25ns", "--target", "split-10bit-tenths"])
    assert code == 0
    assert "register 0x0000a429" in out  # 32-bit register: eight lower-case hex digits
    assert "639.4 ns" in out and "5.115 us" not in out
    code, out, _ = run_cli(["sweep", "--clocks", "160MHz", "--clock-tol", "50ppm", "--window",
                            "25ns:30ns", "--target", "split-10bit-tenths"])
    assert re.search(r"0x[0-9a-f]{8}\b", out) and not re.search(r"0x[0-9A-F]*[A-F]", out)
