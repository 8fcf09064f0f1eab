"""`gapforge sweep`: layouts x timer clocks x dividers against the power stage's window."""

from __future__ import annotations

import csv
import io
import json
import sys
from fractions import Fraction
from typing import Any

import click

from gapforge.base import caution
from gapforge.base.display import (
    both_edges,
    choose_exponent,
    count,
    format_range,
    format_register,
    format_si,
    verdict_word,
)
from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import format_tolerance
from gapforge.cli.options import (
    Quantity,
    Tolerance,
    json_option,
    require_clock_tol,
    warn_renamed,
)
from gapforge.cli.window_cmd import (
    CAUTION,
    MIN_FORMULA,
    OPTION_KEYS,
    spec_from_options,
    stage_options,
)
from gapforge.stage.stage_reader import parse_span
from gapforge.stage.window import EDGES, stage_window
from gapforge.timer.layouts import Layout, builtin_names, load_layout
from gapforge.timer.limits import COUNTINGS, PwmSpec
from gapforge.timer.sweep import RANKS, Sweep, SweepRow, limits_of, parse_clocks, sweep

TEXT_TOP = 20


def _f(value: Fraction | None) -> float | None:
    return None if value is None else float(value)


def _row_json(row: SweepRow, rank: int | None) -> dict[str, Any]:
    return {
        "rank": rank,
        "feasible": row.feasible,
        "layout": row.layout,
        "clock_hz": float(row.clock_hz),
        "divider_code": row.divider_code,
        "divider": row.divider,
        "fields": row.fields,
        "register": row.register,
        "worst_above_min_s": _f(row.worst_above_min_s),
        "worst_margin_s": _f(row.worst_margin_s),
        "worst_error_s": _f(row.worst_error_s),
        "reason": row.reason,
        "pwm": None
        if row.pwm is None
        else {
            "compare_counts": row.pwm.compare_counts,
            "period_counts": row.pwm.period_counts,
            "duty_min_counts": row.pwm.duty_min_counts,
            "duty_max_counts": row.pwm.duty_max_counts,
            "max_share": float(row.pwm.max_share),
            "verdict": verdict_word(row.pwm.verdict),
            "reason": "" if row.pwm.verdict == "ok" else row.pwm.verdict,
        },
        "edges": {
            edge: {
                "code": e.code,
                "steps": e.steps,
                "achieved_s": float(e.achieved_s),
                "achieved_min_s": float(e.achieved_min_s),
                "achieved_max_s": float(e.achieved_max_s),
                "error_s": float(e.error_s),
                "margin_low_s": float(e.margin_low_s),
                "margin_high_s": _f(e.margin_high_s),
                "verdict": verdict_word(e.verdict),
                "reason": "" if e.verdict == "ok" else e.verdict,
            }
            for edge, e in row.edges.items()
        },
    }


def sweep_json(result: Sweep, top: int | None) -> dict[str, Any]:
    shown = result.feasible if top is None else result.feasible[:top]
    return {
        "window": {
            edge: {"min_s": float(lo), "max_s": _f(hi)} for edge, (lo, hi) in result.limits.items()
        },
        "clock_tol": float(result.clock_tol),
        "pwm": None
        if result.pwm is None
        else {"frequency_hz": float(result.pwm.frequency_hz), "counting": result.pwm.counting},
        "rank_by": result.rank,
        "layouts": list(result.layouts),
        "clocks_hz": [float(c) for c in result.clocks],
        "points": result.points,
        "feasible_count": len(result.feasible),
        "feasible": [_row_json(row, i + 1) for i, row in enumerate(shown)],
        "infeasible": [_row_json(row, None) for row in result.infeasible],
        "caution": CAUTION,
    }


