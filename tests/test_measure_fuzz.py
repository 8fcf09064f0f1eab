"""Seeded, time-bounded fuzz tests of the capture parsers through `gapforge measure` (issue 14).

Each case mutates a valid VCD, CSV or serial stream (the seeds are the case numbers, so any
failure is reproduced by its number) and runs the command in process. The promise checked: exit
0, 1 or 2; on 2 exactly one error line on stderr, nothing on stdout and no file written; on 0
or 1 a JSON document with a verdict; never a traceback (any exception other than the command's
exit fails the test with it); never a hang (a per-case alarm). The budget per parser is a few
seconds of cases, small enough for CI.
"""

from __future__ import annotations

import json
import os
import random
import re
import signal
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest

from gapforge.bench.serial_protocol import checked
from gapforge.cli import main

BUDGET_S = 0.5  # wall time per parser; the case count follows from it (at least MIN_CASES)
MIN_CASES = 10
MAX_CASES = 400
CASE_LIMIT_S = 30  # a case running longer is a hang

_VCD = ("$date invented $end\n$timescale 1ns $end\n$scope module top $end\n"
        "$var wire 1 ! gate_h $end\n$var wire 1 \" gate_l $end\n$var wire 4 # bus [3:0] $end\n"
        "$upscope $end\n$enddefinitions $end\n$dumpvars 0! 1\" b0000 # $end\n"
        + "".join(f"#{k * 1000 + 100}\n0\"\n#{k * 1000 + 130}\n1!\nb{k % 16:04b} #\n"
                  f"#{k * 1000 + 600}\n0!\n#{k * 1000 + 640}\n1\"\n" for k in range(6)))
_CSV = ("# invented capture\ntime_ns,signal,level\n0,gh,0\n0,gl,1\n"
        + "".join(f"{k * 1000 + 100},gl,0\n{k * 1000 + 130.5},gh,1\n{k * 1000 + 600},gh,0\n"
                  f"{k * 1000 + 640},gl,1\n" for k in range(6)))
_SAMPLED = "# sample_period: 10ns\ngh,gl\n" + "0,1\n0,0\n1,0\n1,0\n0,0\n0,1\n" * 5
# issue 20: a logic analyser's '#'-commented export (rate, names with spaces) and scope-style
# times with a sign and an exponent
_RATE = ("# Samplerate: 16 MHz\n# Channels (2/8): High Side, Low Side\nHigh Side,Low Side\n"
         + "0,1\n0,0\n1,0\n1,0\n0,0\n0,1\n" * 5)
_EXPONENT = ("time_s,gh,gl\n" + "".join(f"{(k - 20) * 1e-8:.3E},{int(k % 6 in (2, 3))},"
                                        f"{int(k % 6 in (0, 5))}\n" for k in range(30)))
_TOKENS = [b"$end", b"$comment", b"$dumpoff", b"$dumpon", b"#", b"#99999999999999999999",
           b"#-5", b"b", b"b1x0z", b"r1.5", b"x!", b"1", b"$var", b"$scope", b"$upscope",
           b"\x00", b"\xff\xfe", b"$timescale 7ns $end", b"\n", b" ", b",", b",,,", b"x", b"z",
           b"time_ps", b"-1", b"1e9", b"." * 3, b"9" * 70, b"*/", b"\r\n", b"#GFCAP 2",
           b"H1 FFFFFFFF 00", b"T 0 00 *00", b"# sample_period: 0s", b"\xe2\x80\xae"]


def _mutate(rng: random.Random, data: bytes) -> bytes:
    out = bytearray(data)
    for _ in range(rng.randint(1, 4)):
        op = rng.randrange(6)
        at = rng.randrange(len(out) + 1)
        if op == 0 and out:  # flip a byte
            out[min(at, len(out) - 1)] = rng.randrange(256)
        elif op == 1:  # insert a token
            out[at:at] = rng.choice(_TOKENS)
        elif op == 2:  # delete a range
            del out[at : at + rng.randint(1, 40)]
        elif op == 3:  # truncate
            del out[at:]
        elif op == 4:  # duplicate a range
            out[at:at] = out[at : at + rng.randint(1, 80)]
        else:  # swap two lines
            lines = bytes(out).split(b"\n")
            if len(lines) > 2:
                i, j = rng.randrange(len(lines)), rng.randrange(len(lines))
                lines[i], lines[j] = lines[j], lines[i]
                out = bytearray(b"\n".join(lines))
    return bytes(out)


class _Hang(Exception):
    pass


@contextmanager
def _alarm(seconds: int) -> Iterator[None]:
    if not hasattr(signal, "SIGALRM"):
        yield
        return

    def fire(_signum: int, _frame: Any) -> None:
        raise _Hang(f"a case ran longer than {seconds} s")

    old = signal.signal(signal.SIGALRM, fire)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


