"""The design report: one self-contained HTML page with inline SVG figures and tables.

    plan (build.plan_design) --+--> figure data --> figures (one function per figure, SVG text)
    capture (measure result) --+--> tables (rows of prepared strings)
                                      --> templates/report.html.j2 (Jinja2, StrictUndefined,
                                          loops only, no arithmetic) --> text

This module gathers the data (the pair's timing, the reference's node ramps, the staircases,
the Monte Carlo samples), builds the tables and renders the template; `figures` draws.

Figures: the complementary pair through one PWM period with both dead times dimensioned, the
clock-tolerance band shaded and the window edges drawn, plus a to-scale zoom of each transition;
the analog reference's node ramps against the Schmitt thresholds with the delay marked; the
quantization staircase of every output's layout around the request; the Monte Carlo histogram
of the reference's dead times with the window and the digital value; with a capture, the
histograms of measured gaps and the overlaps. A section whose input is absent (no [reference],
no [stage], no capture) says so instead of drawing.

Deterministic: no timestamps, a fixed Monte Carlo seed, fixed decimals in every coordinate, so a
rerun is byte-identical. Returns text; only the CLI writes files.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from typing import TYPE_CHECKING, Any

from markupsafe import Markup

from gapforge import __version__
from gapforge.base.caution import TEXT as CAUTION
from gapforge.base.quantities import format_quantity, format_tolerance
from gapforge.outputs.figures import (
    PairTiming,
    Ramp,
    Staircase,
    analog_figure,
    distribution_figure,
    overlap_figure,
    staircase_figure,
    timing_figure,
    transition_figure,
)
from gapforge.outputs.svg import PALETTE
from gapforge.outputs.templating import environment
from gapforge.pipeline.build import BuildPlan, OutputPlan
from gapforge.timer.layouts import EDGES, Field

if TYPE_CHECKING:
    from gapforge.analog.network import ReferenceNetwork
    from gapforge.bench.measure import Limits, Measurement

REPORT_FORMAT = 1
MC_SAMPLES = 20_000  # Monte Carlo samples drawn for the histogram (uniform over every band)
MC_SEED = 1
STAIR_STEPS = 6  # representable values shown each side of the chosen one
CURVE_POINTS = 80  # closed-form node ramp points per edge
SIM_BEYOND = 1.5  # the simulated node waveform runs on to (1 + this) x its delay

EDGE_TEXT = {
    "to_high": "to_high (low side off, then high side on)",
    "to_low": "to_low (high side off, then low side on)",
}


# ---------------------------------------------------------------------------------------------
# what the template receives


@dataclass(frozen=True)
class TableBlock:
    title: str
    headers: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class FigureBlock:
    svg: Markup
    caption: str


@dataclass(frozen=True)
class Section:
    ident: str
    title: str
    paragraphs: tuple[str, ...]
    figures: tuple[FigureBlock, ...] = ()
    tables: tuple[TableBlock, ...] = ()


def _t(value: Fraction | float | None, digits: int = 6) -> str:
    return "-" if value is None else format_quantity(value, "s", digits)


def _pct(value: Fraction | float) -> str:
    return f"{float(value) * 100:.4g} %"


# ---------------------------------------------------------------------------------------------
# the data the figures are drawn from


def _window_of(plan: BuildPlan, edge: str) -> tuple[Fraction | None, Fraction | None]:
    if plan.window is None:
        return None, None
    return plan.window[edge]


def _achieved(op: OutputPlan, edge: str) -> tuple[Fraction, Fraction, Fraction]:
    e = op.fit.edges[edge]
    assert e.achieved_s is not None and e.achieved_min_s is not None
    assert e.achieved_max_s is not None
    return e.achieved_s, e.achieved_min_s, e.achieved_max_s


def pair_timing(op: OutputPlan) -> PairTiming:
    """One period, edge-aligned (command on at 0) or centre-aligned (on-time centred)."""
    th, tl = _achieved(op, "to_high"), _achieved(op, "to_low")
    if op.limits is not None:
        period = 1 / op.limits.real_frequency_hz
        centre = op.limits.spec.counting == "center"
        assumed = False
    else:
        period = 20 * max(th[2], tl[2])
        centre, assumed = True, True
    on = period / 4 if centre else Fraction(0)
    return PairTiming(period, assumed, on, on + period / 2, th, tl)


# ---------------------------------------------------------------------------------------------
# 2. the analog reference's node ramps


def node_ramps(net: ReferenceNetwork, simulate: bool = True) -> dict[str, Ramp]:
    """Both input edges' node ramps: the model's closed form and, if asked, the simulation.

    The closed-form curve is the model's own delay function evaluated at many threshold levels
    (the time the node needs to reach each level), so it is the very formula the ranges come
    from. The simulated curve is the transient simulation's own node waveform (its accepted
    time points), from the input step through the threshold crossing and beyond.
    """
    import numpy as np

    from gapforge.analog.corners import channel_edge_delays, values_at

    vdd = float(net.vdd.typ)
    n = CURVE_POINTS
    levels = vdd * (np.arange(1, n) / n)
    v = dict(values_at(net, {"vdd": np.full(n - 1, 0.5)}))
    v["vt_plus"] = levels
    v["vt_minus"] = levels
    curve = channel_edge_delays(net, v)
    typ = dict(values_at(net, {"vdd": np.full(1, 0.5)}))
    typ_delays = channel_edge_delays(net, typ)
    ramps: dict[str, Ramp] = {}
    for edge in ("rising", "falling"):
        band = net.vt_plus if edge == "rising" else net.vt_minus
        thr = tuple(lv.volts(vdd) for lv in band.levels())
        times = curve["node_" + edge]
        start = 0.0 if edge == "rising" else vdd
        pts = [(0.0, start)] + [(float(t), float(lv)) for t, lv in zip(times, levels, strict=True)]
        if edge == "falling":
            pts = [pts[0], *sorted(pts[1:], key=lambda p: p[0])]
        sim_pts: tuple[tuple[float, float], ...] = ()
        sim_delay = None
        if simulate:
            sim_pts, sim_delay = _simulated_ramp(net, edge)
        ramps[edge] = Ramp(
            edge,
            vdd,
            (thr[0], thr[1], thr[2]),
            tuple(pts),
            float(typ_delays["node_" + edge][0]),
            sim_pts,
            sim_delay,
        )
    return ramps


def _simulated_ramp(
    net: ReferenceNetwork, edge: str
) -> tuple[tuple[tuple[float, float], ...], float | None]:
    """The simulated node waveform at typical parts and its delay; nothing if it fails."""
    from gapforge.analog import simulate

    try:
        wave = simulate.node_waveform(simulate.edge_circuit(net, edge), beyond=SIM_BEYOND)
    except simulate.SimulationError:
        return (), None
    points = zip(wave.times_s.tolist(), wave.volts.tolist(), strict=True)
    return tuple((float(t), float(v)) for t, v in points), wave.delay_s


# ---------------------------------------------------------------------------------------------
# 3. quantization staircases


def staircase(op: OutputPlan, field: Field, rounding: str) -> Staircase:
    """The rounding rule over the representable values near the chosen code, exactly.

    safe: a request r gets the smallest value v with v / (1 + tol) >= r, so value v_i serves
    requests in (v_(i-1) / (1 + tol), v_i / (1 + tol)]. nearest: v_i serves requests between
    the midpoints to its neighbours (a tie exactly on a midpoint sits on a riser, whichever
    value the fit gives it).
    """
    fit = op.fit
    assert fit.step_s is not None
    step, tol = fit.step_s, fit.request.clock_tol
    edges = [e for e in EDGES if fit.layout.edge_field(e) is field]
    requested = max(fit.request.requested(e) for e in edges)
    chosen_steps = fit.edges[edges[0]].steps
    assert chosen_steps is not None
    table = field.table[0]
    index = table.index(chosen_steps)
    lo, hi = max(0, index - STAIR_STEPS), min(len(table) - 1, index + STAIR_STEPS)

    def value(i: int) -> Fraction:
        return table[i] * step

    def upper(i: int) -> Fraction:
        """The largest request that value i serves."""
        if rounding == "safe":
            return value(i) / (1 + tol)
        return (value(i) + value(i + 1)) / 2 if i + 1 < len(table) else value(i)

    lower = Fraction(0) if lo == 0 else upper(lo - 1)
    breaks = (lower, *(upper(i) for i in range(lo, hi + 1)))
    return Staircase(tuple(value(i) for i in range(lo, hi + 1)), breaks, value(index), requested)


# ---------------------------------------------------------------------------------------------
# 4. Monte Carlo of the reference


def reference_samples(
    net: ReferenceNetwork, samples: int = MC_SAMPLES, seed: int = MC_SEED
) -> dict[str, Any]:
    """Seeded samples of the pair's dead times: every varying part uniform over its band.

    `tolerance.monte_carlo_samples`, the very draws `tolerance.monte_carlo` (and so
    `gapforge analog --monte-carlo N --seed S`) summarises for the same count and seed.
    """
    from gapforge.analog.tolerance import monte_carlo_samples

    return dict(monte_carlo_samples(net, samples, seed=seed))


# ---------------------------------------------------------------------------------------------
# tables


def input_tables(plan: BuildPlan) -> list[TableBlock]:
    d = plan.design
    rows: list[tuple[str, ...]] = [
        ("design file", d.label, ""),
        ("design SHA-256", d.sha256, ""),
        ("timer clock", format_quantity(d.clock_hz, "Hz", 9), "Hz"),
        ("clock tolerance", format_tolerance(d.clock_tol), "relative"),
        ("firmware clock macro", d.clock_macro, ""),
        (
            "PWM frequency",
            "-" if d.pwm is None else format_quantity(d.pwm.frequency_hz, "Hz", 9),
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
        TableBlock("Outputs", ("prefix", "layout", "summary", "header file", "struct"), out_rows)
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
                ("parameter", "value (min : typ : max)", "", "default's source"),
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
                (f"{side}: driver propagation delay", f"{_t(s.prop_min)} .. {_t(s.prop_max)}", "s"),
            ]
        st_rows += [
            ("channel mismatch", _t(spec.mismatch), "s"),
            ("isolator / level-shifter skew", _t(spec.isolator_skew), "s"),
            ("timer output skew", _t(spec.timer_skew), "s"),
            ("margin factor", f"{float(spec.margin):g}", "x"),
            ("switch kind", spec.kind, ""),
            ("reverse-conduction voltage", format_quantity(spec.reverse_voltage, "V"), "V"),
            ("current at to_high", format_quantity(spec.current_to_high, "A"), "A"),
            ("current at to_low", format_quantity(spec.current_to_low, "A"), "A"),
            (
                "switching frequency",
                "-" if spec.fsw is None else format_quantity(spec.fsw, "Hz"),
                "Hz",
            ),
            (
                "loss budget",
                "-" if spec.loss_budget is None else format_quantity(spec.loss_budget, "W"),
                "W",
            ),
            (
                "bus voltage",
                "-" if spec.bus_voltage is None else format_quantity(spec.bus_voltage, "V"),
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
        win = _window_of(plan, e)
        rows.append(
            (
                e,
                _t(st[0]),
                _t(st[1]) if st[1] is not None or plan.stage_window is None else "none",
                "-" if ref is None else f"{_t(ref.min_s)} .. {_t(ref.max_s)}",
                _t(win[0]),
                _t(win[1]) if win[1] is not None or plan.window is None else "none",
            )
        )
    tables.append(
        TableBlock(
            "Dead-time window",
            (
                "edge",
                "stage min",
                "stage max",
                "reference proven range",
                "window min",
                "window max",
            ),
            tuple(rows),
            (
                "The window is the power stage's window intersected with the reference's proven "
                "range.",
            ),
        )
    )
    if plan.stage is not None:
        for e in EDGES:
            terms = plan.stage.edges[e].breakdown
            t_rows = tuple(
                (
                    t.name,
                    _t(t.value) if t.unit == "s" else f"{float(t.value):g}",
                    "counted" if t.counted else "",
                    t.note,
                )
                for t in terms
            )
            tables.append(
                TableBlock(
                    f"Minimum breakdown, {e} (common practice)",
                    ("term", "value", "", "note"),
                    t_rows,
                )
            )
        max_terms = plan.stage.edges["to_high"].max_breakdown
        if max_terms:
            tables.append(
                TableBlock(
                    "Maximum (loss budget)",
                    ("term", "value", "", "note"),
                    tuple(
                        (
                            t.name,
                            _t(t.value) if t.unit == "s" else f"{float(t.value):g} {t.unit}",
                            "",
                            t.note,
                        )
                        for t in max_terms
                    ),
                    (plan.stage.edges["to_high"].max_reason,),
                )
            )
    return tables


def result_tables(plan: BuildPlan) -> list[TableBlock]:
    rows: list[tuple[str, ...]] = []
    margins: list[tuple[str, ...]] = []
    pwm: list[tuple[str, ...]] = []
    for op in plan.outputs:
        f = op.fit
        for e in EDGES:
            x = f.edges[e]
            rel = x.relative_error
            rows.append(
                (
                    op.output.prefix,
                    f.layout.name,
                    e,
                    x.field,
                    "-" if x.code is None else str(x.code),
                    _t(x.requested_s),
                    _t(x.achieved_s),
                    f"{_t(x.achieved_min_s)} .. {_t(x.achieved_max_s)}",
                    "-"
                    if x.error_s is None
                    else (_t(x.error_s) + ("" if rel is None else f" ({float(rel) * 100:+.3g} %)")),
                    _t(x.step_s),
                    _t(x.max_s),
                )
            )
            j = op.judgements.get(e)
            win = _window_of(plan, e)
            margins.append(
                (
                    op.output.prefix,
                    e,
                    _t(win[0]),
                    _t(win[1]),
                    "-" if j is None else _t(j.margin_low_s),
                    "-" if j is None else _t(j.margin_high_s),
                    op.verdict if j is None else j.verdict,
                )
            )
        if op.limits is not None:
            lim = op.limits
            pwm.append(
                (
                    op.output.prefix,
                    str(lim.period_counts),
                    format_quantity(lim.real_frequency_hz, "Hz", 9),
                    f"{lim.duty_bits:.2f}",
                    f"{_pct(lim.duty_min)} .. {_pct(lim.duty_max)}",
                    _pct(lim.edges["to_high"].share),
                    _pct(lim.edges["to_low"].share),
                    lim.verdict,
                )
            )
    regs = tuple(
        (
            op.output.prefix,
            op.fit.layout.name,
            "-" if op.fit.divider is None else f"code {op.fit.divider_code} (/{op.fit.divider})",
            _t(op.fit.step_s),
            ", ".join(f"{k}={v}" for k, v in op.fit.fields.items()) or "-",
            "-"
            if op.fit.register is None
            else f"0x{op.fit.register:0{op.fit.layout.register_bits // 4}x}",
            op.verdict,
        )
        for op in plan.outputs
    )
    tables = [
        TableBlock(
            "Fitted codes",
            ("output", "layout", "divider", "step", "fields", "register", "verdict"),
            regs,
        ),
        TableBlock(
            "Dead times per edge",
            (
                "output",
                "layout",
                "edge",
                "field",
                "code",
                "requested",
                "achieved",
                "worst case (clock tolerance)",
                "error",
                "step",
                "layout max",
            ),
            tuple(rows),
        ),
        TableBlock(
            "Margins to the window and verdicts",
            ("output", "edge", "window min", "window max", "margin low", "margin high", "verdict"),
            tuple(margins),
            (
                "Margins are worst case: achieved minimum over the clock tolerance minus the "
                "window minimum, window maximum minus the achieved maximum.",
            ),
        ),
    ]
    if pwm:
        tables.append(
            TableBlock(
                "PWM limits",
                (
                    "output",
                    "clocks per period",
                    "real frequency",
                    "duty bits",
                    "usable duty",
                    "to_high share",
                    "to_low share",
                    "verdict",
                ),
                tuple(pwm),
            )
        )
    if plan.design.stage is not None and plan.outputs:
        cost_rows: list[tuple[str, ...]] = []
        for op in plan.outputs:
            if not op.fit.ok or op.costs is None:
                continue
            c = op.costs  # the same costs `build` prints: at the longest (slow-clock) dead time
            cost_rows.append(
                (
                    op.output.prefix,
                    format_quantity(c.reverse_conduction_w, "W"),
                    format_quantity(c.recovery_w, "W"),
                    "-" if c.duty_lost is None else _pct(c.duty_lost),
                    "-" if c.voltage_error_v is None else format_quantity(c.voltage_error_v, "V"),
                )
            )
        tables.append(
            TableBlock(
                "Costs of the chosen dead times (at their longest, slow clock)",
                (
                    "output",
                    "reverse conduction",
                    "recovery",
                    "switch-node duty change (by current sign)",
                    "average output-voltage error",
                ),
                tuple(cost_rows),
            )
        )
    return tables


# ---------------------------------------------------------------------------------------------
# the sections


def _timing_section(plan: BuildPlan) -> Section:
    figures: list[FigureBlock] = []
    for i, op in enumerate(plan.outputs):
        if not op.fit.ok:
            continue
        pt = pair_timing(op)
        period = (
            "an illustrative period (the design has no [pwm] section)"
            if pt.assumed_period
            else f"one PWM period of {_t(pt.period_s)}"
        )
        windows = {e: _window_of(plan, e) for e in EDGES}
        figures.append(
            FigureBlock(
                Markup(timing_figure(pt, op.output.prefix, windows, f"timing-{i}")),
                f"{op.output.prefix} ({op.fit.layout.name}): {period} at 50 % "
                "commanded duty. Grey: both gates off; blue-grey: the spread "
                "of each turn-on over the clock tolerance; dash-dot: window "
                "edges.",
            )
        )
        for e in EDGES:
            zoom = transition_figure(
                op.output.prefix,
                e,
                _achieved(op, e),
                op.fit.edges[e].requested_s,
                windows[e],
                f"zoom-{i}-{e}",
            )
            figures.append(
                FigureBlock(Markup(zoom), f"{op.output.prefix}: {EDGE_TEXT[e]}, to scale.")
            )
    paragraphs: tuple[str, ...] = (
        "Each output's gates through one PWM period, then each transition to scale.",
    )
    if not figures:
        paragraphs += ("No output was fitted, so there is no timing to draw.",)
    return Section("timing", "Timing diagrams", paragraphs, tuple(figures))


def _analog_section(plan: BuildPlan) -> Section:
    net = plan.design.reference
    if net is None:
        return Section(
            "analog",
            "Analog reference",
            (
                "Absent: the design has no [reference] section, so there is no analog "
                "network to draw.",
            ),
        )
    ramps = node_ramps(net)
    figures = [
        FigureBlock(
            Markup(analog_figure(ramps[e], net.bypass == e, f"analog-{e}")),
            f"{e} input edge at typical parts: "
            + (
                "simulated (transient waveform) and closed form."
                if ramps[e].simulated
                else "closed form (no transient simulation)."
            ),
        )
        for e in ("rising", "falling")
    ]
    tables = []
    if plan.reference is not None:
        rows = tuple((e, _t(r.min_s), _t(r.typ_s), _t(r.max_s)) for e, r in plan.reference.items())
        tables.append(
            TableBlock(
                "Reference dead times (worst-case corners, Monte Carlo checked)",
                ("edge", "min", "typ", "max"),
                rows,
            )
        )
    try:
        from gapforge.analog.simulate import slow_edge_over_temperature
    except ImportError:
        slow: list[Any] = []
    else:
        slow = list(slow_edge_over_temperature(net))
    if slow:
        tables.append(
            TableBlock(
                "Slow edge over temperature (transient simulation, typical parts)",
                ("input edge", "temperature", "node delay", "without diode leakage", "erosion"),
                tuple(
                    (
                        p.edge,
                        f"{p.temp_c:g} C",
                        _t(p.delay_s),
                        _t(p.delay_no_leakage_s),
                        f"{p.erosion * 100:.2f} %",
                    )
                    for p in slow
                ),
            )
        )
    return Section(
        "analog",
        "Analog reference",
        (
            "The capacitor node on each input edge against the Schmitt threshold band, "
            "with the node delay (ideal input step to the threshold crossing) marked.",
        ),
        tuple(figures),
        tuple(tables),
    )


def _staircase_section(plan: BuildPlan) -> Section:
    figures: list[FigureBlock] = []
    for i, op in enumerate(plan.outputs):
        if not op.fit.ok:
            continue
        for f in op.fit.layout.dead_time_fields:
            edges = [e for e in EDGES if op.fit.layout.edge_field(e) is f]
            stair = staircase_figure(
                staircase(op, f, op.fit.request.rounding),
                op.output.prefix,
                f.name,
                edges,
                [_window_of(plan, e) for e in edges],
                f"stair-{i}-{f.name}",
            )
            figures.append(
                FigureBlock(
                    Markup(stair),
                    f"{op.output.prefix}, {op.fit.layout.name}: {op.fit.request.rounding} rounding at "
                    f"divider /{op.fit.divider} (step {_t(op.fit.step_s)}), "
                    f"{STAIR_STEPS} representable values each side of the chosen one.",
                )
            )
    paragraphs: tuple[str, ...] = (
        "How each layout's codes turn a requested dead time into an achieved one.",
    )
    if not figures:
        paragraphs += ("No output was fitted, so there is no staircase to draw.",)
    return Section("quantization", "Quantization", paragraphs, tuple(figures))


def _monte_carlo_section(plan: BuildPlan) -> Section:
    net = plan.design.reference
    if net is None:
        return Section(
            "monte-carlo",
            "Monte Carlo of the reference",
            ("Absent: the design has no [reference] section.",),
        )
    samples = reference_samples(net)
    first = next((op for op in plan.outputs if op.fit.ok), None)
    figures = []
    for e in EDGES:
        digital = _achieved(first, e) if first is not None else None
        figures.append(
            FigureBlock(
                Markup(
                    distribution_figure(
                        samples[e],
                        edge=e,
                        window=_window_of(plan, e),
                        digital=digital,
                        predicted=None,
                        style=PALETTE["reference"],
                        what="reference Monte Carlo",
                        ident=f"mc-{e}",
                    )
                ),
                f"{MC_SAMPLES} seeded samples (seed {MC_SEED}), every part uniform over its band"
                + ("" if first is None else f"; digital value of {first.output.prefix}."),
            )
        )
    return Section(
        "monte-carlo",
        "Monte Carlo of the reference",
        (
            "The analog network's dead time over its parts' tolerances, against the "
            "window and the digital value that replaces it.",
        ),
        tuple(figures),
    )


def _capture_section(plan: BuildPlan, m: Measurement | None) -> Section:
    if m is None:
        return Section(
            "capture",
            "Bench capture",
            ("Absent: no capture was given (gapforge report --capture FILE).",),
        )
    figures = []
    first = next((op for op in plan.outputs if op.fit.ok), None)
    for e in EDGES:
        stats = m.edge(e)
        if stats.count == 0:
            continue
        lim = m.limits.get(e)
        predicted = None
        if lim is not None and lim.predicted_min_s is not None and lim.predicted_max_s is not None:
            predicted = (lim.predicted_min_s, lim.predicted_max_s)
        window = (lim.window_min_s, lim.window_max_s) if lim is not None else (None, None)
        figures.append(
            FigureBlock(
                Markup(
                    distribution_figure(
                        stats.gaps_s,
                        edge=e,
                        window=window,
                        digital=None,
                        predicted=predicted,
                        style=PALETTE["measured"],
                        what="measured gaps",
                        ident=f"capture-{e}",
                    )
                ),
                f"{stats.count} measured {e} gaps"
                + ("" if first is None else f"; predicted range of {first.output.prefix}."),
            )
        )
    figures.append(
        FigureBlock(
            Markup(overlap_figure(m.duration_s, [o.at_s for o in m.overlaps], "overlaps")),
            "Overlaps: both gates on at once (shoot-through).",
        )
    )
    rows = []
    for e in EDGES:
        s = m.edge(e)
        rows.append(
            (
                e,
                str(s.count),
                _t(s.min_s),
                _t(s.max_s),
                _t(s.mean_s),
                _t(s.std_s),
                str(s.below_window),
                str(s.above_window),
            )
        )
    tables = [
        TableBlock(
            "Measured gaps",
            ("edge", "count", "min", "max", "mean", "std dev", "below window", "above window"),
            tuple(rows),
        )
    ]
    tables.append(
        TableBlock(
            "Overlaps (first 50)",
            ("time", "duration"),
            tuple((_t(o.at_s, 9), _t(o.duration_s)) for o in m.overlaps[:50]),
            (f"{len(m.overlaps)} overlap(s) in total." if m.overlaps else "No overlap.",),
        )
    )
    paragraphs = (
        f"Capture {m.source}: {_t(m.duration_s)} at a tick of {_t(m.tick_s)}; verdict {m.verdict}.",
        *m.reasons,
        *m.notes,
        *m.warnings,
    )
    return Section("capture", "Bench capture", paragraphs, tuple(figures), tuple(tables))


def capture_limits(plan: BuildPlan) -> dict[str, Limits]:
    """What a capture is judged against: the window and the first fitted output's range."""
    from gapforge.bench.measure import Limits
    from gapforge.pipeline.build import capture_expectations

    return {e: Limits(*x) for e, x in capture_expectations(plan).items()}


