"""Measurement checks: hypothesis-built captures whose true gaps are known by construction, and
exact window judgement at the tick boundary."""

from __future__ import annotations

import itertools
from fractions import Fraction
from unittest import mock

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from gapforge import capture as capture_module
from gapforge import measure as measure_module
from gapforge.capture import CaptureStream, GateCapture, make_capture, stream_of
from gapforge.errors import GapforgeError
from gapforge.measure import Limits, Measurement, measure_capture

TICK = Fraction(1, 3 * 10**9)  # a tick that is not a decimal fraction of a second


def _build(periods: list[tuple[int, int, int, int]]) -> tuple[GateCapture, list[int], list[int]]:
    """Each period: (to_high gap, high on-time, to_low gap, low on-time) in ticks.
    A negative gap is an overlap of that length."""
    ht, hv, lt, lv = [0], [0], [0], [1]
    t = 1000  # later than any negative gap, so every change follows the initial levels
    gaps_h: list[int] = []
    gaps_l: list[int] = []
    for g_h, on_h, g_l, on_l in periods:
        lt.append(t); lv.append(0)  # noqa: E702 - low side off
        ht.append(t + g_h); hv.append(1)  # noqa: E702 - high side on after the gap
        t_off_h = max(t, t + g_h) + on_h
        ht.append(t_off_h); hv.append(0)  # noqa: E702
        lt.append(t_off_h + g_l); lv.append(1)  # noqa: E702
        gaps_h.append(g_h)
        gaps_l.append(g_l)
        t = max(t_off_h, t_off_h + g_l) + on_l
    order_h = np.argsort(ht, kind="stable")
    order_l = np.argsort(lt, kind="stable")
    cap = make_capture(
        TICK,
        (np.array(ht, dtype=np.int64)[order_h], np.array(hv, dtype=np.uint8)[order_h]),
        (np.array(lt, dtype=np.int64)[order_l], np.array(lv, dtype=np.uint8)[order_l]),
        end=t, source="built",
    )
    return cap, gaps_h, gaps_l


period = st.tuples(st.integers(-20, 200), st.integers(30, 400), st.integers(-20, 200),
                   st.integers(30, 400))


@settings(max_examples=80, deadline=None)
@given(st.lists(period, min_size=1, max_size=40))
def test_known_gaps_recovered(periods: list[tuple[int, int, int, int]]) -> None:
    cap, gaps_h, gaps_l = _build(periods)
    m = measure_capture(cap)
    assert m.to_high.gaps_ticks.tolist() == gaps_h
    assert m.to_low.gaps_ticks.tolist() == gaps_l
    expected_overlaps = sum(g < 0 for g in gaps_h) + sum(g < 0 for g in gaps_l)
    assert len(m.overlaps) == expected_overlaps
    assert [o.duration_s for o in m.overlaps] == [
        -g * TICK for pair in zip(gaps_h, gaps_l, strict=True) for g in pair if g < 0]
    assert m.to_high.min_s == min(gaps_h) * TICK
    assert m.to_low.max_s == max(gaps_l) * TICK
    assert m.to_high.mean_s == pytest.approx(float(np.mean(gaps_h)) * float(TICK))
    assert m.verdict == ("fail" if expected_overlaps or 0 in gaps_h + gaps_l else "measured")


@settings(max_examples=40, deadline=None)
@given(st.lists(period, min_size=1, max_size=30), st.booleans(), st.booleans())
def test_polarity_inversion_is_transparent(
    periods: list[tuple[int, int, int, int]], inv_h: bool, inv_l: bool
) -> None:
    cap, gaps_h, gaps_l = _build(periods)
    raw_h = np.where(cap.high_levels == 1, 0, 1).astype(np.uint8) if inv_h else cap.high_levels
    raw_l = np.where(cap.low_levels == 1, 0, 1).astype(np.uint8) if inv_l else cap.low_levels
    again = make_capture(TICK, (cap.high_times, raw_h), (cap.low_times, raw_l), end=cap.end,
                         active_low_high=inv_h, active_low_low=inv_l)
    m = measure_capture(again)
    assert m.to_high.gaps_ticks.tolist() == gaps_h
    assert m.to_low.gaps_ticks.tolist() == gaps_l


def test_window_is_exact_at_the_tick() -> None:
    cap, _, _ = _build([(60, 300, 61, 300)] * 3)
    # 60 ticks of 1/3 ns = 20 ns exactly: a 20 ns minimum passes, a hair more fails
    ok = {e: Limits(Fraction(20, 10**9), Fraction(61, 3 * 10**9)) for e in ("to_high", "to_low")}
    assert measure_capture(cap, limits=ok).verdict == "pass"
    tight = {"to_high": Limits(Fraction(20, 10**9) + Fraction(1, 10**18), None)}
    m = measure_capture(cap, limits=tight)
    assert m.verdict == "fail" and m.to_high.below_window == 3
    high = {"to_low": Limits(None, Fraction(20, 10**9))}
    m = measure_capture(cap, limits=high)
    assert m.verdict == "fail" and m.to_low.above_window == 3 and m.to_high.above_window == 0


