"""The first lines of `fit` and `build`: the answer before the breakdown (issue 10).

Per output: the verdict, the register word (hexadecimal, padded to the register width) and the
achieved worst-case dead time of each edge over the clock tolerance; for a failing output every
reason. Display rounds to four significant digits toward the safe side: a worst-case minimum
down, a worst-case maximum up (the exact values stay in JSON and headers).
"""

from __future__ import annotations

from fractions import Fraction

from gapforge.base.display import format_register
from gapforge.pipeline.build import BuildPlan, OutputPlan
from gapforge.timer.compromise import compromises
from gapforge.timer.fit import FitResult
from gapforge.timer.layouts import EDGES
from gapforge.timer.limits import PwmLimits

_PREFIXES = ((Fraction(1), "s"), (Fraction(1, 10**3), "ms"), (Fraction(1, 10**6), "us"),
             (Fraction(1, 10**9), "ns"), (Fraction(1, 10**12), "ps"))


def seconds(value: Fraction, *, up: bool, digits: int = 4) -> str:
    """Four significant digits, rounded down (or up), in one engineering unit."""
    if value == 0:
        return "0 s"
    scale, unit = next(((s, u) for s, u in _PREFIXES if abs(value) >= s), _PREFIXES[-1])
    scaled = value / scale
    exponent = len(str(abs(scaled.numerator) // abs(scaled.denominator))) - digits
    quantum = Fraction(10) ** exponent
    steps = scaled / quantum
    whole = -(-steps.numerator // steps.denominator) if up else steps.numerator // steps.denominator
    rounded = whole * quantum
    decimals = max(0, -exponent)
    text = f"{float(rounded):.{decimals}f}"
    return f"{text} {unit}"


def register_text(result: FitResult) -> str:
    assert result.register is not None
    return f"register {format_register(result.register, result.layout.register_bits)}"


def worst_case_text(result: FitResult) -> str:
    parts = []
    for e in EDGES:
        edge = result.edges[e]
        assert edge.achieved_min_s is not None and edge.achieved_max_s is not None
        parts.append(
            f"{e} {seconds(edge.achieved_min_s, up=False)} .. {seconds(edge.achieved_max_s, up=True)}"
        )
    lo = {result.edges[e].achieved_min_s for e in EDGES}
    hi = {result.edges[e].achieved_max_s for e in EDGES}
    if len(lo) == 1 and len(hi) == 1:
        return "worst case both edges " + parts[0].split(" ", 1)[1]
    return "worst case " + ", ".join(parts)


def fit_verdict(result: FitResult, limits: PwmLimits | None) -> tuple[str, str]:
    """(detail, reason) of a fit in the one vocabulary (issue 19): a request beyond the layout
    ("unreachable"), a worst case below the request whatever the rounding ("below-request": a
    requested dead time is a minimum), then the PWM limits; ("ok", "") otherwise."""
    from gapforge.base.display import format_si
    from gapforge.pipeline.build import below_request_reason

    if not result.ok:
        why = [
            f"{e}: request {format_si(x.requested_s, 's', toward='up')} is above the most the "
            f"layout can guarantee at the fastest clock "
            f"({format_si(x.max_min_s, 's', toward='down')})"
            for e, x in result.edges.items()
            if x.requested_s > x.max_min_s
        ]
        return "unreachable", "; ".join(_both(why)) or "the layout cannot reach the request"
    below = [
        below_request_reason(e, x.achieved_min_s, x.requested_s)
        for e, x in result.edges.items()
        if x.achieved_min_s is not None and x.achieved_min_s < x.requested_s
    ]
    if below:
        return "below-request", "; ".join(_both(below))
    if limits is not None and limits.verdict != "ok":
        return limits.verdict, f"{limits.verdict}: {limits.reason}"
    return "ok", ""


def _both(reasons: list[str]) -> list[str]:
    """'to_high: X' and 'to_low: X' said once as 'both edges: X'."""
    if len(reasons) == 2 and reasons[0].split(":", 1)[1] == reasons[1].split(":", 1)[1]:
        return ["both edges:" + reasons[0].split(":", 1)[1]]
    return reasons


def fit_answer(result: FitResult, verdict: str, reason: str = "") -> str:
    """One line: the fit's answer, in the one verdict vocabulary (ok / fail)."""
    word = "ok" if verdict == "ok" else "fail"
    why = f" ({reason})" if reason else ""
    if not result.ok:
        return f"{word}: {result.layout.name} cannot reach the request{why}"
    return f"{word}: {register_text(result)}, {worst_case_text(result)}{why}"


def output_answer(op: OutputPlan) -> str:
    p = op.output.prefix
    if op.verdict == "ok":
        return f"ok: {p} {register_text(op.fit)}, {worst_case_text(op.fit)}"
    if op.verdict == "inconclusive":  # written, but nobody judged it (issue 19)
        reasons = "; ".join(op.reasons)
        return f"inconclusive: {p} {register_text(op.fit)}, {worst_case_text(op.fit)}: {reasons}"
    reasons = "; ".join(op.reasons) or op.verdict
    if op.fit.ok:
        return f"fail: {p} {register_text(op.fit)}, {worst_case_text(op.fit)}: {reasons}"
    return f"fail: {p}: {reasons}"


def plan_answer(plan: BuildPlan) -> list[str]:
    """One line per output (every failing output with every reason), or the plan's reason."""
    if not plan.outputs:
        return [f"fail: {r}" for r in plan.reasons] or [f"fail: {plan.verdict}"]
    lines = []
    for op in plan.outputs:
        lines.append(output_answer(op))
        # an edge a shared divider or field moved from its own best code: which, how far, why
        lines += [f"  {op.output.prefix} shared: {c.text()}" for c in compromises(op.fit)]
    return lines
