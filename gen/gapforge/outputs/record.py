"""A machine-readable record of one output's fitted values (JSON, a schema of our own).

For generators and tools beside the C header: the same numbers, with stable keys and a schema
version (`schema_version` changes only when a key changes meaning or disappears; new keys may be
added). Time values are whole picoseconds rounded to the safe side exactly as in the header
(requested and worst-case maximum up, achieved and worst-case minimum down, window minimum up and
maximum down), so a consumer never has to parse floats to stay safe. Layout field names live
under `fields`, never beside fixed keys. Deterministic: sorted where order is not meaning, no
timestamps.
"""

from __future__ import annotations

import json
from fractions import Fraction
from typing import Any

from gapforge import __version__
from gapforge.base import caution
from gapforge.base.quantities import picoseconds_ceil, picoseconds_floor
from gapforge.outputs.header_checks import clock_macro_value, fields_msb_first
from gapforge.pipeline.build import BuildPlan, OutputPlan
from gapforge.timer.compromise import compromises
from gapforge.timer.layouts import EDGES

SCHEMA = "gapforge-dead-time-record"
SCHEMA_VERSION = 1


def _exact(value: Fraction) -> str:
    """An exact rational as text: '160000000' or '320000000/3'."""
    return str(value.numerator) if value.denominator == 1 else f"{value.numerator}/{value.denominator}"


def _edges(plan: BuildPlan, op: OutputPlan) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for e in EDGES:
        edge = op.fit.edges[e]
        assert edge.achieved_s is not None and edge.achieved_min_s is not None
        assert edge.achieved_max_s is not None
        entry: dict[str, Any] = {
            "steps": edge.steps,
            "requested_ps": picoseconds_ceil(edge.requested_s),
            "achieved_ps": picoseconds_floor(edge.achieved_s),
            "achieved_min_ps": picoseconds_floor(edge.achieved_min_s),
            "achieved_max_ps": picoseconds_ceil(edge.achieved_max_s),
            "window_min_ps": None,
            "window_max_ps": None,
        }
        if plan.window is not None:
            lo, hi = plan.window[e]
            entry["window_min_ps"] = picoseconds_ceil(lo or Fraction(0))
            entry["window_max_ps"] = None if hi is None else picoseconds_floor(hi)
        out[e] = entry
    return out


def _pwm(op: OutputPlan) -> dict[str, Any] | None:
    lim = op.limits
    if lim is None:
        return None
    return {
        "counting": lim.spec.counting,
        "turn_clocks": lim.spec.turn_clocks,
        "duty_basis": lim.duty_basis,
        "frequency_hz_exact": _exact(lim.spec.frequency_hz),
        "real_frequency_hz_exact": _exact(lim.real_frequency_hz),
        "compare_counts": lim.counts,
        "top_counts": lim.counts - 1,
        "period_counts": lim.period_counts,
        "duty_min_counts": lim.duty_min_counts,
        "duty_max_counts": lim.duty_max_counts,
    }


def _gate_driver(op: OutputPlan) -> dict[str, Any] | None:
    """The gate driver's duty limits (issue 22: --check catches drift in them too)."""
    d = op.driver
    if d is None:
        return None
    return {
        "duty_min_counts": d.duty_min_counts,
        "duty_max_counts": d.duty_max_counts,
        "binds_min": d.binds_min,
        "binds_max": d.binds_max,
        "bootstrap_compare_max": (None if d.bootstrap_compare_max is None
                                  else max(0, d.bootstrap_compare_max)),
        "bootstrap_every_periods": d.spec.bootstrap_every,
    }


def _adaptive(op: OutputPlan) -> dict[str, Any] | None:
    """The current-indexed table, its compensation constants and the selector's bands, as the
    header holds them (issue 22)."""
    a = op.adaptive
    if a is None:
        return None
    from gapforge.outputs.selector import model

    m = model(a)
    bins = []
    for k, b in enumerate(a.table.bins):
        entry: dict[str, Any] = {"edge_ma": m.edges_ma[k]}
        for sign in ("positive", "negative"):
            digits = max(1, (a.layout.register_bits + 3) // 4)
            side: dict[str, Any] = {"register": b.registers[sign],
                                    "register_hex": f"0x{b.registers[sign]:0{digits}x}",
                                    "compensation_counts": b.compensation[sign]}
            for e in EDGES:
                side[f"{e}_code"] = b.entries[sign][e].code
                side[f"{e}_min_ps"] = picoseconds_floor(b.entries[sign][e].achieved_min_s)
            if m.adc is not None:
                side["edge_adc"] = (m.adc.pos_edges if sign == "positive" else m.adc.neg_edges)[k]
            entry[sign] = side
        bins.append(entry)
    return {
        "policy_below_swing": a.table.policy,
        "divider_code": a.divider_code,
        "hysteresis_ma": m.band_ma,
        "sign_band_ma": m.sign_band_ma,
        "adc_zero_code": None if m.adc is None else m.adc.zero,
        "hysteresis_adc_codes": None if m.adc is None else m.adc.band_codes,
        "sign_band_adc_codes": None if m.adc is None else m.adc.sign_band_codes,
        "compensation_band_ma": None if a.inverter is None else m.sign_band_ma,
        "bins": bins,
    }


def record(plan: BuildPlan, op: OutputPlan) -> dict[str, Any]:
    """The record of one fitted output (its verdict must be ok)."""
    fit, layout, design = op.fit, op.output.layout, plan.design
    assert fit.ok and fit.register is not None
    digits = max(1, layout.register_bits // 4)
    return {
        "schema": SCHEMA,
        "schema_version": SCHEMA_VERSION,
        "generator": f"gapforge {__version__}",
        "design": {"file": design.label, "sha256": design.sha256},
        "layout": {"name": layout.name, "file": layout.source, "sha256": layout.sha256},
        "prefix": op.output.prefix,
        "header": op.output.file,
        "timer": {
            "clock_hz": clock_macro_value(plan),
            "clock_hz_exact": _exact(design.clock_hz),
            "tolerance_ppb": picoseconds_ceil(design.clock_tol / 10**3),
            "rounding": design.rounding,
        },
        "register": {
            "bits": layout.register_bits,
            "word": fit.register,
            "hex": f"0x{fit.register:0{digits}x}",
            "sub_steps": layout.sub_steps,
            "divider": fit.divider,
            "divider_code": fit.divider_code,
        },
        "fields": {
            f.name: {"role": f.role, "offset": f.offset, "width": f.width,
                     "mask": (f.mask << f.offset), "code": fit.fields[f.name]}
            for f in fields_msb_first(layout)
        },
        "edges": _edges(plan, op),
        "pwm": _pwm(op),
        "shared": [c.text() for c in compromises(fit)],
        "gate_driver": _gate_driver(op),
        "adaptive": _adaptive(op),
        "verdict": op.verdict,
        "reason": "; ".join(op.reasons) if op.verdict != "ok" else "",
        "caution": caution.TEXT,
    }


def record_text(plan: BuildPlan, op: OutputPlan) -> str:
    return json.dumps(record(plan, op), indent=2) + "\n"
