"""VCD reading speed and memory, gapforge against other readers, in one run (not a test).

    python tests/benchmarks/bench_vcd.py [--periods 2000000] [--dir /tmp] [--keep]

Writes an invented half-bridge capture (two gates, 1 ps timescale, 10 us period, dead times
30-60 ns, four edges per period; about 150 MB for 2 million periods) to a temporary file that is
deleted afterwards (never commit it), then times each reader end to end - from the file to
per-signal change arrays to the dead times (gapforge.bench.measure on the arrays for all of them):

- `wc -l` on the same file: the I/O floor;
- a plain per-line Python parser;
- pyvcd's tokenizer (pure Python, `pip install pyvcd`);
- pywellen (compiled Rust core, `pip install pywellen`), installed only for this benchmark.

Each reader runs in its own process; peak memory is the growth of that process's peak resident
set over its baseline after imports (Linux: VmHWM after resetting it through
/proc/self/clear_refs; elsewhere resource.getrusage ru_maxrss). Missing optional readers are
skipped and say so.
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
from pathlib import Path
from typing import Any

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "gen"))

PERIOD_PS = 10_000_000


def generate(path: Path, periods: int, seed: int = 1) -> int:
    rng = np.random.default_rng(seed)
    edges = 0
    with path.open("w") as f:
        f.write("$comment invented benchmark capture $end\n$timescale 1ps $end\n"
                "$scope module bench $end\n$var wire 1 ! gate_h $end\n$var wire 1 \" gate_l $end\n"
                "$upscope $end\n$enddefinitions $end\n#0\n$dumpvars\n0!\n1\"\n$end\n")
        block = 100_000
        for start in range(0, periods, block):
            n = min(block, periods - start)
            base = (np.arange(start, start + n, dtype=np.int64) * PERIOD_PS) + 1_000_000
            dh = rng.integers(30_000, 60_001, n)
            dl = rng.integers(30_000, 60_001, n)
            t = np.stack([base, base + dh, base + dh + 4_000_000, base + dh + 4_000_000 + dl], 1)
            codes = ['0"', "1!", "0!", '1"']
            lines = [f"#{a}\n{codes[0]}\n#{b}\n{codes[1]}\n#{c}\n{codes[2]}\n#{d}\n{codes[3]}\n"
                     for a, b, c, d in t.tolist()]
            f.write("".join(lines))
            edges += 4 * n
    return edges


def _arrays(pairs: list[tuple[int, int]]) -> tuple[np.ndarray, np.ndarray]:
    if not pairs:
        return np.zeros(0, np.int64), np.zeros(0, np.uint8)
    t, v = zip(*pairs, strict=True)
    return np.asarray(t, dtype=np.int64), np.asarray(v, dtype=np.uint8)


def _finish(tick_ps: int, high: tuple[np.ndarray, np.ndarray], low: tuple[np.ndarray, np.ndarray],
            end: int) -> dict[str, object]:
    from fractions import Fraction

    from gapforge.bench.capture import make_capture
    from gapforge.bench.measure import measure_capture

    cap = make_capture(Fraction(tick_ps, 10**12), high, low, end=end)
    m = measure_capture(cap)
    return {"to_high": m.to_high.count, "to_low": m.to_low.count,
            "min_ps": [int(m.to_high.gaps_ticks.min()), int(m.to_low.gaps_ticks.min())],
            "max_ps": [int(m.to_high.gaps_ticks.max()), int(m.to_low.gaps_ticks.max())],
            "edges": int(high[0].size + low[0].size)}


def run_gapforge(path: Path) -> dict[str, object]:
    """What `gapforge measure` does: the VCD streamed chunk by chunk into the measurement."""
    from gapforge.bench.capture import open_capture
    from gapforge.bench.measure import measure_capture

    return _ours(measure_capture(open_capture(path, "bench.gate_h", "bench.gate_l")))


def run_gapforge_whole(path: Path) -> dict[str, object]:
    """The capture loaded whole first (load_capture, as `gapforge report --capture` does)."""
    from gapforge.bench.capture import load_capture
    from gapforge.bench.measure import measure_capture

    return _ours(measure_capture(load_capture(path, "bench.gate_h", "bench.gate_l")))


def _ours(m: Any) -> dict[str, object]:
    cap_edges = int(m.to_high.count + m.to_low.count)
    return {"to_high": m.to_high.count, "to_low": m.to_low.count,
            "min_ps": [int(m.to_high.gaps_ticks.min()), int(m.to_low.gaps_ticks.min())],
            "max_ps": [int(m.to_high.gaps_ticks.max()), int(m.to_low.gaps_ticks.max())],
            "transitions": cap_edges}


def run_lines(path: Path) -> dict[str, object]:
    """A plain per-line parser for the simple syntax of this file."""
    high: list[tuple[int, int]] = []
    low: list[tuple[int, int]] = []
    t = 0
    in_body = False
    with path.open() as f:
        for line in f:
            if not in_body:
                in_body = line.startswith("$enddefinitions")
                continue
            c = line[0]
            if c == "#":
                t = int(line[1:])
            elif c in "01":
                code = line[1:].strip()
                if code == "!":
                    high.append((t, int(c)))
                elif code == '"':
                    low.append((t, int(c)))
    return _finish(1, _arrays(high), _arrays(low), t)


def run_pyvcd(path: Path) -> dict[str, object]:
    from vcd.reader import TokenKind, tokenize

    high: list[tuple[int, int]] = []
    low: list[tuple[int, int]] = []
    t = 0
    with path.open("rb") as f:
        for token in tokenize(f):
            if token.kind is TokenKind.CHANGE_TIME:
                t = int(token.data)
            elif token.kind is TokenKind.CHANGE_SCALAR:
                code, value = token.scalar_change.id_code, token.scalar_change.value
                if code == "!":
                    high.append((t, int(value)))
                elif code == '"':
                    low.append((t, int(value)))
    return _finish(1, _arrays(high), _arrays(low), t)


def run_pywellen(path: Path) -> dict[str, object]:
    import pywellen

    w = pywellen.Waveform(str(path))
    sig = {v.full_name: v.signal for v in w.all_vars()}
    high = _arrays([(t, int(v)) for t, v in sig["bench.gate_h"]])
    low = _arrays([(t, int(v)) for t, v in sig["bench.gate_l"]])
    end = int(max(high[0][-1], low[0][-1]))
    return _finish(1, high, low, end)


RUNNERS = {"gapforge": run_gapforge, "gf-whole": run_gapforge_whole, "per-line": run_lines,
           "pyvcd": run_pyvcd, "pywellen": run_pywellen}


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
    """Baseline for the peak: on Linux the peak RSS (VmHWM) is reset to the current RSS, since a
    child started by subprocess can inherit its parent's high-water mark (ru_maxrss would then
    hide any growth below the parent's size); elsewhere ru_maxrss."""
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
    # imports count towards the baseline, not the reader
    import gapforge.bench.measure
    import gapforge.bench.vcd  # noqa: F401
    if name == "pyvcd":
        import vcd.reader  # noqa: F401
    if name == "pywellen":
        import pywellen  # noqa: F401
    base_kib = _peak_reset()
    start = time.perf_counter()
    result = RUNNERS[name](path)
    elapsed = time.perf_counter() - start
    peak_kib = _peak()
    print(json.dumps({"seconds": elapsed, "peak_mb": (peak_kib - base_kib) / 1024,
                      "result": result}))


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--periods", type=int, default=2_000_000)
    parser.add_argument("--dir", default=None)
    parser.add_argument("--keep", action="store_true")
    parser.add_argument("--skip", default="", help="comma-separated readers to leave out")
    parser.add_argument("--child", nargs=2, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(args.child[0], Path(args.child[1]))
        return
    handle, name = tempfile.mkstemp(suffix=".vcd", dir=args.dir)
    os.close(handle)
    path = Path(name)
    try:
        t0 = time.perf_counter()
        edges = generate(path, args.periods)
        size_mb = path.stat().st_size / 1e6
        print(f"file: {size_mb:.1f} MB, {edges} edges, {args.periods} periods "
              f"(generated in {time.perf_counter() - t0:.1f} s)")
        t0 = time.perf_counter()
        subprocess.run(["wc", "-l", str(path)], check=True, capture_output=True)
        wc = time.perf_counter() - t0
        rows: dict[str, dict[str, object]] = {}
        skip = set(filter(None, args.skip.split(",")))
        for reader in RUNNERS:
            if reader in skip:
                continue
            proc = subprocess.run([sys.executable, __file__, "--child", reader, str(path)],
                                  capture_output=True, text=True, check=False)
            if proc.returncode != 0:
                print(f"{reader}: skipped ({proc.stderr.strip().splitlines()[-1:]})")
                continue
            rows[reader] = json.loads(proc.stdout)
        ours = rows["gapforge"]
        ref = ours["result"]
        print(f"{'reader':<10} {'seconds':>8} {'MB/s':>8} {'Medges/s':>9} {'peak MB':>8} "
              f"{'peak/file':>9} {'gapforge speed-up':>18}  same result")
        print(f"{'wc -l':<10} {wc:>8.2f} {size_mb / wc:>8.0f} {'':>9} {'':>8} {'':>9} "
              f"{wc / float(ours['seconds']):>17.2f}x")  # type: ignore[arg-type]
        for reader, row in rows.items():
            sec = float(row["seconds"])  # type: ignore[arg-type]
            peak = float(row["peak_mb"])  # type: ignore[arg-type]
            res = row["result"]
            same = all(res[k] == ref[k] for k in ("to_high", "to_low", "min_ps", "max_ps"))  # type: ignore[index]
            print(f"{reader:<10} {sec:>8.2f} {size_mb / sec:>8.1f} {edges / sec / 1e6:>9.2f} "
                  f"{peak:>8.1f} {peak / size_mb:>9.2f} "
                  f"{sec / float(ours['seconds']):>17.2f}x  {same}")  # type: ignore[arg-type]
        print(f"gapforge result: {ref}")
        sec = float(ours["seconds"])  # type: ignore[arg-type]
        goals = [f"{size_mb / sec:.0f} MB/s (goal >= 100)",
                 f"peak/file {float(ours['peak_mb']) / size_mb:.2f} (goal < 0.5)"]  # type: ignore[arg-type]
        for reader, factor in (("per-line", 5), ("pywellen", 3)):
            if reader in rows:
                ratio = float(rows[reader]["seconds"]) / sec  # type: ignore[arg-type]
                goals.append(f"{ratio:.1f}x {reader} (goal >= {factor}x)")
        print("goals: " + "; ".join(goals))
    finally:
        if not args.keep:
            path.unlink(missing_ok=True)


if __name__ == "__main__":
    main()
