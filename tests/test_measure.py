"""Measurement checks: hypothesis-built captures whose true gaps are known by construction, and
exact window judgement at the tick boundary."""

from __future__ import annotations

import itertools
import re
from fractions import Fraction
from unittest import mock

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from gapforge.base.errors import GapforgeError
from gapforge.bench import capture as capture_module
from gapforge.bench import measure as measure_module
from gapforge.bench.capture import CaptureStream, GateCapture, make_capture, stream_of
from gapforge.bench.measure import Glitch, Limits, Measurement, measure_capture

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
    assert m.verdict == ("fail" if expected_overlaps or 0 in gaps_h + gaps_l else "ok")


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


def test_window_judged_with_the_resolution_exactly() -> None:
    # S3: a measured gap g may be off by less than the resolution r either way, so it passes a
    # minimum only if g - r >= min and a maximum only if g + r <= max. Here r = 1 tick = 1/3 ns.
    cap, _, _ = _build([(60, 300, 61, 300)] * 3)  # to_high 60 ticks (20 ns), to_low 61 ticks
    m = measure_capture(cap, limits={e: Limits(Fraction(20, 10**9), None) for e in ("to_high",)})
    # 60 - 1 = 59 ticks = 19.67 ns < 20 ns: not proven, although the gap reads exactly 20 ns
    assert m.verdict == "fail" and m.to_high.below_window == 3
    assert m.resolution_s == TICK and m.resolution_ticks == 1
    # 59 ticks = 59/3 ns is the largest minimum that 60 ticks proves: 60 - 1 = 59 >= 59 passes
    ok = {"to_high": Limits(Fraction(59, 3 * 10**9), None),
          "to_low": Limits(None, Fraction(62, 3 * 10**9))}  # 61 + 1 = 62 <= 62 passes
    assert measure_capture(cap, limits=ok).verdict == "ok"
    # a hair more (10**-18 s) on the minimum, a hair less on the maximum: each fails
    hair = Fraction(1, 10**18)
    m = measure_capture(cap, limits={"to_high": Limits(Fraction(59, 3 * 10**9) + hair, None)})
    assert m.verdict == "fail" and m.to_high.below_window == 3
    m = measure_capture(cap, limits={"to_low": Limits(None, Fraction(62, 3 * 10**9) - hair)})
    assert m.verdict == "fail" and m.to_low.above_window == 3 and m.to_high.above_window == 0
    assert any("gap + resolution > maximum" in r for r in m.reasons)


def test_resolution_widened_never_narrowed() -> None:
    cap, _, _ = _build([(60, 300, 61, 300)] * 2)
    coarse = make_capture(TICK, (cap.high_times, cap.high_levels), (cap.low_times, cap.low_levels),
                          end=cap.end, resolution_ticks=6)
    lim = {"to_high": Limits(Fraction(18, 10**9), None)}  # 18 ns = 54 ticks
    # own resolution 6 ticks: 60 - 6 = 54 >= 54 passes
    assert measure_capture(coarse, limits=lim).verdict == "ok"
    # widened to 2.1 ns = 6.3 ticks, rounded up to 7: 60 - 7 = 53 < 54 fails
    wide = measure_capture(coarse, limits=lim, resolution_s=Fraction(21, 10**10))
    assert wide.verdict == "fail" and wide.resolution_s == 7 * TICK
    # a finer resolution than the capture's own is ignored
    assert measure_capture(coarse, limits=lim, resolution_s=TICK).resolution_s == 6 * TICK
    with pytest.raises(GapforgeError, match="above zero"):
        measure_capture(coarse, resolution_s=Fraction(0))


def test_gap_inside_the_resolution_proves_no_dead_time() -> None:
    # a 3-tick gap read with a resolution of 4 ticks may truly be -1 tick: an overlap
    cap, _, _ = _build([(3, 300, 50, 300)] * 2)
    coarse = make_capture(TICK, (cap.high_times, cap.high_levels), (cap.low_times, cap.low_levels),
                          end=cap.end, resolution_ticks=4)
    m = measure_capture(coarse)
    assert m.verdict == "fail" and any("no dead time proven" in r for r in m.reasons)
    assert measure_capture(cap).verdict == "ok"  # with one tick, 3 ticks is a real gap


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


NS = Fraction(1, 10**9)


