"""Sweep timer layouts x timer clocks x dividers against a dead-time window.

For every point the window's minimum is requested with `safe` rounding (the smallest value whose
worst case, at the fastest clock, is still >= the minimum); the point is feasible when the
achieved worst case at the slowest clock is still <= the window's maximum on both edges and,
when a PWM is given, the fitted dead time also fits the PWM (gapforge.timer.limits: less than half a
period, and some commanded duty still gives a pulse on both outputs) -- the checks `build` makes.
Feasible points are ranked, by default, by the least dead time that is safe (`loss`): the smallest
worst-case maximum above the window minimum over both edges (the dead time the slow clock can
stretch to, beyond what the stage needs, is reverse-conduction loss). `margin` ranks by the larger
worst-case distance to either window edge instead, `error` by quantization error. Ties break
deterministically: lowest clock, then fewest register-field bits, then layout name and divider.
Every infeasible point carries the reason it fails.

Layouts are loaded by the caller once and passed in; nothing is read or rendered per point.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from fractions import Fraction

from gapforge.base.display import both_edges, format_si
from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import parse_quantity
from gapforge.base.records import record
from gapforge.stage.window import EDGES, Window, WindowEdge, judge
from gapforge.timer.fit import FitRequest, fit
from gapforge.timer.layouts import Layout
from gapforge.timer.limits import PwmSpec, compare_counts, pwm_limits

RANKS = ("loss", "margin", "error")
MAX_CLOCKS = 100_000

# edge -> (min_s, max_s or None)
Limits = Mapping[str, tuple[Fraction, Fraction | None]]


@record
class RowEdge:
    code: int
    steps: int
    achieved_s: Fraction
    achieved_min_s: Fraction
    achieved_max_s: Fraction
    error_s: Fraction
    margin_low_s: Fraction
    margin_high_s: Fraction | None
    verdict: str


@record
class RowPwm:
    """The PWM limits of a point's fitted dead time (gapforge.timer.limits.PwmLimits, condensed)."""

    compare_counts: int  # N: compare range 0..N
    period_counts: int
    duty_min_counts: int
    duty_max_counts: int
    max_share: Fraction  # the larger dead time as a share of the PWM period
    verdict: str


@record
class SweepRow:
    layout: str
    clock_hz: Fraction
    divider_code: int
    divider: int
    feasible: bool
    reason: str
    fields: dict[str, int]
    register: int | None
    edges: dict[str, RowEdge]
    worst_margin_s: Fraction | None
    worst_error_s: Fraction | None
    pwm: RowPwm | None = None
    worst_above_min_s: Fraction | None = None  # max over edges of achieved_max - window min
    bits: int = 0  # the layout's register-field bits (a tie-break: fewer is simpler)
    register_bits: int = 32  # the register's width (the hex word is padded to it)


@record
class Sweep:
    limits: dict[str, tuple[Fraction, Fraction | None]]
    clock_tol: Fraction
    rank: str
    feasible: tuple[SweepRow, ...]  # ranked, best first
    infeasible: tuple[SweepRow, ...]  # in layout, clock, divider order
    layouts: tuple[str, ...]
    clocks: tuple[Fraction, ...]
    pwm: PwmSpec | None = None

    @property
    def points(self) -> int:
        return len(self.feasible) + len(self.infeasible)


def limits_of(window: Window) -> dict[str, tuple[Fraction, Fraction | None]]:
    return {edge: (window.edges[edge].min_s, window.edges[edge].max_s) for edge in EDGES}


def _window_edge(lo: Fraction, hi: Fraction | None) -> WindowEdge:
    return WindowEdge(lo, hi, lo, (), (), "")


