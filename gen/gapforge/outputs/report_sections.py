"""The report's sections, in the order of the decision: what the stage needs (the window), what
the timer gives (quantization, timing), what the analog reference did, what the hardware did
(bench captures), then every input. A section whose input is absent says so instead of drawing.
"""

from __future__ import annotations

import re
from fractions import Fraction
from typing import TYPE_CHECKING, Any

from markupsafe import Markup

from gapforge.base.display import count, format_percent, format_si
from gapforge.base.records import record
from gapforge.outputs.figures import (
    analog_figure,
    staircase_figure,
    timing_figure,
    transition_figure,
)
from gapforge.outputs.histograms import (
    bin_counts,
    distribution_figure,
    overlap_figure,
    overlap_zoom_figure,
    value_range,
)
from gapforge.outputs.report_data import (
    EDGE_TEXT,
    MC_SAMPLES,
    MC_SEED,
    STAIR_STEPS,
    achieved,
    node_ramps,
    pair_timing,
    reference_samples,
    staircase,
    window_of,
)
from gapforge.outputs.report_tables import TableBlock
from gapforge.outputs.svg import PALETTE, nice_range
from gapforge.pipeline.build import BuildPlan
from gapforge.timer.layouts import EDGES

if TYPE_CHECKING:
    from gapforge.bench.measure import Measurement


# a capture's verdict in the one vocabulary (older words: pass, measured)
_CAPTURE_WORDS = {"pass": "ok", "measured": "inconclusive"}


def _t(value: Fraction | float | None) -> str:
    return "-" if value is None else format_si(value, "s")


@record
class FigureBlock:
    svg: Markup
    caption: str

    @property
    def kind(self) -> str:
        """ "wide" for a figure wider than half a page (printed across the page), else "half"."""
        match = re.search(r'<svg[^>]* width="(\d+)', self.svg)
        return "wide" if match and int(match.group(1)) > 600 else "half"


@record
class Section:
    ident: str
    title: str
    paragraphs: tuple[str, ...]
    figures: tuple[FigureBlock, ...] = ()
    tables: tuple[TableBlock, ...] = ()


def _fitted(plan: BuildPlan) -> list[tuple[int, Any]]:
    return [(i, op) for i, op in enumerate(plan.outputs) if op.fit.ok]


def transition_figures(plan: BuildPlan) -> list[FigureBlock]:
    """Each fitted output's transitions to scale: the worst case against the window."""
    figures: list[FigureBlock] = []
    windows = {e: window_of(plan, e) for e in EDGES}
    for i, op in _fitted(plan):
        for e in EDGES:
            zoom = transition_figure(
                op.output.prefix,
                e,
                achieved(op, e),
                op.fit.edges[e].requested_s,
                windows[e],
                f"zoom-{i}-{e}",
            )
            figures.append(
                FigureBlock(Markup(zoom), f"{op.output.prefix}: {EDGE_TEXT[e]}, to scale.")
            )
    return figures


def timing_section(plan: BuildPlan) -> Section:
    """Each output's gates through one PWM period (the transitions to scale are decision plots)."""
    figures: list[FigureBlock] = []
    windows = {e: window_of(plan, e) for e in EDGES}
    for i, op in _fitted(plan):
        pt = pair_timing(op)
        period = (
            "an illustrative period (the design has no [pwm] section)"
            if pt.assumed_period
            else f"one PWM period of {_t(pt.period_s)}"
        )
        figures.append(
            FigureBlock(
                Markup(timing_figure(pt, op.output.prefix, windows, f"timing-{i}")),
                f"{op.output.prefix} ({op.fit.layout.name}): {period} at 50 % "
                "commanded duty. Grey: both gates off; blue-grey: the spread "
                "of each turn-on over the clock tolerance (where wide enough to see); "
                "dash-dot: window edges.",
            )
        )
    paragraphs: tuple[str, ...] = (
        "Each output's gates through one PWM period (each transition to scale is among the "
        "decision plots above).",
    )
    if not figures:
        paragraphs += ("No output was fitted, so there is no timing to draw.",)
    return Section("timing", "Timing diagrams", paragraphs, tuple(figures))


