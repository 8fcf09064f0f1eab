"""The C side of the serial capture protocol: a line formatter for the capture firmware.

Python computes every constant (line lengths, the counter type, the header text); the templates
only lay them out. Rendering returns {file name: text}; only the CLI writes files.
"""

from __future__ import annotations

from gapforge import __version__
from gapforge.base import caution
from gapforge.base.errors import GapforgeError
from gapforge.bench.serial_stream import MAX_LINE, PROTOCOL
from gapforge.outputs.templating import environment

COUNTER_TYPES = {16: "uint16_t", 32: "uint32_t", 64: "uint64_t"}
HEADER_NAME = "gapforge_capture_fmt.h"
SOURCE_NAME = "gapforge_capture_fmt.c"
CAUTION = "\n * ".join(caution.LINES)  # wrapped inside a C block comment


def render_capture_helper(counter_bits: int = 32) -> dict[str, str]:
    """Header and source of the capture line formatter for a counter of `counter_bits` bits."""
    if counter_bits not in COUNTER_TYPES:
        raise GapforgeError(
            f"counter width {counter_bits} is not supported (16, 32 or 64 bits)", "--counter-bits"
        )
    digits = (counter_bits + 3) // 4
    header_prefix = f"#GFCAP {PROTOCOL} clock_hz="
    header_suffix = f" counter_bits={counter_bits}\\n"  # C escape for the newline
    # longest header: a 10-digit clock (uint32_t) and the newline
    header_max = len(header_prefix) + 10 + len(f" counter_bits={counter_bits}") + 1
    edge_len = 2 + 1 + digits + 1 + 2 + 1
    buffer_size = max(header_max, edge_len) + 1
    if buffer_size > MAX_LINE:
        raise AssertionError("protocol lines exceed the reader's line limit")
    values = {
        "version": __version__,
        "protocol": PROTOCOL,
        "counter_bits": counter_bits,
        "counter_digits": digits,
        "counter_type": COUNTER_TYPES[counter_bits],
        "edge_len": edge_len,
        "header_max": header_max,
        "buffer_size": buffer_size,
        "header_prefix": header_prefix,
        "header_suffix": header_suffix,
        "header_name": HEADER_NAME,
        "source_name": SOURCE_NAME,
        "guard": "GAPFORGE_CAPTURE_FMT_H",
        "caution": CAUTION,
    }
    env = environment()
    return {
        HEADER_NAME: env.get_template("capture_fmt.h.j2").render(values),
        SOURCE_NAME: env.get_template("capture_fmt.c.j2").render(values),
    }
