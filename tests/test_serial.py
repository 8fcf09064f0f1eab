"""Live serial stream: over pyserial's loop:// and over a real pseudo-terminal pair (os.openpty)."""

from __future__ import annotations

import os
import sys
import threading
from fractions import Fraction

import pytest
import serial

from gapforge.bench.measure import measure_capture
from gapforge.bench.serial_protocol import checked
from gapforge.bench.serial_stream import LineDecoder, StreamStatus, open_port, read_serial

CLOCK = 100_000_000  # 10 ns ticks


def _lines(periods: int, start: int, bits: int = 16, gap_h: int = 7, gap_l: int = 9) -> bytes:
    """An invented stream: a 16-bit counter that wraps many times, known gaps in ticks."""
    out = [checked(f"#GFCAP 2 clock_hz={CLOCK} counter_bits={bits}")]
    t, seq, mask = start, 0, (1 << bits) - 1

    def put(side: str, level: int, when: int) -> None:
        nonlocal seq
        out.append(checked(f"{side}{level} {when & mask:0{(bits + 3) // 4}X} {seq & 0xFF:02X}"))
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
    # the noise came before the first header: skipped while waiting for it, not garbage
    assert dec.status.garbage == 0 and dec.status.before_header == 1
    assert dec.status.partial == 1 and dec.status.lost_lines == 0
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


def test_repeated_header_continues_and_another_one_stops() -> None:
    # the firmware repeats its header (issue 20): the same clock and width change nothing
    whole = _lines(6, 0)
    header, body = whole.split(b"\n", 1)
    rows = body.split(b"\n")
    repeated = b"\n".join([header, *rows[:9], header, *rows[9:]])
    dec = LineDecoder()
    dec.feed(repeated)
    dec.finish()
    plain = LineDecoder()
    plain.feed(whole)
    plain.finish()
    assert dec.stopped is None and dec.status.headers == 2 and dec.status.lost_lines == 0
    assert (dec.times, dec.levels) == (plain.times, plain.levels)
    # a header with another clock: the firmware restarted with other settings
    other = LineDecoder()
    other.feed(_lines(2, 0) + checked("#GFCAP 2 clock_hz=5000 counter_bits=16").encode() + b"\n")
    assert other.stopped is not None and "restarted" in other.stopped
    assert other.status.edges == 8 and dec.status.edges == 24


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
    plain.finish()  # edges wait in the reorder buffer until the end of the input
    inverted.finish()
    assert plain.status.transitions == 20  # L0 then H1, H0 then L1: two hand-overs per period
    cap = inverted.capture("test", active_low_high=True, active_low_low=True)
    assert cap is not None
    m = measure_capture(cap)
    assert inverted.status.transitions == m.to_high.count + m.to_low.count
    stopped = LineDecoder(stop_after=3)
    stopped.feed(data)
    stopped.finish()
    assert stopped.stopped == "transition count reached (3)" and stopped.status.edges == 6
    # inverted, every hand-over overlaps: the 3rd completes when the outgoing gate turns off
    # (edges: low on, high off [1], high on, low off [2], low on, high off [3])
    late = LineDecoder(active_low=(True, True), stop_after=3)
    late.feed(data)
    late.finish()
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
    port.write(_lines(10, 0) + b"L0 01")  # fits loop://'s buffer: written before reading
    result = read_serial("loop://", 115200, idle_timeout_s=0.3, port=port)
    assert "timeout" in result.stop_reason
    assert result.status.edges == 40 and result.status.partial == 1


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="pseudo-terminals on Linux")
def test_pty_pair_then_port_vanishes() -> None:
    master, slave = os.openpty()
    name = os.ttyname(slave)
    data = _lines(200, 5)
    read_all = threading.Event()  # the reader acknowledges every line before the device goes

    def writer() -> None:
        for k in range(0, len(data), 512):
            os.write(master, data[k : k + 512])
        read_all.wait(timeout=60)
        os.close(master)  # the device disappears

    def progress(status: StreamStatus) -> None:
        if status.lines == 801:
            read_all.set()

    port = open_port(name, 2_000_000)  # open (raw mode) before the first byte arrives
    thread = threading.Thread(target=writer)
    thread.start()
    result = read_serial(name, 2_000_000, idle_timeout_s=60.0, port=port, progress=progress)
    thread.join()
    port.close()
    os.close(slave)
    assert "vanished" in result.stop_reason
    assert result.status.edges == 800 and result.status.garbage == 0
    assert result.capture is not None
    assert measure_capture(result.capture).to_low.gaps_ticks.tolist() == [9] * 200


