"""`gapforge measure` end to end: exit codes, JSON keys, one-line errors, --design, --serial."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import threading
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner
from vcd import VCDWriter

from gapforge.cli import cli

ROOT = Path(__file__).parents[1]


def _vcd(path: Path, to_high: int, to_low: int, overlap_at: int | None = None) -> Path:
    # written by pyvcd, a general-purpose VCD writer (not gapforge); times in ns
    with path.open("w") as handle, VCDWriter(handle, timescale="1 ns", date="invented") as w:
        h = w.register_var("top", "gate_h", "wire", size=1, init=0)
        lo = w.register_var("top", "gate_l", "wire", size=1, init=1)
        for k in range(20):
            t = 1000 * k + 100
            w.change(lo, t, 0)
            w.change(h, t + to_high, 1)
            w.change(h, t + 400, 0)
            w.change(lo, t + 400 + to_low, 1)
            if overlap_at == k:
                w.change(h, t + 420 + to_low, 1)
                w.change(h, t + 425 + to_low, 0)
    return path


def _run(args: list[str]) -> subprocess.CompletedProcess[str]:
    env = dict(os.environ, PYTHONPATH=str(ROOT / "gen"))
    return subprocess.run([sys.executable, "-m", "gapforge", *args], capture_output=True,
                          text=True, env=env, check=False, timeout=60)


def test_pass_json(tmp_path: Path) -> None:
    path = _vcd(tmp_path / "ok.vcd", 30, 40)
    # the changes lie on a 10 ns step; --resolution states the simulator's exactness
    result = CliRunner().invoke(cli, ["measure", str(path), "--high", "top.gate_h", "--low",
                                      "top.gate_l", "--window", "25ns:50ns", "--json",
                                      "--resolution", "1ns"])
    assert result.exit_code == 0, result.output
    doc = json.loads(result.output)
    assert doc["edges"]["to_high"]["count"] == 20
    assert doc["edges"]["to_high"]["min_s"] == pytest.approx(30e-9)
    assert doc["edges"]["to_low"]["max_s"] == pytest.approx(40e-9)
    assert doc["edges"]["to_low"]["mean_s"] == pytest.approx(40e-9)
    assert doc["overlaps"] == 0 and doc["verdict"] == "ok"
    assert "bench" in doc["caution"]


def test_window_violation_exits_1(tmp_path: Path) -> None:
    path = _vcd(tmp_path / "short.vcd", 30, 40)
    result = CliRunner().invoke(cli, ["measure", str(path), "--high", "gate_h", "--low", "gate_l",
                                      "--window", "35ns:"])
    assert result.exit_code == 1
    first = result.output.splitlines()[0]
    # issue 10: the first line is the answer, lower-case verdict and the shortest gap per edge
    assert first == "fail: shortest gap to_high 30 ns, to_low 40 ns"
    assert "FAIL" not in result.output and "Verdict" not in result.output
    assert "reduced voltage" in result.output.splitlines()[-1]  # the short caution, once, last
    assert result.output.count("reduced voltage") == 1


def test_overlap_exits_1_with_timestamp(tmp_path: Path) -> None:
    path = _vcd(tmp_path / "shoot.vcd", 30, 40, overlap_at=3)
    result = CliRunner().invoke(cli, ["measure", str(path), "--high", "gate_h", "--low", "gate_l",
                                      "--json"])
    assert result.exit_code == 1
    doc = json.loads(result.output)
    assert doc["overlaps"] == 1 and doc["verdict"] == "fail"
    # low side back on at 3100 + 440 ns; the high side pulses on at 3100 + 460 ns for 5 ns
    assert doc["overlap_events"][0]["at_s"] == pytest.approx(3560e-9)
    assert doc["overlap_events"][0]["duration_s"] == pytest.approx(5e-9)


def test_active_low_options(tmp_path: Path) -> None:
    path = _vcd(tmp_path / "ok.vcd", 30, 40)
    # read inverted, the low side's dead times become the high side's on-times and vice versa
    result = CliRunner().invoke(cli, ["measure", str(path), "--high", "gate_h", "--low", "gate_l",
                                      "--active-low-high", "--active-low-low", "--json"])
    doc = json.loads(result.output)
    assert result.exit_code == 1  # both inverted gates are "on" together most of the period
    assert doc["overlaps"] > 0


@pytest.mark.parametrize("content,args,message", [
    (b"$timescale 1ns $end\n$var wire 1 ! gate_h $end\n", ["--high", "gate_h", "--low", "gate_l"],
     "enddefinitions"),  # truncated
    (bytes(range(256)) * 8, ["--high", "gate_h", "--low", "gate_l"], "error"),  # binary junk
    (None, ["--high", "gate_x", "--low", "gate_l"], "no signal 'gate_x'"),  # unknown signal
    (None, ["--high", "gate_h"], "--high and --low"),  # one signal missing
    (b"$var wire 1 ! gate_h $end $var wire 1 \" gate_l $end $enddefinitions $end\n#0 0! 1\"\n",
     ["--high", "gate_h", "--low", "gate_l"], "no edges"),  # no edges
    (None, ["--high", "gate_h", "--low", "gate_l", "--window", "50ns:20ns"], "above maximum"),
])
def test_bad_input_one_line_exit_2(tmp_path: Path, content: bytes | None, args: list[str],
                                   message: str) -> None:
    path = tmp_path / "bad.vcd"
    if content is None:
        _vcd(path, 30, 40)
    else:
        path.write_bytes(content)
    proc = _run(["measure", str(path), *args])
    assert proc.returncode == 2, proc.stdout + proc.stderr
    assert "Traceback" not in proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("gapforge: error:")
    assert message in lines[0]


def test_design_file(tmp_path: Path) -> None:
    from gapforge.pipeline.build import measurement_expectations

    design = ROOT / "examples" / "motor-inverter.toml"
    expected = measurement_expectations(design)
    path = _vcd(tmp_path / "ok.vcd", 30, 40)
    result = CliRunner().invoke(cli, ["measure", str(path), "--high", "gate_h", "--low", "gate_l",
                                      "--design", str(design), "--output", "MOTOR_DT", "--json"])
    assert result.exit_code in (0, 1), result.output
    doc = json.loads(result.output)
    for edge in ("to_high", "to_low"):
        wmin, wmax, _pmin, pmax = expected[edge]
        got = doc["edges"][edge]
        assert got["window_min_s"] == (None if wmin is None else float(wmin))
        assert got["predicted_max_s"] == (None if pmax is None else float(pmax))
        judged = (wmin is not None and float(wmin) > 30e-9) or (wmax is not None and float(wmax) < 40e-9)
        if judged:
            assert doc["verdict"] == "fail"


def _serial_run(monkeypatch: pytest.MonkeyPatch, data: bytes, args: list[str],
                via_main: bool = False) -> Any:
    """`measure --serial` on a pseudo-terminal fed `data`. The command empties the port's input
    buffer when it opens it, so the writer waits until the port is open (signalled from inside
    open_port, after the flush), never on a sleep."""
    import tty

    from gapforge.bench import serial_stream

    master, slave = os.openpty()
    tty.setraw(slave)
    name = os.ttyname(slave)
    opened = threading.Event()
    real_open = serial_stream.open_port

    def open_and_signal(url: str, baud: int) -> object:
        port = real_open(url, baud)
        opened.set()
        return port

    monkeypatch.setattr(serial_stream, "open_port", open_and_signal)

    def writer() -> None:
        if opened.wait(timeout=60):
            view = memoryview(data)
            while view:  # os.write may take only part of it when the terminal's buffer is full
                view = view[os.write(master, view):]

    thread = threading.Thread(target=writer, daemon=True)
    thread.start()
    argv = ["measure", "--serial", name, "--baud", "2000000", *args]
    try:
        if not via_main:
            return CliRunner().invoke(cli, argv)
        from gapforge.cli import main

        with pytest.raises(SystemExit) as stop:
            main(argv)
        return stop.value.code
    finally:
        thread.join(timeout=60)
        os.close(master)
        os.close(slave)


def _checked_stream(rows: list[tuple[str, int, int]]) -> bytes:
    from gapforge.bench.serial_protocol import checked

    lines = [checked("#GFCAP 2 clock_hz=1000000000 counter_bits=32")]
    lines += [checked(f"{kind} {at:08X} {seq % 256:02X}") for kind, at, seq in rows]
    return ("\n".join(lines) + "\n").encode()


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="pseudo-terminals on Linux")
def test_serial_over_pty(monkeypatch: pytest.MonkeyPatch) -> None:
    rows = []
    for k in range(30):
        t = 1000 * k + 500
        for kind, at in (("L0", t), ("H1", t + 25), ("H0", t + 400), ("L1", t + 433)):
            rows.append((kind, at, len(rows)))
    result = _serial_run(monkeypatch, _checked_stream(rows),
                         ["--count", "60", "--idle-timeout", "20s", "--window", "20ns:40ns",
                          "--json"])
    assert result.exit_code == 0, result.output
    doc = json.loads(result.output)
    # 60 transitions: every to_high and to_low of the 30 periods (120 edges)
    assert doc["stream"]["stop_reason"] == "transition count reached (60)"
    assert doc["stream"]["transitions"] == 60 and doc["stream"]["edges"] == 120
    assert doc["edges"]["to_high"]["count"] == 30 and doc["edges"]["to_low"]["count"] == 30
    # judged with one 1 ns counter tick: 25 - 1 >= 20 and 33 + 1 <= 40
    assert doc["resolution_s"] == pytest.approx(1e-9) and doc["verdict"] == "ok"
    assert doc["edges"]["to_low"]["min_s"] == pytest.approx(33e-9)


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="pseudo-terminals on Linux")
def test_serial_reordered_overlap_fails(monkeypatch: pytest.MonkeyPatch) -> None:
    # issue 14: the high side turns on 100 ns before the low side turns off; the two lines
    # arrive in interrupt order (later edge first). The old reader read a 4.29 s dead time.
    rows = [("L0", 100, 0), ("H1", 130, 1), ("H0", 600, 2), ("L1", 640, 3),
            ("L0", 1100, 4), ("H1", 1000, 5), ("H0", 1600, 6), ("L1", 1640, 7)]
    result = _serial_run(monkeypatch, _checked_stream(rows),
                         ["--idle-timeout", "1s", "--window", "20ns:", "--json"])
    assert result.exit_code == 1, result.output
    doc = json.loads(result.output)
    assert doc["overlaps"] == 1 and doc["edges"]["to_high"]["min_s"] == pytest.approx(-100e-9)


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="pseudo-terminals on Linux")
def test_serial_garbage_only_is_an_error(monkeypatch: pytest.MonkeyPatch,
                                        capsys: pytest.CaptureFixture[str]) -> None:
    # issue 14: a port sending only garbage used to read until the user gave up
    from gapforge.bench.serial_stream import GARBAGE_RUN

    code = _serial_run(monkeypatch, b"\x00\xff line noise\n" * (GARBAGE_RUN + 5),
                       ["--idle-timeout", "30s"], via_main=True)
    captured = capsys.readouterr()
    assert code == 2 and captured.out == ""
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and "undecodable lines in a row" in lines[0]


def test_timing_diagram_under_the_tables(tmp_path: Path) -> None:
    # issue 6: the pair drawn with the shortest measured gaps over the measured mean period
    path = _vcd(tmp_path / "ok.vcd", 30, 40)
    args = ["measure", str(path), "--high", "gate_h", "--low", "gate_l"]
    text = CliRunner().invoke(cli, args).output
    lines = text.splitlines()
    at = next(i for i, line in enumerate(lines) if line.startswith("Timing"))
    assert "mean period 1 us" in lines[at]  # _vcd writes one period every 1000 ns
    assert lines[at + 1].startswith("high  ") and lines[at + 2].startswith("low   ")
    assert "to_high 30 ns" in lines[at + 4] and "to_low 40 ns" in lines[at + 4]
    assert at > next(i for i, line in enumerate(lines) if line.startswith("to_low "))  # under
    assert at < next(i for i, line in enumerate(lines) if line.startswith("Glitches"))
    plain = CliRunner().invoke(cli, [*args, "--ascii"]).output
    assert "Timing" in plain and all(ord(ch) < 128 for ch in plain)
    assert "\u2594" in text  # the default drawing uses block characters
    none = CliRunner().invoke(cli, [*args, "--no-diagram"]).output
    assert "Timing" not in none
    assert not any(line.startswith(("high  ", "low   ")) for line in none.splitlines())
    doc = json.loads(CliRunner().invoke(cli, [*args, "--json"]).output)
    assert doc["verdict"] == "ok"


def test_streamed_file_equals_the_capture_in_memory(tmp_path: Path) -> None:
    # the CLI streams the VCD; the report path loads it whole: same measurement either way
    from gapforge.bench.capture import load_capture, open_capture
    from gapforge.bench.measure import measure_capture
    from gapforge.cli.measure_cmd import measurement_json

    path = _vcd(tmp_path / "shoot.vcd", 30, 40, overlap_at=7)
    streamed = measure_capture(open_capture(path, "gate_h", "gate_l", chunk_bytes=64), worst=3)
    whole = measure_capture(load_capture(path, "gate_h", "gate_l"), worst=3)
    assert measurement_json(streamed) == measurement_json(whole)
    assert streamed.overlaps == whole.overlaps and len(whole.overlaps) == 1


def test_backwards_timestamps_fall_back_to_sorting(tmp_path: Path) -> None:
    # hand-written: '#1500' comes after '#2000' (IEEE 1364-2005 18.2 has times increase; a
    # reader should warn and order them)
    path = tmp_path / "back.vcd"
    path.write_text("$timescale 1ns $end $scope module top $end $var wire 1 ! gate_h $end\n"
                    "$var wire 1 \" gate_l $end $upscope $end $enddefinitions $end\n"
                    "#0 0! 1\"\n#1000 0\"\n#2000 0!\n#1500 1!\n#2100 1\"\n#3000 0\"\n#3025 1!\n")
    result = CliRunner().invoke(cli, ["measure", str(path), "--high", "gate_h", "--low",
                                      "gate_l", "--json"])
    doc = json.loads(result.output)
    assert doc["edges"]["to_high"]["count"] == 2
    assert doc["edges"]["to_high"]["max_s"] == pytest.approx(500e-9)  # 1000 -> 1500 once sorted
    assert doc["edges"]["to_high"]["min_s"] == pytest.approx(25e-9)  # 3000 -> 3025
    assert doc["edges"]["to_low"]["min_s"] == pytest.approx(100e-9)
    assert any("backwards" in w for w in doc["warnings"])


def test_diagram_notes_an_overlapping_hand_over() -> None:
    # built in memory: the high side turns on 4 ticks before the low side turns off
    from fractions import Fraction

    import numpy as np

    from gapforge.bench.capture import make_capture
    from gapforge.bench.measure import measure_capture
    from gapforge.cli.measure_cmd import measurement_diagram

    ht = np.array([0, 96, 500, 1096, 1500], dtype=np.int64)
    hv = np.array([0, 1, 0, 1, 0], dtype=np.uint8)
    lt = np.array([0, 100, 530, 1100, 1530], dtype=np.int64)
    lv = np.array([1, 0, 1, 0, 1], dtype=np.uint8)
    m = measure_capture(make_capture(Fraction(1, 10**9), (ht, hv), (lt, lv)))
    assert m.to_high.min_s == Fraction(-4, 10**9) and m.mean_period_s == Fraction(1000, 10**9)
    text = measurement_diagram(m, ascii_only=True)
    # issue 20: an overlap is never drawn as a dead time (before, the picture showed a gap
    # labelled "to_high -4 ns"): no picture, the overlap said in words
    assert "to_high -4 ns" not in text and "to_high 4 ns overlap" in text
    assert "no timing diagram" in text and "both gates on" in text
    assert len(text.splitlines()) == 1  # no drawn waveform
    from gapforge.cli.measure_text import answer_line

    # issue 10: a negative gap is said as an overlap, one prefix for both edges
    assert answer_line(m) == ("fail: 2 overlaps (both gates on); shortest gap to_high 4 ns "
                              "overlap, to_low 30 ns")
    assert "overlap" in text


# --- review S3-S5: resolution, unknown levels, glitches (VCDs written by pyvcd) --------------

def _invoke(args: list[str]) -> tuple[int, dict[str, object]]:
    result = CliRunner().invoke(cli, ["measure", *args, "--json"])
    return result.exit_code, json.loads(result.output)


def _s5_vcd(path: Path) -> Path:
    # S5, invented: each period the low side turns off at t, the high side pulses on 2 ns wide
    # 10 ns later, then turns on for real 30 ns after t; off at t + 400, low on at t + 440
    with path.open("w") as handle, VCDWriter(handle, timescale="1 ns", date="invented") as w:
        h = w.register_var("top", "gate_h", "wire", size=1, init=0)
        lo = w.register_var("top", "gate_l", "wire", size=1, init=1)
        for k in range(5):
            t = 1000 * k + 100
            w.change(lo, t, 0)
            w.change(h, t + 10, 1)
            w.change(h, t + 12, 0)
            w.change(h, t + 30, 1)
            w.change(h, t + 400, 0)
            w.change(lo, t + 440, 1)
    return path


def test_glitch_option_never_hides_a_short_gap(tmp_path: Path) -> None:
    path = _s5_vcd(tmp_path / "s5.vcd")
    base = [str(path), "--high", "gate_h", "--low", "gate_l", "--window", "20ns:100ns"]
    code, raw = _invoke(base)
    code_g, filtered = _invoke([*base, "--glitch", "5ns"])
    # the gap ends at the glitch's on-edge either way: 10 ns, below the 20 ns minimum
    for exit_code, doc in ((code, raw), (code_g, filtered)):
        assert exit_code == 1 and doc["verdict"] == "fail"
        edges = doc["edges"]
        assert isinstance(edges, dict)
        assert edges["to_high"]["min_s"] == pytest.approx(10e-9)
        assert edges["to_high"]["max_s"] == pytest.approx(10e-9)
        assert edges["to_high"]["below_window"] == 5
    assert raw["glitches"] == 0 and filtered["glitches"] == 5
    events = filtered["glitch_events"]
    assert isinstance(events, list)
    assert events[0] == {"signal": "high", "level": 1, "at_s": pytest.approx(110e-9),
                         "width_s": pytest.approx(2e-9), "in_dead_time": True}
    # a window the 10 ns gap meets still fails: an on-pulse glitch inside a dead time
    code, doc = _invoke([str(path), "--high", "gate_h", "--low", "gate_l", "--window", "5ns:",
                         "--glitch", "5ns"])
    assert code == 1 and any("on-pulse glitch" in r for r in doc["reasons"])  # type: ignore[attr-defined]


def test_unknown_level_against_an_on_gate_exits_1(tmp_path: Path) -> None:
    path = tmp_path / "x.vcd"
    with path.open("w") as handle, VCDWriter(handle, timescale="1 ns", date="invented") as w:
        h = w.register_var("top", "gate_h", "wire", size=1, init=0)
        lo = w.register_var("top", "gate_l", "wire", size=1, init=1)
        for k in range(4):
            t = 1000 * k + 100
            w.change(lo, t, 0)
            w.change(h, t + 30, 1)
            w.change(h, t + 400, 0)
            w.change(lo, t + 440, 1)
        w.change(h, 4500, "x")  # unknown high side while the low side is on
        w.change(h, 4520, 0)
        w.change(lo, 4600, "z")  # unknown low side while the high side is off: harmless
        w.change(lo, 4610, 1)
    args = [str(path), "--high", "gate_h", "--low", "gate_l"]
    code, doc = _invoke(args)
    assert code == 1 and doc["verdict"] == "fail" and doc["overlaps"] == 0
    assert doc["possible_overlaps"] == 1
    assert doc["possible_overlap_events"] == [{"at_s": pytest.approx(4500e-9),
                                               "duration_s": pytest.approx(20e-9)}]
    text = CliRunner().invoke(cli, ["measure", *args, "--no-diagram"]).output
    assert "POSSIBLE OVERLAPS" in text and "unknown gate level at 4.5 us for 20 ns" in text


def test_sampled_csv_judged_with_one_sample(tmp_path: Path) -> None:
    # S3, invented: 10 ns samples, the to_high gap reads 3 samples = 30 ns, the to_low 4
    rows = ["0,1"] * 5 + ["0,0"] * 3 + ["1,0"] * 20 + ["0,0"] * 4 + ["0,1"] * 5
    path = tmp_path / "sampled.csv"
    path.write_text("# invented capture\n# sample_period: 10ns\ngh,gl\n" + "\n".join(rows) + "\n")
    args = [str(path), "--high", "gh", "--low", "gl"]
    code, doc = _invoke([*args, "--window", "30ns:"])
    assert code == 1 and doc["resolution_s"] == pytest.approx(10e-9)
    assert doc["edges"]["to_high"]["min_s"] == pytest.approx(30e-9)  # type: ignore[index]
    # 30 - 10 = 20 < 30: not proven; 30 - 10 >= 20 and 40 - 10 >= 20: proven
    code, doc = _invoke([*args, "--window", "20ns:"])
    assert code == 0 and doc["verdict"] == "ok"
    text = CliRunner().invoke(cli, ["measure", *args, "--window", "20ns:", "--no-diagram"]).output
    assert "resolution 10 ns" in text and "gap - resolution >= min" in text


def test_resolution_option_overrides(tmp_path: Path) -> None:
    path = _vcd(tmp_path / "ok.vcd", 30, 40)
    args = [str(path), "--high", "gate_h", "--low", "gate_l", "--window", "25ns:50ns"]
    # every change lies on a 10 ns step (10 ticks of 1 ns): taken as the sample period, the
    # safe side, and said: 30 - 10 = 20 < 25
    code, doc = _invoke(args)
    assert code == 1 and doc["resolution_s"] == pytest.approx(10e-9)
    assert "common step" in str(doc["resolution_origin"])
    # the writer is a simulator, exact to its tick: --resolution says so
    code, doc = _invoke([*args, "--resolution", "1ns"])  # 30 - 1 >= 25 and 40 + 1 <= 50
    assert code == 0 and doc["resolution_origin"] == "--resolution"
    # never below the file's own tick
    code, doc = _invoke([*args, "--resolution", "1ps"])
    assert code == 0 and doc["resolution_s"] == pytest.approx(1e-9)
    code, doc = _invoke([*args, "--resolution", "6ns"])  # 30 - 6 = 24 < 25
    assert code == 1 and doc["resolution_s"] == pytest.approx(6e-9)
    assert doc["edges"]["to_high"]["below_window"] == 20  # type: ignore[index]
    assert doc["edges"]["to_low"]["above_window"] == 0  # type: ignore[index]  # 40 + 6 <= 50


def test_missing_edges_with_a_window_are_inconclusive(tmp_path: Path) -> None:
    path = tmp_path / "lost.vcd"
    with path.open("w") as handle, VCDWriter(handle, timescale="1 ns", date="invented") as w:
        h = w.register_var("top", "gate_h", "wire", size=1, init=0)
        lo = w.register_var("top", "gate_l", "wire", size=1, init=1)
        for k in range(4):
            t = 1000 * k + 100
            w.change(lo, t, 0)
            if k != 2:  # period 2: the high side's edges are missing
                w.change(h, t + 30, 1)
                w.change(h, t + 400, 0)
            w.change(lo, t + 440, 1)
    args = [str(path), "--high", "gate_h", "--low", "gate_l"]
    code, doc = _invoke(args)
    assert code == 0 and doc["verdict"] == "ok" and doc["missing_edges"] == 1
    code, doc = _invoke([*args, "--window", "20ns:60ns"])
    assert code == 1 and doc["verdict"] == "inconclusive"
    text = CliRunner().invoke(cli, ["measure", *args, "--window", "20ns:60ns"]).output
    assert text.startswith("inconclusive: shortest gap to_high 30 ns, to_low 40 ns\n")
    assert "missing edge" in text.splitlines()[1]  # the reason right under the answer


def test_truncated_value_change_is_a_one_line_error(tmp_path: Path) -> None:
    path = _vcd(tmp_path / "cut.vcd", 30, 40)
    with path.open("a") as handle:
        handle.write("#20000\n1")  # the file was cut after a value, before its code
    lines_in_file = path.read_text().count("\n") + 1
    proc = _run(["measure", str(path), "--high", "gate_h", "--low", "gate_l"])
    assert proc.returncode == 2 and "Traceback" not in proc.stderr
    assert proc.stderr.strip() == (f"gapforge: error: {path}:{lines_in_file}: value change '1' "
                                   "without an identifier code: the file ends here (truncated?)")


# --- issue 10: the answer first, one vocabulary, progress only at a terminal ------------------

def test_answer_first_and_an_overlap_stays_prominent(tmp_path: Path) -> None:
    path = _vcd(tmp_path / "shoot.vcd", 30, 40, overlap_at=3)
    args = ["measure", str(path), "--high", "gate_h", "--low", "gate_l", "--window", "20ns:60ns"]
    lines = CliRunner().invoke(cli, args).output.splitlines()
    # the high side pulses on for 5 ns 20 ns after the low side came back on: an overlap that
    # is no hand-over, so the shortest gaps stay 30 and 40 ns
    assert lines[0] == "fail: 1 overlap (both gates on); shortest gap to_high 30 ns, to_low 40 ns"
    at = lines.index("OVERLAPS (shoot-through, both gates on): 1")
    assert at < 5 and lines[at + 1] == "  both gates on at 3.56 us for 5 ns"
    plain = CliRunner().invoke(cli, args[:-2]).output.splitlines()
    assert plain[0].startswith("fail: 1 overlap")  # an overlap fails without a window too
    clean = _vcd(tmp_path / "ok.vcd", 30, 40)
    first = CliRunner().invoke(cli, ["measure", str(clean), "--high", "gate_h", "--low",
                                     "gate_l"]).output.splitlines()[0]
    # issue 19: an ok without a window says what it proved, and what it did not judge
    assert first == ("ok: no overlap seen; no window given, so the dead time itself was not "
                     "judged; shortest gap to_high 30 ns, to_low 40 ns")
    doc = json.loads(CliRunner().invoke(cli, ["measure", str(clean), "--high", "gate_h", "--low",
                                              "gate_l", "--json"]).output)
    assert doc["verdict"] == "ok" and doc["window_judged"] is False


def test_progress_bar_only_at_a_terminal(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from gapforge.cli import measure_cmd

    path = _vcd(tmp_path / "ok.vcd", 30, 40)
    monkeypatch.setattr(measure_cmd, "PROGRESS_BYTES", 1)  # every file is "large"
    seen: list[int] = []

    class Bar:
        pos = 0

        def update(self, n: int) -> None:
            self.pos += n
            seen.append(self.pos)

        def render_finish(self) -> None:
            seen.append(-1)

    monkeypatch.setattr(measure_cmd.click, "progressbar", lambda **kw: Bar())
    args = ["measure", str(path), "--high", "gate_h", "--low", "gate_l"]
    # piped (CliRunner's streams are not terminals): no bar
    CliRunner().invoke(cli, args)
    assert seen == []
    monkeypatch.setattr(measure_cmd, "_at_terminal", lambda as_json: not as_json)
    result = CliRunner().invoke(cli, [*args, "--json"])  # JSON: never a bar
    assert seen == [] and json.loads(result.output)["verdict"] == "ok"
    CliRunner().invoke(cli, args)  # at a terminal: the bar reaches the file's size, then ends
    assert seen[-2] == path.stat().st_size and seen[-1] == -1