CSV_COLUMNS = [
    "rank",
    "feasible",
    "layout",
    "clock_hz",
    "divider_code",
    "divider",
    "to_high_code",
    "to_high_achieved_s",
    "to_high_min_s",
    "to_high_max_s",
    "to_low_code",
    "to_low_achieved_s",
    "to_low_min_s",
    "to_low_max_s",
    "worst_margin_s",
    "worst_error_s",
    "register",
    "fields",
    "pwm_compare_counts",
    "duty_min_counts",
    "duty_max_counts",
    "reason",
]


def sweep_csv(result: Sweep, top: int | None) -> str:
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(CSV_COLUMNS)
    shown = result.feasible if top is None else result.feasible[:top]
    rows = [(i + 1, r) for i, r in enumerate(shown)] + [(None, r) for r in result.infeasible]
    for rank, row in rows:
        cells: list[object] = [
            "" if rank is None else rank,
            int(row.feasible),
            row.layout,
            f"{float(row.clock_hz):.12g}",
            row.divider_code,
            row.divider,
        ]
        for edge in EDGES:
            e = row.edges.get(edge)
            if e is None:
                cells += ["", "", "", ""]
            else:
                cells += [
                    e.code,
                    f"{float(e.achieved_s):.9g}",
                    f"{float(e.achieved_min_s):.9g}",
                    f"{float(e.achieved_max_s):.9g}",
                ]
        cells += [
            "" if row.worst_margin_s is None else f"{float(row.worst_margin_s):.9g}",
            "" if row.worst_error_s is None else f"{float(row.worst_error_s):.9g}",
            "" if row.register is None else row.register,
            ";".join(f"{k}={v}" for k, v in row.fields.items()),
            "" if row.pwm is None else row.pwm.compare_counts,
            "" if row.pwm is None else row.pwm.duty_min_counts,
            "" if row.pwm is None else row.pwm.duty_max_counts,
            row.reason,
        ]
        writer.writerow(cells)
    return buffer.getvalue()


RANK_WORDS = {
    "loss": "least dead time that is safe (smallest worst-case maximum above the minimum)",
    "margin": "worst-case margin to the nearer window edge",
    "error": "quantization error",
}
# fixed column widths, whatever the code or register width (issue 10)
_COLUMNS = (("#", 4, ">"), ("target layout", 26, "<"), ("clock", 9, ">"), ("div", 5, ">"),
            ("to_high code", 12, ">"), ("to_low code", 12, ">"), ("worst case (both edges)", 26, "<"),
            ("above min", 10, ">"), ("margin", 10, ">"), ("error", 10, ">"), ("register", 0, "<"))


def _cell(text: str, width: int, align: str) -> str:
    if width and len(text) > width:
        text = text[: width - 1] + "~"
    return f"{text:{align}{width}}" if width else text


def _row_cells(rank: int, row: SweepRow, exp3: int) -> list[str]:
    lo = min(e.achieved_min_s for e in row.edges.values())
    hi = max(e.achieved_max_s for e in row.edges.values())
    span = format_range(lo, hi, "s", cut='outward')
    register = "-" if row.register is None else format_register(row.register, row.register_bits)
    return [
        str(rank),
        row.layout,
        format_si(row.clock_hz, "Hz"),
        f"/{row.divider}",
        str(row.edges["to_high"].code),
        str(row.edges["to_low"].code),
        span,
        _ns(row.worst_above_min_s, exp3),
        _ns(row.worst_margin_s, exp3),
        _ns(row.worst_error_s, exp3),
        register,
    ]


def _ns(value: Fraction | None, exp3: int) -> str:
    return "-" if value is None else format_si(value, "s", exponent=exp3)


def best_line(result: Sweep) -> str:
    """The answer, first: the best choice, or that there is none."""
    if not result.feasible:
        return f"sweep: fail - no feasible choice among {count(result.points, 'point')}"
    row = result.feasible[0]
    codes = both_edges({edge: f"code {row.edges[edge].code}" for edge in EDGES})
    lo = min(e.achieved_min_s for e in row.edges.values())
    hi = max(e.achieved_max_s for e in row.edges.values())
    register = "" if row.register is None else f", register {format_register(row.register, row.register_bits)}"
    return (
        f"sweep: best {row.layout} at {format_si(row.clock_hz, 'Hz')} /{row.divider}, "
        f"{'; '.join(codes)}{register}: worst case {format_range(lo, hi, 's', cut='outward')}"
    )


