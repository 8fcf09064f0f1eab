"""Live serial stream: over pyserial's loop:// and over a real pseudo-terminal pair (os.openpty)."""

from __future__ import annotations

import os
import sys
import threading
import time
from fractions import Fraction

import pytest
import serial

from gapforge.bench.measure import measure_capture
from gapforge.bench.serial_stream import LineDecoder, open_port, read_serial

CLOCK = 100_000_000  # 10 ns ticks


def _lines(periods: int, start: int, bits: int = 16, gap_h: int = 7, gap_l: int = 9) -> bytes:
    """An invented stream: a 16-bit counter that wraps many times, known gaps in ticks."""
    out = [f"#GFCAP 1 clock_hz={CLOCK} counter_bits={bits}"]
    t, seq, mask = start, 0, (1 << bits) - 1

    def put(side: str, level: int, when: int) -> None:
        nonlocal seq
        out.append(f"{side}{level} {when & mask:0{(bits + 3) // 4}X} {seq & 0xFF:02X}")
        seq += 1

    for _ in range(periods):
        put("L", 0, t)
        put("H", 1, t + gap_h)
        put("H", 0, t + gap_h + 3000)
        put("L", 1, t + gap_h + 3000 + gap_l)
        t += 20_000  # > one wrap of 2**16 every few periods
    return ("\n".join(out) + "\n").encode()


def test_decoder_unwraps_and_counts_problems() -> None:
    data = _lines(40, 65_000)
    dec = LineDecoder()
    # garbage, a comment, a line split over two reads, CR LF line ends
    dec.feed(b"noise \x00\xff\n# comment\n")
    for k in range(0, len(data), 7):
        dec.feed(data[k : k + 7].replace(b"\n", b"\r\n"))
    dec.feed(b"H1 00")  # a partial line at the end
    dec.finish()
    assert dec.status.garbage == 1 and dec.status.partial == 1 and dec.status.lost_lines == 0
    cap = dec.capture("test")
    assert cap is not None and cap.tick_s == Fraction(1, CLOCK)
    m = measure_capture(cap)
    # the stream reports edges, so the level before each side's first edge is implied
    assert m.to_high.gaps_ticks.tolist() == [7] * 40
    assert m.to_low.gaps_ticks.tolist() == [9] * 40
    assert int(cap.high_times[-1]) - int(cap.high_times[0]) == 39 * 20_000 + 3000


def test_lost_lines_seen_by_sequence() -> None:
    lines = _lines(5, 0).split(b"\n")
    del lines[3]  # drop one edge line
    dec = LineDecoder()
    dec.feed(b"\n".join(lines))
    assert dec.status.lost_lines == 1


def test_second_header_stops() -> None:
    dec = LineDecoder()
    dec.feed(_lines(2, 0) + _lines(2, 0))
    assert dec.stopped is not None and "restarted" in dec.stopped
    assert dec.status.edges == 8


def _feed(port: serial.SerialBase, data: bytes) -> threading.Thread:
    """Write from a thread: loop:// holds only a small buffer and blocks the writer."""
    thread = threading.Thread(target=port.write, args=(data,), daemon=True)
    thread.start()
    return thread


def test_loop_url_stops_after_count_transitions() -> None:
    # --count counts dead-time transitions (hand-overs), not edges: 25 transitions are 12 whole
    # periods (L0 H1 H0 L1: a to_high and a to_low each) and the next L0 H1 (the 25th)
    port = serial.serial_for_url("loop://", baudrate=2_000_000, timeout=0.05)
    port.write_timeout = 2.0
    _feed(port, _lines(30, 123))
    result = read_serial("loop://", 2_000_000, max_transitions=25, idle_timeout_s=1.0, port=port)
    assert result.stop_reason == "transition count reached (25)"
    assert result.capture is not None
    m = measure_capture(result.capture)
    assert result.status.transitions == 25 and result.status.edges == 12 * 4 + 2
    assert m.to_high.count + m.to_low.count == 25 and m.to_low.count == 12
    assert set(m.to_high.gaps_ticks.tolist()) == {7} and m.to_high.count == 13
    assert result.status.partial == 0  # the lines after the stop are not read, not partial


