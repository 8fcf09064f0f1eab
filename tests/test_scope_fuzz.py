"""Seeded, time-bounded fuzz test of the analog (oscilloscope CSV) reader through
`gapforge measure` (issue 21), with the harness of tests/test_measure_fuzz.py.

Each case mutates a valid scope export (bytes flipped, tokens inserted, ranges deleted,
duplicated, truncated, lines swapped) and sometimes shrinks the reader's chunk so block
boundaries fall everywhere. The promise: exit 0, 1 or 2; on 2 one error line and nothing on
stdout; never a traceback, a hang or a written file. Each case is reproduced by its number.
"""

from __future__ import annotations

import os
import random
from pathlib import Path

import pytest

from gapforge.bench import scope_csv
from test_measure_fuzz import _cases, _check, _mutate, _run

_TOKENS = [b"nan", b"inf", b"1e999", b"-", b"e", b"E+", b"..", b",", b"\r\n", b"# c\n", b"\n\n",
           b" ", b'"', b"\x00", b"\xff", b"s,V,V\n", b"-1e-9", b"9" * 40, b"0x1f", b"1_0"]


def _base() -> bytes:
    rows = []
    for k in range(120):
        t = (k - 20) * 1e-9
        gh = 6.0 if 40 <= k < 80 else 0.0
        gl = 15.0 if k < 30 or k >= 95 else -5.0
        rows.append(f"{t:.6e},{gh:.3e},{gl:.3e},{400.0 if 35 <= k < 88 else 0.0:.2f}")
    return ("# invented fuzz base\nTime,gh,gl,sw\ns,V,V,V\n" + "\n".join(rows) + "\n").encode()


def _token_mutate(rng: random.Random, data: bytes) -> bytes:
    out = bytearray(_mutate(rng, data))
    for _ in range(rng.randint(0, 3)):
        at = rng.randrange(len(out) + 1)
        out[at:at] = rng.choice(_TOKENS)
    return bytes(out)


def test_fuzz_scope_csv(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                        monkeypatch: pytest.MonkeyPatch) -> None:
    base = _base()
    path = tmp_path / "scope.csv"
    for n, rng in enumerate(_cases(2100)):
        path.write_bytes(_token_mutate(rng, base))
        monkeypatch.setattr(scope_csv, "CHUNK_BYTES", rng.choice([64, 500, 4 << 20]))
        before = set(os.listdir(tmp_path))
        argv = ["measure", str(path), "--high", "gh", "--low", "gl", "--json"]
        argv += rng.choice([["--threshold", "3V"], ["--threshold-high", "2V", "--threshold-low",
                                                    "3V"], ["--level", "50%"], []])
        if rng.random() < 0.5:
            argv += ["--hysteresis", rng.choice(["0V", "1V", "30V"])]
        if rng.random() < 0.3:
            argv += ["--node", "sw", "--bus", "400V"]
        if rng.random() < 0.3:
            argv += ["--window", "5ns:30ns"]
        code, out, err = _run(argv, capsys)
        _check(f"scope case {n} ({path.read_bytes()[:60]!r}...)", code, out, err, tmp_path,
               before)
