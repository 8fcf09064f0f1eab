"""The quantization engine: a requested dead time -> register codes, exactly.

Everything is in fractions. A code gives `steps` dead-time steps; one step lasts
divider / (sub_steps x f_clk). The clock may run fast by up to `clock_tol`, so the shortest real
gap is nominal / (1 + tol) and the longest nominal / (1 - tol) (common practice: the fast clock
gives the shortest gap).

`safe` rounding (the default) picks, for each edge, the smallest representable value whose
worst case (fastest clock) is still >= the request. `nearest` picks the value closest to the
request at the nominal clock. Every divider is searched; one divider serves both edges, so the
dividers are compared by the total excess (safe) or total absolute error (nearest), then finer
step (smaller divider), then smaller codes. A field shared by both edges serves the longer of the
two requests.
"""

from __future__ import annotations

from fractions import Fraction

from gapforge.base.display import format_si
from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import ceil_fraction
from gapforge.base.records import record
from gapforge.timer.layouts import EDGES, Field, Layout

ROUNDINGS = ("safe", "nearest")


@record
class FitRequest:
    clock_hz: Fraction
    clock_tol: Fraction
    to_high_s: Fraction
    to_low_s: Fraction
    rounding: str = "safe"

    def requested(self, edge: str) -> Fraction:
        return self.to_high_s if edge == "to_high" else self.to_low_s

    def __post_init__(self) -> None:
        if self.clock_hz <= 0:
            raise GapforgeError("the timer clock must be positive", "clock")
        if not 0 <= self.clock_tol < 1:
            raise GapforgeError("the clock tolerance must be in 0..100 %", "clock tolerance")
        if self.to_high_s < 0 or self.to_low_s < 0:
            raise GapforgeError("a dead time must not be negative", "dead time")
        if self.rounding not in ROUNDINGS:
            raise GapforgeError(f"rounding must be one of {', '.join(ROUNDINGS)}", "rounding")


@record
class EdgeFit:
    """One edge's result. Seconds as exact fractions; None where the edge is unreachable."""

    edge: str
    field: str
    requested_s: Fraction
    code: int | None
    steps: int | None
    achieved_s: Fraction | None
    achieved_min_s: Fraction | None
    achieved_max_s: Fraction | None
    error_s: Fraction | None
    step_s: Fraction | None
    lower_s: Fraction | None
    higher_s: Fraction | None
    max_s: Fraction
    max_min_s: Fraction

    @property
    def relative_error(self) -> Fraction | None:
        if self.error_s is None or self.requested_s == 0:
            return None
        return self.error_s / self.requested_s

    @property
    def below_request_worst_case(self) -> bool:
        return self.achieved_min_s is not None and self.achieved_min_s < self.requested_s


@record
class FitResult:
    layout: Layout
    request: FitRequest
    verdict: str
    divider_code: int | None
    divider: int | None
    fields: dict[str, int]
    register: int | None
    edges: dict[str, EdgeFit]

    @property
    def ok(self) -> bool:
        return self.verdict == "ok"

    @property
    def step_s(self) -> Fraction | None:
        if self.divider is None:
            return None
        return step_seconds(self.layout, self.request.clock_hz, self.divider)


def step_seconds(layout: Layout, clock_hz: Fraction, divider: int) -> Fraction:
    return Fraction(divider) / (layout.sub_steps * clock_hz)


def fit(layout: Layout, request: FitRequest, divider_code: int | None = None) -> FitResult:
    """Choose codes for both edges on one layout, searching every divider (or just one)."""
    codes = range(len(layout.dividers)) if divider_code is None else [divider_code]
    if divider_code is not None and not 0 <= divider_code < len(layout.dividers):
        raise GapforgeError(
            f"divider code {divider_code} is not one of 0..{len(layout.dividers) - 1}", "divider"
        )
    best: tuple[tuple[object, ...], int, dict[str, int]] | None = None
    for d in codes:
        divider = layout.dividers[d]
        chosen: dict[str, int] = {}
        scale = Fraction(divider) / (layout.sub_steps * request.clock_hz)
        total = Fraction(0)
        for edge in EDGES:
            f = layout.edge_field(edge)
            # a shared field serves the longer of the two requests
            target = max(request.requested(e) for e in EDGES if layout.edge_field(e) is f)
            idx = _choose(f, request, target, scale)
            if idx is None:
                break
            chosen[edge] = idx
            value = f.table[0][idx] * scale
            err = value - request.requested(edge)
            total += err if request.rounding == "safe" else abs(err)
        else:
            key = (
                total,
                divider,
                tuple(layout.edge_field(e).table[1][chosen[e]] for e in EDGES),
            )
            if best is None or key < best[0]:
                best = (key, d, chosen)
    if best is None:
        return _unreachable(layout, request, divider_code)
    _, d, chosen = best
    return _result(layout, request, d, chosen, divider_code)