def decision_section(plan: BuildPlan) -> Section:
    """The plots that carry the decision: each transition to scale against the window, the old
    network's Monte Carlo against the window and its worst case, dead time by load current."""
    figures = transition_figures(plan) + monte_carlo_figures(plan)
    outputs = [(op.output.prefix, op.adaptive) for op in plan.outputs if op.adaptive is not None]
    if outputs:
        from gapforge.outputs.adaptive_report import adaptive_parts

        _, adaptive, _ = adaptive_parts(outputs)
        figures += [FigureBlock(Markup(svg), caption) for svg, caption in adaptive]
    paragraphs: tuple[str, ...] = (
        "Each transition to scale against the window"
        + ("" if plan.design.reference is None
           else "; the old network's dead time over its parts' tolerances, with its worst case")
        + ("" if not outputs else "; the dead time by load current")
        + ". Everything else is folded below.",
    )
    if not figures:
        paragraphs += ("No output was fitted, so there is no decision plot to draw.",)
    return Section("decision", "Decision plots", paragraphs, tuple(figures))


def analog_section(plan: BuildPlan) -> Section:
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
                "Reference dead times (worst-case corners, checked on a finer grid)",
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
                        format_percent(p.erosion),
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


def staircase_section(plan: BuildPlan) -> Section:
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
                [window_of(plan, e) for e in edges],
                f"stair-{i}-{f.name}",
            )
            figures.append(
                FigureBlock(
                    Markup(stair),
                    f"{op.output.prefix}, {' and '.join(edges)} (field {f.name} of "
                    f"target layout {op.fit.layout.name}): {op.fit.request.rounding} rounding at "
                    f"divider /{op.fit.divider} (step {_t(op.fit.step_s)}), "
                    f"{STAIR_STEPS} representable values each side of the chosen one.",
                )
            )
    paragraphs: tuple[str, ...] = (
        "How each target layout's codes turn a requested dead time into an achieved one.",
    )
    if not figures:
        paragraphs += ("No output was fitted, so there is no staircase to draw.",)
    return Section("quantization", "Quantization", paragraphs, tuple(figures))


def monte_carlo_figures(plan: BuildPlan) -> list[FigureBlock]:
    """The old network's Monte Carlo per edge: the axis holds the samples, the window, the
    digital value's band and the worst-case corners; samples outside the window coloured."""
    net = plan.design.reference
    if net is None:
        return []
    samples = reference_samples(net)
    first = next((op for op in plan.outputs if op.fit.ok), None)
    worst = {
        e: None if plan.reference is None else (plan.reference[e].min_s, plan.reference[e].max_s)
        for e in EDGES
    }
    shared = _shared_axes(
        {e: samples[e] for e in EDGES},
        {
            e: [float(x) for x in window_of(plan, e) if x is not None]
            + ([] if first is None else [float(x) for x in achieved(first, e)[1:]])
            + [float(x) for x in worst[e] or ()]
            for e in EDGES
        },
    )
    figures = []
    for e in EDGES:
        digital = achieved(first, e) if first is not None else None
        figures.append(
            FigureBlock(
                Markup(
                    distribution_figure(
                        samples[e],
                        edge=e,
                        window=window_of(plan, e),
                        digital=digital,
                        predicted=None,
                        style=PALETTE["reference"],
                        what="reference Monte Carlo",
                        ident=f"mc-{e}",
                        x_range=shared[0],
                        count_top=shared[1],
                        worst=worst[e],
                    )
                ),
                f"{EDGE_TEXT[e]}: {MC_SAMPLES} seeded samples (seed {MC_SEED}) of the old network, "
                "every part uniform over its band; bracket: the worst case over the tolerance "
                "corners; pink: samples outside the window"
                + ("; hatched: at or below zero dead time (overlap)" if shared[0][0] < 0 else "")
                + ("." if first is None else f"; black: the digital value of {first.output.prefix}.")
                + _beyond_worst(samples[e], worst[e]),
            )
        )
    return figures