def test_time_limit() -> None:
    port = serial.serial_for_url("loop://", timeout=0.05)
    port.write(_lines(3, 0))  # fits loop://'s buffer: all there before reading starts
    result = read_serial("loop://", 115200, max_seconds=0.2, idle_timeout_s=10.0, port=port)
    assert result.stop_reason.startswith("time limit")
    assert result.status.edges == 12


# --- issue 14: reorders, corruption, protocol versions, wide counters, garbage ----------------

def _stream(rows: list[tuple[str, int, int]], bits: int = 32, clock: int = CLOCK) -> bytes:
    """Checked lines for (side+level or 'T', counter, seq) rows after a header."""
    digits = (bits + 3) // 4
    out = [checked(f"#GFCAP 2 clock_hz={clock} counter_bits={bits}")]
    for kind, counter, seq in rows:
        out.append(checked(f"{kind} {counter:0{digits}X} {seq:02X}"))
    return ("\n".join(out) + "\n").encode()


def _measure(data: bytes, window: tuple[Fraction, Fraction] | None = None):  # type: ignore[no-untyped-def]
    from gapforge.bench.measure import Limits

    dec = LineDecoder()
    dec.feed(data)
    dec.finish()
    cap = dec.capture("test")
    assert cap is not None
    limits = None if window is None else {e: Limits(*window) for e in ("to_high", "to_low")}
    return dec, measure_capture(cap, limits=limits)


def test_crc_is_the_catalogue_crc8() -> None:
    # CRC-8 with polynomial 0x07, init 0, no reflection: check value 0xF4 over the ASCII digits
    # "123456789" (the CRC RevEng catalogue, "CRC-8/SMBUS"; from memory)
    from gapforge.bench.serial_protocol import crc8

    assert crc8(b"123456789") == 0xF4
    assert crc8(b"") == 0


# an invented 1 GHz stream: periods of 1000 ticks; in period 2 the high side turns on 100 ticks
# before the low side turns off (a 100 ns overlap), and the firmware prints the two edges in
# interrupt order: the low side's off-edge first although it happened later
_OVERLAP_ROWS = [
    ("L0", 100, 0), ("H1", 130, 1), ("H0", 600, 2), ("L1", 640, 3),
    ("L0", 1100, 4), ("H1", 1130, 5), ("H0", 1600, 6), ("L1", 1640, 7),
    ("L0", 2100, 8), ("H1", 2000, 9), ("H0", 2600, 10), ("L1", 2640, 11),
    ("L0", 3100, 12), ("H1", 3130, 13), ("H0", 3600, 14), ("L1", 3640, 15),
]


def test_a_small_step_back_is_a_reorder_not_a_wrap() -> None:
    # the old reader took 2000 after 2100 for a wrap of the 32-bit counter: a 4.29 s dead
    # time at 1 GHz, no overlap. Modular arithmetic: -100 ticks, the line arrived late.
    dec, m = _measure(_stream(_OVERLAP_ROWS, clock=10**9), (Fraction(20, 10**9), None))
    assert dec.status.reordered == 1 and dec.status.lost_lines == 0
    assert len(m.overlaps) == 1
    assert m.overlaps[0].at_s == Fraction(2000 - 100, 10**9)  # times count from the first line
    assert m.overlaps[0].duration_s == Fraction(100, 10**9)
    assert m.to_high.min_s == Fraction(-100, 10**9)
    assert m.verdict == "fail"


def test_a_line_later_than_the_buffer_makes_it_inconclusive() -> None:
    from gapforge.bench.serial_order import REORDER_LINES

    rows = [(kind, t + 1000 * k, 4 * k + i)
            for k in range(REORDER_LINES)
            for i, (kind, t) in enumerate((("L0", 100), ("H1", 130), ("H0", 600), ("L1", 640)))]
    late = rows.pop(5)  # period 1's high turn-on, reported after every later edge
    rows.append(late)
    dec, m = _measure(_stream(rows, clock=10**9), (Fraction(20, 10**9), Fraction(50, 10**9)))
    assert dec.status.lost_lines == 1  # could not be put in place: counted lost, not misplaced
    assert m.verdict == "inconclusive" and m.missing_edge_count >= 1
    assert all(int(g) >= 0 for g in m.to_high.gaps_ticks)  # no wrap-sized or negative gap


