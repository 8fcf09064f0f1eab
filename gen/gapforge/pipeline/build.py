"""The pipeline in one function: a design -> what to request -> fits -> limits -> verdicts.

    design --> reference range (analog)  --+
           --> stage window (stage)      --+--> window (policy) --> request --> fit per output
                                                                   --> PWM limits
                                                                   --> verdict and margins
Nothing here reads or writes files (except what load_design read); rendering is elsewhere.
"""

from __future__ import annotations

from dataclasses import replace
from fractions import Fraction
from typing import Any

from gapforge.base.display import format_range, format_si
from gapforge.base.errors import GapforgeError
from gapforge.base.records import record
from gapforge.pipeline.design import Design, Output
from gapforge.pipeline.policy import DesignWindow, window_of
from gapforge.timer.fit import FitRequest, FitResult, fit, fit_warnings
from gapforge.timer.layouts import EDGES, rename_warning
from gapforge.timer.limits import PwmLimits, counter_problem, pwm_limits

VERDICTS = (
    "ok", "inconclusive", "unreachable", "empty-window", "too-short", "too-long", "below-request"
)

# issue 19: a design without [stage] is fitted and written, but nobody judged the dead time
NOT_JUDGED = (
    "not judged against a power stage (the design has no [stage] section: the dead time was "
    "fitted as asked, but nothing proves it long enough)"
)

Bounds = tuple[Fraction | None, Fraction | None]


@record
class EdgeJudgement:
    verdict: str
    margin_low_s: Fraction | None  # achieved_min - window min (>= 0 when ok)
    margin_high_s: Fraction | None  # window max - achieved_max (>= 0 when ok), None if no max


@record
class OutputPlan:
    output: Output
    fit: FitResult
    limits: PwmLimits | None
    judgements: dict[str, EdgeJudgement]
    verdict: str
    reasons: tuple[str, ...]
    warnings: tuple[str, ...]
    costs: Any = None  # stage.Costs at the slow-clock (longest) dead times, with a [stage]
    adaptive: Any = None  # pipeline.adaptive_plan.AdaptivePlan, with an [adaptive] section
    driver: Any = None  # timer.driver.DriverLimits, with a [gate_driver] section and [pwm]


@record
class BuildPlan:
    design: Design
    request: FitRequest | None
    reference: dict[str, Any] | None  # edge -> analog.EdgeRange
    stage_window: dict[str, Bounds] | None
    window: dict[str, Bounds] | None  # the design's window (gapforge.pipeline.policy)
    stage: Any  # stage.Window or None (with breakdown and costs)
    outputs: tuple[OutputPlan, ...]
    verdict: str
    reasons: tuple[str, ...]
    warnings: tuple[str, ...] = ()
    design_window: DesignWindow | None = None

    @property
    def window_basis(self) -> str:
        """What the window is made of, in words ("power stage", ...)."""
        return self.design_window.basis if self.design_window is not None else "none"


def judge(window: Bounds, achieved_min: Fraction, achieved_max: Fraction) -> EdgeJudgement:
    """Is [achieved_min, achieved_max] inside the window, and by how much?"""
    from gapforge.stage.window import judge_bounds

    return EdgeJudgement(*judge_bounds(window[0], window[1], achieved_min, achieved_max))


def plan_design(design: Design) -> BuildPlan:
    dw = window_of(design)
    warnings = _plan_warnings(design, dw)
    if dw.empty:
        empty = ["no dead time fits the window on " + ", ".join(e for e in EDGES if e in dw.empty)]
        empty.extend(dw.empty[e] for e in EDGES if e in dw.empty)
        return BuildPlan(
            design,
            None,
            dw.reference,
            dw.stage_bounds,
            dw.bounds,
            dw.stage,
            (),
            "empty-window",
            tuple(empty),
            warnings,
            dw,
        )
    requested = _requested(design, dw)
    request = FitRequest(
        clock_hz=design.clock_hz,
        clock_tol=design.clock_tol,
        to_high_s=requested["to_high"],
        to_low_s=requested["to_low"],
        rounding=design.rounding,
    )
    outputs = tuple(
        _plan_output(design, o, request, dw.bounds, dw.reference) for o in design.outputs
    )
    if design.stage is None:  # fitted, maybe fine, but not proven: inconclusive (issue 19)
        outputs = tuple(
            replace(o, verdict="inconclusive", reasons=(NOT_JUDGED,)) if o.verdict == "ok" else o
            for o in outputs
        )
    verdict = "ok"
    reasons: list[str] = []
    for o in outputs:  # every failing output's reasons; the verdict is the first failure's
        if o.verdict not in ("ok", "inconclusive"):
            verdict = o.verdict if verdict in ("ok", "inconclusive") else verdict
            reasons.extend(f"{o.output.prefix}: {r}" for r in o.reasons)
        elif o.verdict == "inconclusive" and verdict == "ok":
            verdict = "inconclusive"
    if verdict == "inconclusive":
        reasons.insert(0, NOT_JUDGED)
    return BuildPlan(
        design,
        request,
        dw.reference,
        dw.stage_bounds,
        dw.bounds,
        dw.stage,
        outputs,
        verdict,
        tuple(reasons),
        warnings,
        dw,
    )


