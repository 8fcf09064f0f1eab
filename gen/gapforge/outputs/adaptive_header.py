"""The current-indexed dead-time table in the C header: macros, const arrays and self-checks.

Returns plain rows for `gapforge.outputs.header` to lay out (it never imports that module). All
entries use the fixed fit's divider (`P_DIVIDER_CODE`): only the edge fields change per bin.

Firmware use: bin k is judged for |I| >= `p_adapt_edge_ma[k]` (edges rounded UP to a
milliampere, so a bin is entered only at or above its true edge); with the ADC scaling, code >=
`p_adapt_pos_edge_adc[k]` for positive current, code <= `p_adapt_neg_edge_adc[k]` for negative
current (codes rounded away from zero current, the same safe side). The generated bin selector
(`gapforge.outputs.selector`) picks the bin with hysteresis; nobody should write it by hand.
A mid-tread converter enters a code half an LSB early, so the design's `current_error` must
include half an LSB besides the sensor's own error.

Table types are fixed per kind (issue 22): codes from their field's width, register words from
the register's (in hexadecimal), ADC codes from the converter's bits, picoseconds, milliamperes
and counts 32 bits; a value that does not fit its type is refused, never written.
"""

from __future__ import annotations

from fractions import Fraction
from typing import Any

from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import ceil_fraction, format_quantity, picoseconds_floor
from gapforge.outputs import selector
from gapforge.outputs.c_types import c_hex, c_uint, hex_for, least_bits, least_type, literal_for
from gapforge.pipeline.adaptive_plan import AdaptivePlan
from gapforge.stage.adaptive import SIGNS
from gapforge.timer.layouts import EDGES

Row = tuple[str, str, str]
SHORT = {"positive": "pos", "negative": "neg"}


def _lit(value: int) -> str:
    return c_uint(value)


# One fixed C type per kind of table, from the width of what it holds (issue 22): never from the
# values, the same for both current signs, from the uint_leastN_t family.
PS_BITS = 32  # picoseconds: up to 4.29 ms (a longer table entry is refused)
MA_BITS = 32  # milliamperes (bin edges; the selector compares them with a C long)
COUNTS_BITS = 32  # compare counts of the compensation


def adaptive_parts(
    plan: AdaptivePlan, prefix: str
) -> tuple[list[Row], list[tuple[str, str]], list[str]]:
    """(macro rows, self-checks as (condition, message), lines with the arrays)."""
    rows, checks = _macros(plan, prefix)
    rows += selector.macro_rows(plan, prefix)
    lines = _array_lines(plan, prefix, _arrays(plan))
    error = format_quantity(plan.spec.current_error, "A", 6)
    return rows, checks, [*lines, "", *selector.c_lines(plan, prefix, error)]


def _macros(plan: AdaptivePlan, prefix: str) -> tuple[list[Row], list[tuple[str, str]]]:
    p = prefix
    table = plan.table
    bins = table.bins
    n = len(bins)
    layout = plan.layout
    rows: list[Row] = [
        (f"{p}_ADAPT_BINS", _lit(n), "current bins (mirrored for negative current)"),
        (
            f"{p}_ADAPT_POLICY_BELOW_SWING_HARD",
            _lit(1 if table.policy == "hard" else 0),
            "policy flag, 1: where the swing cannot finish, the soft edge runs at the stage"
            " minimum; 0: at the window maximum",
        ),
    ]
    checks: list[tuple[str, str]] = []
    for e in EDGES:
        top = max(b.entries[s][e].code for b in bins for s in SIGNS)
        field = layout.edge_field(e).name.upper()
        rows.append((f"{p}_ADAPT_{e.upper()}_CODE_MAX", _lit(top), f"largest {e} code in the table"))
        checks.append(
            (
                f"({p}_ADAPT_{e.upper()}_CODE_MAX) > ({p}_{field}_MASK >> {p}_{field}_SHIFT)",
                f"{p}_ADAPT_{e.upper()}_CODE_MAX does not fit its field",
            )
        )
    words = [b.registers[s] for b in bins for s in SIGNS]
    bits = layout.register_bits
    rows.append((f"{p}_ADAPT_REGISTER_MAX", c_hex(max(words), bits),
                 "largest register word in the table"))
    limit = (1 << bits) - 1
    checks.append(
        (
            f"({p}_ADAPT_REGISTER_MAX) > {c_hex(limit, bits)}",
            f"{p}_ADAPT_REGISTER_MAX does not fit a {layout.register_bits}-bit register",
        )
    )
    if plan.spec.adc is not None:
        rows.append((f"{p}_ADAPT_ADC_ZERO_CODE", _lit(plan.spec.adc.zero), "ADC code at 0 A"))
    if plan.inverter is not None:
        band = edge_ma(plan.inverter.band_a)
        rows.append(
            (
                f"{p}_ADAPT_COMPENSATION_BAND_MA",
                _lit(band),
                "no dead-time compensation while |I| is below this (sign uncertain)",
            )
        )
        if plan.spec.adc is not None:
            codes = ceil_fraction(plan.inverter.band_a / plan.spec.adc.amps_per_code)
            rows.append(
                (
                    f"{p}_ADAPT_COMPENSATION_BAND_ADC_CODES",
                    _lit(codes),
                    "the same band in ADC codes from the zero code, rounded up",
                )
            )
    return rows, checks