def parse_clocks(texts: Sequence[str], where: str = "--clocks") -> tuple[Fraction, ...]:
    """Clocks from 'F1,F2,...' lists and 'START:STOP:STEP' ranges (STOP included when on grid)."""
    clocks: set[Fraction] = set()
    for text in texts:
        for part in text.split(","):
            part = part.strip()
            if not part:
                continue
            pieces = part.split(":")
            if len(pieces) == 1:
                clocks.add(parse_quantity(part, "Hz", where))
                continue
            if len(pieces) != 3:
                raise GapforgeError(
                    f"{part!r}: expected a clock or START:STOP:STEP (100MHz:200MHz:5MHz)", where
                )
            start = parse_quantity(pieces[0], "Hz", where)
            stop = parse_quantity(pieces[1], "Hz", where)
            step = parse_quantity(pieces[2], "Hz", where)
            if stop < start:
                raise GapforgeError(f"{part!r}: STOP is below START", where)
            count = int((stop - start) / step) + 1
            if len(clocks) + count > MAX_CLOCKS:
                raise GapforgeError(f"{part!r} gives more than {MAX_CLOCKS} clocks", where)
            clocks.update(start + k * step for k in range(count))
    if not clocks:
        raise GapforgeError("no clocks given", where)
    if len(clocks) > MAX_CLOCKS:
        raise GapforgeError(f"more than {MAX_CLOCKS} clocks", where)
    return tuple(sorted(clocks))


def sweep(
    layouts: Sequence[Layout],
    clocks: Sequence[Fraction],
    clock_tol: Fraction,
    limits: Limits,
    rank: str = "loss",
    pwm: PwmSpec | None = None,
    progress: Callable[[int], object] | None = None,
) -> Sweep:
    """Every layout x clock x divider code, judged against the window limits per edge and, with
    `pwm`, against the PWM limits of the fitted dead time. `progress(1)` is called after each
    layout x clock (the CLI's progress bar)."""
    if rank not in RANKS:
        raise GapforgeError(f"rank must be one of {', '.join(RANKS)}", "--rank")
    if not 0 <= clock_tol < 1:
        raise GapforgeError("the clock tolerance must be in 0..100 %", "--clock-tol")
    for edge in EDGES:
        lo, hi = limits[edge]
        if lo < 0 or (hi is not None and hi < 0):
            raise GapforgeError("window limits must not be negative", edge)
    window = {edge: _window_edge(*limits[edge]) for edge in EDGES}
    empty = [e for e in EDGES if window[e].empty]
    feasible: list[SweepRow] = []
    infeasible: list[SweepRow] = []
    # a clock too slow for the PWM (under 2 counts per period) fails on every layout and divider
    pwm_problem = {clock: _pwm_problem(clock, pwm) for clock in clocks} if pwm else {}
    for layout in layouts:
        for clock in clocks:
            if pwm_problem.get(clock):
                for d, divider in enumerate(layout.dividers):
                    infeasible.append(_bare(layout, clock, d, divider, pwm_problem[clock]))
                continue
            if empty:
                reason = "empty window on " + ", ".join(
                    f"{e} ({_t(limits[e][0])} > {_t(limits[e][1] or Fraction(0))})" for e in empty
                )
                for d, divider in enumerate(layout.dividers):
                    infeasible.append(_bare(layout, clock, d, divider, reason))
                continue
            request = FitRequest(
                clock_hz=clock,
                clock_tol=clock_tol,
                to_high_s=limits["to_high"][0],
                to_low_s=limits["to_low"][0],
                rounding="safe",
            )
            for d, divider in enumerate(layout.dividers):
                row = _point(layout, clock, d, divider, request, window, pwm)
                (feasible if row.feasible else infeasible).append(row)
            if progress is not None:
                progress(1)
    if rank == "loss":
        feasible.sort(key=lambda r: (_num(r.worst_above_min_s), _order(r)))
    elif rank == "margin":
        feasible.sort(key=lambda r: (-_num(r.worst_margin_s), _num(r.worst_error_s), _order(r)))
    else:
        feasible.sort(key=lambda r: (_num(r.worst_error_s), -_num(r.worst_margin_s), _order(r)))
    return Sweep(
        limits={e: limits[e] for e in EDGES},
        clock_tol=clock_tol,
        rank=rank,
        feasible=tuple(feasible),
        infeasible=tuple(infeasible),
        layouts=tuple(layout.name for layout in layouts),
        clocks=tuple(clocks),
        pwm=pwm,
    )


def _pwm_problem(clock: Fraction, pwm: PwmSpec) -> str:
    try:
        compare_counts(clock, pwm)
    except GapforgeError as exc:
        return f"pwm: {exc.message}"
    return ""


def _pwm_text(spec: PwmSpec) -> str:
    return f"{format_si(spec.frequency_hz, 'Hz')} {spec.counting}-aligned PWM"