def _beyond_worst(values: Any, worst: tuple[Fraction, Fraction] | None) -> str:
    """A caption's warning when samples fall outside the worst-case bracket (a response the
    corner search missed: the worst case is then not proven)."""
    if worst is None:
        return ""
    lo, hi = float(worst[0]), float(worst[1])
    count = int(((values < lo) | (values > hi)).sum())
    if count == 0:
        return ""
    return (f" WARNING: {count} samples lie outside the worst-case bracket: the corner search "
            "missed an extreme of this network, so its worst case is not proven.")


def _capture_marks(m: Measurement, edge: str) -> list[float]:
    lim = m.limits.get(edge)
    if lim is None:
        return []
    marks = (lim.window_min_s, lim.window_max_s, lim.predicted_min_s, lim.predicted_max_s)
    return [float(x) for x in marks if x is not None]


def _shared_axes(
    values: dict[str, Any], marks: dict[str, list[float]]
) -> tuple[tuple[float, float], int]:
    """One x range and one count scale for side-by-side histograms, so they compare."""
    ranges = [value_range(values[e], marks[e]) for e in values]
    x_range = nice_range(min(r[0] for r in ranges), max(r[1] for r in ranges), 8)
    top = max(max(bin_counts(values[e], x_range), default=1) for e in values)
    return x_range, top


def capture_section(plan: BuildPlan, m: Measurement | None) -> Section:
    if m is None:
        return Section(
            "capture",
            "Bench capture",
            ("Absent: no capture was given (gapforge report --capture FILE).",),
        )
    figures = []
    first = next((op for op in plan.outputs if op.fit.ok), None)
    measured = [e for e in EDGES if m.edge(e).count > 0]
    shared = (
        _shared_axes(
            {e: m.edge(e).gaps_s for e in measured},
            {e: _capture_marks(m, e) for e in measured},
        )
        if measured
        else None
    )
    for e in measured:
        stats = m.edge(e)
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
                        x_range=None if shared is None else shared[0],
                        count_top=None if shared is None else shared[1],
                    )
                ),
                f"{EDGE_TEXT[e]}: {stats.count} measured gaps"
                + ("." if first is None else f"; predicted range of {first.output.prefix}."),
            )
        )
    figures.append(
        FigureBlock(
            Markup(overlap_figure(m.duration_s, [o.at_s for o in m.overlaps], "overlaps")),
            "Overlaps: both gates on at once (shoot-through), in red.",
        )
    )
    if m.overlaps:
        first_overlap = m.overlaps[0]
        figures.append(
            FigureBlock(
                Markup(overlap_zoom_figure(first_overlap.at_s, first_overlap.duration_s,
                                           "overlap-zoom")),
                "The first measured overlap to scale: both gates on together (red).",
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
            tuple((_t(o.at_s), _t(o.duration_s)) for o in m.overlaps[:50]),
            (f"{count(len(m.overlaps), 'overlap')} in total." if m.overlaps else "No overlap.",),
        )
    )
    paragraphs = (
        f"Capture {m.source}: {_t(m.duration_s)} at a tick of {_t(m.tick_s)}; verdict "
        f"{_CAPTURE_WORDS.get(m.verdict, m.verdict)}.",
        *m.reasons,
        *m.notes,
        *m.warnings,
    )
    return Section("capture", "Bench capture", paragraphs, tuple(figures), tuple(tables))


def adaptive_sections(plan: BuildPlan) -> list[Section]:
    """Dead time by load current (issue 12), only for designs with [adaptive]."""
    outputs = [(op.output.prefix, op.adaptive) for op in plan.outputs if op.adaptive is not None]
    if not outputs:
        return []
    from gapforge.outputs.adaptive_report import adaptive_parts

    paragraphs, _, tables = adaptive_parts(outputs)
    return [
        Section(
            "adaptive",
            "Dead time by load current: the table",
            (*paragraphs, "The figure is among the decision plots above."),
            (),
            tuple(TableBlock(t, h, r, n) for t, h, r, n in tables),
        )
    ]