def test_transitions_counted_after_polarity() -> None:
    # the same stream read with both gates active low: an "off" line is the gate turning on,
    # so the hand-overs fall on the other edges; still one per to_high and to_low gap
    data = _lines(10, 0)
    plain, inverted = LineDecoder(), LineDecoder(active_low=(True, True))
    plain.feed(data)
    inverted.feed(data)
    assert plain.status.transitions == 20  # L0 then H1, H0 then L1: two hand-overs per period
    cap = inverted.capture("test", active_low_high=True, active_low_low=True)
    assert cap is not None
    m = measure_capture(cap)
    assert inverted.status.transitions == m.to_high.count + m.to_low.count
    stopped = LineDecoder(stop_after=3)
    stopped.feed(data)
    assert stopped.stopped == "transition count reached (3)" and stopped.status.edges == 6
    # inverted, every hand-over overlaps: the 3rd completes when the outgoing gate turns off
    # (edges: low on, high off [1], high on, low off [2], low on, high off [3])
    late = LineDecoder(active_low=(True, True), stop_after=3)
    late.feed(data)
    assert late.stopped == "transition count reached (3)" and late.status.edges == 6
    cap = late.capture("test", active_low_high=True, active_low_low=True)
    assert cap is not None
    m = measure_capture(cap)
    assert m.to_high.count + m.to_low.count == 3 and len(m.overlaps) == 3


def test_lost_lines_make_missing_edges_and_one_tick_resolution() -> None:
    lines = _lines(5, 0).split(b"\n")
    del lines[3]  # drop one edge line (the first period's H0)
    dec = LineDecoder()
    dec.feed(b"\n".join(lines))
    cap = dec.capture("test")
    assert cap is not None and cap.lost_events == 1 and cap.resolution_ticks == 1
    m = measure_capture(cap)
    assert m.resolution_s == Fraction(1, CLOCK) and m.missing_edge_count >= 1


def test_loop_url_idle_timeout_reports_what_was_measured() -> None:
    port = serial.serial_for_url("loop://", timeout=0.05)
    _feed(port, _lines(10, 0) + b"L0 01").join(timeout=0.01)
    result = read_serial("loop://", 115200, idle_timeout_s=0.3, port=port)
    assert "timeout" in result.stop_reason
    assert result.status.edges == 40 and result.status.partial == 1


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="pseudo-terminals on Linux")
def test_pty_pair_then_port_vanishes() -> None:
    master, slave = os.openpty()
    name = os.ttyname(slave)
    data = _lines(200, 5)

    def writer() -> None:
        for k in range(0, len(data), 512):
            os.write(master, data[k : k + 512])
            time.sleep(0.002)
        time.sleep(0.2)
        os.close(master)  # the device disappears

    port = open_port(name, 2_000_000)  # open (raw mode) before the first byte arrives
    thread = threading.Thread(target=writer)
    thread.start()
    result = read_serial(name, 2_000_000, idle_timeout_s=5.0, port=port)
    thread.join()
    port.close()
    os.close(slave)
    assert "vanished" in result.stop_reason or "timeout" in result.stop_reason
    assert result.status.edges == 800 and result.status.garbage == 0
    assert result.capture is not None
    assert measure_capture(result.capture).to_low.gaps_ticks.tolist() == [9] * 200


def test_time_limit() -> None:
    port = serial.serial_for_url("loop://", timeout=0.05)
    _feed(port, _lines(3, 0))
    result = read_serial("loop://", 115200, max_seconds=0.2, idle_timeout_s=10.0, port=port)
    assert result.stop_reason.startswith("time limit")
    assert result.status.edges == 12
