"""The gapforge serial line protocol, version 2: one ASCII line per gate edge, each checked.

The capture firmware timestamps each gate edge with a free-running timer-capture counter and
prints one line per edge (the C helper from `gapforge firmware` formats them)::

    #GFCAP 2 clock_hz=160000000 counter_bits=32 *C5   header: protocol 2, counter clock, width
    H1 0001F4A0 07 *8F                                  high side turned on at counter 0x0001F4A0
    L0 0001F4B8 08 *BD                                  low side turned off
    T 8001F4B8 09 *56                                   keep-alive: no edge, counter now

Every header, edge and keep-alive line ends in ` *XX`: the CRC-8 of the bytes before the space
(polynomial 0x07, initial value 0, no reflection, no final XOR; the CRC catalogue's
"CRC-8/SMBUS", check value 0xF4 for the ASCII digits 1..9). A line whose check does not match is
corrupt: it is dropped and, since the sequence number then skips, counted as lost. Edge lines are
`<H|L><0|1> <counter, hex> <sequence, 2 hex digits>`; the sequence counts every edge and
keep-alive line modulo 256. The header is sent at start-up and repeated after every
`HEADER_EVERY` edge and keep-alive lines, so a reader that opens the port while the controller
is already streaming (the usual case on a bench) waits for the next header and decodes from
there; a repeated header that states the same clock and counter width changes nothing. Other lines starting with '#' are comments. Lines end with LF (CR LF
is accepted). Protocol 1 (the same lines without the check) is refused with a clear reason: a
single corrupted digit there can move an edge silently.

This module only parses single lines; ordering, unwrapping and counting live in `serial_order`
and `serial_stream`.
"""

from __future__ import annotations

import re

from gapforge.base.records import record

PROTOCOL = 2
HEADER_EVERY = 256  # the firmware repeats its header after this many edge and keep-alive lines
MAX_LINE = 96  # longest line the reader accepts (the longest protocol line is 57 characters)

_VERSION = re.compile(rb"^#GFCAP (\d{1,9})(?: |$)")
_HEADER = re.compile(rb"^#GFCAP (\d+) clock_hz=(\d{1,20}) counter_bits=(\d{1,3})$")
_EDGE = re.compile(rb"^([HL])([01]) ([0-9A-Fa-f]{1,16}) ([0-9A-Fa-f]{2})$")
_KEEP = re.compile(rb"^T ([0-9A-Fa-f]{1,16}) ([0-9A-Fa-f]{2})$")
_CHECKED = re.compile(rb"^(.*) \*([0-9A-Fa-f]{2})$")


def _crc_table() -> tuple[int, ...]:
    table = []
    for byte in range(256):
        crc = byte
        for _ in range(8):
            crc = ((crc << 1) ^ 0x07) & 0xFF if crc & 0x80 else (crc << 1) & 0xFF
        table.append(crc)
    return tuple(table)


_CRC_TABLE = _crc_table()


def crc8(data: bytes) -> int:
    """CRC-8, polynomial 0x07, initial 0, no reflection, no final XOR."""
    crc = 0
    for byte in data:
        crc = _CRC_TABLE[crc ^ byte]
    return crc


def checked(body: str) -> str:
    """A protocol line with its check appended (for writers: tests, simulators)."""
    return f"{body} *{crc8(body.encode('ascii')):02X}"


@record
class Header:
    version: int
    clock_hz: int
    counter_bits: int


@record
class Edge:
    side: int  # 0 = high side, 1 = low side
    level: int  # as reported (before any polarity option)
    counter: int
    seq: int


@record
class KeepAlive:
    counter: int
    seq: int


@record
class Comment:
    pass


@record
class Refused:
    """A header of a protocol this reader does not read (the stream cannot be decoded)."""

    reason: str


@record
class Bad:
    """An undecodable line: `corrupt` when it parsed but its check did not match."""

    corrupt: bool = False


Line = Header | Edge | KeepAlive | Comment | Refused | Bad


def parse_line(line: bytes) -> Line:
    """One stripped, non-empty line."""
    if line.startswith(b"#GFCAP"):
        return _header(line)
    if line.startswith(b"#"):
        return Comment()
    body = _body(line)
    if body is None:
        return Bad(corrupt=_looks_like_a_line(line))
    edge = _EDGE.match(body)
    if edge is not None:
        return Edge(0 if edge.group(1) == b"H" else 1, int(edge.group(2)),
                    int(edge.group(3), 16), int(edge.group(4), 16))
    keep = _KEEP.match(body)
    if keep is not None:
        return KeepAlive(int(keep.group(1), 16), int(keep.group(2), 16))
    return Bad()


def _body(line: bytes) -> bytes | None:
    """The line without its check, or None when there is no check or it does not match."""
    match = _CHECKED.match(line)
    if match is None or crc8(match.group(1)) != int(match.group(2), 16):
        return None
    return match.group(1)


def _looks_like_a_line(line: bytes) -> bool:
    stem = _CHECKED.match(line)
    body = stem.group(1) if stem is not None else line
    return bool(_EDGE.match(body) or _KEEP.match(body))


def _header(line: bytes) -> Line:
    version = _VERSION.match(line)
    if version is None:
        return Bad()
    number = int(version.group(1))
    if number == 1:
        return Refused("protocol 1 lines carry no check, so a corrupted digit could move an edge "
                       "unseen: regenerate the capture firmware with `gapforge firmware` "
                       f"(protocol {PROTOCOL})")
    if number != PROTOCOL:
        return Refused(f"unsupported protocol {number}; this reader reads protocol {PROTOCOL}")
    body = _body(line)
    if body is None:
        return Bad(corrupt=True)
    match = _HEADER.match(body)
    if match is None:
        return Bad()
    clock, bits = int(match.group(2)), int(match.group(3))
    if clock <= 0 or not 8 <= bits <= 64:
        return Refused(f"unsupported header (clock_hz {clock}, counter_bits {bits}); expected "
                       "clock_hz > 0, counter_bits 8..64")
    return Header(number, clock, bits)