def _s5(glitch: bool = True, dropout: bool = False) -> GateCapture:
    """S5: low side on until 100 ns; the high side pulses on 2 ns wide 10 ns after the low
    side turns off (at 110 ns), then turns on for real at 130 ns; off at 500, low on at 600."""
    ht = [0, 110, 112, 130, 500] if glitch else [0, 130, 500]
    hv = [0, 1, 0, 1, 0] if glitch else [0, 1, 0]
    if dropout:  # the high side drops out for 2 ns while on
        ht, hv = [*ht[:-1], 300, 302, 500], [*hv[:-1], 0, 1, 0]
    lt, lv = [0, 100, 600], [1, 0, 1]
    return make_capture(NS, (np.array(ht, np.int64), np.array(hv, np.uint8)),
                        (np.array(lt, np.int64), np.array(lv, np.uint8)), end=900)


def test_glitch_never_lengthens_a_gap() -> None:
    window = {e: Limits(30 * NS, 200 * NS) for e in ("to_high", "to_low")}
    raw = measure_capture(_s5(), limits=window)
    filtered = measure_capture(_s5(), limits=window, glitch_width_s=5 * NS)
    # the gap ends at the first on-edge, the glitch's, with or without --glitch: 110 - 100
    for m in (raw, filtered):
        assert m.to_high.gaps_ticks.tolist() == [10] and m.to_high.min_s == 10 * NS
        assert m.to_low.gaps_ticks.tolist() == [100]
        assert m.verdict == "fail" and m.to_high.below_window == 1
    assert raw.glitch_count == 0 and raw.missing_edge_count == 1  # on, off, on: an edge lost?
    assert filtered.glitches == (Glitch("high", 1, 110 * NS, 2 * NS, in_dead_time=True),)
    assert filtered.glitch_count == 1 and filtered.missing_edge_count == 0  # explained
    # a window the 10 ns gap meets (10 - 1 >= 5): the on-pulse glitch alone fails it
    loose = {e: Limits(5 * NS, 200 * NS) for e in ("to_high", "to_low")}
    m = measure_capture(_s5(), limits=loose, glitch_width_s=5 * NS)
    assert m.verdict == "fail" and m.to_high.below_window == 0
    assert m.reasons == ("1 on-pulse glitch(es): a gate briefly on (inside a dead time it ends "
                         "the dead time early)",)
    # without --glitch the pulse is an unexplained on-off-on: the capture proves nothing
    assert measure_capture(_s5(), limits=loose).verdict == "inconclusive"
    # the clean capture (no pulse) passes the 30 ns minimum: 30 - 1 >= 30 fails, 29 passes
    clean = measure_capture(_s5(glitch=False), limits={"to_high": Limits(29 * NS, None)})
    assert clean.to_high.gaps_ticks.tolist() == [30] and clean.verdict == "ok"


def test_dropout_glitch_is_listed_but_harmless() -> None:
    window = {e: Limits(20 * NS, 200 * NS) for e in ("to_high", "to_low")}
    cap = _s5(glitch=False, dropout=True)
    m = measure_capture(cap, limits=window, glitch_width_s=5 * NS)
    assert m.glitches == (Glitch("high", 0, 300 * NS, 2 * NS),)
    assert m.verdict == "ok" and m.missing_edge_count == 0
    assert m.to_high.gaps_ticks.tolist() == [30] and m.to_low.gaps_ticks.tolist() == [100]
    # without --glitch the dropout is an unexplained off-on: a missing edge, inconclusive
    unfiltered = measure_capture(cap, limits=window)
    assert unfiltered.verdict == "inconclusive" and unfiltered.missing_edge_count == 1
    assert unfiltered.failed


def test_zero_width_pulse_is_always_a_glitch() -> None:
    # two changes of the high side at one time stamp (a pulse narrower than a tick)
    ht = np.array([0, 110, 110, 130, 500], dtype=np.int64)
    hv = np.array([0, 1, 0, 1, 0], dtype=np.uint8)
    lt, lv = np.array([0, 100, 600], np.int64), np.array([1, 0, 1], np.uint8)
    m = measure_capture(make_capture(NS, (ht, hv), (lt, lv)), limits={"to_high": Limits(NS)})
    assert m.glitches == (Glitch("high", 1, 110 * NS, Fraction(0), in_dead_time=True),)
    assert m.verdict == "fail"