def _choose(f: Field, request: FitRequest, target: Fraction, scale: Fraction) -> int | None:
    """Index into f.table of the value chosen for one target at one step length, or None."""
    values = f.table[0]
    if request.rounding == "safe":
        return f.at_least(ceil_fraction(target * (1 + request.clock_tol) / scale))
    exact = target / scale
    if exact > values[-1]:
        return None
    i = f.at_least(ceil_fraction(exact))
    candidates = [j for j in (i, (len(values) if i is None else i) - 1) if j is not None and j >= 0]
    # an exact tie goes to the longer value: the safe side
    return min(candidates, key=lambda j: (abs(values[j] - exact), -values[j]))


def _edge_max(layout: Layout, request: FitRequest, edge: str, divider_code: int | None) -> Fraction:
    f = layout.edge_field(edge)
    codes = range(len(layout.dividers)) if divider_code is None else [divider_code]
    top = max(layout.dividers[d] for d in codes)
    return f.table[0][-1] * Fraction(top) / (layout.sub_steps * request.clock_hz)


def _result(
    layout: Layout,
    request: FitRequest,
    d: int,
    chosen: dict[str, int],
    divider_code: int | None = None,
) -> FitResult:
    divider = layout.dividers[d]
    scale = Fraction(divider) / (layout.sub_steps * request.clock_hz)
    tol = request.clock_tol
    fields: dict[str, int] = {}
    edges: dict[str, EdgeFit] = {}
    for edge in EDGES:
        f = layout.edge_field(edge)
        values, codes = f.table
        i = chosen[edge]
        steps = values[i]
        achieved = steps * scale
        higher = values[i + 1] * scale if i + 1 < len(values) else None
        lower = values[i - 1] * scale if i > 0 else None
        top = _edge_max(layout, request, edge, d)  # at the divider in use (issue 23)
        edges[edge] = EdgeFit(
            edge=edge,
            field=f.name,
            requested_s=request.requested(edge),
            code=codes[i],
            steps=steps,
            achieved_s=achieved,
            achieved_min_s=achieved / (1 + tol),
            achieved_max_s=achieved / (1 - tol),
            error_s=achieved - request.requested(edge),
            step_s=(higher - achieved)
            if higher is not None
            else (achieved - lower if lower is not None else None),
            lower_s=lower,
            higher_s=higher,
            max_s=top,
            max_min_s=top / (1 + tol),
        )
        fields[f.name] = codes[i]
    if layout.divider_field is not None:
        fields[layout.divider_field] = d
    return FitResult(
        layout=layout,
        request=request,
        verdict="ok",
        divider_code=d,
        divider=divider,
        fields=dict(sorted(fields.items())),
        register=layout.pack(fields),
        edges=edges,
    )


def _unreachable(layout: Layout, request: FitRequest, divider_code: int | None) -> FitResult:
    edges: dict[str, EdgeFit] = {}
    for edge in EDGES:
        f = layout.edge_field(edge)
        top = _edge_max(layout, request, edge, divider_code)
        edges[edge] = EdgeFit(
            edge=edge,
            field=f.name,
            requested_s=request.requested(edge),
            code=None,
            steps=None,
            achieved_s=None,
            achieved_min_s=None,
            achieved_max_s=None,
            error_s=None,
            step_s=None,
            lower_s=None,
            higher_s=None,
            max_s=top,
            max_min_s=top / (1 + request.clock_tol),
        )
    return FitResult(
        layout=layout,
        request=request,
        verdict="unreachable",
        divider_code=None,
        divider=None,
        fields={},
        register=None,
        edges=edges,
    )


def unreachable_edges(result: FitResult) -> list[str]:
    """Edges whose request lies above what the layout can reach (worst case for `safe`)."""
    out = []
    for edge, e in result.edges.items():
        limit = e.max_min_s if result.request.rounding == "safe" else e.max_s
        if e.requested_s > limit:
            out.append(edge)
    return out


def fit_warnings(result: FitResult) -> list[str]:
    """What a fitted result must warn about (text and JSON alike)."""
    out: list[str] = []
    if result.request.clock_tol == 0:
        out.append(
            "the clock tolerance is 0: 'safe' covers a perfect clock only; give the real "
            "tolerance (crystal tens of ppm, on-chip RC oscillator percents)"
        )
    for edge in EDGES:
        e = result.edges[edge]
        if e.below_request_worst_case:
            assert e.achieved_min_s is not None
            out.append(
                f"{edge}: nearest rounding gives {format_si(e.achieved_min_s, 's', toward='down')}"
                f" at the fast clock, below the {format_si(e.requested_s, 's')} requested; use "
                "safe rounding for a guaranteed minimum"
            )
    return out
