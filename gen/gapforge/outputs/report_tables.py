"""The report's tables: rows of prepared strings (the template only loops over them).

Every number goes through the one display style (gapforge.base.display): four significant
digits, a limit cut toward its safe side, one unit per column (named in the header).
"""

from __future__ import annotations

from fractions import Fraction
from typing import Any

from gapforge.base.display import (
    choose_exponent,
    format_percent,
    format_range,
    format_register,
    format_si,
    verdict_word,
)
from gapforge.base.quantities import format_tolerance
from gapforge.base.records import record
from gapforge.outputs.header_checks import fields_text
from gapforge.outputs.report_data import window_of
from gapforge.pipeline.build import BuildPlan, OutputPlan
from gapforge.timer.layouts import EDGES


@record
class TableBlock:
    title: str
    headers: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    notes: tuple[str, ...] = ()


def _t(value: Fraction | float | None, toward: str = "nearest") -> str:
    """Seconds in the one display style; a limit cut toward its safe side."""
    return "-" if value is None else format_si(value, "s", toward=toward)


def _pct(value: Fraction | float) -> str:
    return format_percent(value)


def _si(value: Fraction | float | None, unit: str) -> str:
    return "-" if value is None else format_si(value, unit)


def _pair(lo: Fraction | None, hi: Fraction | None) -> tuple[str, str]:
    """A window's minimum (cut up) and maximum (cut down) with one prefix, so they compare."""
    exp3 = choose_exponent([x for x in (lo, hi) if x is not None])
    return (
        "-" if lo is None else format_si(lo, "s", toward="up", exponent=exp3),
        "-" if hi is None else format_si(hi, "s", toward="down", exponent=exp3),
    )


def _term_value(term: Any) -> str:
    """A breakdown term; the window's own minimum is cut up and its maximum down (never wider)."""
    if term.unit == "s":
        toward = {"minimum": "up", "maximum": "down"}.get(term.name.split(" ")[0], "nearest")
        return _t(term.value, toward)
    return _si(term.value, term.unit) if term.unit else f"{float(term.value):g}"


def input_tables(plan: BuildPlan) -> list[TableBlock]:
    d = plan.design
    rows: list[tuple[str, ...]] = [
        ("design file", d.label, ""),
        ("design SHA-256", d.sha256, ""),
        ("timer clock", format_si(d.clock_hz, "Hz"), "Hz"),
        ("clock tolerance", format_tolerance(d.clock_tol), "relative"),
        ("firmware clock macro", d.clock_macro, ""),
        (
            "PWM frequency",
            _si(None if d.pwm is None else d.pwm.frequency_hz, "Hz"),
            "Hz",
        ),
        ("PWM counting", "-" if d.pwm is None else d.pwm.counting + "-aligned", ""),
        ("dead time source", d.source, ""),
        ("rounding", d.rounding, ""),
    ]
    if d.dead_time is not None:
        rows += [(f"dead time {e} (given)", _t(d.dead_time[e]), "s") for e in EDGES]
    if plan.request is not None:
        rows += [(f"dead time {e} (requested)", _t(plan.request.requested(e)), "s") for e in EDGES]
    tables = [TableBlock("Design inputs", ("input", "value", "unit"), tuple(rows))]
    out_rows = tuple(
        (o.prefix, o.layout.name, o.layout.summary, o.file, "yes" if o.struct else "no")
        for o in d.outputs
    )
    tables.append(
        TableBlock(
            "Outputs", ("prefix", "target layout", "summary", "header file", "struct"), out_rows
        )
    )
    if d.reference is not None:
        from gapforge.analog.describe import describe_parameters

        ref_rows = tuple(
            (name, value, "default" if is_default else "given", source)
            for name, value, is_default, source in describe_parameters(d.reference)
        )
        tables.append(
            TableBlock(
                "Analog reference network (one channel)",
                ("parameter", "value (min : typ : max)", "given or default", "default's source"),
                ref_rows,
                ("Every default is shown; enter your parts' data.",),
            )
        )
    if d.stage is not None:
        spec = d.stage
        st_rows: list[tuple[str, ...]] = []
        for side in ("high", "low"):
            s = spec.side(side)
            st_rows += [
                (f"{side}: turn-off delay, max", _t(s.td_off_max), "s"),
                (f"{side}: fall time, max", _t(s.t_fall_max), "s"),
                (f"{side}: turn-on delay, min", _t(s.td_on_min), "s"),
                (f"{side}: rise time", _t(s.t_rise), "s"),
                (f"{side}: driver propagation delay", format_range(s.prop_min, s.prop_max, "s", cut="outward"), "s"),
            ]
        st_rows += [
            ("channel mismatch", _t(spec.mismatch), "s"),
            ("isolator / level-shifter skew", _t(spec.isolator_skew), "s"),
            ("timer output skew", _t(spec.timer_skew), "s"),
            ("margin factor", f"{float(spec.margin):g}", "x"),
            ("switch kind", spec.kind, ""),
            ("reverse-conduction voltage", format_si(spec.reverse_voltage, "V"), "V"),
            ("current at to_high", format_si(spec.current_to_high, "A"), "A"),
            ("current at to_low", format_si(spec.current_to_low, "A"), "A"),
            (
                "switching frequency",
                _si(spec.fsw, "Hz"),
                "Hz",
            ),
            (
                "loss budget",
                _si(spec.loss_budget, "W"),
                "W",
            ),
            (
                "bus voltage",
                _si(spec.bus_voltage, "V"),
                "V",
            ),
        ]
        tables.append(TableBlock("Power stage", ("input", "value", "unit"), tuple(st_rows)))
    return tables


