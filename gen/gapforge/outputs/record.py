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
from gapforge.outputs.header import clock_macro_value, fields_msb_first
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
        "verdict": op.verdict,
        "caution": caution.TEXT,
    }


def record_text(plan: BuildPlan, op: OutputPlan) -> str:
    return json.dumps(record(plan, op), indent=2) + "\n"
