"""The header's self-checks (#if / #error) and the language it claims (issue 22).

Every `#if` works within what the C90 preprocessor guarantees (32-bit `long`) or is reached only
under C99 / C++11 preprocessing (64-bit `intmax_t`, ISO C99 6.10.1): the window guards, which
recompute the worst case from STEPS, DIVIDER, SUB_STEPS, the clock and its tolerance in products
up to 2^64, run under C99 and later; under a C90 preprocessor the same macros are compared with
the values gapforge wrote, so any edit of them is an error there too. A header with a value above
2^32 - 1 (only C99's unsigned long long holds it) says so in its comment and stops a C90 or
C++98 compile with #error naming that value.
"""

from __future__ import annotations

from collections.abc import Mapping
from fractions import Fraction

from gapforge.base.quantities import picoseconds_ceil, picoseconds_floor
from gapforge.base.records import record
from gapforge.outputs import c_text
from gapforge.outputs.c_types import C99_NOTE, c_hex, c_uint, needs_c99
from gapforge.pipeline.build import BuildPlan, OutputPlan
from gapforge.timer.layouts import EDGES, Field, Layout

HEADER_FORMAT = 1
U64 = 1 << 64
PS_PER_S = 10**12
PPB = 10**9

C99_PREPROCESSOR = (
    "(defined(__STDC_VERSION__) && (__STDC_VERSION__ >= 199901L))"
    " || (defined(__cplusplus) && (__cplusplus >= 201103L))"
)


@record
class Group:
    """Checks that run only where `condition` holds, and the ones that run otherwise."""

    condition: str
    then: tuple[Check, ...]
    otherwise: tuple[Check, ...]


def check_lines(items: list[Check | Group]) -> list[str]:
    """The #if / #error lines of the checks, groups nested."""
    lines: list[str] = []
    for item in items:
        if isinstance(item, Group):
            lines.append(f"#if {item.condition}")
            lines += check_lines(list(item.then))
            if item.otherwise:
                lines.append("#else")
                lines += check_lines(list(item.otherwise))
            lines.append("#endif")
        else:
            lines += [f"#if {item.condition}", f'#error "{item.message}"', "#endif"]
    return lines


def c99_reasons(rows: list[tuple[str, str, str]]) -> list[str]:
    """Names of the macros whose literal only C99 (unsigned long long) holds."""
    return [name for name, value, _ in rows if needs_c99(value)]


def language_line(reasons: list[str]) -> str:
    if not reasons:
        return ("Language: ISO C90 (C89) and later, and C++; no 64-bit type, every #if within a"
                " C90 preprocessor's 32-bit long (the 64-bit window guards run from C99 on).")
    return (f"Language: ISO C99 and later, and C++11: {reasons[0]} needs 64 bits ({C99_NOTE});"
            " a C90 or C++98 compile stops with #error.")


def language_checks(file: str, reasons: list[str]) -> list[Check | Group]:
    if not reasons:
        return []
    message = f"{file} needs C99 or later: {reasons[0]} needs 64 bits ({C99_NOTE})"
    return [
        Check("!defined(__cplusplus) && (!defined(__STDC_VERSION__)"
              " || (__STDC_VERSION__ < 199901L))", message),
        Check("defined(__cplusplus) && (__cplusplus < 201103L)", message),
    ]


@record
class Check:
    condition: str
    message: str  # the inside of a C string literal (already escaped)



def fields_msb_first(layout: Layout) -> list[Field]:
    """Register fields in bit order, most significant first (comment and macros alike)."""
    return sorted(layout.fields, key=lambda f: f.offset, reverse=True)


def fields_text(layout: Layout, codes: Mapping[str, int]) -> str:
    """ "div=0, to_high_count=18, ...": field codes in bit order, most significant first, as the
    headers and `targets show` list them (text answers and the report alike)."""
    return ", ".join(f"{f.name}={codes[f.name]}" for f in fields_msb_first(layout)
                     if f.name in codes)



