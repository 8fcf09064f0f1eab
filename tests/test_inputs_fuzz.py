"""Seeded, time-bounded fuzz tests of the design and layout TOML readers through the commands
(issue 14; the quantity parser's own fuzz is in tests/test_quantities.py).

Each case mutates a valid invented design or layout file (the seed is the case number, so any
failure is reproduced by its number) and runs `build`, `window --design`, `targets show` or
`fit` in process. The promise checked: exit 0, 1 or 2; on 2 exactly one short error line naming
the file, nothing on stdout; nothing written unless the exit is 0; never a traceback (any
exception other than the command's exit fails the test with it); never a hang (a per-case
alarm). The budget per reader is a fraction of a second of cases, small enough for CI.
"""

from __future__ import annotations

import json
import random
import signal
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest

from conftest import TARGETS
from gapforge.cli import main

BUDGET_S = 0.5  # wall time per reader; the case count follows from it (at least MIN_CASES)
MIN_CASES = 10
MAX_CASES = 300
CASE_LIMIT_S = 30  # a case running longer is a hang

DESIGN = """# invented fuzz design
format = 1
[timer]
clock = "160MHz"
tolerance = "50ppm"
[pwm]
frequency = "100kHz"
counting = "center"
[dead_time]
source = "window"
rounding = "safe"
[stage]
td_off = "35ns"
t_fall = "20ns"
td_on = "10ns"
prop_delay = "20ns:45ns"
mismatch = "5ns"
isolator_skew = "0ns"
timer_skew = "0ns"
kind = "silicon"
qrr = "0nC"
current = "10A"
loss_budget = "2W"
[[output]]
target = "split-10bit-div1-8"
prefix = "DT"
file = "dt.h"
"""

TOKENS = [
    "[", "]", "[[output]]", "[stage]", "[stage.high]", "=", '"', "'", "\n", "400", '"400"',
    '"1.2uS"', '"160mHZ"', '"+/-2%"', '"\u00b12%"', '"2"', "[" * 40, "]" * 40, "1" * 400,
    "9" * 5000, "nan", "inf", "-inf", "true", "{", "}", ".", "a.b.c.d", '"\\u0000"', "\ufeff",
    '"*/"', "-", "1e400", "0x7fffffffffffffffffff", '"/dev/zero"', '"../x.h"', "#", "\r\n",
    '"' + "x" * 3000 + '"', '"window-within-reference"', '"reference-minimum"', "\x00",
    "segment = [{select = 0, base = 0, multiplier = 1}]", 'encoding = "segmented"',
]


def _mutate(rng: random.Random, text: str) -> bytes:
    out = text
    for _ in range(rng.randint(1, 4)):
        op = rng.randrange(5)
        at = rng.randrange(len(out) + 1)
        if op == 0:  # insert a token
            out = out[:at] + rng.choice(TOKENS) + out[at:]
        elif op == 1:  # delete a range
            out = out[:at] + out[at + rng.randint(1, 30) :]
        elif op == 2:  # replace a value
            lines = out.split("\n")
            k = rng.randrange(len(lines))
            key, sep, _ = lines[k].partition("=")
            if sep:
                lines[k] = f"{key}= {rng.choice(TOKENS)}"
            out = "\n".join(lines)
        elif op == 3:  # duplicate a line
            lines = out.split("\n")
            k = rng.randrange(len(lines))
            lines.insert(k, lines[k])
            out = "\n".join(lines)
        else:  # flip a character
            if out:
                k = min(at, len(out) - 1)
                out = out[:k] + chr(rng.randrange(32, 0x250)) + out[k + 1 :]
    return out.encode("utf-8", "surrogatepass")


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


def _files(folder: Path) -> set[str]:
    return {str(p.relative_to(folder)) for p in folder.rglob("*")}


def _check(case: str, code: int, out: str, err: str, where: str) -> None:
    assert code in (0, 1, 2), f"{case}: exit {code}: {err[-500:]}"
    assert "Traceback" not in out + err, case
    if code == 2:
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("gapforge: error:"), f"{case}: {err!r}"
        assert where in lines[0], f"{case}: the error does not name {where}: {lines[0]}"
        assert len(lines[0]) < 800, f"{case}: error line of {len(lines[0])} characters"
        assert out == "", f"{case}: output on error"
    else:
        json.loads(out)  # a whole JSON document, never a half-printed one


def _cases(seed_base: int) -> Iterator[tuple[int, random.Random]]:
    start = time.monotonic()
    for n in range(MAX_CASES):
        if n >= MIN_CASES and time.monotonic() - start > BUDGET_S:
            return
        yield n, random.Random(seed_base + n)


def test_fuzz_design_files_through_build_and_window(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    design = tmp_path / "d.toml"
    out_dir = tmp_path / "out"
    for n, rng in _cases(9_000):
        design.write_bytes(_mutate(rng, DESIGN))
        before = _files(tmp_path)
        code, out, err = _run(["build", str(design), "--json", "--out", str(out_dir), "--parents"], capsys)
        _check(f"design case {n}", code, out, err, str(design))
        if code != 0:
            assert _files(tmp_path) == before, f"design case {n}: a file was written"
        code, out, err = _run(["window", "--design", str(design), "--json"], capsys)
        _check(f"design case {n} (window)", code, out, err, str(design))


def test_fuzz_layout_files_through_targets_and_fit(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    base = (TARGETS / "shared-8bit-segmented.toml").read_text(encoding="utf-8")
    layout = tmp_path / "lay.toml"
    for n, rng in _cases(5_000):
        layout.write_bytes(_mutate(rng, base))
        before = _files(tmp_path)
        code, out, err = _run(["targets", "show", str(layout), "--clock", "100MHz", "--json"],
                              capsys)
        _check(f"layout case {n}", code, out, err, str(layout))
        code, out, err = _run(["fit", "--clock", "100MHz", "--clock-tol", "0ppm", "--dead-time", "200ns", "--target",
                               str(layout), "--json"], capsys)
        _check(f"layout case {n} (fit)", code, out, err, str(layout))
        assert _files(tmp_path) == before, f"layout case {n}: a file was written"