def test_statistics_and_worst_instances() -> None:
    gaps = [50, 40, 70, 45, 90, 60]
    cap, _, _ = _build([(g, 300, 55, 300) for g in gaps])
    m = measure_capture(cap, percentiles=(50.0,), bins=5, worst=2)
    st_h = m.to_high
    assert st_h.count == 6
    assert [i.gap_s for i in st_h.shortest] == [40 * TICK, 45 * TICK]
    assert [i.gap_s for i in st_h.longest] == [90 * TICK, 70 * TICK]
    assert st_h.percentiles[0][1] == pytest.approx(55 * float(TICK))  # median of the six
    assert sum(st_h.histogram_counts) == 6
    assert st_h.std_s == pytest.approx(float(np.std(gaps)) * float(TICK))
    assert m.to_high.gaps_s.shape == (6,)
    # the instance time stamp is where the low side turned off: period k starts at
    # 1000 + k * (55 + 300 + 300) + (sum of the earlier to_high gaps), as _build lays it out
    starts = [1000 + k * 655 + sum(gaps[:k]) for k in range(len(gaps))]
    assert [i.at_s for i in st_h.shortest] == [starts[1] * TICK, starts[3] * TICK]
    assert [i.at_s for i in st_h.longest] == [starts[4] * TICK, starts[2] * TICK]


def test_glitch_listed_and_left_out() -> None:
    # low side on, a 3-tick on-pulse on the high side during the low side's dead time
    ht = np.array([0, 100, 103, 200, 500], dtype=np.int64)
    hv = np.array([0, 1, 0, 1, 0], dtype=np.uint8)
    lt = np.array([0, 50, 560], dtype=np.int64)
    lv = np.array([1, 0, 1], dtype=np.uint8)
    cap = make_capture(TICK, (ht, hv), (lt, lv), end=900)
    raw = measure_capture(cap)
    assert raw.to_high.gaps_ticks.tolist() == [50]
    filtered = measure_capture(cap, glitch_width_s=5 * TICK)
    assert len(filtered.glitches) == 1 and filtered.glitches[0].width_s == 3 * TICK
    assert filtered.to_high.gaps_ticks.tolist() == [150]
    assert filtered.to_low.gaps_ticks.tolist() == [60]


def test_glitch_overlap_is_never_hidden() -> None:
    ht = np.array([0, 100, 102, 300, 600], dtype=np.int64)
    hv = np.array([0, 1, 0, 1, 0], dtype=np.uint8)
    lt = np.array([0, 200, 650], dtype=np.int64)
    lv = np.array([1, 0, 1], dtype=np.uint8)
    m = measure_capture(make_capture(TICK, (ht, hv), (lt, lv)), glitch_width_s=10 * TICK)
    assert len(m.overlaps) == 1 and m.overlaps[0].at_s == 100 * TICK
    assert m.verdict == "fail"


def test_missing_edges() -> None:
    # low turns off, then back on without the high side ever turning on
    ht = np.array([0, 400, 600], dtype=np.int64)
    hv = np.array([0, 1, 0], dtype=np.uint8)
    lt = np.array([0, 100, 150, 350, 650], dtype=np.int64)
    lv = np.array([1, 0, 1, 0, 1], dtype=np.uint8)
    m = measure_capture(make_capture(TICK, (ht, hv), (lt, lv)))
    assert len(m.missing_edges) == 1 and m.missing_edges[0].at_s == 100 * TICK
    assert m.to_high.gaps_ticks.tolist() == [50]
    # a level reported twice: the edge between is lost
    lt2 = np.array([0, 100, 350, 650], dtype=np.int64)
    lv2 = np.array([1, 0, 0, 1], dtype=np.uint8)
    m2 = measure_capture(make_capture(TICK, (ht, hv), (lt2, lv2)))
    assert any("twice" in f.text for f in m2.missing_edges)


def test_no_edges_is_bad_input() -> None:
    t = np.array([0], dtype=np.int64)
    cap = make_capture(TICK, (t, np.array([0], dtype=np.uint8)), (t, np.array([1], dtype=np.uint8)))
    with pytest.raises(GapforgeError, match="no dead-time transitions"):
        measure_capture(cap)
    empty = make_capture(TICK, (t[:0], np.zeros(0, dtype=np.uint8)), (t, np.array([1], np.uint8)))
    with pytest.raises(GapforgeError, match="high-side signal never changes"):
        measure_capture(empty)


# --- the incremental engine: chunking must not change any result --------------------------------