def _num(value: Fraction | None) -> Fraction:
    return value if value is not None else Fraction(0)


def _order(row: SweepRow) -> tuple[Fraction, int, str, int]:
    """The deterministic tie-break: lowest clock, fewest bits, then layout name and divider."""
    return (row.clock_hz, row.bits, row.layout, row.divider_code)


def _t(value: Fraction) -> str:
    return format_si(value, "s")


def _bare(layout: Layout, clock: Fraction, d: int, divider: int, reason: str) -> SweepRow:
    return SweepRow(
        layout.name, clock, d, divider, False, reason, {}, None, {}, None, None, bits=_bits(layout)
    )


def _bits(layout: Layout) -> int:
    return sum(f.width for f in layout.fields)


def _point(
    layout: Layout,
    clock: Fraction,
    d: int,
    divider: int,
    request: FitRequest,
    window: dict[str, WindowEdge],
    pwm: PwmSpec | None,
) -> SweepRow:
    result = fit(layout, request, d)
    if result.verdict != "ok":
        parts = []
        for edge in EDGES:
            e = result.edges[edge]
            if e.requested_s > e.max_min_s:
                parts.append(
                    f"{edge} needs {format_si(e.requested_s, 's', toward='up')} worst case, the "
                    f"longest here is {format_si(e.max_min_s, 's', toward='down')} at the fast clock"
                )
        reason = "unreachable: " + ("; ".join(parts) or "no code reaches the window minimum")
        return _bare(layout, clock, d, divider, reason)
    edges: dict[str, RowEdge] = {}
    reasons: list[str] = []
    too_long: dict[str, str] = {}
    margins: list[Fraction] = []
    errors: list[Fraction] = []
    for edge in EDGES:
        e = result.edges[edge]
        assert e.achieved_s is not None and e.achieved_min_s is not None
        assert e.achieved_max_s is not None and e.error_s is not None
        assert e.code is not None and e.steps is not None
        verdict, low, high = judge(window[edge], e.achieved_min_s, e.achieved_max_s)
        edges[edge] = RowEdge(
            code=e.code,
            steps=e.steps,
            achieved_s=e.achieved_s,
            achieved_min_s=e.achieved_min_s,
            achieved_max_s=e.achieved_max_s,
            error_s=e.error_s,
            margin_low_s=low,
            margin_high_s=high,
            verdict=verdict,
        )
        margins.append(low)
        if high is not None:
            margins.append(high)
        errors.append(abs(e.error_s))
        if verdict == "too-long":
            top = window[edge].max_s
            assert top is not None
            too_long[edge] = (
                f"the shortest safe value {format_si(e.achieved_s, 's')} lasts up to "
                f"{format_si(e.achieved_max_s, 's', toward='up')} at the slow clock, above the "
                f"window maximum {format_si(top, 's', toward='down')}"
            )
        elif verdict != "ok":
            reasons.append(f"{verdict}: {edge}")
    if too_long:
        said = both_edges(too_long) if len(too_long) == len(EDGES) else [
            f"{edge}: {text}" for edge, text in too_long.items()
        ]
        reasons[:0] = [f"too-long: {line}" for line in said]
    row_pwm = None
    if pwm is not None:
        lim = pwm_limits(result, pwm)
        row_pwm = RowPwm(
            compare_counts=lim.counts,
            period_counts=lim.period_counts,
            duty_min_counts=lim.duty_min_counts,
            duty_max_counts=lim.duty_max_counts,
            max_share=max(e.share for e in lim.edges.values()),
            verdict=lim.verdict,
        )
        if lim.verdict != "ok":
            reasons.append(
                f"pwm: {lim.reason} ({_pwm_text(pwm)}, {lim.period_counts} counts per period)"
            )
    return SweepRow(
        layout=layout.name,
        clock_hz=clock,
        divider_code=d,
        divider=divider,
        feasible=not reasons,
        reason="; ".join(reasons),
        fields=dict(result.fields),
        register=result.register,
        register_bits=layout.register_bits,
        edges=edges,
        worst_margin_s=min(margins),
        worst_error_s=max(errors),
        pwm=row_pwm,
        worst_above_min_s=max(
            edges[edge].achieved_max_s - window[edge].min_s for edge in EDGES
        ),
        bits=_bits(layout),
    )
