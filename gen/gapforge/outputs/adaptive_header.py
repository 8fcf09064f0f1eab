"""The current-indexed dead-time table in the C header: macros, const arrays and self-checks.

Returns plain rows for `gapforge.outputs.header` to lay out (it never imports that module). All
entries use the fixed fit's divider (`P_DIVIDER_CODE`): only the edge fields change per bin.

Firmware use: with |I| measured, bin k is the largest k with |I| >= `p_adapt_edge_ma[k]` (edges
rounded UP to a milliampere, so a bin is entered only at or above its true edge); with the ADC
scaling, code >= `p_adapt_pos_edge_adc[k]` for positive current, code <= `p_adapt_neg_edge_adc[k]`
for negative current (codes rounded away from zero current, the same safe side). A mid-tread
converter enters a code half an LSB early, so the design's `current_error` must include half an
LSB besides the sensor's own error.
"""

from __future__ import annotations

from fractions import Fraction
from typing import Any

from gapforge.base.quantities import ceil_fraction, picoseconds_floor
from gapforge.pipeline.adaptive_plan import AdaptivePlan
from gapforge.stage.adaptive import SIGNS
from gapforge.timer.layouts import EDGES

Row = tuple[str, str, str]
SHORT = {"positive": "pos", "negative": "neg"}


def _lit(value: int) -> str:
    if value < 0:
        raise ValueError("negative value in an unsigned array")
    if value <= 0xFFFF:
        return f"{value}u"
    if value <= 0xFFFFFFFF:
        return f"{value}ul"
    return f"{value}ull"


def _ctype(values: list[int]) -> str:
    top = max(values)
    if top <= 0xFF:
        return "uint8_t"
    if top <= 0xFFFF:
        return "uint16_t"
    if top <= 0xFFFFFFFF:
        return "uint32_t"
    return "uint64_t"


def adaptive_parts(
    plan: AdaptivePlan, prefix: str
) -> tuple[list[Row], list[tuple[str, str]], list[str]]:
    """(macro rows, self-checks as (condition, message), lines with the arrays)."""
    rows, checks = _macros(plan, prefix)
    return rows, checks, _array_lines(plan, prefix, _arrays(plan))


def _macros(plan: AdaptivePlan, prefix: str) -> tuple[list[Row], list[tuple[str, str]]]:
    p = prefix
    table = plan.table
    bins = table.bins
    n = len(bins)
    layout = plan.layout
    rows: list[Row] = [
        (f"{p}_ADAPT_BINS", _lit(n), "current bins (mirrored for negative current)"),
        (
            f"{p}_ADAPT_BELOW_SWING_HARD",
            _lit(1 if table.policy == "hard" else 0),
            "1: where the swing cannot finish, the soft edge runs at the stage minimum;"
            " 0: at the window maximum",
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
    rows.append((f"{p}_ADAPT_REGISTER_MAX", _lit(max(words)), "largest register word in the table"))
    limit = (1 << layout.register_bits) - 1
    checks.append(
        (
            f"({p}_ADAPT_REGISTER_MAX) > {_lit(limit)}",
            f"{p}_ADAPT_REGISTER_MAX does not fit a {layout.register_bits}-bit register",
        )
    )
    if plan.spec.adc is not None:
        rows.append((f"{p}_ADAPT_ADC_ZERO_CODE", _lit(plan.spec.adc.zero), "ADC code at 0 A"))
    if plan.inverter is not None:
        band = edge_ma(plan.inverter.band_a)
        rows.append(
            (
                f"{p}_ADAPT_COMP_BAND_MA",
                _lit(band),
                "no dead-time compensation while |I| is below this (sign uncertain)",
            )
        )
        if plan.spec.adc is not None:
            codes = ceil_fraction(plan.inverter.band_a / plan.spec.adc.amps_per_code)
            rows.append(
                (
                    f"{p}_ADAPT_COMP_BAND_ADC_CODES",
                    _lit(codes),
                    "the same band in ADC codes from the zero code, rounded up",
                )
            )
    return rows, checks


def _arrays(plan: AdaptivePlan) -> list[tuple[str, list[int], str]]:
    bins = plan.table.bins
    arrays: list[tuple[str, list[int], str]] = [
        (
            "edge_ma",
            [edge_ma(b.current_min_a) for b in bins],
            "lower edge of each bin, mA, rounded up",
        )
    ]
    for s in SIGNS:
        for e in EDGES:
            arrays.append(
                (
                    f"{SHORT[s]}_{e}_code",
                    [b.entries[s][e].code for b in bins],
                    f"{e} code, {s} current",
                )
            )
    for s in SIGNS:
        arrays.append(
            (f"{SHORT[s]}_register", [b.registers[s] for b in bins], f"register word, {s} current")
        )
    for s in SIGNS:
        for e in EDGES:
            arrays.append(
                (
                    f"{SHORT[s]}_{e}_min_ps",
                    [picoseconds_floor(b.entries[s][e].achieved_min_s) for b in bins],
                    f"{e} worst case (fastest clock), ps rounded down, {s} current",
                )
            )
    if plan.spec.adc is not None:
        zero = plan.spec.adc.zero
        pos = [zero if b.adc_codes is None else b.adc_codes[0] for b in bins]
        neg = [zero if b.adc_codes is None else b.adc_codes[1] for b in bins]
        arrays.append(("pos_edge_adc", pos, "positive current: bin k while code >= this"
                       " (a mid-tread ADC enters a code half an LSB early: current_error"
                       " includes it)"))
        arrays.append(("neg_edge_adc", neg, "negative current: bin k while code <= this"))
    if plan.inverter is not None:
        for s in SIGNS:
            verb = "add to" if s == "positive" else "subtract from"
            arrays.append(
                (
                    f"comp_{SHORT[s]}_counts",
                    [b.compensation[s] for b in bins],
                    f"compare counts to {verb} the duty command, {s} current",
                )
            )
    return arrays


def _array_lines(
    plan: AdaptivePlan, prefix: str, arrays: list[tuple[str, list[int], str]]
) -> list[str]:
    p, low = prefix, prefix.lower()
    lines = [
        "",
        "/* Dead time by load current: bin k covers |I| from edge_ma[k] up to edge_ma[k + 1]",
        f"   (the last bin has no upper edge). Every entry uses divider code {plan.divider_code}.",
        "   Verify every bin, every temperature and both current signs on the bench. */",
        "#include <stdint.h>",
    ]
    for name, values, comment in arrays:
        full = f"{low}_adapt_{name}"
        suffix = _lit(max(values)).lstrip("0123456789")
        body = ", ".join(f"{v}{suffix}" for v in values)
        lines.append(f"/* {comment} */")
        lines.append(f"static const {_ctype(values)} {full}[] = {{{body}}};")
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
