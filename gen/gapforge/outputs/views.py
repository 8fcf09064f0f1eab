"""Text tables and JSON documents for terminal output. Returns strings and plain data; never prints.

Seconds in JSON are numbers (floats for display; the exact values stay inside the program).
"""

from __future__ import annotations

from fractions import Fraction
from typing import Any

from gapforge.base import caution
from gapforge.base.display import (
    both_edges,
    format_percent,
    format_range,
    format_register,
    format_si,
    significant,
    verdict_word,
)
from gapforge.base.quantities import format_quantity, format_tolerance
from gapforge.outputs.header_checks import fields_text
from gapforge.pipeline.build import BuildPlan, OutputPlan
from gapforge.timer.fit import FitResult, fit_warnings, step_seconds
from gapforge.timer.layouts import EDGES, Layout, describe_codes
from gapforge.timer.limits import PwmLimits

CAUTION = caution.TEXT


def _f(x: Fraction | None) -> float | None:
    return None if x is None else float(x)


def _t(x: Fraction | None) -> str:
    """A nominal time for display, in the one number style (four significant digits)."""
    return "-" if x is None else format_si(x, "s")


def _down(x: Fraction | None) -> str:
    """A guaranteed minimum (or a margin) for display: cut toward shorter, never rounded up past
    the truth."""
    return "-" if x is None else format_si(x, "s", toward="down")


def _up(x: Fraction | None) -> str:
    """A maximum (or a required minimum) for display: cut toward longer."""
    return "-" if x is None else format_si(x, "s", toward="up")


def _range(lo: Fraction | None, hi: Fraction | None) -> str:
    """A worst-case range with one prefix, widened outward (the minimum cut down, the maximum up)."""
    if lo is None or hi is None:
        return f"{_down(lo)} .. {_up(hi)}"
    return format_range(lo, hi, "s", cut="outward")


