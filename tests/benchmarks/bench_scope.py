"""Oscilloscope-export reading speed and memory against numpy's loadtxt, in one run (not a test).

    python tests/benchmarks/bench_scope.py [--points 10000000] [--dir /tmp] [--keep]

Writes an invented 3-channel scope export (time + two gate-source voltages + the switch node,
`%.6e` per value as scope software prints; about 530 MB at 10 M points) to a temporary file that
is deleted afterwards (never commit it), then in separate processes:

- `wc -l` on the same file: the I/O floor;
- `numpy.loadtxt(path, delimiter=",", skiprows=2)`: the baseline, every column as float64;
- gapforge's reader (`bench.scope_csv.blocks`): the same four columns, block by block;
- gapforge end to end (`bench.scope.read_scope` + `measure_capture`): both gates' threshold
  crossings and every gap (the node column is read too, as a third channel would be).

Peak memory is each process's growth of the peak resident set over its baseline after imports
(Linux VmHWM after a reset through /proc/self/clear_refs; elsewhere ru_maxrss). The readers run
in interleaved rounds (`--repeat`, default 2) and each one's best time counts, so a burst of load
on a shared machine does not decide the ratio; the ratio is gapforge's time over loadtxt's,
measured in this run (below 1: faster).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from fractions import Fraction
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "gen"))

TS = 1e-9  # 1 GS/s
PERIOD = 10_000  # samples per PWM period (10 us)


def generate(path: Path, points: int, seed: int = 1) -> None:
    rng = np.random.default_rng(seed)
    block = 500_000
    with path.open("w") as f:
        f.write("Time,gate_h,gate_l,node\ns,V,V,V\n")
        for start in range(0, points, block):
            k = np.arange(start, min(points, start + block))
            t = (k - points // 2) * TS  # negative times too
            phase = k % PERIOD
            gh = np.where((phase > 1000) & (phase < 5000), 6.0, 0.0)
            gl = np.where((phase < 900) | (phase > 5100), 15.0, -5.0)
            node = np.where((phase > 950) & (phase < 5050), 400.0, 0.0)
            data = np.column_stack([t, gh + rng.normal(0, 0.05, k.size),
                                    gl + rng.normal(0, 0.05, k.size), node])
            np.savetxt(f, data, delimiter=",", fmt="%.6e")


def run_loadtxt(path: Path) -> dict[str, object]:
    data = np.loadtxt(path, delimiter=",", skiprows=2)
    return {"rows": int(data.shape[0]), "checksum": _checksum(data[:, 1:])}


def _checksum(values: np.ndarray) -> int:
    """The bits of every value summed modulo 2**64: equal only for identical float64 values
    (whatever the order of the blocks)."""
    return int(np.ascontiguousarray(values).view(np.uint64).sum(dtype=np.uint64))


def run_reader(path: Path) -> dict[str, object]:
    from gapforge.bench.scope_csv import blocks, read_layout

    sf = read_layout(path)
    rows, checksum = 0, 0
    for b in blocks(sf, [0, 1, 2]):
        rows += b.times.size
        checksum = (checksum + _checksum(b.values)) % 2**64
    return {"rows": rows, "checksum": checksum}


def run_end_to_end(path: Path) -> dict[str, object]:
    from gapforge.bench.measure import measure_capture
    from gapforge.bench.scope import Reference, ScopeSettings, read_scope

    th = Reference(Fraction(3))
    cap = read_scope([path], "gate_h", "gate_l", ScopeSettings(th, th, Fraction(1)))
    m = measure_capture(cap.stream)
    return {"to_high": m.to_high.count, "to_low": m.to_low.count}


RUNNERS = {"loadtxt": run_loadtxt, "gapforge-reader": run_reader,
           "gapforge-measure": run_end_to_end}


def _status_kib(key: str) -> int | None:
    try:
        with open("/proc/self/status") as f:
            for line in f:
                if line.startswith(key + ":"):
                    return int(line.split()[1])
    except OSError:
        pass
    return None


def _peak_reset() -> int:
    try:
        with open("/proc/self/clear_refs", "w") as f:
            f.write("5")
        rss = _status_kib("VmRSS")
        if rss is not None:
            return rss
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss


def _peak() -> int:
    hwm = _status_kib("VmHWM")
    return hwm if hwm is not None else resource.getrusage(resource.RUSAGE_SELF).ru_maxrss


def child(name: str, path: Path) -> None:
    import gapforge.bench.measure
    import gapforge.bench.scope  # noqa: F401  (imports count towards the baseline)

    base = _peak_reset()
    start = time.perf_counter()
    result = RUNNERS[name](path)
    elapsed = time.perf_counter() - start
    print(json.dumps({"seconds": elapsed, "peak_mb": (_peak() - base) / 1024, "result": result}))


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--points", type=int, default=10_000_000)
    parser.add_argument("--dir", default=None)
    parser.add_argument("--keep", action="store_true")
    parser.add_argument("--repeat", type=int, default=2, help="interleaved rounds (best counts)")
    parser.add_argument("--child", nargs=2, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(args.child[0], Path(args.child[1]))
        return
    handle, name = tempfile.mkstemp(suffix=".csv", dir=args.dir)
    os.close(handle)
    path = Path(name)
    try:
        t0 = time.perf_counter()
        generate(path, args.points)
        size_mb = path.stat().st_size / 1e6
        print(f"file: {size_mb:.0f} MB, {args.points} points x 3 channels "
              f"(generated in {time.perf_counter() - t0:.0f} s)")
        t0 = time.perf_counter()
        subprocess.run(["wc", "-l", str(path)], check=True, capture_output=True)
        print(f"{'wc -l':<18} {time.perf_counter() - t0:>8.2f} s")
        rows: dict[str, dict] = {}
        for _ in range(args.repeat):  # interleaved rounds; the best time of each reader counts
            for reader in RUNNERS:
                proc = subprocess.run([sys.executable, __file__, "--child", reader, str(path)],
                                      capture_output=True, text=True, check=True)
                row = json.loads(proc.stdout)
                if reader not in rows or row["seconds"] < rows[reader]["seconds"]:
                    rows[reader] = row
        base = float(rows["loadtxt"]["seconds"])
        print(f"{'reader':<18} {'seconds':>8} {'MB/s':>7} {'peak MB':>8} {'vs loadtxt':>10}  result")
        for reader, row in rows.items():
            sec = float(row["seconds"])
            print(f"{reader:<18} {sec:>8.2f} {size_mb / sec:>7.0f} {float(row['peak_mb']):>8.0f} "
                  f"{sec / base:>9.2f}x  {row['result']}")
        same = rows["loadtxt"]["result"] == rows["gapforge-reader"]["result"]
        print(f"reader and loadtxt read identical float64 values (rows, bit checksum): {same}")
    finally:
        if not args.keep:
            path.unlink(missing_ok=True)


if __name__ == "__main__":
    main()
