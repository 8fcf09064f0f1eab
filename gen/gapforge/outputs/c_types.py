"""C literals and table types for the generated headers (issue 22).

The headers claim ISO C90 (C89) and later, and C++, unless a value truly needs 64 bits:
- a literal gets the smallest suffix C90 guarantees to hold it (`u` up to 0xFFFF: unsigned int is
  at least 16 bits; `ul` up to 0xFFFFFFFF: unsigned long is at least 32 bits); only a value above
  2^32 - 1 gets `ull`, which needs C99 (ISO C99 6.4.4.1, long long) and makes the header say so;
- table types come from the width of the field, register or converter they hold, never from the
  values in the table, and from the `uint_leastN_t` family (ISO C99 7.18.1.2; every target has
  them, also a DSP without an 8-bit type, where the exact-width `uint8_t` does not exist);
- register words are written in hexadecimal everywhere.
"""

from __future__ import annotations

from gapforge.base.errors import GapforgeError

U16_MAX = 0xFFFF
U32_MAX = 0xFFFFFFFF
# the standard that a 64-bit value needs, said in the header and in errors
C99_NOTE = "unsigned long long, ISO C99"


def c_uint(value: int) -> str:
    """An unsigned C literal sized so nothing overflows where int is 16 bits."""
    if value < 0:
        raise ValueError("negative value in an unsigned macro")
    if value <= U16_MAX:
        return f"{value}u"
    if value <= U32_MAX:
        return f"{value}ul"
    return f"{value}ull"


def needs_c99(literal: str) -> bool:
    """True for a literal that only C99 (long long) can hold."""
    return literal.rstrip().lower().endswith("ull")


def c_hex(value: int, bits: int) -> str:
    """A register word or mask in hexadecimal, as many digits as the register has nibbles."""
    if value < 0:
        raise ValueError("negative value in a register word")
    digits = max(1, (bits + 3) // 4)
    text = f"0x{value:0{digits}x}"
    if value > U32_MAX:
        return text + "ull"
    return text + ("u" if value <= U16_MAX and bits <= 16 else "ul")


def least_bits(width: int) -> int:
    """The smallest of 8, 16, 32, 64 that holds `width` bits."""
    for bits in (8, 16, 32, 64):
        if width <= bits:
            return bits
    raise ValueError(f"{width} bits is wider than any standard C type")


def least_type(width: int) -> str:
    """`uint_leastN_t` for a quantity `width` bits wide."""
    return f"uint_least{least_bits(width)}_t"


def literal_for(value: int, width: int) -> str:
    """A literal for an element of a `least_type(width)` table: the suffix the type needs (not
    the value), so every element of a table is written alike."""
    bits = least_bits(width)
    if value >= 1 << bits:
        raise ValueError(f"{value} does not fit {least_type(width)}")
    if bits <= 16:
        return f"{value}u"
    if bits == 32:
        return f"{value}ul"
    return f"{value}ull"


def hex_for(value: int, width: int) -> str:
    """A register word of a `least_type(width)` table, in hexadecimal."""
    bits = least_bits(width)
    if value >= 1 << bits:
        raise ValueError(f"{value:#x} does not fit {least_type(width)}")
    digits = max(1, (width + 3) // 4)
    suffix = "u" if bits <= 16 else ("ul" if bits == 32 else "ull")
    return f"0x{value:0{digits}x}{suffix}"


def require_fits(value: int, width: int, what: str, where: str) -> None:
    """Refuse (exit 2) a value that does not fit the type the header uses for it."""
    if value < 0 or value >= 1 << least_bits(width):
        raise GapforgeError(
            f"{what} = {value} does not fit the header's {least_type(width)} "
            f"(at most {(1 << least_bits(width)) - 1})",
            where,
        )
