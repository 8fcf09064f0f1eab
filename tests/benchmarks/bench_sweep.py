"""Benchmark: `gapforge sweep` over 10 layouts x 200 timer clocks x every divider.

Budget (issue 4): under 2 s. The figures are also printed as ratios against the start-up of
`python3 -c 'import click, jinja2'`, measured in the same run, so they can be compared across
machines. Exit 1 if the end-to-end command is over budget.

Run: python3 benchmarks/bench_sweep.py
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
from fractions import Fraction
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "gen"))

from gapforge.timer.layouts import builtin_names, load_layout  # noqa: E402
from gapforge.timer.sweep import parse_clocks, sweep  # noqa: E402

BUDGET_S = 2.0
CLOCKS = "50MHz:249MHz:1MHz"  # 200 clocks
WINDOW = "90ns:1us"
TOL = "1%"

# Invented user layouts (generic shapes of our own) to make ten layouts with the six built-ins.
USER_LAYOUTS = {
    "bench-split-12bit-div8": """
format = 1
name = "bench-split-12bit-div8"
summary = "invented: per-edge 12-bit counts, 3-bit divider field"
register_bits = 32
[clock]
sub_steps = 1
dividers = [1, 2, 4, 8, 16, 32, 64, 128]
divider_field = "div"
[[field]]
name = "rise_count"
role = "to_high"
offset = 0
width = 12
[[field]]
name = "fall_count"
role = "to_low"
offset = 12
width = 12
[[field]]
name = "div"
role = "divider"
offset = 24
width = 3
""",
    "bench-shared-10bit-plus-two": """
format = 1
name = "bench-shared-10bit-plus-two"
summary = "invented: one shared 10-bit count to which the hardware adds two"
register_bits = 16
[clock]
sub_steps = 1
dividers = [1]
[[field]]
name = "gap"
role = "both"
offset = 0
width = 10
add = 2
""",
    "bench-split-8bit-subclock": """
format = 1
name = "bench-split-8bit-subclock"
summary = "invented: per-edge 8-bit counts in eighths of a clock, divider 1 or 4"
register_bits = 32
[clock]
sub_steps = 8
dividers = [1, 4]
divider_field = "scale"
[[field]]
name = "rise_fine"
role = "to_high"
offset = 0
width = 8
[[field]]
name = "fall_fine"
role = "to_low"
offset = 8
width = 8
[[field]]
name = "scale"
role = "divider"
offset = 16
width = 1
""",
    "bench-shared-7bit-segmented": """
format = 1
name = "bench-shared-7bit-segmented"
summary = "invented: shared 7-bit code, two ranges"
register_bits = 16
[clock]
sub_steps = 1
dividers = [1, 2]
divider_field = "div"
[[field]]
name = "gap"
role = "both"
offset = 0
width = 7
encoding = "segmented"
select_bits = 1
segment = [ { select = 0, base = 0, multiplier = 1 }, { select = 1, base = 64, multiplier = 4 } ]
[[field]]
name = "div"
role = "divider"
offset = 8
width = 1
""",
}


def timed(args: list[str], env: dict[str, str], repeat: int = 3) -> float:
    """Best of `repeat` wall-clock runs of a subprocess (seconds)."""
    best = float("inf")
    for _ in range(repeat):
        start = time.perf_counter()
        subprocess.run(args, env=env, check=False, stdout=subprocess.DEVNULL)
        best = min(best, time.perf_counter() - start)
    return best


def main() -> int:
    env = {**os.environ, "PYTHONPATH": str(ROOT / "gen")}
    with tempfile.TemporaryDirectory() as tmp:
        paths = []
        for name, text in USER_LAYOUTS.items():
            path = Path(tmp) / f"{name}.toml"
            path.write_text("# invented benchmark layout\n" + text, encoding="utf-8")
            paths.append(str(path))
        names = builtin_names()[:6] + paths
        assert len(names) == 10, names

        baseline = timed([sys.executable, "-c", "import click, jinja2"], env)

        # In-process: load once, then the sweep itself.
        start = time.perf_counter()
        layouts = [load_layout(n) for n in names]
        loaded = time.perf_counter() - start
        clocks = parse_clocks([CLOCKS])
        assert len(clocks) == 200
        limits = {e: (Fraction(90, 10**9), Fraction(1, 10**6)) for e in ("to_high", "to_low")}
        start = time.perf_counter()
        result = sweep(layouts, clocks, Fraction(1, 100), limits)
        swept = time.perf_counter() - start

        # End to end: the command as a user runs it.
        args = [sys.executable, "-m", "gapforge", "sweep", "--clocks", CLOCKS, "--window", WINDOW,
                "--clock-tol", TOL, "--csv"]
        for n in names:
            args += ["--target", n]
        whole = timed(args, env)

    print(f"points: {result.points} ({len(layouts)} layouts x {len(clocks)} clocks x dividers), "
          f"{len(result.feasible)} feasible")
    print(f"baseline  python3 -c 'import click, jinja2': {baseline * 1000:8.1f} ms")
    print(f"load 10 layouts (in process):           {loaded * 1000:8.1f} ms  "
          f"ratio {loaded / baseline:6.2f}")
    print(f"sweep() (in process):                   {swept * 1000:8.1f} ms  "
          f"ratio {swept / baseline:6.2f}  ({swept / result.points * 1e6:.0f} us per point)")
    print(f"gapforge sweep --csv (end to end):      {whole * 1000:8.1f} ms  "
          f"ratio {whole / baseline:6.2f}  budget {BUDGET_S:.1f} s")
    ok = whole < BUDGET_S
    print("within budget" if ok else "OVER BUDGET")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