def window_tables(plan: BuildPlan) -> list[TableBlock]:
    tables: list[TableBlock] = []
    rows: list[tuple[str, ...]] = []
    for e in EDGES:
        st = plan.stage_window[e] if plan.stage_window is not None else (None, None)
        ref = plan.reference[e] if plan.reference is not None else None
        win = window_of(plan, e)
        rows.append(
            (
                e,
                _pair(*st)[0],
                _pair(*st)[1] if st[1] is not None or plan.stage_window is None else "none",
                "-" if ref is None else format_range(ref.min_s, ref.max_s, "s", cut="outward"),
                _pair(*win)[0],
                _pair(*win)[1] if win[1] is not None or plan.window is None else "none",
            )
        )
    tables.append(
        TableBlock(
            "Dead-time window",
            (
                "edge",
                "stage min",
                "stage max",
                "worst-case range of the old network (evidence)",
                "window min",
                "window max",
            ),
            tuple(rows),
            (
                f"The window is the {plan.window_basis}'s (dead-time policy "
                f"'{plan.design.source}'); the old network's range is evidence beside it. Minima "
                "are shown rounded up, maxima down.",
            ),
        )
    )
    if plan.stage is not None:
        for e in EDGES:
            terms = plan.stage.edges[e].breakdown
            t_rows = tuple(
                (
                    t.name,
                    _term_value(t),
                    t.note,
                )
                for t in terms
            )
            tables.append(
                TableBlock(
                    f"Minimum breakdown, {e} (common practice)",
                    ("term", "value", "note"),
                    t_rows,
                )
            )
        max_terms = plan.stage.edges["to_high"].max_breakdown
        if max_terms:
            tables.append(
                TableBlock(
                    "Maximum (loss budget)",
                    ("term", "value", "note"),
                    tuple(
                        (
                            t.name,
                            _term_value(t),
                            t.note,
                        )
                        for t in max_terms
                    ),
                )
            )
    return tables


def _edge_rows(op: OutputPlan) -> list[tuple[str, ...]]:
    """Per edge: the request, the achieved value and its worst case (cut outward), the error."""
    f = op.fit
    rows: list[tuple[str, ...]] = []
    for e in EDGES:
        x = f.edges[e]
        rel = x.relative_error
        worst = (
            "-"
            if x.achieved_min_s is None or x.achieved_max_s is None
            else format_range(x.achieved_min_s, x.achieved_max_s, "s", cut="outward")
        )
        error = "-" if x.error_s is None else _t(x.error_s)
        if x.error_s is not None and rel is not None:
            error += f" ({'+' if rel >= 0 else '-'}{format_percent(abs(rel))})"
        rows.append(
            (
                op.output.prefix,
                f.layout.name,
                e,
                x.field,
                "-" if x.code is None else str(x.code),
                _t(x.requested_s),
                _t(x.achieved_s),
                worst,
                error,
                _t(x.step_s),
                _t(x.max_s),
            )
        )
    return rows