def sweep_text(result: Sweep, top: int | None, formula: bool = True) -> str:
    n = TEXT_TOP if top is None else top
    out: list[str] = [best_line(result), ""]
    window = both_edges(
        {
            edge: format_range(lo, hi, "s", cut="inward") if hi is not None
            else f"{format_si(lo, 's', toward='up')} .. no max"
            for edge, (lo, hi) in result.limits.items()
        }
    )
    star = "*" if formula else ""
    out.append(f"Window{star}: {'; '.join(window)}; clock tolerance "
               f"{format_tolerance(result.clock_tol)}")
    if result.pwm is None:
        out.append("PWM: not checked (give --pwm F, or a design with a [pwm] section)")
    else:
        out.append(
            f"PWM: {format_si(result.pwm.frequency_hz, 'Hz')} "
            f"{result.pwm.counting}-aligned; a row must leave a pulse on both outputs"
        )
    out.append(
        f"{count(result.points, 'point')} ({count(len(result.layouts), 'target layout')} x "
        f"{count(len(result.clocks), 'clock')} x dividers): {len(result.feasible)} feasible, "
        f"ranked by {RANK_WORDS[result.rank]}"
    )
    out.append("")
    out.append(" ".join(_cell(name, w, a) for name, w, a in _COLUMNS).rstrip())
    shown = result.feasible[:n]
    values = [v for r in shown for v in (r.worst_above_min_s, r.worst_margin_s, r.worst_error_s)]
    exp3 = choose_exponent([v for v in values if v is not None])
    for i, row in enumerate(shown):
        cells = _row_cells(i + 1, row, exp3)
        out.append(" ".join(_cell(c, w, a) for c, (_, w, a) in zip(cells, _COLUMNS, strict=True)))
    if len(result.feasible) > n:
        more = len(result.feasible) - n
        out.append(f"      ... and {more} more feasible (--top N, --json, --csv)")
    if not result.feasible:
        out.append("      (no feasible choice)")
    if result.infeasible:
        out.append("")
        out.append(f"Infeasible ({len(result.infeasible)}):")
        for row in result.infeasible[:n]:
            out.append(
                f"      {_cell(row.layout, 26, '<')} {_cell(format_si(row.clock_hz, 'Hz'), 9, '>')}"
                f" {_cell('/' + str(row.divider), 5, '>')}  {row.reason}"
            )
        if len(result.infeasible) > n:
            out.append(f"      ... and {len(result.infeasible) - n} more (--json or --csv for all)")
    if formula:
        out.append("")
        out.append(f"* window {MIN_FORMULA} (see `gapforge window` for the breakdown).")
    out.append("")
    out.append(caution.SHORT)
    return "\n".join(out) + "\n"


def _design_limits(
    values: dict[str, Any],
) -> tuple[
    dict[str, tuple[Fraction, Fraction | None]], Fraction, PwmSpec | None, Fraction, list[Layout]
]:
    """The window of a design (gapforge.pipeline.policy, the same numbers `build` judges
    against), its tolerance, its PWM, its timer clock and the layouts its outputs name."""
    from pathlib import Path

    from gapforge.pipeline.design import load_design
    from gapforge.pipeline.policy import window_of

    used = [name for name in (*OPTION_KEYS, "high_side", "low_side") if values.get(name)]
    if used:
        raise GapforgeError(
            "give either --design or the stage options, not both", "--" + used[0].replace("_", "-")
        )
    design = load_design(Path(values["design"]))
    window = window_of(design).bounds
    if window is None:
        raise GapforgeError("the design has no [stage] section to give a window", str(design.path))
    limits = {e: (lo if lo is not None else Fraction(0), hi) for e, (lo, hi) in window.items()}
    layouts = [o.layout for o in design.outputs]
    return limits, design.clock_tol, design.pwm, design.clock_hz, layouts