def _stream(cap: GateCapture, cuts: list[int]) -> CaptureStream:
    """The capture's events in time order, split at the given event counts (a chunked reader)."""
    whole = next(stream_of(cap).chunks())
    bounds = sorted({min(c, whole[0].size) for c in cuts} | {0, whole[0].size})

    def chunks():  # type: ignore[no-untyped-def]
        for a, b in itertools.pairwise(bounds):
            yield whole[0][a:b], whole[1][a:b], whole[2][a:b]

    return CaptureStream(cap.tick_s, "chunked", chunks, chunks, lambda: (cap.end, ()),
                         high_initial=cap.high_initial, low_initial=cap.low_initial)


def _summary(m: Measurement) -> tuple[object, ...]:
    return (
        m.to_high.gaps_ticks.tolist(), m.to_low.gaps_ticks.tolist(),
        m.to_high.shortest, m.to_high.longest, m.to_low.shortest, m.to_low.longest,
        m.to_high.percentiles, m.to_low.histogram_counts, m.overlaps, m.glitches,
        m.missing_edges, m.unknown_intervals, m.verdict, m.reasons, m.notes, m.duration_s,
        m.mean_period_s,
    )


# random event lists: (time step, side, level) with repeats, x/z, equal times and overlaps
steps = st.sampled_from([0, 0, 0, 1, 2, 3, 7, 19, 40])  # many changes at one time
events = st.lists(st.tuples(steps, st.booleans(), st.sampled_from([0, 1, 1, 0, 2, 3])),
                  min_size=2, max_size=80)


def _capture(evs: list[tuple[int, bool, int]], edges_only: bool) -> GateCapture:
    t = 0
    ht: list[int] = []
    hv: list[int] = []
    lt: list[int] = []
    lv: list[int] = []
    for dt, high, level in evs:
        t += dt
        (ht if high else lt).append(t)
        (hv if high else lv).append(level)
    return make_capture(TICK, (np.array(ht, np.int64), np.array(hv, np.uint8)),
                        (np.array(lt, np.int64), np.array(lv, np.uint8)), end=t + 7,
                        edges_only=edges_only)


@settings(max_examples=150, deadline=None)
@given(events, st.lists(st.integers(0, 80), max_size=8), st.booleans(),
       st.sampled_from([0, 3, 20]))
def test_chunked_equals_whole(evs: list[tuple[int, bool, int]], cuts: list[int],
                              edges_only: bool, glitch: int) -> None:
    cap = _capture(evs, edges_only)
    if cap.high_times.size == 0 or cap.low_times.size == 0:
        return
    kwargs = {"glitch_width_s": glitch * TICK, "worst": 3, "percentiles": (0.0, 37.5, 100.0)}
    try:
        whole = measure_capture(cap, **kwargs)  # type: ignore[arg-type]
    except GapforgeError as exc:
        with pytest.raises(GapforgeError, match=exc.message[:20]):
            measure_capture(_stream(cap, cuts), **kwargs)  # type: ignore[arg-type]
        return
    assert _summary(measure_capture(_stream(cap, cuts), **kwargs)) == _summary(whole)  # type: ignore[arg-type]
    # a capture in memory in time windows; gaps stored in blocks of three
    with mock.patch.object(capture_module, "_WINDOW", 2), \
            mock.patch.object(measure_module._GapStore, "BLOCK", 3):
        assert _summary(measure_capture(cap, **kwargs)) == _summary(whole)  # type: ignore[arg-type]


def _reference(evs: list[tuple[int, bool, int]]) -> tuple[list[int], list[int], list[tuple[int, int]]]:
    """A plain per-event loop over clean 0/1 edges, written from the rules in the module
    docstring: the joint state after all changes at each time; a dead time runs from the state
    where the outgoing gate is off to the state where the incoming gate is on."""
    t = 0
    joint: list[tuple[int, tuple[int, int]]] = []
    level = {True: 2, False: 2}
    for dt, high, value in evs:
        t += dt
        level[high] = value
        state = (level[True], level[False])
        if joint and joint[-1][0] == t:
            joint[-1] = (t, state)
        else:
            joint.append((t, state))
    states: list[tuple[int, tuple[int, int]]] = []
    for item in joint:
        if not states or states[-1][1] != item[1]:
            states.append(item)
    to_high: list[int] = []
    to_low: list[int] = []
    overlaps: list[tuple[int, int]] = []
    for k, (tk, sk) in enumerate(states):
        if sk == (1, 1) and k + 1 < len(states):
            overlaps.append((tk, states[k + 1][0] - tk))
        if k + 1 >= len(states):
            continue
        tb, b = states[k + 1]
        c = states[k + 2] if k + 2 < len(states) else None
        for out, before, after, incoming in ((to_high, (0, 1), (1, 0), 0), (to_low, (1, 0), (0, 1), 1)):
            if sk != before:
                continue
            if b == (0, 0) and c is not None and c[1][incoming] == 1:
                out.append(c[0] - tb)
            elif b == after:
                out.append(0)
            elif b == (1, 1) and c is not None and c[1] == after:
                out.append(tb - c[0])
    return to_high, to_low, overlaps