def _margin_rows(plan: BuildPlan, op: OutputPlan) -> list[tuple[str, ...]]:
    """Per edge: the window, the worst case achieved, the worst-case margins and the verdict."""
    rows: list[tuple[str, ...]] = []
    for e in EDGES:
        j = op.judgements.get(e)
        win = window_of(plan, e)
        lo_text, hi_text = _pair(win[0], win[1])
        x = op.fit.edges[e]
        worst = (
            "-"
            if x.achieved_min_s is None or x.achieved_max_s is None
            else format_range(x.achieved_min_s, x.achieved_max_s, "s", cut="outward")
        )
        rows.append(
            (
                op.output.prefix,
                e,
                lo_text,
                hi_text if win[1] is not None or plan.window is None else "none",
                worst,
                "-" if j is None else _t(j.margin_low_s, "down"),
                "-" if j is None else _t(j.margin_high_s, "down"),
                verdict_word(op.verdict if j is None else j.verdict),
            )
        )
    return rows


def _pwm_row(op: OutputPlan) -> tuple[str, ...] | None:
    lim = op.limits
    if lim is None:
        return None
    return (
        op.output.prefix,
        str(lim.period_counts),
        format_si(lim.real_frequency_hz, "Hz"),
        f"{lim.duty_bits:.2f}",
        f"{_pct(lim.duty_min)} .. {_pct(lim.duty_max)}",
        _pct(lim.edges["to_high"].share),
        _pct(lim.edges["to_low"].share),
        verdict_word(lim.verdict),
    )


def _register_row(op: OutputPlan) -> tuple[str, ...]:
    fit = op.fit
    return (
        op.output.prefix,
        fit.layout.name,
        "-" if fit.divider is None else f"code {fit.divider_code} (/{fit.divider})",
        _t(fit.step_s),
        fields_text(fit.layout, fit.fields) or "-",
        "-" if fit.register is None else format_register(fit.register, fit.layout.register_bits),
        verdict_word(op.verdict),
    )


def _cost_table(plan: BuildPlan) -> TableBlock | None:
    if plan.design.stage is None or not plan.outputs:
        return None
    rows: list[tuple[str, ...]] = []
    for op in plan.outputs:
        if not op.fit.ok or op.costs is None:
            continue
        c = op.costs  # the same costs `build` prints: at the longest (slow-clock) dead time
        rows.append(
            (
                op.output.prefix,
                format_si(c.reverse_conduction_w, "W"),
                format_si(c.recovery_w, "W"),
                "-" if c.duty_lost is None else _pct(c.duty_lost),
                _si(c.voltage_error_v, "V"),
            )
        )
    return TableBlock(
        "Costs of the chosen dead times (at their longest, slow clock)",
        (
            "output",
            "reverse conduction",
            "recovery",
            "switch-node duty change (by current sign)",
            "average output-voltage error",
        ),
        tuple(rows),
    )


EDGE_HEADERS = (
    "output",
    "target layout",
    "edge",
    "field",
    "code",
    "requested",
    "achieved",
    "worst case (clock tolerance)",
    "error",
    "step",
    "target layout max",
)
PWM_HEADERS = (
    "output",
    "clocks per period",
    "real frequency",
    "duty bits",
    "usable duty",
    "to_high share",
    "to_low share",
    "verdict",
)


def summary_tables(plan: BuildPlan) -> list[TableBlock]:
    """The first screen: the chosen words, then per edge the window, the worst case achieved,
    the margins and the verdict."""
    margins = [row for op in plan.outputs for row in _margin_rows(plan, op)]
    return [
        TableBlock(
            "Chosen words",
            ("output", "target layout", "divider", "step", "fields", "register", "verdict"),
            tuple(_register_row(op) for op in plan.outputs),
        ),
        TableBlock(
            "Window, worst case and margins",
            ("output", "edge", "window min", "window max", "worst case achieved", "margin low",
             "margin high", "verdict"),
            tuple(margins),
            (
                "Worst case over the clock tolerance (cut outward); margins: its minimum minus "
                "the window minimum, the window maximum minus its maximum (cut down). Window "
                "minima are shown rounded up, maxima down.",
            ),
        ),
    ]


def result_tables(plan: BuildPlan) -> list[TableBlock]:
    """Dead times per edge, PWM limits, costs (the chosen words and margins are the summary)."""
    edge_rows = [row for op in plan.outputs for row in _edge_rows(op)]
    pwm = [row for row in (_pwm_row(op) for op in plan.outputs) if row is not None]
    tables = [TableBlock("Dead times per edge", EDGE_HEADERS, tuple(edge_rows))]
    if pwm:
        tables.append(TableBlock("PWM limits", PWM_HEADERS, tuple(pwm)))
    costs = _cost_table(plan)
    if costs is not None:
        tables.append(costs)
    return tables