def _pwm_spec(values: dict[str, Any], design_pwm: PwmSpec | None) -> PwmSpec | None:
    """--pwm and --counting, each overriding its part of the design's [pwm] section."""
    frequency: Fraction | None = values["pwm"]
    counting = values["counting"]
    if design_pwm is not None:
        frequency = frequency if frequency is not None else design_pwm.frequency_hz
        counting = counting if counting is not None else design_pwm.counting
    if frequency is None:
        if counting is not None:
            raise GapforgeError("needs --pwm F (or a design with a [pwm] section)", "--counting")
        return None
    counting = counting if counting is not None else "edge"
    # the design's counter width and turning convention stay while its counting does
    same = design_pwm is not None and design_pwm.counting == counting
    return PwmSpec(
        frequency,
        counting,
        design_pwm.counter_bits if same and design_pwm is not None else None,
        design_pwm.turn_clocks if same and design_pwm is not None else None,
    )


@click.command(name="sweep")
@click.option(
    "--target",
    "targets",
    multiple=True,
    help="Target layout name or .toml file (repeat). Default: every built-in target layout.",
)
@click.option(
    "--builtins", is_flag=True, help="Add every built-in target layout to the --target list."
)
@click.option(
    "--clocks",
    "clock_texts",
    multiple=True,
    metavar="LIST|START:STOP:STEP",
    help="Timer clocks: '160MHz,170MHz' or '100MHz:200MHz:5MHz' (repeatable; default with "
    "--design: the design's clock).",
)
@click.option(
    "--clock-tol",
    type=Tolerance(),
    default=None,
    help="Timer clock tolerance, required unless --design gives it: '50ppm' (crystal), '2%' "
    "(RC oscillator), '0ppm' stated for an exact clock.",
)
@click.option(
    "--window",
    "window_text",
    metavar="MIN:MAX",
    help="The window directly for both edges ('90ns:1us'; '90ns' for no maximum), "
    "instead of the stage options.",
)
@stage_options
@click.option(
    "--pwm",
    type=Quantity("Hz"),
    default=None,
    help="PWM frequency: rows whose dead time does not fit the PWM are infeasible "
    "(default: the design's [pwm], else not checked).",
)
@click.option(
    "--counting",
    type=click.Choice(COUNTINGS),
    default=None,
    help="PWM counting: edge-aligned up, or center-aligned up/down "
    "(default: the design's, else edge).",
)
@click.option(
    "--rank",
    type=click.Choice(RANKS),
    default="loss",
    show_default=True,
    help="Order feasible rows: loss = the least dead time that is safe (smallest worst-case "
    "maximum above the window minimum); margin = the largest worst-case distance to either "
    "window edge; error = the smallest quantization error. Ties: lowest clock, fewest bits.",
)
@click.option(
    "--top",
    type=click.IntRange(min=1),
    default=None,
    help=f"Show only the N best feasible rows (text default {TEXT_TOP}).",
)
@json_option
@click.option("--csv", "as_csv", is_flag=True, help="Print CSV.")
def command(**values: Any) -> None:
    """Compare target layouts x timer clocks x dividers against the dead-time window.

    Each point asks for the window minimum with safe rounding and checks the worst case at the
    slow clock against the window maximum and, with a PWM, that the dead time is under half a
    period and leaves a pulse on both outputs. Exit 1 when no point is feasible. A design aid:
    verify on the bench at reduced voltage with current limiting.
    """
    if values["as_json"] and values["as_csv"]:
        raise GapforgeError("give --json or --csv, not both", "--csv")
    design_pwm: PwmSpec | None = None
    design_clock: Fraction | None = None
    design_layouts: list[Layout] = []
    if values["window_text"] is not None:
        used = [
            name for name in ("design", *OPTION_KEYS, "high_side", "low_side") if values.get(name)
        ]
        if used:
            raise GapforgeError(
                "give --window or the stage options, not both", "--" + used[0].replace("_", "-")
            )
        limits = _window_limits(values["window_text"])
    elif values.get("design") is not None:
        limits, design_tol, design_pwm, design_clock, design_layouts = _design_limits(values)
        if values["clock_tol"] is None:
            values["clock_tol"] = design_tol
        if (
            design_pwm is not None
            and values["pwm"] is not None
            and values["pwm"] != design_pwm.frequency_hz
        ):
            # the design's window maximum was computed for its own switching frequency
            raise GapforgeError(
                "differs from the design's [pwm] frequency, for which its window was derived; "
                "edit the design instead",
                "--pwm",
            )
    else:
        # a half bridge switches once per PWM period: --pwm is the stage's switching frequency
        spec = spec_from_options(values, values["pwm"])
        if values["pwm"] is not None and spec.fsw is not None and spec.fsw != values["pwm"]:
            raise GapforgeError("differs from --pwm (a half bridge switches once per PWM period)",
                                "--fsw")
        limits = limits_of(stage_window(spec))
    pwm = _pwm_spec(values, design_pwm)
    if values["clock_texts"]:
        clocks = parse_clocks(values["clock_texts"])
    elif design_clock is not None:
        clocks = (design_clock,)
    else:
        raise GapforgeError("required (or give --design FILE to sweep at its clock)", "--clocks")
    values["clock_tol"] = require_clock_tol(values["clock_tol"])
    names = list(values["targets"])
    if values["builtins"] or not names:
        names = builtin_names() + [n for n in names if n not in builtin_names()]
    layouts = []
    seen: set[str] = set()
    for name in names:  # each layout is loaded once, before the sweep
        try:
            layout = load_layout(name)
        except GapforgeError as exc:
            raise exc.at("--target") from None
        warn_renamed(name)
        if layout.name not in seen:
            seen.add(layout.name)
            layouts.append(layout)
    for layout in design_layouts:  # the user layouts a design's outputs name are swept too
        if layout.name not in seen:
            seen.add(layout.name)
            layouts.append(layout)
    result = _run(layouts, clocks, values["clock_tol"], limits, values["rank"], pwm,
                  show_progress=not (values["as_json"] or values["as_csv"]))
    top = values["top"]
    if values["as_json"]:
        click.echo(json.dumps(sweep_json(result, top), indent=2))
    elif values["as_csv"]:
        click.echo(sweep_csv(result, top), nl=False)
    else:
        click.echo(sweep_text(result, top, formula=values["window_text"] is None), nl=False)
    if not result.feasible:
        raise SystemExit(1)


