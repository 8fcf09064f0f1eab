"""Benchmark of `gapforge build` as a firmware build runs it (issue 22; a script, not a test:
run `python tests/benchmarks/bench_build.py`).

Measured in one run, as ratios against the floor `python -c "import numpy, click, jinja2"` (what
any Python tool using those libraries pays before doing anything):
- an up-to-date `build --check --self-test --record` of each shipped example (goal: at most
  1.5x the floor);
- a full `build --self-test --record` of each example into an empty folder (goal: at most 2x).
Each figure is the median of eleven runs after one warm-up run (bytecode cached, as installed).
The runs are interleaved (a floor run before each example's full build and check, eleven times
over; the floor is the median of all its runs), so a change in the machine's load during the run
moves the floor and the commands alike.
Exit status 1 when a goal is missed.
"""

from __future__ import annotations

import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
PY = sys.executable
ENV = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
REPEAT = 11


def _run(cmd: list[str]) -> float:
    t0 = time.perf_counter()
    subprocess.run(cmd, check=False, capture_output=True, cwd=ROOT, env=ENV)
    return time.perf_counter() - t0


def main() -> int:
    floor_cmd = [PY, "-c", "import numpy, click, jinja2"]
    with tempfile.TemporaryDirectory() as tmp:
        jobs: dict[str, tuple[list[str], list[str], Path]] = {}
        for design in sorted((ROOT / "examples").glob("*.toml")):
            out = Path(tmp) / design.stem
            base = [PY, "-m", "gapforge", "build", str(design), "--out", str(out), "--parents",
                    "--self-test", "--record"]
            jobs[design.name] = (base, [*base, "--check"], out)
        floor: list[float] = []
        full: dict[str, list[float]] = {name: [] for name in jobs}
        check: dict[str, list[float]] = {name: [] for name in jobs}
        _run(floor_cmd)  # warm-up: bytecode written, files cached
        for base, check_cmd, _out in jobs.values():
            subprocess.run(base, check=True, capture_output=True, cwd=ROOT, env=ENV)
            _run(check_cmd)
        for _ in range(REPEAT):
            for name, (base, check_cmd, out) in jobs.items():
                floor.append(_run(floor_cmd))
                shutil.rmtree(out, ignore_errors=True)
                full[name].append(_run(base))  # into an empty folder
                check[name].append(_run(check_cmd))  # what it just wrote: up to date
        floor_s = statistics.median(floor)
        print(f"floor (import numpy, click, jinja2): {floor_s * 1000:.0f} ms")
        worst_check = worst_build = 0.0
        for name in jobs:
            f = statistics.median(full[name]) / floor_s
            c = statistics.median(check[name]) / floor_s
            worst_build, worst_check = max(worst_build, f), max(worst_check, c)
            print(f"{name:24s} full build {f:4.2f}x   up-to-date --check {c:4.2f}x")
    print(f"worst: full build {worst_build:.2f}x (goal <= 2), --check {worst_check:.2f}x "
          "(goal <= 1.5)")
    return 0 if worst_build <= 2 and worst_check <= 1.5 else 1


if __name__ == "__main__":
    sys.exit(main())