def test_glitch_overlap_is_never_hidden() -> None:
    ht = np.array([0, 100, 102, 300, 600], dtype=np.int64)
    hv = np.array([0, 1, 0, 1, 0], dtype=np.uint8)
    lt = np.array([0, 200, 650], dtype=np.int64)
    lv = np.array([1, 0, 1], dtype=np.uint8)
    m = measure_capture(make_capture(TICK, (ht, hv), (lt, lv)), glitch_width_s=10 * TICK)
    assert len(m.overlaps) == 1 and m.overlaps[0].at_s == 100 * TICK
    assert m.verdict == "fail"


def test_unknown_level_against_an_on_gate_is_a_possible_overlap() -> None:
    # S4: high side x for 10 ns while the low side is on; low side z for 5 ns while the high
    # side is on; later both gates unknown for 4 ns; one x on the high side while the low is off
    ht = np.array([0, 50, 60, 130, 500, 700, 704, 750, 760], dtype=np.int64)
    hv = np.array([0, 2, 0, 1, 0, 2, 0, 2, 0], dtype=np.uint8)
    lt = np.array([0, 100, 300, 305, 600, 650, 700, 704], dtype=np.int64)
    lv = np.array([1, 0, 3, 0, 1, 0, 3, 0], dtype=np.uint8)
    m = measure_capture(make_capture(NS, (ht, hv), (lt, lv), end=900))
    assert [(o.at_s, o.duration_s) for o in m.possible_overlaps] == [
        (50 * NS, 10 * NS), (300 * NS, 5 * NS), (700 * NS, 4 * NS)]
    assert len(m.overlaps) == 0 and m.verdict == "fail"  # even without a window
    assert m.reasons[0].startswith("3 possible overlap(s)")
    assert m.unknown_intervals == 4  # the x at 750 (low side off) is unknown but harmless
    # the hand-over that does not pass through x is measured
    assert m.to_high.gaps_ticks.tolist() == [30]


def test_both_unknown_at_the_start_is_not_measured_but_later_it_fails() -> None:
    # a simulator's $dumpvars x on both gates before the first known levels (at 50)
    ht = np.array([0, 50, 130, 500], dtype=np.int64)
    hv = np.array([2, 0, 1, 0], dtype=np.uint8)
    lt = np.array([0, 50, 100, 600], dtype=np.int64)
    lv = np.array([2, 1, 0, 1], dtype=np.uint8)
    m = measure_capture(make_capture(NS, (ht, hv), (lt, lv)), limits={"to_high": Limits(NS)})
    assert len(m.possible_overlaps) == 0 and m.verdict == "ok"
    assert any("start of the capture" in n for n in m.notes)
    # both unknown later (a $dumpoff): a possible overlap
    ht2 = np.array([0, 50, 130, 500, 700, 720], dtype=np.int64)
    hv2 = np.array([2, 0, 1, 0, 2, 0], dtype=np.uint8)
    lt2 = np.array([0, 50, 100, 600, 700, 720], dtype=np.int64)
    lv2 = np.array([2, 1, 0, 1, 2, 1], dtype=np.uint8)
    m2 = measure_capture(make_capture(NS, (ht2, hv2), (lt2, lv2)))
    assert [(o.at_s, o.duration_s) for o in m2.possible_overlaps] == [(700 * NS, 20 * NS)]
    assert m2.verdict == "fail"


def test_possible_overlap_runs_to_the_end_and_across_states() -> None:
    # low on; high x then z (two unknown states in one run), to the end of the capture
    ht = np.array([0, 200, 210], dtype=np.int64)
    hv = np.array([0, 2, 3], dtype=np.uint8)
    lt = np.array([0, 100, 150], dtype=np.int64)
    lv = np.array([1, 0, 1], dtype=np.uint8)
    m = measure_capture(make_capture(NS, (ht, hv), (lt, lv), end=400))
    assert [(o.at_s, o.duration_s) for o in m.possible_overlaps] == [(200 * NS, 200 * NS)]


def test_unknown_while_the_other_is_off_is_inconclusive_with_a_window() -> None:
    # high x for 10 ns inside the to_low dead time: that hand-over cannot be measured
    ht = np.array([0, 130, 500, 550, 560], dtype=np.int64)
    hv = np.array([0, 1, 0, 2, 0], dtype=np.uint8)
    lt, lv = np.array([0, 100, 600], np.int64), np.array([1, 0, 1], np.uint8)
    cap = make_capture(NS, (ht, hv), (lt, lv))
    assert measure_capture(cap).verdict == "ok"
    m = measure_capture(cap, limits={"to_high": Limits(20 * NS, None)})
    assert m.verdict == "inconclusive" and len(m.possible_overlaps) == 0
    assert m.to_low.count == 0