PROGRESS_POINTS = 2000  # a sweep this large shows a progress bar on a terminal


def _run(
    layouts: list[Layout],
    clocks: tuple[Fraction, ...],
    clock_tol: Fraction,
    limits: dict[str, tuple[Fraction, Fraction | None]],
    rank: str,
    pwm: PwmSpec | None,
    show_progress: bool,
) -> Sweep:
    """The sweep, with a progress bar on stderr only when stderr is a terminal and it is long."""
    points = sum(len(layout.dividers) for layout in layouts) * len(clocks)
    if not (show_progress and points >= PROGRESS_POINTS and sys.stderr.isatty()):
        return sweep(layouts, clocks, clock_tol, limits, rank, pwm)
    with click.progressbar(
        length=len(layouts) * len(clocks), label="sweeping", file=sys.stderr
    ) as bar:
        return sweep(layouts, clocks, clock_tol, limits, rank, pwm, progress=bar.update)


def _window_limits(text: str) -> dict[str, tuple[Fraction, Fraction | None]]:
    where = "--window"
    lo_text, sep, hi_text = text.partition(":")
    if not sep or not hi_text.strip():
        lo, _ = parse_span(lo_text, where)
        hi: Fraction | None = None
    else:
        lo, hi = parse_span(text, where)
    return {edge: (lo, hi) for edge in EDGES}