# name, values, comment, width in bits, hexadecimal
Array = tuple[str, list[int], str, int, bool]


def _arrays(plan: AdaptivePlan) -> list[Array]:
    bins = plan.table.bins
    layout = plan.layout
    arrays: list[Array] = [
        ("edge_ma", [edge_ma(b.current_min_a) for b in bins],
         "lower edge of each bin, mA, rounded up", MA_BITS, False),
    ]
    for s in SIGNS:
        for e in EDGES:
            width = layout.edge_field(e).width
            arrays.append((f"{SHORT[s]}_{e}_code", [b.entries[s][e].code for b in bins],
                           f"{e} code, {s} current ({width}-bit field)", width, False))
    for s in SIGNS:
        arrays.append((f"{SHORT[s]}_register", [b.registers[s] for b in bins],
                       f"register word, {s} current", layout.register_bits, True))
    for s in SIGNS:
        for e in EDGES:
            arrays.append((
                f"{SHORT[s]}_{e}_min_ps",
                [picoseconds_floor(b.entries[s][e].achieved_min_s) for b in bins],
                f"{e} worst case (fastest clock), ps rounded down, {s} current", PS_BITS, False,
            ))
    if plan.spec.adc is not None:
        zero, bits = plan.spec.adc.zero, plan.spec.adc.bits
        pos = [zero if b.adc_codes is None else b.adc_codes[0] for b in bins]
        neg = [zero if b.adc_codes is None else b.adc_codes[1] for b in bins]
        arrays.append(("pos_edge_adc", pos, "positive current: bin k while code >= this"
                       " (a mid-tread ADC enters a code half an LSB early: current_error"
                       " includes it)", bits, False))
        arrays.append(("neg_edge_adc", neg, "negative current: bin k while code <= this",
                       bits, False))
    if plan.inverter is not None:
        for s in SIGNS:
            verb = "add to" if s == "positive" else "subtract from"
            arrays.append((f"compensation_{SHORT[s]}_counts", [b.compensation[s] for b in bins],
                           f"compare counts to {verb} the duty command, {s} current",
                           COUNTS_BITS, False))
    return arrays


def _array_lines(plan: AdaptivePlan, prefix: str, arrays: list[Array]) -> list[str]:
    p, low = prefix, prefix.lower()
    lines = [
        "",
        "/* Dead time by load current: bin k covers |I| from edge_ma[k] up to edge_ma[k + 1]",
        f"   (the last bin has no upper edge). Every entry uses divider code {plan.divider_code}.",
        "   Table types are fixed by what they hold (field, register or converter width), the",
        "   same for both current signs, and do not change when a regenerated table's values do.",
        "   Verify every bin, every temperature and both current signs on the bench. */",
        "#include <stdint.h>",
    ]
    for name, values, comment, width, hexadecimal in arrays:
        full = f"{low}_adapt_{name}"
        if any(v < 0 or v >= 1 << least_bits(width) for v in values):
            raise GapforgeError(
                f"a table value does not fit the header's {least_type(width)} ({comment})",
                f"{prefix}: {full}",
            )
        body = ", ".join(hex_for(v, width) if hexadecimal else literal_for(v, width)
                         for v in values)
        lines.append(f"/* {comment} */")
        lines.append(f"static const {least_type(width)} {full}[] = {{{body}}};")
        lines.append(
            f"typedef char {full}_size_check[(sizeof({full}) / sizeof({full}[0]) =="
            f" {p}_ADAPT_BINS) ? 1 : -1];"
        )
    return lines


def edge_ma(current: Fraction) -> int:
    """A bin edge in milliamperes, rounded up (the bin is entered at or above its edge)."""
    return ceil_fraction(current * 1000)


def driver_rows(driver: Any, prefix: str) -> list[Row]:
    """Macros of the gate driver's duty limits (issue 12)."""
    p = prefix
    rows: list[Row] = [
        (
            f"{p}_DRIVER_DUTY_MIN_COUNTS",
            _lit(driver.duty_min_counts),
            f"smallest compare value, set by the {driver.binds_min}",
        ),
        (
            f"{p}_DRIVER_DUTY_MAX_COUNTS",
            _lit(driver.duty_max_counts),
            f"largest compare value, set by the {driver.binds_max}",
        ),
    ]
    if driver.bootstrap_compare_max is not None:
        rows += [
            (
                f"{p}_BOOTSTRAP_COMPARE_MAX",
                _lit(max(0, driver.bootstrap_compare_max)),
                "a refresh period needs compare <= this",
            ),
            (
                f"{p}_BOOTSTRAP_EVERY_PERIODS",
                _lit(driver.spec.bootstrap_every),
                "at least one refresh period in every this many",
            ),
        ]
    return rows