def test_lost_events_of_the_capture_are_missing_edges() -> None:
    cap, _, _ = _build([(60, 300, 61, 300)] * 2)
    lossy = make_capture(TICK, (cap.high_times, cap.high_levels), (cap.low_times, cap.low_levels),
                         end=cap.end, lost_events=2)
    assert measure_capture(lossy).missing_edge_count == 2
    m = measure_capture(lossy, limits={"to_high": Limits(TICK, None)})
    assert m.verdict == "inconclusive" and "cannot prove" in m.reasons[-1]


def test_missing_edges() -> None:
    # low turns off, then back on without the high side ever turning on
    ht = np.array([0, 400, 600], dtype=np.int64)
    hv = np.array([0, 1, 0], dtype=np.uint8)
    lt = np.array([0, 100, 150, 350, 650], dtype=np.int64)
    lv = np.array([1, 0, 1, 0, 1], dtype=np.uint8)
    m = measure_capture(make_capture(TICK, (ht, hv), (lt, lv)))
    assert len(m.missing_edges) == 1 and m.missing_edges[0].at_s == 100 * TICK
    assert m.to_high.gaps_ticks.tolist() == [50] and m.verdict == "ok"
    # with a window set, a capture with missing edges cannot prove the dead time
    judged = measure_capture(make_capture(TICK, (ht, hv), (lt, lv)),
                             limits={"to_high": Limits(10 * TICK, None)})
    assert judged.verdict == "inconclusive" and judged.failed
    # a level reported twice in a stream of edge reports: the edge between is lost
    lt2 = np.array([0, 100, 350, 650], dtype=np.int64)
    lv2 = np.array([1, 0, 0, 1], dtype=np.uint8)
    m2 = measure_capture(make_capture(TICK, (ht, hv), (lt2, lv2), edges_only=True))
    assert any("twice" in f.text for f in m2.missing_edges)
    # the same rows from a file that restates levels (a VCD vector, $dumpall, a sample): no
    # evidence of a lost edge (IEEE 1364-2005 18.2: a vector change writes the whole vector)
    m3 = measure_capture(make_capture(TICK, (ht, hv), (lt2, lv2)))
    assert m3.missing_edge_count == 0 and not m3.missing_edges


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
                         high_initial=cap.high_initial, low_initial=cap.low_initial,
                         edge_events=cap.edge_events)


