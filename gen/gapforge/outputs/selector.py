"""The generated bin selector: which table entry the firmware uses now (issue 22).

One C function per table and input (milliamperes; ADC codes where the design has an ADC scale)
takes the measured current and the state chosen last time and returns the state to use now.
A state is a bin (0 .. BINS-1) with `STATE_NEGATIVE` (0x80) set while the negative-current
entries are in use. Python's model here is the reference the C code is tested against.

The rule (one band per decision, the safe side while in doubt):
- Sign: the held sign changes only when the current is beyond zero, on the other side, by more
  than the whole sign band (`sign_band`, default the first bin edge: the compensation's band);
  a change of sign starts again from bin 0.
- Bin, in the held sign's direction (a current against the held sign counts as 0): bin k is
  judged by the table for a measured current at or above its edge (edge_ma[k]; codes rounded
  away from 0 A). The selector never uses a bin whose edge is above the measured current. It
  moves up to bin k only when the current is at least edge_ma[k] + band, and leaves its bin
  downward as soon as the current is below the bin's edge, i.e. below its upward threshold by
  the whole band; then it takes the highest bin whose edge the current still reaches. A current
  that dithers around an edge by less than the band therefore changes the bin at most once.
- The band defaults to current_error plus half an ADC step (a mid-tread converter changes code
  half a step early); the design may widen it (`[adaptive] hysteresis`).
Fixed work: every call compares against every edge once (no early exit), no division, no
floating point, no recursion, no static state (reentrant), C89.
"""

from __future__ import annotations

from gapforge.base.quantities import ceil_fraction
from gapforge.base.records import record
from gapforge.outputs.c_types import c_uint
from gapforge.pipeline.adaptive_plan import AdaptivePlan

NEGATIVE = 0x80
BIN_MASK = 0x7F


@record
class AdcModel:
    zero: int
    pos_edges: tuple[int, ...]
    neg_edges: tuple[int, ...]
    band_codes: int
    sign_band_codes: int


@record
class SelectorModel:
    edges_ma: tuple[int, ...]
    band_ma: int
    sign_band_ma: int
    adc: AdcModel | None


def edge_ma(plan: AdaptivePlan) -> tuple[int, ...]:
    return tuple(ceil_fraction(b.current_min_a * 1000) for b in plan.table.bins)


def model(plan: AdaptivePlan) -> SelectorModel:
    spec = plan.spec
    band, sign_band = spec.hysteresis_band, spec.band
    adc = None
    if spec.adc is not None:
        zero = spec.adc.zero
        bins = plan.table.bins
        adc = AdcModel(
            zero=zero,
            pos_edges=tuple(zero if b.adc_codes is None else b.adc_codes[0] for b in bins),
            neg_edges=tuple(zero if b.adc_codes is None else b.adc_codes[1] for b in bins),
            band_codes=ceil_fraction(band / spec.adc.amps_per_code),
            sign_band_codes=ceil_fraction(sign_band / spec.adc.amps_per_code),
        )
    return SelectorModel(
        edges_ma=edge_ma(plan),
        band_ma=ceil_fraction(band * 1000),
        sign_band_ma=ceil_fraction(sign_band * 1000),
        adc=adc,
    )


def _state(bin_: int, negative: bool) -> int:
    return bin_ | (NEGATIVE if negative else 0)


def select_ma(m: SelectorModel, current_ma: int, previous: int) -> int:
    """The reference model of `<p>_adapt_select_ma`."""
    negative = bool(previous & NEGATIVE)
    bin_ = previous & BIN_MASK
    magnitude = abs(current_ma)
    if current_ma < 0 and not negative and magnitude > m.sign_band_ma:
        negative, bin_ = True, 0
    elif current_ma >= 0 and negative and magnitude > m.sign_band_ma:
        negative, bin_ = False, 0
    if (current_ma < 0) != negative:
        magnitude = 0
    if bin_ >= len(m.edges_ma):
        bin_ = 0
    fall, rise = 0, bin_
    for k in range(1, len(m.edges_ma)):
        edge = m.edges_ma[k]
        if magnitude >= edge:
            fall = k
            if k > bin_ and magnitude >= edge + m.band_ma:
                rise = k
    return _state(rise if magnitude >= m.edges_ma[bin_] else fall, negative)