def clock_macro_value(plan: BuildPlan) -> int:
    """The timer clock as a whole number of hertz, rounded up: firmware that recomputes a dead
    time from the macros then errs short (safe)."""
    clock = plan.design.clock_hz
    return -(-clock.numerator // clock.denominator)



def window_ps(plan: BuildPlan) -> dict[str, tuple[int, int | None]]:
    """The window in whole picoseconds, the safe side of each bound (min up, max down)."""
    if plan.window is None:
        return {}
    out: dict[str, tuple[int, int | None]] = {}
    for e in EDGES:
        lo, hi = plan.window[e]
        out[e] = (picoseconds_ceil(lo or Fraction(0)),
                  picoseconds_floor(hi) if hi is not None else None)
    return out



# ---------------------------------------------------------------------------------------------
# The self-checks


def checks(plan: BuildPlan, op: OutputPlan) -> list[Check | Group]:
    p, layout = op.output.prefix, op.output.layout
    file = c_text.string_body(op.output.file)
    out: list[Check | Group] = [
        Check(
            f"defined(GAPFORGE_FORMAT_REQUIRED) && (GAPFORGE_FORMAT_REQUIRED != {p}_FORMAT_VERSION)",
            f"{file} has gapforge header format {HEADER_FORMAT}: regenerate it",
        ),
    ]
    for f in fields_msb_first(layout):
        name = f.name.upper()
        out.append(Check(f"({p}_{name}_CODE) > ({p}_{name}_MASK >> {p}_{name}_SHIFT)",
                            f"{p}_{name}_CODE does not fit its field"))
    out.append(Check(
        f"({p}_REGISTER) > {c_hex((1 << layout.register_bits) - 1, layout.register_bits)}",
        f"{p}_REGISTER does not fit a {layout.register_bits}-bit register",
    ))
    wide: list[Check] = []
    for e, (lo_ps, hi_ps) in window_ps(plan).items():
        wide += _window_guards(plan, op, e, lo_ps, hi_ps)
    if wide:
        out.append(Group(C99_PREPROCESSOR, tuple(wide), (_c90_guard(plan, op),)))
    return out


def _c90_guard(plan: BuildPlan, op: OutputPlan) -> Check:
    """Under a C90 preprocessor (32-bit long): the window guards' inputs as written."""
    p, fit = op.output.prefix, op.fit
    assert fit.divider is not None
    values = [
        (f"{p}_DIVIDER", fit.divider),
        (f"{p}_SUB_STEPS", op.output.layout.sub_steps),
        (f"{p}_TIMER_CLOCK_HZ", clock_macro_value(plan)),
        (f"{p}_CLOCK_TOL_PPB", picoseconds_ceil(plan.design.clock_tol / 10**3)),
    ]
    for e in EDGES:
        steps = fit.edges[e].steps
        assert steps is not None
        values.append((f"{p}_{e.upper()}_STEPS", steps))
    for e, (lo_ps, hi_ps) in window_ps(plan).items():
        values.append((f"{p}_WINDOW_{e.upper()}_MIN_PS", lo_ps))
        if hi_ps is not None:
            values.append((f"{p}_WINDOW_{e.upper()}_MAX_PS", hi_ps))
    cond = " || ".join(f"({name} != {c_uint(v)})" for name, v in values)
    return Check(cond, f"{p}: a macro the window guards use was edited (a C90 preprocessor"
                       " cannot recompute them): regenerate the header")


def _window_guards(
    plan: BuildPlan, op: OutputPlan, edge: str, lo_ps: int, hi_ps: int | None
) -> list[Check]:
    """#error when the worst case recomputed from STEPS, DIVIDER, SUB_STEPS, the clock and its
    tolerance leaves the window, so a hand edit of any of those macros cannot pass silently.

    In whole numbers (N = STEPS x DIVIDER, K = SUB_STEPS x CLOCK, W the window bound in ps,
    WK = W x K = a x 10^9 + b): the fastest-clock minimum floor(N 10^21 / (K (10^9 + PPB))) >= W
    exactly when N 10^12 >= WK + a PPB + ceil(b PPB / 10^9); the slowest-clock maximum
    ceil(N 10^21 / (K (10^9 - PPB))) <= W exactly when N 10^12 <= WK - a PPB - ceil(b PPB / 10^9).
    Every term stays below 2^64 (checked here; where it would not, the guard compares the
    ACHIEVED macros instead and says so). PPB is the tolerance rounded up, so the recomputed range
    can be wider than the exact one by under a picosecond: where that alone would trip a guard, the
    guard allows that picosecond and says so.
    """
    p, E = op.output.prefix, edge.upper()
    fit = op.fit.edges[edge]
    assert fit.steps is not None and op.fit.divider is not None
    n = fit.steps * op.fit.divider
    k = op.output.layout.sub_steps * clock_macro_value(plan)
    ppb = picoseconds_ceil(plan.design.clock_tol / 10**3)
    steps, div = f"{p}_{E}_STEPS", f"{p}_DIVIDER"
    kk = f"({p}_SUB_STEPS * {p}_TIMER_CLOCK_HZ)"
    lhs = f"({steps} * {div} * 1000000000000u)"
    out: list[Check] = []
    bounds = [("MIN", lo_ps, "below the window minimum", "<")]
    if hi_ps is not None:
        bounds.append(("MAX", hi_ps, "above the window maximum", ">"))
    for side, w, words, op_sign in bounds:
        macro = f"{p}_WINDOW_{E}_{side}_PS"
        slack = 0 if _guard_holds(n, k, w, ppb, side) else (1 if side == "MIN" else -1)
        # an ok output is inside its window exactly; only the ps rounding of PPB can differ
        assert _guard_holds(n, k, w - slack, ppb, side), (edge, side)
        wm = macro if slack == 0 else f"({macro} {'-' if slack > 0 else '+'} 1u)"
        if not fits_u64(n, k, w + (-slack), ppb):
            achieved = f"{p}_{E}_ACHIEVED_{side}_PS"
            cond = f"({achieved}) {op_sign} ({macro})"
            note = " (64-bit recomputation would overflow: compares the ACHIEVED macro)"
        else:
            wk = f"({wm} * {kk})"
            extra = (f"(({wk} / 1000000000u) * {p}_CLOCK_TOL_PPB"
                     f" + (({wk} % 1000000000u) * {p}_CLOCK_TOL_PPB + 999999999u) / 1000000000u)")
            rhs = f"({wk} + {extra})" if side == "MIN" else f"({wk} - {extra})"
            cond = f"{lhs} {op_sign} {rhs}"
            note = "" if slack == 0 else " (1 ps allowed for the rounded-up tolerance)"
        out.append(Check(cond, f"{p} {edge}: worst-case dead time {words}{note}"))
    return out


def _guard_terms(n: int, k: int, w: int, ppb: int) -> tuple[int, int, int]:
    wk = w * k
    a, b = divmod(wk, PPB)
    extra = a * ppb + -(-(b * ppb) // PPB)
    return n * PS_PER_S, wk, extra


def _guard_holds(n: int, k: int, w: int, ppb: int, side: str) -> bool:
    lhs, wk, extra = _guard_terms(n, k, w, ppb)
    return lhs >= wk + extra if side == "MIN" else lhs <= wk - extra


def fits_u64(n: int, k: int, w: int, ppb: int) -> bool:
    lhs, wk, extra = _guard_terms(n, k, w, ppb)
    b = wk % PPB
    return max(lhs, wk + extra, b * ppb + PPB, (wk // PPB) * ppb) < U64


