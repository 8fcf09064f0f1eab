"""The current-indexed dead-time table as JSON and as terminal text (issue 12).

JSON per output: `adaptive` (a list of bins: `current_min_a`, `current_max_a` (null for the top
bin, which has no upper edge), and per current sign `positive` / `negative`, per edge `to_high`
/ `to_low`: `code`, `achieved_min_s`, `swing_s`, `soft`, with more detail) and `adaptive_model`
(the inputs, the chain before the swing, the fixed comparison, the other policy, the inverter
figures). Seconds and watts are floats here; the exact values stay in the plan.
"""

from __future__ import annotations

from fractions import Fraction
from typing import Any

from gapforge.base.display import count, format_percent, format_si
from gapforge.pipeline.adaptive_plan import AdaptivePlan, AdaptiveTable, Bin, Entry
from gapforge.stage.adaptive import COMMUTATED, SIGNS
from gapforge.timer.layouts import EDGES


def _f(x: Fraction | None) -> float | None:
    return None if x is None else float(x)


def entry_json(x: Entry) -> dict[str, Any]:
    return {
        "code": x.code,
        "achieved_min_s": float(x.achieved_min_s),
        "swing_s": float(x.swing_s),
        "soft": x.soft,
        "steps": x.steps,
        "requested_s": float(x.requested_s),
        "achieved_s": float(x.achieved_s),
        "achieved_max_s": float(x.achieved_max_s),
        "commutated": x.commutated,
        "below_swing": x.below_swing,
        "swing_needed_s": _f(x.swing_needed_s),
    }


def bin_json(b: Bin) -> dict[str, Any]:
    doc: dict[str, Any] = {
        "current_min_a": float(b.current_min_a),
        "current_max_a": _f(b.current_max_a),
    }
    for sign in SIGNS:
        doc[sign] = {e: entry_json(b.entries[sign][e]) for e in EDGES}
    doc["registers"] = dict(b.registers)
    doc["compensation_counts"] = dict(b.compensation)
    doc["adc_codes"] = (
        None if b.adc_codes is None else {"positive": b.adc_codes[0], "negative": b.adc_codes[1]}
    )
    doc["costs"] = (
        None
        if b.costs is None
        else {
            sign: {
                "current_a": float(c.current_a),
                "hard_current_a": float(c.hard_current_a),
                "reverse_conduction_fixed_w": float(c.fixed_w),
                "reverse_conduction_adaptive_w": float(c.adaptive_w),
                "saved_w": float(c.fixed_w - c.adaptive_w),
                "hard_turn_on_fixed_w": _f(c.fixed_hard_w),
                "hard_turn_on_adaptive_w": _f(c.adaptive_hard_w),
            }
            for sign, c in b.costs.items()
        }
    )
    return doc


def table_json(table: AdaptiveTable) -> list[dict[str, Any]]:
    return [bin_json(b) for b in table.bins]


def model_json(plan: AdaptivePlan) -> dict[str, Any]:
    spec = plan.spec
    inv = plan.inverter
    other = plan.other
    return {
        "below_swing": spec.below_swing,
        "currents_a": [float(c) for c in spec.currents],
        "current_error_a": float(spec.current_error),
        "qoss_high_c": float(spec.qoss_high),
        "qoss_low_c": float(spec.qoss_low),
        "qoss_total_c": float(spec.qoss_total),
        "c_node_f": _f(spec.c_node),
        "swing_charge_c": float(spec.swing_charge),
        "floor_s": {e: float(v) for e, v in plan.floor_s.items()},
        "policy_source": plan.policy_source,
        "commutated_edge": dict(COMMUTATED),
        "pre_swing_s": {e: float(v) for e, v in plan.pre_swing_s.items()},
        "threshold_a": {s: _f(v) for s, v in plan.threshold_a.items()},
        "divider_code": plan.divider_code,
        "fixed": {
            e: {
                "code": x.code,
                "achieved_min_s": float(x.achieved_min_s),
                "achieved_max_s": float(x.achieved_max_s),
            }
            for e, x in plan.table.fixed.items()
        },
        "adc": None
        if spec.adc is None
        else {
            "zero": spec.adc.zero,
            "amps_per_code": float(spec.adc.amps_per_code),
            "bits": spec.adc.bits,
        },
        # the same table under the other below_swing policy, for comparison (issue 23: named for
        # what it holds, formerly "other_policy")
        "other_below_swing_table": None
        if other is None
        else {"below_swing": other.policy, "bins": table_json(other)},
        "inverter": None
        if inv is None
        else {
            "peak_current_a": float(inv.peak_current_a),
            "mean_abs_current_a": inv.mean_abs_current_a,
            "error_positive_v": float(inv.error_positive_v),
            "error_negative_v": float(inv.error_negative_v),
            "error_fundamental_v": inv.fundamental_v,
            "reverse_conduction_fixed_w": inv.loss_fixed_w,
            "reverse_conduction_adaptive_w": inv.loss_adaptive_w,
            "compensation_band_a": float(inv.band_a),
        },
        "notes": list(plan.notes),
    }


