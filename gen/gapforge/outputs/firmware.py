"""The C side of the serial capture protocol: a line formatter for the capture firmware.

Python computes every constant (line lengths, the counter type, the header text); the templates
only lay them out. Rendering returns {file name: text}; only the CLI writes files. Every text
that reaches a C comment or a C string literal passes `_comment` or `_string` first: printable
ASCII only, no comment delimiters in comments, quotes and backslashes escaped in strings;
anything else is refused, never passed through.
"""

from __future__ import annotations

from gapforge import __version__
from gapforge.base import caution
from gapforge.base.errors import GapforgeError
from gapforge.bench.serial_protocol import HEADER_EVERY, MAX_LINE, PROTOCOL
from gapforge.outputs.templating import environment

COUNTER_TYPES = {16: "uint16_t", 32: "uint32_t", 64: "uint64_t"}
HEADER_NAME = "gapforge_capture_fmt.h"
SOURCE_NAME = "gapforge_capture_fmt.c"
CHECK_LEN = 4  # " *XX": the line's CRC-8 in two hex digits


def _printable(text: str, what: str) -> str:
    bad = next((ch for ch in text if not " " <= ch <= "~"), None)
    if bad is not None:
        raise GapforgeError(f"{what} holds the character {bad!r}: only printable ASCII may reach "
                            "generated C", "firmware")
    return text


def _comment(text: str, what: str) -> str:
    """Text placed inside a C block comment: printable ASCII without `/*` or `*/`."""
    _printable(text, what)
    if "*/" in text or "/*" in text:
        raise GapforgeError(f"{what} holds a C comment delimiter ('/*' or '*/')", "firmware")
    return text


def _string(text: str, what: str) -> str:
    """Text placed inside a C string literal: printable ASCII, quote and backslash escaped
    (a trailing newline is written as the escape \\n)."""
    newline = text.endswith("\n")
    body = _printable(text[:-1] if newline else text, what)
    escaped = body.replace("\\", "\\\\").replace('"', '\\"').replace("?", "\\?")
    return escaped + ("\\n" if newline else "")


def render_capture_helper(counter_bits: int = 32) -> dict[str, str]:
    """Header and source of the capture line formatter for a counter of `counter_bits` bits."""
    if counter_bits not in COUNTER_TYPES:
        raise GapforgeError(
            f"counter width {counter_bits} is not supported (16, 32 or 64 bits)", "--counter-bits"
        )
    digits = (counter_bits + 3) // 4
    header_prefix = f"#GFCAP {PROTOCOL} clock_hz="
    header_suffix = f" counter_bits={counter_bits}"
    # longest header: a 10-digit clock (uint32_t), the check and the newline
    header_max = len(header_prefix) + 10 + len(header_suffix) + CHECK_LEN + 1
    edge_len = 2 + 1 + digits + 1 + 2 + CHECK_LEN + 1
    buffer_size = max(header_max, edge_len) + 1
    if buffer_size > MAX_LINE:
        raise AssertionError("protocol lines exceed the reader's line limit")
    values = {
        "version": _comment(__version__, "the version"),
        "protocol": PROTOCOL,
        "header_every": HEADER_EVERY,
        "counter_bits": counter_bits,
        "counter_digits": digits,
        "counter_type": COUNTER_TYPES[counter_bits],
        "edge_len": edge_len,
        "header_max": header_max,
        "buffer_size": buffer_size,
        "header_prefix": _string(header_prefix, "the header text"),
        "header_suffix": _string(header_suffix, "the header text"),
        "header_name": _comment(_string(HEADER_NAME, "a file name"), "a file name"),
        "source_name": _comment(_string(SOURCE_NAME, "a file name"), "a file name"),
        "check_len": CHECK_LEN,
        "guard": "GAPFORGE_CAPTURE_FMT_H",
        "caution": "\n * ".join(_comment(line, "the caution") for line in caution.LINES),
    }
    env = environment()
    return {
        HEADER_NAME: env.get_template("capture_fmt.h.j2").render(values),
        SOURCE_NAME: env.get_template("capture_fmt.c.j2").render(values),
    }