def test_a_corrupted_digit_fails_the_check_and_counts_as_lost() -> None:
    data = _stream([*_OVERLAP_ROWS[:4], ("L0", 1100, 4), ("H1", 1130, 5), ("H0", 1600, 6)],
                   clock=10**9)
    corrupt = data.replace(b"H1 0000046A", b"H1 0000056A")  # one digit of 1130 changed
    assert corrupt != data
    dec, m = _measure(corrupt, (Fraction(20, 10**9), None))
    assert dec.status.corrupt == 1 and dec.status.lost_lines == 1
    assert m.verdict == "inconclusive"


def test_protocol_1_is_refused_with_its_reason() -> None:
    dec = LineDecoder()
    dec.feed(b"#GFCAP 1 clock_hz=100000000 counter_bits=32\nH1 00000010 00\n")
    assert dec.stopped is not None and "protocol 1" in dec.stopped
    assert "gapforge firmware" in dec.stopped and dec.capture("x") is None


def test_sequence_numbers_arriving_out_of_order_are_not_lost() -> None:
    from gapforge.bench.serial_order import SequenceTracker

    seq = SequenceTracker()
    for s in (254, 255, 1, 0, 2, 3):  # 0 and 1 swapped across the 8-bit wrap
        seq.see(s)
    assert seq.lost == 0
    seq.see(7)  # 4, 5, 6 lost
    seq.see(7)  # a repeat: something is wrong, counted
    assert seq.lost == 4


def test_a_64_bit_counter_at_and_above_2_63() -> None:
    # the old reader put the raw counter into int64: 2**63 overflowed
    top = (1 << 64) - 300
    rows = [("L0", top, 0), ("H1", top + 25, 1), ("H0", (top + 200) % (1 << 64), 2),
            ("L1", (top + 233) % (1 << 64), 3), ("L0", (top + 1000) % (1 << 64), 4),
            ("H1", (top + 1025) % (1 << 64), 5)]
    _, m = _measure(_stream(rows, bits=64))
    assert m.to_high.gaps_ticks.tolist() == [25, 25] and m.to_low.gaps_ticks.tolist() == [33]
    rows = [("L0", 1 << 63, 0), ("H1", (1 << 63) + 7, 1)]
    _, m = _measure(_stream(rows, bits=64))
    assert m.to_high.gaps_ticks.tolist() == [7]


def test_only_garbage_ends_the_capture() -> None:
    from gapforge.bench.serial_stream import GARBAGE_RUN

    dec = LineDecoder()
    dec.feed(b"\xfe\x13garbage at the wrong baud rate\n" * (GARBAGE_RUN + 10))
    assert dec.garbage_stop and dec.stopped is not None and "in a row" in dec.stopped
    # before any header the lines are skipped while waiting for one; the run still ends it
    assert dec.status.before_header + dec.status.garbage == GARBAGE_RUN
    endless = LineDecoder()  # binary junk without line ends: every MAX_LINE bytes is one line
    for _ in range(GARBAGE_RUN * 2):
        endless.feed(bytes(range(1, 100)))
    assert endless.garbage_stop
    # valid lines between the garbage reset the run
    mixed = LineDecoder()
    mixed.feed(_lines(2, 0) + (b"noise\n" * (GARBAGE_RUN - 1) + _lines(1, 0).split(b"\n", 1)[1]))
    assert not mixed.garbage_stop


def test_read_serial_stops_on_a_garbage_stream() -> None:
    port = serial.serial_for_url("loop://", timeout=0.05)
    stop = threading.Event()

    def noise() -> None:
        while not stop.is_set():
            port.write(b"\x00\xffjunk\n" * 64)

    thread = threading.Thread(target=noise, daemon=True)
    thread.start()
    result = read_serial("loop://", 115200, idle_timeout_s=30.0, port=port)
    stop.set()
    thread.join(timeout=10)
    assert result.garbage_stop and "undecodable lines in a row" in result.stop_reason


def test_the_reader_says_it_waits_for_the_header(capsys: pytest.CaptureFixture[str]) -> None:
    # issue 20: joined mid-way, the progress line says it waits for the repeated header
    from gapforge.bench.serial_stream import HEADER_EVERY
    from gapforge.cli.measure_cmd import _progress

    _progress(StreamStatus(lines=12))
    err = capsys.readouterr().err
    assert "waiting for the next capture header" in err and f"every {HEADER_EVERY} lines" in err
    _progress(StreamStatus(lines=12, clock_hz=CLOCK, counter_bits=16))
    assert "waiting" not in capsys.readouterr().err