# ---------------------------------------------------------------------------------------------
# terminal


def _table(headers: list[str], rows: list[list[str]]) -> str:
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(headers)]
    out = ["  ".join(h.ljust(w) for h, w in zip(headers, widths, strict=True)).rstrip()]
    out.append("  ".join("-" * w for w in widths))
    out += ["  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip() for r in rows]
    return "\n".join("  " + line for line in out)


def _t(x: Fraction | None) -> str:
    return "-" if x is None else format_si(x, "s")


def _w(x: Fraction | float | None) -> str:
    return "-" if x is None else format_si(x, "W")


def _amps(b: Bin) -> str:
    top = "up" if b.current_max_a is None else format_si(b.current_max_a, "A")
    return f"{format_si(b.current_min_a, 'A')} .. {top}"


def _measurement_lines(plan: AdaptivePlan) -> list[str]:
    """The threshold per sign (a measured current: the error included) and the ADC's half LSB."""
    spec = plan.spec
    lines = []
    for sign in SIGNS:
        thr = plan.threshold_a[sign]
        if thr is not None:
            lines.append(
                f"  {sign} current: the swing fits the window above about "
                f"{format_si(thr, 'A', toward='up')} measured (the current error"
                f" {format_si(spec.current_error, 'A')} included; before rounding to codes)"
            )
    if spec.adc is not None:
        lines.append(
            "  ADC: each bin starts at the code rounded away from 0 A; a mid-tread converter"
            " enters a code half an LSB"
            f" ({format_si(spec.adc.amps_per_code / 2, 'A')}) early, so current_error"
            f" ({format_si(spec.current_error, 'A')}) must include that half LSB"
        )
    return lines


def _charge_words(plan: AdaptivePlan) -> str:
    spec = plan.spec
    if spec.c_node is not None:
        return (
            f"Qoss,high + Qoss,low + c_node {format_si(spec.c_node, 'F')} x Vbus, charge"
            " balance Q = C x V"
        )
    return (
        "Qoss,high + Qoss,low only: add the node's other capacitance (inductor winding, layout)"
        " as [stage] c_node"
    )


def _state(x: Entry) -> str:
    return "soft" if x.soft else ("below swing" if x.below_swing else "hard")


def adaptive_text(prefix: str, plan: AdaptivePlan) -> str:
    spec = plan.spec
    lines = [
        f"{prefix}: dead time by load current (below_swing '{spec.below_swing}'); the load "
        "commutates to_low for I > 0 (out of the switch node), to_high for I < 0; swing = "
        f"{format_si(spec.swing_charge, 'C')} / |I| ({_charge_words(plan)}); the chain before"
        " the swing " + ", ".join(f"{e} {_t(plan.pre_swing_s[e])}" for e in EDGES),
        "  table floor per edge = max(stage minimum, the request of dead-time policy"
        f" '{plan.policy_source}'): "
        + ", ".join(f"{e} {format_si(plan.floor_s[e], 's', toward='up')}" for e in EDGES)
        + "; a soft edge asks for max(floor, stage minimum + swing)",
    ]
    rows = []
    for b in plan.table.bins:
        for sign in SIGNS:
            soft = b.entries[sign][COMMUTATED[sign]]
            hard = b.entries[sign]["to_high" if COMMUTATED[sign] == "to_low" else "to_low"]
            cost = b.costs[sign] if b.costs is not None else None
            rows.append(
                [
                    _amps(b) if sign == "positive" else "",
                    "+" if sign == "positive" else "-",
                    f"{soft.edge} {soft.code}",
                    format_si(soft.achieved_min_s, "s", toward="down"),
                    _t(soft.swing_needed_s),
                    _state(soft),
                    f"{hard.edge} {hard.code}",
                    "-" if cost is None else _w(cost.fixed_w),
                    "-" if cost is None else _w(cost.adaptive_w),
                    "-" if cost is None else _w(cost.fixed_w - cost.adaptive_w),
                    "-" if cost is None else _w(cost.adaptive_hard_w),
                ]
            )
    lines.append(
        _table(
            [
                "|I| bin",
                "sign",
                "soft edge code",
                "worst case",
                "swing",
                "state",
                "hard edge code",
                "loss fixed",
                "loss table",
                "saved",
                "hard turn-on",
            ],
            rows,
        )
    )
    fixed = plan.table.fixed
    lines.append(
        "  fixed comparison: "
        + ", ".join(f"{e} code {fixed[e].code}" for e in EDGES)
        + " on every bin (the table's longest entries: what a fixed dead time needs for the"
        " same transitions); each cost where it is worst in the bin, the current error"
        f" {format_si(spec.current_error, 'A')} counted: reverse conduction at the bin's largest"
        " current plus the error (top bin: its lower edge), slowest clock (common practice);"
        " hard turn-on at the bin's smallest current less the error, fastest clock: at most"
        " (swing charge) x Vbus x fsw where the swing does not finish (Eoss <= Qoss x V)"
    )
    lines.extend(_measurement_lines(plan))
    if plan.inverter is not None:
        inv = plan.inverter
        lines.append(
            f"  inverter, sinusoidal {format_si(inv.peak_current_a, 'A')} peak: mean |i|"
            f" = 2 Ipk / pi = {format_si(inv.mean_abs_current_a, 'A')}; average"
            f" output-voltage error -{format_si(inv.error_positive_v, 'V')} (I > 0),"
            f" +{format_si(inv.error_negative_v, 'V')} (I < 0) in the top bin; its fundamental"
            f" {format_si(inv.fundamental_v, 'V')} over the sine, each bin's hard edge where"
            " |i| is in the bin (Fourier coefficient of the error wave; 4/pi x Vd x t x fsw"
            " for one dead time; Mohan et al. ch. 8, Jeong & Park 1991)"
        )
        comp = plan.table.bins[-1].compensation
        lines.append(
            f"  compensation: add {comp['positive']} compare counts while I > "
            f"{format_si(inv.band_a, 'A')}, subtract {comp['negative']} while I < "
            f"-{format_si(inv.band_a, 'A')}, none in between (sign uncertain);"
            f" reverse conduction over the sine {_w(inv.loss_fixed_w)} fixed,"
            f" {_w(inv.loss_adaptive_w)} with the table"
        )
    lines.append(
        "  verify adaptive dead time on the bench at every bin, every temperature and both"
        " current signs"
    )
    return "\n".join(lines)


# ---------------------------------------------------------------------------------------------
# gate-driver duty limits (issue 12), shown where they bind


def driver_json(d: Any) -> dict[str, Any]:
    spec = d.spec
    return {
        "min_pulse_s": _f(spec.min_pulse_s),
        "min_pulse_clocks": d.min_pulse_clocks,
        "bootstrap_on_s": _f(spec.bootstrap_on_s),
        "bootstrap_every": spec.bootstrap_every,
        "bootstrap_clocks": d.bootstrap_clocks,
        "duty_min_counts": d.duty_min_counts,
        "duty_max_counts": d.duty_max_counts,
        "binds_min": d.binds_min,
        "binds_max": d.binds_max,
        "bootstrap_compare_max": d.bootstrap_compare_max,
        "verdict": d.verdict,
        "reason": d.reason or None,
    }


def driver_text(prefix: str, d: Any, counts: int) -> str:
    lines = [
        f"{prefix}: gate driver: usable compare {d.duty_min_counts}..{d.duty_max_counts} of"
        f" {counts} ({format_percent(Fraction(d.duty_min_counts, counts))} .."
        f" {format_percent(Fraction(d.duty_max_counts, counts))}); the minimum is set by the"
        f" {d.binds_min}, the maximum by the {d.binds_max}"
    ]
    if d.spec.min_pulse_s is not None:
        lines.append(
            f"  minimum pulse {format_si(d.spec.min_pulse_s, 's')} ="
            f" {count(d.min_pulse_clocks, 'clock')} at the fastest clock"
        )
    if d.bootstrap_compare_max is not None:
        lines.append(
            f"  bootstrap refresh: the low side on for {format_si(d.spec.bootstrap_on_s, 's')}"
            f" ({count(d.bootstrap_clocks, 'clock')}) needs compare <= {d.bootstrap_compare_max}"
            + (
                " in every period"
                if d.spec.bootstrap_every == 1
                else f" in at least one of every {d.spec.bootstrap_every} periods"
            )
        )
    if d.verdict != "ok":
        lines.append(f"  {d.verdict}: {d.reason}")
    return "\n".join(lines)
