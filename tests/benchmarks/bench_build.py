"""Benchmark of `gapforge build` as a firmware build runs it (issue 22; a script, not a test:
run `python tests/benchmarks/bench_build.py`).

Measured in one run, as ratios against the floor `python -c "import numpy, click, jinja2"` (what
any Python tool using those libraries pays before doing anything):
- an up-to-date `build --check --self-test --record` of each shipped example (goal: at most
  1.5x the floor);
- a full `build --self-test --record` of each example into an empty folder (goal: at most 2x).
Each figure is the median of seven runs after one warm-up run (bytecode cached, as installed).
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
REPEAT = 7


def wall(cmd: list[str], before: list[str] | None = None) -> float:
    subprocess.run(cmd, check=False, capture_output=True, cwd=ROOT, env=ENV)
    times = []
    for _ in range(REPEAT):
        if before:
            shutil.rmtree(before[0], ignore_errors=True)
        t0 = time.perf_counter()
        subprocess.run(cmd, check=False, capture_output=True, cwd=ROOT, env=ENV)
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main() -> int:
    floor = wall([PY, "-c", "import numpy, click, jinja2"])
    print(f"floor (import numpy, click, jinja2): {floor * 1000:.0f} ms")
    worst_check = worst_build = 0.0
    with tempfile.TemporaryDirectory() as tmp:
        for design in sorted((ROOT / "examples").glob("*.toml")):
            out = Path(tmp) / design.stem
            base = [PY, "-m", "gapforge", "build", str(design), "--out", str(out), "--parents",
                    "--self-test", "--record"]
            full = wall(base, before=[str(out)])
            subprocess.run(base, check=True, capture_output=True, cwd=ROOT, env=ENV)
            check = wall([*base, "--check"])
            worst_check = max(worst_check, check / floor)
            worst_build = max(worst_build, full / floor)
            print(f"{design.name:24s} full build {full / floor:4.2f}x   "
                  f"up-to-date --check {check / floor:4.2f}x")
    print(f"worst: full build {worst_build:.2f}x (goal <= 2), --check {worst_check:.2f}x "
          "(goal <= 1.5)")
    return 0 if worst_build <= 2 and worst_check <= 1.5 else 1


if __name__ == "__main__":
    sys.exit(main())
