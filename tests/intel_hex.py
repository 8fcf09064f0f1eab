"""A tiny strict Intel HEX reader for the tests (not part of gapforge).

Source: the Intel Hexadecimal Object File Format Specification, revision A (Intel, 1988):
a record is ':' LL AAAA TT DD.. CC in ASCII hexadecimal, LL the number of data bytes, AAAA a
16-bit offset, TT the type, CC the two's complement of the sum of every byte before it (so all
bytes of a record, checksum included, sum to 0 modulo 256). Types read here: 00 data,
01 end of file (LL = 00, the last record), 04 extended linear address (LL = 02: the upper 16
bits of every following data address). Any other type, a bad checksum, a length that does not
match, a byte written twice, data after the end record or a missing end record is refused with
ValueError naming the line.
"""

from __future__ import annotations

import re

_RECORD = re.compile(r":([0-9A-F]{2})+")


def read_intel_hex(text: str) -> dict[int, int]:
    """Every data byte by its 32-bit address."""
    memory: dict[int, int] = {}
    upper = 0
    ended = False
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line:
            continue
        if ended:
            raise ValueError(f"line {number}: a record after the end-of-file record")
        if not _RECORD.fullmatch(line):
            raise ValueError(f"line {number}: not a record (':' and pairs of hex digits)")
        data = bytes.fromhex(line[1:])
        if len(data) < 5 or len(data) != 5 + data[0]:
            raise ValueError(f"line {number}: length byte {data[0] if data else 0} does not match")
        if sum(data) % 256 != 0:
            raise ValueError(f"line {number}: checksum 0x{data[-1]:02X} does not match")
        count, offset, kind, payload = data[0], (data[1] << 8) | data[2], data[3], data[4:-1]
        if kind == 0x00:
            for i, byte in enumerate(payload):
                address = upper + ((offset + i) & 0xFFFF)  # the offset wraps within 64 KiB
                if address in memory:
                    raise ValueError(f"line {number}: address 0x{address:X} written twice")
                memory[address] = byte
        elif kind == 0x01:
            if count != 0:
                raise ValueError(f"line {number}: end-of-file record with data")
            ended = True
        elif kind == 0x04:
            if count != 2 or offset != 0:
                raise ValueError(f"line {number}: extended linear address record needs LL=02, "
                                 "AAAA=0000")
            upper = ((payload[0] << 8) | payload[1]) << 16
        else:
            raise ValueError(f"line {number}: record type {kind:02X} is not read here")
    if not ended:
        raise ValueError("no end-of-file record")
    return memory


def read_bytes(memory: dict[int, int], address: int, size: int) -> bytes:
    """`size` bytes from `address`; every one of them must have been written."""
    missing = [a for a in range(address, address + size) if a not in memory]
    if missing:
        raise ValueError(f"address 0x{missing[0]:X} not in the file")
    return bytes(memory[a] for a in range(address, address + size))