@settings(max_examples=150, deadline=None)
@given(st.lists(st.tuples(steps, st.booleans(), st.sampled_from([0, 1])),
                min_size=4, max_size=80), st.lists(st.integers(0, 80), max_size=6))
def test_against_a_per_event_loop(evs: list[tuple[int, bool, int]], cuts: list[int]) -> None:
    cap = _capture(evs, edges_only=False)
    expect_h, expect_l, expect_o = _reference(evs)
    if cap.high_times.size == 0 or cap.low_times.size == 0 or not (expect_h or expect_l or expect_o):
        return
    m = measure_capture(_stream(cap, cuts))
    assert m.to_high.gaps_ticks.tolist() == expect_h
    assert m.to_low.gaps_ticks.tolist() == expect_l
    # the last overlap may run to the end of the capture, which the reference leaves out
    got = [(int(o.at_s / TICK), int(o.duration_s / TICK)) for o in m.overlaps]
    assert got[: len(expect_o)] == expect_o and len(got) - len(expect_o) in (0, 1)


def test_gaps_stored_compactly() -> None:
    cap, _, _ = _build([(60, 300, 61, 300)] * 4)
    m = measure_capture(cap)
    assert m.to_high.gaps_ticks.dtype == np.int32
    wide, _, _ = _build([(3 * 10**9, 300, 61, 300)] * 2)  # a gap beyond 2**31 ticks
    m2 = measure_capture(wide)
    assert m2.to_high.gaps_ticks.dtype == np.int64
    assert m2.to_high.gaps_ticks.tolist() == [3 * 10**9] * 2
    assert m2.to_high.min_s == 3 * 10**9 * TICK
    # int32 blocks first, then a gap that does not fit: every block becomes int64
    gaps = [60, 70, 80, 90, 100, 3 * 10**9, 50]
    mixed, _, _ = _build([(g, 300, 61, 300) for g in gaps])
    with mock.patch.object(measure_module._GapStore, "BLOCK", 2), \
            mock.patch.object(capture_module, "_WINDOW", 1):
        m3 = measure_capture(mixed)
    assert m3.to_high.gaps_ticks.dtype == np.int64 and m3.to_high.gaps_ticks.tolist() == gaps


def test_percentiles_and_histogram_match_numpy() -> None:
    # reference: numpy.percentile (default linear method) and numpy.histogram on the raw gaps
    rng = np.random.default_rng(5)
    gaps = rng.integers(-5, 400, 301).tolist()
    cap, _, _ = _build([(g, 500, 50, 500) for g in gaps])
    pcts = (0.0, 1.0, 12.5, 50.0, 99.0, 100.0)
    st_h = measure_capture(cap, percentiles=pcts, bins=7).to_high
    for (p, got), want in zip(st_h.percentiles, np.percentile(gaps, pcts), strict=True):
        assert got == pytest.approx(float(want) * float(TICK), rel=1e-12), p
    counts, _ = np.histogram(gaps, bins=7, range=(min(gaps), max(gaps) + 1))
    assert st_h.histogram_counts == tuple(counts.tolist())
    assert st_h.mean_s == pytest.approx(float(np.mean(gaps)) * float(TICK), rel=1e-12)


def test_mean_period() -> None:
    cap, _, _ = _build([(50, 300, 55, 300)] * 5)
    # each period: 55 + 300 + 300 + the 50-tick to_high gap = 705 ticks
    assert measure_capture(cap).mean_period_s == 705 * TICK


def test_overlap_on_every_period_held_compactly() -> None:
    # a shoot-through of 3 + (k % 5) ticks on each of 5000 periods (by construction)
    periods = [(-(3 + k % 5), 300, 40, 300) for k in range(5000)]
    cap, gaps_h, _ = _build(periods)
    m = measure_capture(cap)
    assert len(m.overlaps) == 5000 and m.overlaps.starts_ticks.dtype == np.int64
    assert [o.duration_s for o in m.overlaps[:6]] == [(3 + k % 5) * TICK for k in range(6)]
    assert m.overlaps[-1].duration_s == 7 * TICK  # 4999 % 5 = 4
    assert list(m.overlaps[2:4]) == [m.overlaps[2], m.overlaps[3]]
    assert m.overlaps == tuple(m.overlaps)  # compares equal to a tuple of the same Overlap items
    assert m.overlap_at_s[10] == pytest.approx(float(m.overlaps[10].at_s))
    assert m.to_high.gaps_ticks.tolist() == gaps_h and m.verdict == "fail"