def table(headers: list[str], rows: list[list[str]]) -> str:
    widths = [
        max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(headers)
    ]
    lines = ["  ".join(h.ljust(w) for h, w in zip(headers, widths, strict=True)).rstrip()]
    lines.append("  ".join("-" * w for w in widths))
    lines += ["  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip() for r in rows]
    return "\n".join(lines)


# ---------------------------------------------------------------------------------------------
# layouts


def layout_json(layout: Layout, clock_hz: Fraction | None = None) -> dict[str, Any]:
    doc: dict[str, Any] = {
        "name": layout.name,
        "summary": layout.summary,
        "description": layout.description,
        "source": layout.source,
        "register_bits": layout.register_bits,
        "sub_steps": layout.sub_steps,
        "dividers": list(layout.dividers),
        "divider_field": layout.divider_field,
        "shared": layout.shared,
        "fields": [
            {
                "name": f.name,
                "role": f.role,
                "offset": f.offset,
                "width": f.width,
                "encoding": f.encoding if f.role != "divider" else None,
                "codes": describe_codes(f),
            }
            for f in sorted(layout.fields, key=lambda f: -f.offset)  # most significant first
        ],
    }
    if clock_hz is not None:
        doc["clock_hz"] = float(clock_hz)
        doc["ranges"] = [
            {
                "divider_code": d,
                "divider": div,
                "step_s": float(step_seconds(layout, clock_hz, div)),
                "edges": {
                    e: {
                        "min_s": float(
                            layout.edge_field(e).table[0][0] * step_seconds(layout, clock_hz, div)
                        ),
                        "max_s": float(
                            layout.edge_field(e).table[0][-1] * step_seconds(layout, clock_hz, div)
                        ),
                    }
                    for e in EDGES
                },
            }
            for d, div in enumerate(layout.dividers)
        ]
    return doc


def layout_text(layout: Layout, clock_hz: Fraction | None = None) -> str:
    lines = [f"{layout.name}: {layout.summary}", f"  file: {layout.source}"]
    lines += [f"  {line}" for line in layout.description.splitlines()]
    lines.append(
        f"  register: {layout.register_bits} bits; dead-time step = clock period x divider / "
        f"{layout.sub_steps}; dividers {', '.join(map(str, layout.dividers))}"
    )
    rows = [
        [f.name, f.role, f"{f.offset}..{f.offset + f.width - 1}", describe_codes(f)]
        for f in sorted(layout.fields, key=lambda f: -f.offset)  # most significant first
    ]
    lines.append("")
    lines.append(table(["field", "role", "bits", "codes"], rows))
    if clock_hz is not None:
        lines.append("")
        lines.append(f"At {format_quantity(clock_hz, 'Hz', 9)}:")
        rows = []
        edges = ("to_high",) if layout.shared else EDGES
        for d, div in enumerate(layout.dividers):
            step = step_seconds(layout, clock_hz, div)
            row = [str(d), str(div), _t(step)]
            for e in edges:
                values = layout.edge_field(e).table[0]
                row += [_t(values[0] * step), _t(values[-1] * step)]
            rows.append(row)
        heads = (
            ["shortest", "longest"]
            if layout.shared
            else ["to_high shortest", "to_high longest", "to_low shortest", "to_low longest"]
        )
        lines.append(table(["code", "divider", "step", *heads], rows))
    return "\n".join(lines)


# ---------------------------------------------------------------------------------------------
# fits


def fit_json(result: FitResult, limits: PwmLimits | None) -> dict[str, Any]:
    req = result.request
    doc: dict[str, Any] = {
        "target": result.layout.name,
        "target_source": result.layout.source,
        "clock_hz": float(req.clock_hz),
        "clock_tol": float(req.clock_tol),
        "rounding": req.rounding,
        "verdict": verdict_word(result.verdict),
        "reason": "" if result.verdict == "ok" else result.verdict,
        "divider_code": result.divider_code,
        "divider": result.divider,
        "sub_steps": result.layout.sub_steps,
        "fields": dict(result.fields),
        "register": result.register,
        "register_bits": result.layout.register_bits,
        "edges": {},
    }
    for edge in EDGES:
        e = result.edges[edge]
        rel = e.relative_error
        doc["edges"][edge] = {
            "field": e.field,
            "code": e.code,
            "steps": e.steps,
            "requested_s": float(e.requested_s),
            "achieved_s": _f(e.achieved_s),
            "achieved_min_s": _f(e.achieved_min_s),
            "achieved_max_s": _f(e.achieved_max_s),
            "error_s": _f(e.error_s),
            "error_rel": _f(rel),
            "step_s": _f(e.step_s),
            "lower_s": _f(e.lower_s),
            "higher_s": _f(e.higher_s),
            # the longest dead time the layout's field reaches (at the divider in use; when
            # unreachable, at the largest divider allowed), nominal and at the fast clock
            "layout_max_s": float(e.max_s),
            "layout_max_worst_case_s": float(e.max_min_s),
        }
    doc["pwm"] = pwm_json(limits) if limits is not None else None
    doc["warnings"] = fit_warnings(result) if result.ok else []
    doc["caution"] = CAUTION
    return doc


def pwm_json(lim: PwmLimits) -> dict[str, Any]:
    return {
        "verdict": verdict_word(lim.verdict),
        "reason": "" if lim.verdict == "ok" else f"{lim.verdict}: {lim.reason}",
        "counting": lim.spec.counting,
        "turn_clocks": lim.spec.turn_clocks,
        "convention": lim.spec.convention,
        "duty_basis": lim.duty_basis,
        "requested_hz": float(lim.spec.frequency_hz),
        "real_hz": float(lim.real_frequency_hz),
        "exact": lim.exact,
        "compare_counts": lim.counts,
        "period_counts": lim.period_counts,
        "duty_bits": lim.duty_bits,
        "duty_min": float(lim.duty_min),
        "duty_max": float(lim.duty_max),
        "duty_min_counts": lim.duty_min_counts,
        "duty_max_counts": lim.duty_max_counts,
        "both_off_share": float(lim.both_off_share),
        "edges": {
            e: {
                "dead_counts": float(x.dead_counts),
                "share": float(x.share),
                "duty_lost": float(x.lost_duty),
                "tol_minus_s": float(x.tol_minus_s),
                "tol_plus_s": float(x.tol_plus_s),
            }
            for e, x in lim.edges.items()
        },
    }


def fit_text(result: FitResult, limits: PwmLimits | None, verdict: str) -> str:
    """The fit's details; `verdict` is the word the first line gave (ok / fail)."""
    req = result.request
    layout = result.layout
    lines = [
        f"target {layout.name}: {layout.summary}",
        f"timer clock {format_quantity(req.clock_hz, 'Hz', 9)} +/- "
        f"{format_tolerance(req.clock_tol)}, rounding {req.rounding}",
    ]
    if result.ok:
        assert result.step_s is not None
        lines.append(
            f"divider code {result.divider_code} (/{result.divider}), step {_t(result.step_s)}"
        )
    rows = []
    for edge in EDGES:
        e = result.edges[edge]
        rel = e.relative_error
        rows.append(
            [
                edge,
                _t(e.requested_s),
                "-" if e.code is None else str(e.code),
                _t(e.achieved_s),
                f"{_down(e.achieved_min_s)} .. {_up(e.achieved_max_s)}",
                "-"
                if e.error_s is None
                else f"{format_quantity(e.error_s, 's', 4)} ({float(rel) * 100:+.3g} %)"
                if rel is not None
                else _t(e.error_s),
                _t(e.step_s),
                f"{_t(e.lower_s)} / {_t(e.higher_s)}",
                _t(e.max_s),
            ]
        )
    lines.append("")
    lines.append(
        table(
            [
                "edge",
                "requested",
                "code",
                "achieved",
                "worst case (clock tol)",
                "error",
                "step",
                "lower / higher",
                "max",
            ],
            rows,
        )
    )
    lines.append("")
    if result.ok:
        assert result.register is not None
        fields = fields_text(result.layout, result.fields)
        lines.append(f"fields: {fields}; register "
                     f"{format_register(result.register, result.layout.register_bits)}")
        lines += [f"warning: {w}" for w in fit_warnings(result)]
    else:
        for edge in EDGES:
            e = result.edges[edge]
            if e.requested_s > e.max_min_s:
                lines.append(
                    f"fail: {edge} request {_up(e.requested_s)} is longer than the layout "
                    f"can guarantee: at most {_down(e.max_min_s)} at the fast clock "
                    f"({_t(e.max_s)} nominal)"
                )
    if limits is not None:
        lines.append("")
        lines.append(pwm_text(limits))
    lines.append(f"verdict: {verdict}")
    return "\n".join(lines)


def count_word(clocks: Fraction) -> str:
    """ "1 clock", "4.438 clocks" (four significant digits, singular only for exactly one)."""
    return f"{significant(clocks)} clock{'' if clocks == 1 else 's'}"


def pwm_text(lim: PwmLimits) -> str:
    exact = (
        ""
        if lim.exact
        else (
            f" (not a whole number of counts: real {format_quantity(lim.real_frequency_hz, 'Hz', 7)})"
        )
    )
    lines = [
        f"PWM {format_si(lim.spec.frequency_hz, 'Hz')}, {lim.spec.counting}-aligned: "
        f"{lim.period_counts} clocks per period, compare 0..{lim.counts} "
        f"({lim.duty_bits:.2f} bits){exact}; {lim.spec.convention}",
        f"  usable duty (a pulse on both outputs, for {lim.duty_basis}): "
        f"{format_percent(lim.duty_min)} .. "
        f"{format_percent(lim.duty_max)} "
        f"(compare {lim.duty_min_counts}..{lim.duty_max_counts})",
    ]
    per_edge = {
        edge: f"{count_word(x.dead_counts)} = {format_percent(x.share)} of the period"
        " (the share of the gate command lost; the switch node's duty changes by it only where"
        " the current's sign holds the node at the other rail); clock tolerance moves it "
        f"{format_si(x.tol_minus_s, 's')} shorter / {format_si(x.tol_plus_s, 's')} longer"
        for edge, x in lim.edges.items()
    }
    lines.extend(f"  {line}" for line in both_edges(per_edge))
    if lim.verdict != "ok":
        lines.append(f"  {lim.verdict}: {lim.reason}")
    return "\n".join(lines)


# ---------------------------------------------------------------------------------------------
# builds


def plan_json(plan: BuildPlan) -> dict[str, Any]:
    d = plan.design
    doc: dict[str, Any] = {
        "design": d.label,
        "name": d.name,
        "clock_hz": float(d.clock_hz),
        "clock_tol": float(d.clock_tol),
        "source": d.source,
        "verdict": verdict_word(plan.verdict),
        "reason": ""
        if plan.verdict == "ok"
        else plan.reasons[0]
        if plan.verdict == "inconclusive"
        else plan.verdict,
        "reasons": list(plan.reasons),
        "stage_terms": stage_terms_json(plan.stage),
        "warnings": list(plan.warnings),
        "requested_s": None
        if plan.request is None
        else {e: float(plan.request.requested(e)) for e in EDGES},
        "window": None
        if plan.window is None
        else {e: {"min_s": _f(lo), "max_s": _f(hi)} for e, (lo, hi) in plan.window.items()},
        "reference": None
        if plan.reference is None
        else {
            e: {"min_s": float(r.min_s), "typ_s": float(r.typ_s), "max_s": float(r.max_s)}
            for e, r in plan.reference.items()
        },
        "outputs": [],
        "caution": CAUTION,
    }
    for op in plan.outputs:
        entry = fit_json(op.fit, op.limits)
        entry.update(
            {
                "prefix": op.output.prefix,
                "file": op.output.file,
                "verdict": verdict_word(op.verdict),
                "reason": ""
                if op.verdict == "ok"
                else op.reasons[0]
                if op.verdict == "inconclusive"
                else op.verdict,
                "reasons": list(op.reasons),
                "warnings": list(op.warnings),
                "costs": None if op.costs is None else costs_json(op.costs),
                "margins": {
                    e: {
                        "margin_low_s": _f(j.margin_low_s),
                        "margin_high_s": _f(j.margin_high_s),
                        "verdict": verdict_word(j.verdict),
                        "reason": "" if j.verdict == "ok" else j.verdict,
                    }
                    for e, j in op.judgements.items()
                },
            }
        )
        if op.adaptive is not None:
            from gapforge.outputs.adaptive_view import model_json, table_json

            entry["adaptive"] = table_json(op.adaptive.table)
            entry["adaptive_model"] = model_json(op.adaptive)
        if op.driver is not None:
            from gapforge.outputs.adaptive_view import driver_json

            entry["gate_driver"] = driver_json(op.driver)
        doc["outputs"].append(entry)
    return doc


def stage_terms_json(window: Any) -> dict[str, list[dict[str, Any]]] | None:
    """Each term of the stage window's minimum per edge, and whether it was given (issue 19)."""
    if window is None:
        return None
    return {
        e: [
            {"term": t.name, "value": float(t.value), "unit": t.unit or "factor",
             "counted": t.counted, "given": t.given, "note": t.note}
            for t in window.edges[e].breakdown
        ]
        for e in EDGES
    }


def stage_terms_text(window: Any) -> str:
    """One line: every counted term was given; which were stated as 0 (checked, none)."""
    zero = sorted(
        {t.name.split(",")[0] for e in EDGES for t in window.edges[e].breakdown
         if t.counted and t.value == 0}
    )
    defaulted = sorted(
        {t.name.split(",")[0] for e in EDGES for t in window.edges[e].breakdown if not t.given}
    )
    line = "  stage minimum: every term given"
    if zero:
        line += "; given as 0 (checked, none): " + ", ".join(zero)
    if defaulted:
        line += "; documented defaults: " + ", ".join(defaulted)
    return line


def plan_text(plan: BuildPlan) -> str:
    d = plan.design
    lines = [
        f"design {d.label}: timer clock {format_quantity(d.clock_hz, 'Hz', 9)} +/- "
        f"{format_tolerance(d.clock_tol)}, dead time source: {d.source}, rounding {d.rounding}",
    ]
    if plan.reference is not None:
        for e in EDGES:
            r = plan.reference[e]
            lines.append(
                f"  old network (evidence) {e}: {_range(r.min_s, r.max_s)} "
                f"(typical {_t(r.typ_s)})"
            )
    if plan.window is not None:
        what = f"window ({plan.window_basis})"
        for e in EDGES:
            lo, hi = plan.window[e]
            lines.append(
                f"  {what} {e}: "
                + (format_range(lo, hi, "s", cut="inward") if hi is not None and lo is not None
                   else f"{_up(lo)} .. no maximum")
            )
    if plan.stage is not None:
        lines.append(stage_terms_text(plan.stage))
    for w in plan.warnings:
        lines.append(f"warning: {w}")
    if plan.request is not None:
        lines.append(
            "  requested: " + ", ".join(f"{e} {_up(plan.request.requested(e))}" for e in EDGES)
        )
    rows = []
    for op in plan.outputs:
        rows.extend(_output_rows(op))
    if rows:
        lines.append("")
        lines.append(
            table(
                [
                    "output",
                    "target",
                    "edge",
                    "code",
                    "achieved",
                    "worst case",
                    "margin low / high",
                    "verdict",
                ],
                rows,
            )
        )
    for op in plan.outputs:
        for w in op.warnings:
            lines.append(f"warning: {op.output.prefix}: {w}")
        if op.costs is not None:
            lines.append(f"{op.output.prefix}: " + costs_text(op.costs, table_sets_error(op)))
        if op.adaptive is not None:
            from gapforge.outputs.adaptive_view import adaptive_text

            lines.append("")
            lines.append(adaptive_text(op.output.prefix, op.adaptive))
        if op.limits is not None:
            lines.append("")
            lines.append(f"{op.output.prefix}: " + pwm_text(op.limits))
        if op.driver is not None and op.limits is not None:
            from gapforge.outputs.adaptive_view import driver_text

            lines.append(driver_text(op.output.prefix, op.driver, op.limits.counts))
    for r in plan.reasons:
        lines.append(f"{plan.verdict}: {r}")
    word = verdict_word(plan.verdict)
    # one verdict word for every command (issue 19 item 4); the detail stays in brackets
    lines.append(f"verdict: {word}" + ("" if word == plan.verdict else f" ({plan.verdict})"))
    return "\n".join(lines)


def table_sets_error(op: OutputPlan) -> bool:
    """With a load-indexed table and its inverter figure, the table (not the fixed word) sets
    the output-voltage error: one figure per output, the table's (issue 19)."""
    return op.adaptive is not None and getattr(op.adaptive, "inverter", None) is not None


def costs_text(costs: Any, table_error: bool = False) -> str:
    """One line: what the fitted dead time costs at its longest (slow clock)."""
    parts = [
        f"reverse conduction {format_quantity(costs.reverse_conduction_w, 'W', 4)}",
        f"recovery {format_quantity(costs.recovery_w, 'W', 4)}",
    ]
    if costs.duty_lost is not None:
        parts.append(
            f"switch-node duty change {float(costs.duty_lost) * 100:.4g} % (by the current's sign)"
        )
    if table_error:
        parts.append("average output-voltage error: the table's inverter figure below")
    elif costs.voltage_error_v is not None:
        parts.append(
            f"average output-voltage error {format_quantity(costs.voltage_error_v, 'V', 4)}"
        )
    return "costs at the longest dead time: " + ", ".join(parts)


def costs_json(costs: Any) -> dict[str, Any]:
    return {
        "reverse_conduction_w": float(costs.reverse_conduction_w),
        "recovery_w": float(costs.recovery_w),
        "duty_lost": _f(costs.duty_lost),
        "voltage_error_v": _f(costs.voltage_error_v),
        "reverse_voltage_v": float(costs.reverse_voltage_v),
    }


def _output_rows(op: OutputPlan) -> list[list[str]]:
    rows = []
    for e in EDGES:
        x = op.fit.edges[e]
        j = op.judgements.get(e)
        margin = "-" if j is None else f"{_down(j.margin_low_s)} / {_down(j.margin_high_s)}"
        rows.append(
            [
                op.output.prefix if e == "to_high" else "",
                op.output.layout.name if e == "to_high" else "",
                e,
                "-" if x.code is None else str(x.code),
                _t(x.achieved_s),
                _range(x.achieved_min_s, x.achieved_max_s),
                margin,
                verdict_word(op.verdict) if e == "to_high" else "",
            ]
        )
    return rows