def select_adc(m: SelectorModel, code: int, previous: int) -> int:
    """The reference model of `<p>_adapt_select_adc`."""
    a = m.adc
    assert a is not None
    negative = bool(previous & NEGATIVE)
    bin_ = previous & BIN_MASK
    if code < a.zero and not negative and a.zero - code > a.sign_band_codes:
        negative, bin_ = True, 0
    elif code >= a.zero and negative and code - a.zero > a.sign_band_codes:
        negative, bin_ = False, 0
    if bin_ >= len(a.pos_edges):
        bin_ = 0

    def inside(k: int) -> bool:
        return code <= a.neg_edges[k] if negative else code >= a.pos_edges[k]

    def beyond(k: int) -> int:
        return a.neg_edges[k] - code if negative else code - a.pos_edges[k]

    fall, rise = 0, bin_
    for k in range(1, len(a.pos_edges)):
        if inside(k):
            fall = k
            if k > bin_ and beyond(k) >= a.band_codes:
                rise = k
    stay = bin_ == 0 or inside(bin_)
    return _state(rise if stay else fall, negative)


# ---------------------------------------------------------------------------------------------
# C


def macro_rows(plan: AdaptivePlan, prefix: str) -> list[tuple[str, str, str]]:
    m, p = model(plan), prefix
    rows = [
        (f"{p}_ADAPT_STATE_NEGATIVE", c_uint(NEGATIVE),
         "selector state: set while the negative-current entries are in use"),
        (f"{p}_ADAPT_STATE_BIN_MASK", c_uint(BIN_MASK), "selector state: the bin"),
        (f"{p}_ADAPT_HYSTERESIS_MA", c_uint(m.band_ma),
         "selector band, mA rounded up (current_error + half an ADC step, or wider)"),
        (f"{p}_ADAPT_SIGN_BAND_MA", c_uint(m.sign_band_ma),
         "the sign changes only beyond 0 A by more than this, mA rounded up"),
    ]
    if m.adc is not None:
        rows += [
            (f"{p}_ADAPT_HYSTERESIS_ADC_CODES", c_uint(m.adc.band_codes),
             "selector band in ADC codes, rounded up"),
            (f"{p}_ADAPT_SIGN_BAND_ADC_CODES", c_uint(m.adc.sign_band_codes),
             "sign band in ADC codes, rounded up"),
        ]
    return rows


def c_lines(plan: AdaptivePlan, prefix: str, current_error: str) -> list[str]:
    """The selector's comment, prototypes and (behind `<P>_DEFINE_SELECTOR`) definitions."""
    p, low = prefix, prefix.lower()
    m = model(plan)
    a = f"{low}_adapt"
    lines = [
        "/* Bin selector. Call it once per PWM period with the current sampled in that period and",
        "   the state it returned last time (start with 0u: bin 0, positive current); use",
        f"   bin = state & {p}_ADAPT_STATE_BIN_MASK and the negative entries ({a}_neg_*) while",
        f"   state & {p}_ADAPT_STATE_NEGATIVE is set, the positive ones otherwise.",
        "   It moves up to bin k only at edge_ma[k] + band, leaves its bin downward as soon as the",
        "   current is below the bin's edge (the band below its upward threshold: the longer dead",
        "   time wins while in doubt), and changes sign only beyond 0 A by the whole sign band.",
        "   Fixed work, no division, no floating point, no recursion, no static state (reentrant).",
        "   Writing the word: at a PWM period boundary, through the timer's preload (shadow)",
        "   register so it takes effect at the next update, never in mid-period; computed from the",
        "   current sampled in that period. The sample's latency (sampling to the word taking",
        "   effect) and the current's ripple over that time must be inside current_error",
        f"   ({current_error}), which every bin was judged with.",
        f"   Define {p}_DEFINE_SELECTOR in exactly one C file before including this header to get",
        "   the definitions; every other file sees the prototypes. */",
        f"unsigned int {a}_select_ma(long current_ma, unsigned int previous);",
    ]
    if m.adc is not None:
        lines.append(f"unsigned int {a}_select_adc(unsigned long code, unsigned int previous);")
    lines += [f"#if defined({p}_DEFINE_SELECTOR)", *_ma_body(p, a)]
    if m.adc is not None:
        lines += _adc_body(p, a)
    lines.append(f"#endif /* {p}_DEFINE_SELECTOR */")
    return lines