def _summary(m: Measurement) -> tuple[object, ...]:
    return (
        m.to_high.gaps_ticks.tolist(), m.to_low.gaps_ticks.tolist(),
        m.to_high.shortest, m.to_high.longest, m.to_low.shortest, m.to_low.longest,
        m.to_high.percentiles, m.to_low.histogram_counts, m.overlaps, m.glitches,
        m.missing_edges, m.unknown_intervals, m.verdict, m.reasons, m.notes, m.duration_s,
        m.mean_period_s, m.possible_overlaps, m.glitch_count, m.missing_edge_count,
        m.resolution_s,
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


def _reference_glitches_and_possible(
    evs: list[tuple[int, bool, int]], width: int, initial: tuple[int, int], end: int
) -> tuple[list[Glitch], list[tuple[int, int]]]:
    """A plain loop written from the module docstring's rules: a glitch is a clean pulse of
    one gate shorter than `width` ticks (zero width always); a possible overlap is a run of
    joint states with one gate x/z and the other on or x/z, except the capture's first state
    while both are unknown (with unknown levels before the capture)."""
    t = 0
    timed: list[tuple[int, bool, int]] = []
    for dt, high, value in evs:
        t += dt
        timed.append((t, high, value))
    # the joint state after all changes at each time
    after: dict[int, tuple[int, int]] = {}
    level = {True: initial[0], False: initial[1]}
    for when, high, value in timed:
        level[high] = value
        after[when] = (level[True], level[False])
    glitches: list[Glitch] = []
    for high in (True, False):
        changes: list[tuple[int | None, int]] = [(None, initial[0 if high else 1])]
        for when, side, value in timed:
            if side == high and value != changes[-1][1]:
                changes.append((when, value))
        for k in range(1, len(changes) - 1):
            (_, before), (start, v), (stop, nxt) = changes[k - 1], changes[k], changes[k + 1]
            assert start is not None and stop is not None
            if stop - start < max(width, 1) and max(before, v, nxt) <= 1:
                other = after[start][1 if high else 0]
                glitches.append(Glitch("high" if high else "low", v, start * TICK,
                                       (stop - start) * TICK, v == 1 and other == 0))
    glitches.sort(key=lambda g: (g.at_s, g.signal))
    states: list[tuple[int, tuple[int, int]]] = []
    for when in sorted(after):
        if not states or states[-1][1] != after[when]:
            states.append((when, after[when]))
    runs: list[tuple[int, int]] = []
    open_at: int | None = None
    for k, (when, (h, lo)) in enumerate(states):
        risky = h != 0 and lo != 0 and (h, lo) != (1, 1)
        if k == 0 and initial == (2, 2) and h >= 2 and lo >= 2:
            risky = False  # nothing observed yet
        if risky and open_at is None:
            open_at = when
        elif not risky and open_at is not None:
            runs.append((open_at, when - open_at))
            open_at = None
    if open_at is not None:
        runs.append((open_at, max(end, t) - open_at))
    return glitches, runs


@settings(max_examples=150, deadline=None)
@given(events, st.lists(st.integers(0, 80), max_size=6), st.booleans(), st.sampled_from([0, 3, 20]))
def test_glitches_and_possible_overlaps_against_a_per_event_loop(
    evs: list[tuple[int, bool, int]], cuts: list[int], edges_only: bool, width: int
) -> None:
    cap = _capture(evs, edges_only)
    if cap.high_times.size == 0 or cap.low_times.size == 0:
        return
    try:
        m = measure_capture(_stream(cap, cuts), glitch_width_s=width * TICK)
    except GapforgeError:
        return  # no transitions at all (checked elsewhere)
    glitches, runs = _reference_glitches_and_possible(
        evs, width, (cap.high_initial, cap.low_initial), cap.end)
    assert list(m.glitches) == glitches and m.glitch_count == len(glitches)
    assert [(int(o.at_s / TICK), int(o.duration_s / TICK)) for o in m.possible_overlaps] == runs
    if runs:
        assert m.verdict == "fail"


# --- issue 20: a restated level (a VCD vector written whole, a $dumpall checkpoint, a repeated
# sample) is no evidence of anything: it never changes a result -------------------------------

def _restated(times: list[int], levels: list[int], picks: list[tuple[int, int]], end: int,
              ) -> tuple[list[int], list[int]]:
    """The same signal with its current level written again: after change i (index picked
    modulo the count), somewhere before the next change (or the end), `offset` into that span."""
    out = [(t, i, 0, v) for i, (t, v) in enumerate(zip(times, levels, strict=True))]
    for index, offset in picks:
        i = index % len(times)
        stop = times[i + 1] if i + 1 < len(times) else end
        at = times[i] + offset % (stop - times[i] + 1)
        out.append((at, i, 1, levels[i]))  # after change i, before change i + 1
    out.sort()
    return [e[0] for e in out], [e[3] for e in out]


@settings(max_examples=200, deadline=None)
@given(events, st.lists(st.tuples(st.integers(0, 99), st.integers(0, 999)), max_size=12),
       st.lists(st.tuples(st.integers(0, 99), st.integers(0, 999)), max_size=12),
       st.sampled_from([0, 3, 20]))
def test_restated_levels_never_change_a_result(
    evs: list[tuple[int, bool, int]], high_picks: list[tuple[int, int]],
    low_picks: list[tuple[int, int]], glitch: int,
) -> None:
    cap = _capture(evs, edges_only=False)
    if cap.high_times.size == 0 or cap.low_times.size == 0:
        return
    kwargs = {"glitch_width_s": glitch * TICK, "worst": 3,
              "limits": {"to_high": Limits(2 * TICK, 30 * TICK)}}
    ht, hv = _restated(cap.high_times.tolist(), cap.high_levels.tolist(), high_picks, cap.end)
    lt, lv = _restated(cap.low_times.tolist(), cap.low_levels.tolist(), low_picks, cap.end)
    restated = make_capture(TICK, (np.array(ht, np.int64), np.array(hv, np.uint8)),
                            (np.array(lt, np.int64), np.array(lv, np.uint8)), end=cap.end)
    try:
        plain = measure_capture(cap, **kwargs)  # type: ignore[arg-type]
    except GapforgeError as exc:
        with pytest.raises(GapforgeError, match=re.escape(exc.message[:20])):
            measure_capture(restated, **kwargs)  # type: ignore[arg-type]
        return
    assert _summary(measure_capture(restated, **kwargs)) == _summary(plain)  # type: ignore[arg-type]