def _plan_warnings(design: Design, dw: DesignWindow) -> tuple[str, ...]:
    """The old network's own dangers and its range against the stage window (evidence about the
    old board, never a failure of the new design), and a perfect-clock tolerance."""
    warnings: tuple[str, ...] = ()
    if design.reference is not None and dw.reference is not None:
        from gapforge.analog.findings import reference_findings

        # the old network's own dangers (overlap at a corner, hot-board leakage) repeated here
        warnings = tuple(reference_findings(design.reference, dw.reference))
    warnings += dw.evidence
    if design.clock_tol == 0:
        warnings += (
            "the clock tolerance is 0 ([timer] tolerance): 'safe' covers a perfect clock only",
        )
    return warnings


def _requested(design: Design, dw: DesignWindow) -> dict[str, Fraction]:
    """The dead time each edge asks for under the design's policy (a request is a minimum)."""
    requested: dict[str, Fraction] = {}
    for e in EDGES:
        if design.source == "explicit":
            assert design.dead_time is not None
            requested[e] = design.dead_time[e]
        elif design.source == "reference-typical":
            assert dw.reference is not None
            requested[e] = dw.reference[e].typ_s
        elif design.source == "reference-minimum":
            assert dw.reference is not None
            requested[e] = dw.reference[e].limit_min_s  # rounded up: a request is a minimum
        else:  # "window", "window-within-reference": the window's minimum
            assert dw.bounds is not None
            lo = dw.bounds[e][0]
            requested[e] = lo if lo is not None else Fraction(0)
        if design.source.startswith("reference") and requested[e] <= 0:
            raise GapforgeError(
                f"the reference network's worst-case {e} dead time is "
                f"{float(requested[e]) * 1e9:.6g} ns, not positive (its outputs can overlap), "
                "so it cannot set the dead time; give an explicit value or a [stage] window",
                f"{design.path}: dead_time.source",
            )
    if design.source == "window-within-reference" and dw.stage_bounds is None:
        for e in EDGES:
            if requested[e] <= 0:
                raise GapforgeError(
                    f"the old network's worst-case {e} range starts at "
                    f"{float(requested[e]) * 1e9:.6g} ns, not positive (its outputs can "
                    "overlap), so it cannot set the dead time; add a [stage] window",
                    f"{design.path}: dead_time.source",
                )
    return requested