def _adaptive_sections(plan: BuildPlan) -> list[Section]:
    """Dead time by load current (issue 12), only for designs with [adaptive]."""
    outputs = [(op.output.prefix, op.adaptive) for op in plan.outputs if op.adaptive is not None]
    if not outputs:
        return []
    from gapforge.outputs.adaptive_report import adaptive_parts

    paragraphs, figures, tables = adaptive_parts(outputs)
    return [
        Section(
            "adaptive",
            "Dead time by load current",
            paragraphs,
            tuple(FigureBlock(Markup(svg), caption) for svg, caption in figures),
            tuple(TableBlock(t, h, r, n) for t, h, r, n in tables),
        )
    ]


def render_report(plan: BuildPlan, capture: Measurement | None = None) -> str:
    """The whole report as HTML text (self-contained: inline CSS and SVG, no scripts)."""
    d = plan.design
    warnings = [f"{op.output.prefix}: {w}" for op in plan.outputs for w in op.warnings]
    sections = [
        Section(
            "results",
            "Results, margins and verdicts",
            (f"Verdict: {plan.verdict}.", *plan.reasons, *warnings),
            (),
            tuple(result_tables(plan)),
        ),
        _timing_section(plan),
        _analog_section(plan),
        _staircase_section(plan),
        _monte_carlo_section(plan),
        *_adaptive_sections(plan),
        _capture_section(plan, capture),
        Section(
            "window",
            "Window",
            (
                "Absent: the design has neither a [stage] nor a [reference] section, so there is no "
                "window; margins are not judged.",
            )
            if plan.window is None
            else (),
            (),
            tuple(window_tables(plan)) if plan.window is not None else (),
        ),
        Section(
            "inputs",
            "Inputs",
            ("Every input the numbers come from, with its unit.",),
            (),
            tuple(input_tables(plan)),
        ),
    ]
    verdict_class = (
        "ok" if plan.verdict == "ok" and (capture is None or not capture.failed) else "fail"
    )
    return (
        environment(html=True)
        .get_template("report.html.j2")
        .render(
            title=f"gapforge design report: {d.name}",
            design=d.label,
            description=d.description,
            version=__version__,
            report_format=REPORT_FORMAT,
            verdict=plan.verdict,
            capture_verdict="-" if capture is None else capture.verdict,
            verdict_class=verdict_class,
            caution=CAUTION,
            sections=sections,
            toc=[(s.ident, s.title) for s in sections],
        )
    )