def _ma_body(p: str, a: str) -> list[str]:
    return [
        f"unsigned int {a}_select_ma(long current_ma, unsigned int previous)",
        "{",
        f"    unsigned int negative = (previous & {p}_ADAPT_STATE_NEGATIVE) != 0u ? 1u : 0u;",
        f"    unsigned int bin = previous & {p}_ADAPT_STATE_BIN_MASK;",
        "    unsigned int fall = 0u, rise, k;",
        "    unsigned long magnitude;",
        "    if (current_ma < 0L) {",
        "        magnitude = 0ul - (unsigned long)current_ma;",
        f"        if (negative == 0u && magnitude > {p}_ADAPT_SIGN_BAND_MA) {{",
        "            negative = 1u;",
        "            bin = 0u;",
        "        }",
        "    } else {",
        "        magnitude = (unsigned long)current_ma;",
        f"        if (negative != 0u && magnitude > {p}_ADAPT_SIGN_BAND_MA) {{",
        "            negative = 0u;",
        "            bin = 0u;",
        "        }",
        "    }",
        "    if ((current_ma < 0L ? 1u : 0u) != negative) {",
        "        magnitude = 0ul; /* against the held sign: below every edge */",
        "    }",
        f"    if (bin >= {p}_ADAPT_BINS) {{",
        "        bin = 0u;",
        "    }",
        "    rise = bin;",
        f"    for (k = 1u; k < {p}_ADAPT_BINS; ++k) {{",
        f"        unsigned long edge = (unsigned long){a}_edge_ma[k];",
        "        if (magnitude >= edge) {",
        "            fall = k;",
        f"            if (k > bin && magnitude >= edge + {p}_ADAPT_HYSTERESIS_MA) {{",
        "                rise = k;",
        "            }",
        "        }",
        "    }",
        f"    bin = magnitude >= (unsigned long){a}_edge_ma[bin] ? rise : fall;",
        f"    return negative != 0u ? (bin | {p}_ADAPT_STATE_NEGATIVE) : bin;",
        "}",
    ]


def _adc_body(p: str, a: str) -> list[str]:
    z = f"(unsigned long){p}_ADAPT_ADC_ZERO_CODE"
    return [
        f"unsigned int {a}_select_adc(unsigned long code, unsigned int previous)",
        "{",
        f"    unsigned int negative = (previous & {p}_ADAPT_STATE_NEGATIVE) != 0u ? 1u : 0u;",
        f"    unsigned int bin = previous & {p}_ADAPT_STATE_BIN_MASK;",
        "    unsigned int fall = 0u, rise, k, stay;",
        f"    if (code < {z}) {{",
        f"        if (negative == 0u && {z} - code > {p}_ADAPT_SIGN_BAND_ADC_CODES) {{",
        "            negative = 1u;",
        "            bin = 0u;",
        "        }",
        f"    }} else if (negative != 0u && code - {z} > {p}_ADAPT_SIGN_BAND_ADC_CODES) {{",
        "        negative = 0u;",
        "        bin = 0u;",
        "    }",
        f"    if (bin >= {p}_ADAPT_BINS) {{",
        "        bin = 0u;",
        "    }",
        "    rise = bin;",
        f"    for (k = 1u; k < {p}_ADAPT_BINS; ++k) {{",
        f"        unsigned long pos = (unsigned long){a}_pos_edge_adc[k];",
        f"        unsigned long neg = (unsigned long){a}_neg_edge_adc[k];",
        "        if (negative != 0u ? code <= neg : code >= pos) {",
        "            fall = k;",
        f"            if (k > bin && (negative != 0u ? code + {p}_ADAPT_HYSTERESIS_ADC_CODES <= neg"
        f" : code >= pos + {p}_ADAPT_HYSTERESIS_ADC_CODES)) {{",
        "                rise = k;",
        "            }",
        "        }",
        "    }",
        "    stay = (bin == 0u || (negative != 0u"
        f" ? code <= (unsigned long){a}_neg_edge_adc[bin]"
        f" : code >= (unsigned long){a}_pos_edge_adc[bin])) ? 1u : 0u;",
        "    bin = stay != 0u ? rise : fall;",
        f"    return negative != 0u ? (bin | {p}_ADAPT_STATE_NEGATIVE) : bin;",
        "}",
    ]
