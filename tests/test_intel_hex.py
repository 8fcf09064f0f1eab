"""The test suite's strict Intel HEX reader (tests/intel_hex.py), against the Intel Hexadecimal
Object File Format Specification rev A: record layout, checksum (the two's complement of the sum
of the record's bytes), types 00 / 01 / 04 only, the end record last.
"""

from __future__ import annotations

import random

import pytest

from intel_hex import read_bytes, read_intel_hex


def _record(kind: int, offset: int, data: bytes) -> str:
    body = bytes([len(data), offset >> 8, offset & 0xFF, kind]) + data
    return ":" + (body + bytes([(-sum(body)) & 0xFF])).hex().upper()


EOF_RECORD = ":00000001FF"  # the specification's end-of-file record, checksum FF


def test_record_checksum_matches_the_specification_worked_value() -> None:
    # bytes 03 00 30 00 02 33 7A sum to 0xE2; the checksum is 0x100 - 0xE2 = 0x1E
    assert _record(0x00, 0x0030, bytes([0x02, 0x33, 0x7A])) == ":0300300002337A1E"
    assert _record(0x01, 0, b"") == EOF_RECORD


def test_data_and_extended_linear_address() -> None:
    text = "\n".join([_record(0, 0x0010, b"\x01\x02"), _record(4, 0, b"\x00\x01"),
                      _record(0, 0x0000, b"\xAA"), EOF_RECORD, ""])
    memory = read_intel_hex(text)
    assert memory == {0x10: 1, 0x11: 2, 0x10000: 0xAA}
    assert read_bytes(memory, 0x10, 2) == b"\x01\x02"
    with pytest.raises(ValueError, match="0x12 not in the file"):
        read_bytes(memory, 0x10, 3)


@pytest.mark.parametrize(("text", "message"), [
    (":0300300002337A1F\n" + EOF_RECORD, "line 1: checksum"),
    (":0400300002337A1E\n" + EOF_RECORD, "line 1: length"),
    (_record(0x02, 0, b"\x10\x00") + "\n" + EOF_RECORD, "type 02"),
    (_record(0x03, 0, b"\x00\x00\x00\x00") + "\n" + EOF_RECORD, "type 03"),
    (_record(0x05, 0, b"\x00\x00\x00\x00") + "\n" + EOF_RECORD, "type 05"),
    (_record(0, 0x0030, b"\x01"), "no end-of-file record"),
    (EOF_RECORD + "\n" + _record(0, 0x0030, b"\x01"), "line 2: a record after"),
    (_record(0, 0, b"\x01") + "\n" + _record(0, 0, b"\x02") + "\n" + EOF_RECORD,
     "written twice"),
    ("0300300002337A1E\n" + EOF_RECORD, "line 1: not a record"),
    (":0300300002337a1e\n" + EOF_RECORD, "line 1: not a record"),  # hex digits in upper case
    (":03003000002337A1E\n" + EOF_RECORD, "line 1: not a record"),  # odd digit count
    (_record(4, 0, b"\x00") + "\n" + EOF_RECORD, "extended linear address"),
    (_record(1, 0, b"\x00") + "\n", "end-of-file record with data"),
])
def test_malformed_files_are_refused(text: str, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        read_intel_hex(text)


def test_fuzz_the_reader_never_fails_otherwise() -> None:
    """Seeded: every mutation of a valid file is read or refused with ValueError (any other
    exception fails); most are refused (checksum, length, record form), and one that only moves
    whitespace between records reads the same bytes."""
    valid = "\n".join([_record(0, 0x100 + 16 * k, bytes(range(k, k + 16))) for k in range(8)]
                      + [_record(4, 0, b"\x00\x02"), _record(0, 0, b"\x55\xAA"), EOF_RECORD])
    expected = read_intel_hex(valid)
    alphabet = ":0123456789ABCDEFa\n \r"
    outcomes = {"read": 0, "refused": 0}
    for case in range(2000):
        rng = random.Random(case)
        chars = list(valid)
        for _ in range(rng.randint(1, 4)):
            at = rng.randrange(len(chars))
            action = rng.randrange(3)
            if action == 0:
                chars[at] = rng.choice(alphabet)
            elif action == 1:
                del chars[at]
            else:
                chars.insert(at, rng.choice(alphabet))
        text = "".join(chars)
        try:
            memory = read_intel_hex(text)
        except ValueError:
            outcomes["refused"] += 1
            continue
        outcomes["read"] += 1
        if text.split() == valid.split():
            assert memory == expected, case
    assert outcomes["refused"] > 1000 and outcomes["read"] > 0, outcomes