def _plan_output(
    design: Design,
    output: Output,
    request: FitRequest,
    window: dict[str, Bounds] | None,
    reference: dict[str, Any] | None,
) -> OutputPlan:
    result = fit(output.layout, request)
    reasons: list[str] = []
    warnings: list[str] = []
    judgements: dict[str, EdgeJudgement] = {}
    if not result.ok:
        for e in EDGES:
            edge = result.edges[e]
            if edge.requested_s > edge.max_min_s:
                reasons.append(
                    f"{e} request {format_si(edge.requested_s, 's', toward='up')} is above the "
                    f"layout's maximum {format_si(edge.max_min_s, 's', toward='down')} (worst "
                    "case at the fast clock)"
                )
        return OutputPlan(output, result, None, {}, "unreachable", tuple(reasons), ())
    limits = pwm_limits(result, design.pwm) if design.pwm is not None else None
    renamed = rename_warning(output.target)
    if renamed is not None:
        warnings.append(renamed)
    # the clock tolerance is said once for the design; a worst case below the request is a
    # reason (below), not a warning
    warnings.extend(
        w for w in fit_warnings(result)
        if not w.startswith("the clock tolerance") and "nearest rounding gives" not in w
    )
    if limits is not None and counter_problem(limits):
        warnings.append(counter_problem(limits))  # refused under `build --strict`
    verdict = "ok"
    for e in EDGES:
        edge = result.edges[e]
        assert edge.achieved_min_s is not None and edge.achieved_max_s is not None
        if window is not None:
            j = judge(window[e], edge.achieved_min_s, edge.achieved_max_s)
            judgements[e] = j
            if j.verdict != "ok":  # every failing edge's reason; the verdict is the first's
                verdict = j.verdict if verdict == "ok" else verdict
                reasons.append(_reason(e, j, window[e], edge.achieved_min_s, edge.achieved_max_s))
        if edge.achieved_min_s < edge.requested_s and (e not in judgements or
                                                         judgements[e].verdict == "ok"):
            # a requested dead time is a minimum, whatever the rounding (issue 19)
            verdict = "below-request" if verdict == "ok" else verdict
            reasons.append(below_request_reason(e, edge.achieved_min_s, edge.requested_s))
        if reference is not None:
            r = reference[e]
            if edge.achieved_min_s < r.limit_min_s or edge.achieved_max_s > r.limit_max_s:
                warnings.append(
                    f"{e}: digital range "
                    f"{format_range(edge.achieved_min_s, edge.achieved_max_s, 's', cut='outward')}"
                    " lies outside what the reference network proved ("
                    f"{format_range(r.min_s, r.max_s, 's', cut='inward')})"
                )
    costs = None
    if design.stage is not None:
        from gapforge.stage.window import stage_costs

        longest = {e: result.edges[e].achieved_max_s for e in EDGES}
        costs = stage_costs(design.stage, longest)  # type: ignore[arg-type]
    adaptive = None
    if design.adaptive is not None and window is not None:
        from gapforge.pipeline.adaptive_plan import plan_adaptive

        adaptive = plan_adaptive(
            design.adaptive, design.stage, result, window, limits, str(design.path),
            design.source,
        )
        warnings.extend(adaptive.notes)
    table_reasons: list[str] = []
    if adaptive is not None and limits is not None:  # issue 19: every entry judged like the word
        from gapforge.pipeline.adaptive_limits import TABLE_BASIS, judge_table, table_dead_clocks
        from gapforge.timer.limits import with_table

        table_reasons = judge_table(
            adaptive, limits, design.gate_driver, design.clock_hz, design.clock_tol
        )
        limits = with_table(limits, table_dead_clocks(adaptive), TABLE_BASIS)
    if limits is not None and limits.verdict != "ok":
        verdict = limits.verdict if verdict == "ok" else verdict
        reasons.append(limits.reason)
    if table_reasons:
        verdict = "too-long" if verdict == "ok" else verdict
        reasons.extend(table_reasons)
    driver = _driver(design, result, limits, adaptive)
    if driver is not None and driver.verdict != "ok":
        verdict = driver.verdict if verdict == "ok" else verdict
        scope = "" if adaptive is None else "over every entry of the current-indexed table: "
        reasons.append(scope + driver.reason)
    return OutputPlan(
        output, result, limits, judgements, verdict, tuple(reasons), tuple(warnings), costs,
        adaptive, driver,
    )


def _driver(design: Design, result: FitResult, limits: PwmLimits | None, adaptive: Any) -> Any:
    """Gate-driver duty limits (issue 12) at the longest dead time in use per edge."""
    if design.gate_driver is None or limits is None:
        return None
    from gapforge.timer.driver import driver_limits

    dead = {e: limits.edges[e].dead_counts for e in EDGES}
    if adaptive is not None:
        from gapforge.pipeline.adaptive_limits import table_dead_clocks

        longest = table_dead_clocks(adaptive)
        dead = {e: max(dead[e], longest[e]) for e in EDGES}
    return driver_limits(limits, design.gate_driver, design.clock_hz, design.clock_tol, dead)


def _reason(edge: str, j: EdgeJudgement, window: Bounds, amin: Fraction, amax: Fraction) -> str:
    lo, hi = window
    if j.verdict == "too-short":
        assert lo is not None
        return (
            f"{edge}: worst-case {float(amin) * 1e9:.6g} ns is below the window's minimum "
            f"{float(lo) * 1e9:.6g} ns"
        )
    assert hi is not None
    return (
        f"{edge}: worst-case {float(amax) * 1e9:.6g} ns is above the window's maximum "
        f"{float(hi) * 1e9:.6g} ns"
    )


def below_request_reason(edge: str, achieved_min: Fraction, requested: Fraction) -> str:
    """Why a worst case below the request fails (`fit` and `build` say it alike)."""
    from gapforge.base.display import format_si

    return (
        f"{edge}: worst case {format_si(achieved_min, 's', toward='down')} at the fastest clock "
        f"is below the {format_si(requested, 's', toward='up')} requested (a requested dead "
        "time is a minimum; 'nearest' rounding can land below it, 'safe' never does)"
    )


Expectation = tuple[Fraction | None, Fraction | None, Fraction | None, Fraction | None]
