"""Benchmark of the core pipeline (a script, not a test: run `python tests/benchmarks/bench_core.py`).

Reports, measured in one run, as ratios against `python3 -c 'import click, jinja2'` (the floor
any click + Jinja2 program pays):
- `gapforge build` on each example (goal: under 0.5 s each);
- `gapforge --help` and `gapforge targets` (and whether they import numpy: they must not);
- a cold fit over every code of a 16-bit layout with four dividers (goal: under 50 ms).
"""

from __future__ import annotations

import os
import statistics
import subprocess
import sys
import tempfile
import time
from fractions import Fraction
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
PY = sys.executable

LAYOUT_16BIT_DIV4 = """
format = 1
name = "bench-16bit-div4"
summary = "benchmark only: 16-bit count with four dividers"
register_bits = 32
[clock]
dividers = [1, 2, 4, 8]
divider_field = "div"
[[field]]
name = "count"
role = "both"
offset = 0
width = 16
[[field]]
name = "div"
role = "divider"
offset = 16
width = 2
"""


# As a user's install runs: bytecode cached (some sandboxes set PYTHONDONTWRITEBYTECODE, which
# makes every run recompile every module); one warm-up run writes the cache.
ENV = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}


def wall(cmd: list[str], repeat: int = 5) -> float:
    subprocess.run(cmd, check=False, capture_output=True, cwd=ROOT, env=ENV)
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        subprocess.run(cmd, check=False, capture_output=True, cwd=ROOT, env=ENV)
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def imports_numpy(args: list[str]) -> bool:
    code = (
        f"import sys\nfrom gapforge.cli import main\nsys.argv=['gapforge',*{args!r}]\n"
        "try:\n    main()\nexcept SystemExit:\n    pass\n"
        "sys.stderr.write('NUMPY=%s' % ('numpy' in sys.modules))\n"
    )
    out = subprocess.run([PY, "-c", code], capture_output=True, text=True, cwd=ROOT)
    return "NUMPY=True" in out.stderr


def main() -> None:
    floor = wall([PY, "-c", "import click, jinja2"])
    print(f"floor: python -c 'import click, jinja2'  {floor * 1000:.1f} ms")
    with tempfile.TemporaryDirectory() as tmp:
        for example in sorted((ROOT / "examples").glob("*.toml")):
            t = wall([PY, "-m", "gapforge", "build", str(example), "--out", tmp])
            flag = "ok" if t < 0.5 else "SLOW"
            print(f"build {example.name:24s} {t * 1000:7.1f} ms  = {t / floor:5.2f} x floor  "
                  f"(goal < 500 ms: {flag})")
    for args in (["--help"], ["targets"]):
        t = wall([PY, "-m", "gapforge", *args])
        print(f"gapforge {' '.join(args):10s}        {t * 1000:7.1f} ms  = {t / floor:5.2f} x floor  "
              f"imports numpy: {imports_numpy(args)}")

    sys.path.insert(0, str(ROOT / "gen"))
    import tomllib

    from gapforge.timer.fit import FitRequest, fit
    from gapforge.timer.layouts import parse_layout

    raw = LAYOUT_16BIT_DIV4.encode()
    req = FitRequest(Fraction(160_000_000), Fraction(50, 10**6), Fraction(123456, 10**9),
                     Fraction(98765, 10**9))
    cold = []
    for _ in range(5):
        layout = parse_layout(tomllib.loads(LAYOUT_16BIT_DIV4), raw, "bench", "bench")
        t0 = time.perf_counter()
        result = fit(layout, req)
        cold.append(time.perf_counter() - t0)
        assert result.ok
    t0 = time.perf_counter()
    for _ in range(100):
        fit(layout, req)
    warm = (time.perf_counter() - t0) / 100
    c = statistics.median(cold)
    print(f"fit, 16-bit x 4 dividers, cold (builds the 65536-code table): {c * 1000:.1f} ms "
          f"= {c / floor:.3f} x floor (goal < 50 ms: {'ok' if c < 0.05 else 'SLOW'})")
    print(f"fit, same layout, warm: {warm * 1e6:.0f} us = {warm / floor:.5f} x floor")


if __name__ == "__main__":
    main()
