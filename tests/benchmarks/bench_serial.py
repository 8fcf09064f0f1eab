"""Benchmark: can the serial reader keep up with 2 Mbaud of edge lines? (a script, not a test)

Run `python tests/benchmarks/bench_serial.py`. At 2 Mbaud with 8N1 framing a link carries
2,000,000 / 10 = 200,000 bytes/s. The benchmark writes gapforge protocol-2 edge lines as fast as it
can into a pseudo-terminal pair and reads them with `read_serial` on the other end (the real path:
pyserial, the line decoder, the unwrapping), then checks that every line arrived and reports the
sustained byte rate as a ratio to the 2 Mbaud line rate. It also times the decoder alone on the
same bytes, in process, as the floor of the parsing cost.
"""

from __future__ import annotations

import os
import sys
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "gen"))

from gapforge.bench.serial_protocol import checked  # noqa: E402
from gapforge.bench.serial_stream import LineDecoder, open_port, read_serial  # noqa: E402

LINE_RATE = 2_000_000 / 10  # bytes/s at 2 Mbaud, 8N1
PERIODS = 100_000  # 4 edges and 2 transitions each


def stream_bytes() -> bytes:
    """Invented square-wave pair: 1000-count period, 25-count gaps, a 32-bit counter."""
    lines = [checked("#GFCAP 2 clock_hz=100000000 counter_bits=32").encode() + b"\n"]
    seq = 0
    t = 0
    for _ in range(PERIODS):
        for side, level, dt in ((b"L", b"0", 0), (b"H", b"1", 25), (b"H", b"0", 450), (b"L", b"1", 25)):
            t = (t + dt) & 0xFFFFFFFF
            body = f"{side.decode()}{level.decode()} {t:08X} {seq:02X}"
            lines.append(checked(body).encode() + b"\n")
            seq = (seq + 1) & 0xFF
        t += 500
    return b"".join(lines)


def main() -> None:
    data = stream_bytes()
    n_lines = data.count(b"\n") - 1

    t0 = time.perf_counter()
    decoder = LineDecoder()
    for i in range(0, len(data), 4096):
        decoder.feed(data[i:i + 4096])
    decoder.finish()
    t_decode = time.perf_counter() - t0
    print(f"decoder alone: {len(data) / t_decode / 1e6:.2f} MB/s = "
          f"{len(data) / t_decode / LINE_RATE:.1f} x the 2 Mbaud line rate "
          f"({decoder.status.edges} of {n_lines} edges)")

    master, slave = os.openpty()
    import tty

    tty.setraw(slave)

    def writer() -> None:
        view = memoryview(data)
        while view:
            written = os.write(master, view[:4096])
            view = view[written:]

    # open the port first (opening a tty may drop what was buffered), then start writing
    link = open_port(os.ttyname(slave), 2_000_000)
    thread = threading.Thread(target=writer, daemon=True)
    t0 = time.perf_counter()
    thread.start()
    result = read_serial(os.ttyname(slave), 2_000_000, idle_timeout_s=1.0, port=link)
    elapsed = time.perf_counter() - t0 - 1.0  # the idle timeout that ended the read
    thread.join(timeout=5)
    os.close(master)
    got = result.status.edges
    print(f"pty + read_serial: {len(data) / elapsed / 1e6:.2f} MB/s = "
          f"{len(data) / elapsed / LINE_RATE:.1f} x the 2 Mbaud line rate; "
          f"{got} of {n_lines} edges, lost lines {result.status.lost_lines}, "
          f"garbage {result.status.garbage} {result.status.first_garbage!r}; stopped: {result.stop_reason}")
    print("keeps up with 2 Mbaud" if got == n_lines and len(data) / elapsed > LINE_RATE
          else "DOES NOT keep up with 2 Mbaud")


if __name__ == "__main__":
    main()