def _run(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    with _alarm(CASE_LIMIT_S):
        try:
            main(argv)
            code: Any = 0
        except SystemExit as stop:
            code = stop.code
    out, err = capsys.readouterr()
    return int(code or 0), out, err


def _check(case: str, code: int, out: str, err: str, folder: Path, before: set[str]) -> None:
    assert code in (0, 1, 2), f"{case}: exit {code}: {err[-500:]}"
    assert "Traceback" not in out + err, case
    if code == 2:
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("gapforge: error:"), f"{case}: {err!r}"
        assert len(lines[0]) < 500, f"{case}: error line of {len(lines[0])} characters"
        assert out == "", f"{case}: output on error"
        assert not re.search(r"(^|[\s(:,=])b'", lines[0]), f"{case}: a bytes literal: {lines[0]}"
    else:
        doc = json.loads(out)
        assert doc["verdict"] in ("ok", "fail", "inconclusive"), case
    assert set(os.listdir(folder)) == before, f"{case}: a file was written"


def _cases(seed_base: int) -> Iterator[random.Random]:
    start = time.monotonic()
    for n in range(MAX_CASES):
        if n >= MIN_CASES and time.monotonic() - start > BUDGET_S:
            return
        yield random.Random(seed_base + n)


@pytest.mark.parametrize("kind,base,names", [
    ("vcd", _VCD.encode(), ["gate_h", "gate_l"]),
    ("vcd", _VCD.encode(), ["top.bus[2]", "gate_l"]),
    ("csv", _CSV.encode(), ["gh", "gl"]),
    ("csv", _SAMPLED.encode(), ["gh", "gl"]),
    ("csv", _RATE.encode(), ["High Side", "Low Side"]),
    ("csv", _EXPONENT.encode(), ["gh", "gl"]),
])
def test_fuzz_capture_files(tmp_path: Path, capsys: pytest.CaptureFixture[str], kind: str,
                            base: bytes, names: list[str]) -> None:
    path = tmp_path / f"capture.{kind}"
    before = {path.name}
    for n, rng in enumerate(_cases(1000 * len(names[0]) + len(base))):
        path.write_bytes(_mutate(rng, base))
        before = set(os.listdir(tmp_path))
        argv = ["measure", str(path), "--high", names[0], "--low", names[1], "--json"]
        if rng.random() < 0.5:
            argv += ["--window", "20ns:60ns"]
        if rng.random() < 0.2:
            argv += ["--glitch", "5ns"]
        code, out, err = _run(argv, capsys)
        _check(f"{kind} case {n} ({path.read_bytes()[:60]!r}...)", code, out, err, tmp_path,
               before)


class _FakePort:
    """A serial port that hands out fixed bytes in random pieces, then nothing."""

    def __init__(self, data: bytes, rng: random.Random) -> None:
        self.data = data
        self.rng = rng

    @property
    def in_waiting(self) -> int:
        return len(self.data)

    def read(self, size: int) -> bytes:
        take = min(size, self.rng.randint(1, 300))
        piece, self.data = self.data[:take], self.data[take:]
        return piece

    def close(self) -> None:
        pass


def _serial_base(rng: random.Random) -> bytes:
    lines = [checked("#GFCAP 2 clock_hz=100000000 counter_bits=16")]
    seq, t = 0, rng.randrange(1 << 16)
    for _ in range(8):
        for kind, dt in (("L0", 0), ("H1", 7), ("H0", 3000), ("L1", 9)):
            t = (t + dt) & 0xFFFF
            lines.append(checked(f"{kind} {t:04X} {seq & 0xFF:02X}"))
            seq += 1
        t += 20000
    if rng.random() < 0.3:  # two lines in interrupt order
        k = rng.randrange(1, len(lines) - 1)
        lines[k], lines[k + 1] = lines[k + 1], lines[k]
    return ("\n".join(lines) + "\n").encode()


def test_fuzz_serial_stream(monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str],
                            tmp_path: Path) -> None:
    from gapforge.bench import serial_stream

    port: list[_FakePort] = []
    monkeypatch.setattr(serial_stream, "open_port", lambda url, baud: port[0])
    monkeypatch.chdir(tmp_path)
    for n, rng in enumerate(_cases(77)):
        data = _mutate(rng, _serial_base(rng))
        port[:] = [_FakePort(data, rng)]
        argv = ["measure", "--serial", "fake://", "--idle-timeout", "1ms", "--json"]
        if rng.random() < 0.5:
            argv += ["--window", "50ns:100ns"]
        if rng.random() < 0.3:
            argv += ["--count", str(rng.randint(1, 20))]
        code, out, err = _run(argv, capsys)
        _check(f"serial case {n} ({data[:60]!r}...)", code, out, err, tmp_path, set())


def test_fuzz_line_decoder_never_raises() -> None:
    # the decoder alone, fed random bytes in random pieces: no exception, counts consistent
    from gapforge.bench.serial_stream import LineDecoder

    for rng in _cases(4242):
        data = _mutate(rng, _serial_base(rng)) + bytes(rng.randrange(256) for _ in range(50))
        dec = LineDecoder(stop_after=rng.choice([None, 3, 10]))
        at = 0
        while at < len(data):
            step = rng.randint(1, 64)
            dec.feed(data[at : at + step])
            at += step
        dec.finish()
        cap = dec.capture("fuzz")
        assert dec.status.edges == len(dec.times) and dec.status.lost_lines >= 0
        if cap is not None:
            assert all(int(a) <= int(b) for a, b in zip(cap.high_times[:-1], cap.high_times[1:], strict=True))

