"""`gapforge window`: the power stage's dead-time window, its breakdown and its costs.

The stage options are defined once here (`stage_options`) and shared with `gapforge sweep`.
Option values go through the same reader as a design file's [stage] table, so both are checked
by one piece of code; a problem is reported against the option that caused it.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from fractions import Fraction
from pathlib import Path
from typing import Any, TypeVar

import click

from gapforge.base import caution
from gapforge.base.display import (
    both_edges,
    format_offset,
    format_percent,
    format_range,
    format_si,
    verdict_word,
)
from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import parse_quantity, picoseconds_ceil
from gapforge.base.schema import Reader
from gapforge.cli.options import json_option
from gapforge.pipeline.policy import POLICIES, DesignWindow, design_window
from gapforge.stage.stage_reader import read_stage
from gapforge.stage.window import (
    EDGES,
    KINDS,
    Costs,
    StageSpec,
    Term,
    Window,
    judge_bounds,
    stage_costs,
    stage_window,
)

CAUTION = caution.TEXT
MIN_FORMULA = (
    "minimum (common practice, no single published source): margin x (td_off,max + t_fall,max "
    "- td_on,min + driver delay max - min + mismatch + isolator skew + timer skew), rounded up "
    "to 1 ps"
)
MAX_FORMULA = (
    "maximum (common practice): (loss budget - recovery loss) / (Vsd x (|I to_high| + "
    "|I to_low|) x fsw), never beyond half a period, rounded down to 1 ps"
)

# option name (click parameter) -> [stage] key
OPTION_KEYS: dict[str, str] = {
    "td_off": "td_off",
    "t_fall": "t_fall",
    "td_on": "td_on",
    "t_rise": "t_rise",
    "prop_delay": "prop_delay",
    "mismatch": "mismatch",
    "isolator_skew": "isolator_skew",
    "timer_skew": "timer_skew",
    "margin": "margin",
    "kind": "kind",
    "vsd": "vsd",
    "vsd_at_gate_off": "vsd_at_gate_off",
    "gate_off": "gate_off",
    "current": "current",
    "current_to_high": "current_to_high",
    "current_to_low": "current_to_low",
    "fsw": "fsw",
    "loss_budget": "loss_budget",
    "qrr": "qrr",
    "bus_voltage": "bus_voltage",
}

F = TypeVar("F", bound=Callable[..., Any])


def stage_options(func: F) -> F:
    """The power-stage options, shared by `window` and `sweep`."""
    options = [
        click.option(
            "--design",
            type=click.Path(path_type=Path),
            default=None,
            help="Read the [stage] section of this design file instead of options.",
        ),
        click.option("--td-off", help="Switch turn-off delay, max (both switches), e.g. 35ns."),
        click.option("--t-fall", help="Switch fall time, max, e.g. 20ns."),
        click.option("--td-on", help="Switch turn-on delay, min, e.g. 10ns."),
        click.option("--t-rise", help="Switch rise time (shown, not counted)."),
        click.option(
            "--prop-delay",
            metavar="MIN:MAX",
            help="Gate-driver propagation delay, min:max per channel, e.g. 20ns:45ns.",
        ),
        click.option(
            "--high",
            "high_side",
            multiple=True,
            metavar="KEY=VALUE",
            help="Override one timing of the high-side switch and its driver channel (repeat): "
            "td_off, t_fall, td_on, t_rise, prop_delay; e.g. --high td_off=150ns.",
        ),
        click.option(
            "--low",
            "low_side",
            multiple=True,
            metavar="KEY=VALUE",
            help="The same for the low-side switch, e.g. --low prop_delay=20ns:40ns.",
        ),
        click.option("--mismatch", help="Driver channel mismatch not covered by MIN:MAX."),
        click.option("--isolator-skew", help="Isolator or level-shifter skew."),
        click.option("--timer-skew", help="The timer's own output skew, if known."),
        click.option("--margin", help="Margin factor (>= 1).  [default: 1.2]"),
        click.option(
            "--kind",
            type=click.Choice(KINDS),
            default=None,
            help="Reverse-conduction path: silicon or SiC body diode, GaN third quadrant."
            "  [default: silicon]",
        ),
        click.option(
            "--vsd",
            help="Reverse-conduction voltage (default: the kind's usual top). For GaN: read at "
            "0 V gate (the datasheet's third-quadrant curve); --gate-off is added once.",
        ),
        click.option(
            "--vsd-at-gate-off",
            is_flag=True,
            default=None,
            help="GaN: the --vsd given was measured at the gate-off bias (nothing is added).",
        ),
        click.option(
            "--gate-off",
            help="GaN gate-off voltage, e.g. -3V: its magnitude is added once to a --vsd read "
            "at 0 V gate.",
        ),
        click.option("--current", help="Load current at both transitions, signed (+ out of node)."),
        click.option("--current-to-high", help="Load current at the to_high transition, signed."),
        click.option("--current-to-low", help="Load current at the to_low transition, signed."),
        click.option("--fsw", help="Switching frequency, e.g. 20kHz."),
        click.option("--loss-budget", help="Reverse-conduction + recovery loss budget, e.g. 0.5W."),
        click.option("--qrr", help="Reverse-recovery charge, e.g. 50nC (needs --bus-voltage)."),
        click.option("--bus-voltage", help="Bus voltage (recovery loss, inverter voltage error)."),
    ]
    for option in reversed(options):
        func = option(func)
    return func


def spec_from_options(values: dict[str, Any], default_fsw: Fraction | None = None) -> StageSpec:
    """A StageSpec from --design or from the stage options (one validation path for both)."""
    design = values.get("design")
    given: dict[str, Any] = {
        key: values[name] for name, key in OPTION_KEYS.items() if values.get(name) is not None
    }
    for side, option in (("high", "high_side"), ("low", "low_side")):
        pairs = values.get(option) or ()
        if pairs:
            given[side] = _side_table(pairs, f"--{side}")
    if design is not None:
        extra = sorted(given)
        if extra:
            option = "--" + extra[0].replace("_", "-")
            raise GapforgeError("give either --design or the stage options, not both", option)
        spec, _dw = design_window_of_file(Path(design))
        return spec
    reader = Reader("options")
    spec = read_stage(reader.table(given, ""), default_fsw)
    if reader.problems:
        path, message = reader.problems[0]
        if message.startswith("required") and not given:
            message += " (or give --design FILE)"
        parts = path.split(".")
        if parts[0] in ("high", "low") and len(parts) == 2:
            raise GapforgeError(message, f"--{parts[0]} {parts[1]}")
        raise GapforgeError(message, "--" + parts[-1].replace("_", "-"))
    return spec


def design_window_of_file(path: Path) -> tuple[StageSpec, DesignWindow]:
    """The [stage] spec of a design file and the window of the design (the same function
    `build` uses, so both show the same numbers for the same file)."""
    from gapforge.pipeline.design import load_window_sections

    sections = load_window_sections(path)
    if sections.stage is None:
        raise GapforgeError("required section is missing", f"{path}: stage")
    return sections.stage, design_window(sections.stage, sections.reference, sections.source)


def _side_table(pairs: tuple[str, ...], option: str) -> dict[str, str]:
    """'td_off=150ns' pairs of a --high/--low option as a [stage.high]/[stage.low] table."""
    table: dict[str, str] = {}
    for pair in pairs:
        key, sep, value = pair.partition("=")
        key = key.strip().replace("-", "_")
        if not sep or not key or not value.strip():
            raise GapforgeError(f"{pair!r} is not KEY=VALUE (e.g. td_off=150ns)", option)
        if key in table:
            raise GapforgeError(f"{key} is given twice", option)
        table[key] = value.strip()
    return table


# ---------------------------------------------------------------------------------------------
# rendering (returns text; the command prints)


def _seconds(value: Fraction | None) -> float | None:
    return None if value is None else float(value)


def _term_json(term: Term) -> dict[str, Any]:
    return {
        "term": term.name,
        "value": float(term.value),
        "unit": term.unit or "factor",
        "counted": term.counted,
        "given": term.given,
        "note": term.note,
    }


def window_json(
    window: Window,
    costs: Costs,
    dead_times: dict[str, Fraction],
    judged: dict[str, tuple[str, Fraction, Fraction | None]] | None,
    verdict: str,
    reason: str = "",
) -> dict[str, Any]:
    edges: dict[str, Any] = {}
    for edge in EDGES:
        w = window.edges[edge]
        c = costs.edges[edge]
        edges[edge] = {
            "min_s": float(w.min_s),
            "max_s": _seconds(w.max_s),
            "min_ps": picoseconds_ceil(w.min_s),
            "max_ps": None if w.max_s is None else int(w.max_s * 10**12),
            "max_reason": w.max_reason,
            "empty": w.empty,
            "breakdown": [_term_json(t) for t in w.breakdown],
            "max_breakdown": [_term_json(t) for t in w.max_breakdown],
            "costs": {
                "dead_time_s": float(c.dead_time_s),
                "current_a": float(c.current_a),
                "reverse_conduction_w": float(c.reverse_conduction_w),
                "recovery_w": float(c.recovery_w),
                "voltage_error_v": float(c.voltage_error_v),
            },
        }
        if judged is not None:
            v, low, high = judged[edge]
            edges[edge]["judged"] = {
                "verdict": verdict_word(v),
                "reason": "" if v == "ok" else v,
                "margin_low_s": float(low),
                "margin_high_s": _seconds(high),
            }
    return {
        "verdict": verdict,
        "reason": reason,
        "margin": float(window.margin),
        "minimum_formula": MIN_FORMULA,
        "maximum_formula": MAX_FORMULA,
        "edges": edges,
        "costs": {
            "dead_times_s": {edge: float(dead_times[edge]) for edge in EDGES},
            "reverse_voltage_v": float(costs.reverse_voltage_v),
            "reverse_conduction_w": float(costs.reverse_conduction_w),
            "recovery_w": float(costs.recovery_w),
            "total_w": float(costs.reverse_conduction_w + costs.recovery_w),
            "dead_share": _seconds(costs.dead_share),
            "duty_lost": _seconds(costs.duty_lost),
            "voltage_error_v": _seconds(costs.voltage_error_v),
        },
        "caution": CAUTION,
    }


def design_json(dw: DesignWindow) -> dict[str, Any]:
    """The window of the design (policy, bounds, evidence), as `build` judges against it."""
    assert dw.bounds is not None
    return {
        "policy": dw.policy,
        "policy_means": POLICIES[dw.policy][0],
        "basis": dw.basis,
        "window": {
            e: {
                "min_s": _seconds(lo),
                "max_s": _seconds(hi),
                "min_ps": None if lo is None else picoseconds_ceil(lo),
                "max_ps": None if hi is None else int(hi * 10**12),
            }
            for e, (lo, hi) in dw.bounds.items()
        },
        "old_network": None
        if dw.reference is None
        else {
            e: {"min_s": float(r.min_s), "typ_s": float(r.typ_s), "max_s": float(r.max_s)}
            for e, r in dw.reference.items()
        },
        "empty": dict(dw.empty),
        "warnings": list(dw.evidence),
    }


def design_text(dw: DesignWindow) -> str:
    assert dw.bounds is not None
    out = [f"Design window (policy '{dw.policy}': {POLICIES[dw.policy][0]}; {dw.basis})"]
    for e, (lo, hi) in dw.bounds.items():
        low = "0 s" if lo is None else format_si(lo, "s", toward="up")
        top = "no maximum" if hi is None else format_si(hi, "s", toward="down")
        out.append(f"  {e}: {low} .. {top}")
    if dw.reference is not None:
        for e, r in dw.reference.items():
            out.append(
                f"  old network (evidence) {e}: "
                f"{format_range(r.min_s, r.max_s, 's', cut='outward')} "
                f"(typical {format_si(r.typ_s, 's')})"
            )
    out.extend(f"  EMPTY: {why}" for why in dw.empty.values())
    out.extend(f"warning: {w}" for w in dw.evidence)
    return "\n".join(out) + "\n"


def _line(term: Term) -> str:
    if term.unit == "s":
        # the window's own minimum is cut up and its maximum down: the display is never wider
        toward = {"minimum": "up", "maximum": "down"}.get(term.name.split(" ")[0], "nearest")
        value = format_si(abs(term.value), "s", toward=toward)
        sign = ("-" if term.value < 0 else "+") if term.counted else " "
        shown = f"{sign} {value}"
    elif term.unit:
        shown = f"  {format_si(term.value, term.unit)}"
    else:
        shown = f"  x {float(term.value):g}"
    note = f"  ({term.note})" if term.note else ""
    return f"    {shown:>12}  {term.name}{note}"


def _window_span(w: Any) -> str:
    """The window of one edge, cut inward (minimum up, maximum down), with why the top is there."""
    if w.max_s is None:
        return f"{format_si(w.min_s, 's', toward='up')} .. no maximum"
    return f"{format_range(w.min_s, w.max_s, 's', cut='inward')} ({w.max_reason})"


def first_line(window: Window, verdict: str, reason: str) -> str:
    """The answer: the verdict and the two windows (said once when both edges agree)."""
    spans = both_edges({edge: _window_span(window.edges[edge]) for edge in EDGES})
    why = f" ({reason})" if reason and reason != verdict else ""
    return f"window: {verdict}{why} - {'; '.join(spans)}"


def window_text(
    window: Window,
    costs: Costs,
    dead_times: dict[str, Fraction],
    judged: dict[str, tuple[str, Fraction, Fraction | None]] | None,
    verdict: str,
    reason: str = "",
) -> str:
    out: list[str] = [first_line(window, verdict, reason)]
    if window.empty:
        out.append("EMPTY WINDOW: no dead time is both long enough and within the budget")
    if judged is not None:
        lines = {}
        for edge in EDGES:
            v, low, high = judged[edge]
            top = "" if high is None else ", " + format_offset(-high, "s", "the maximum")
            lines[edge] = f"{v} ({format_offset(low, 's', 'the minimum')}{top})"
        out.extend(f"  {line}" for line in both_edges(lines))
    out.append("")
    chosen = both_edges({edge: format_si(dead_times[edge], "s") for edge in EDGES})
    if chosen[0].startswith("both edges: "):
        chosen = [chosen[0].removeprefix("both edges: ") + " on both edges"]
    out.append(f"Costs at {'; '.join(chosen)}:")
    out.append(
        f"  reverse conduction {format_si(costs.reverse_conduction_w, 'W')} "
        f"at {format_si(costs.reverse_voltage_v, 'V')}, "
        f"recovery {format_si(costs.recovery_w, 'W')}"
    )
    if costs.dead_share is not None:
        out.append(f"  both switches off {format_percent(costs.dead_share)} of each period")
    if costs.duty_lost is not None:
        out.append(
            "  switch-node duty change (the high side's gate command minus what the current's "
            f"sign takes): {format_percent(costs.duty_lost)}"
        )
    if costs.voltage_error_v is not None:
        out.append(
            "  inverter average output-voltage error (Vd x t_dead x fsw, sign by current): "
            f"{format_si(costs.voltage_error_v, 'V')}"
        )
    out.append("")
    out.append("Breakdown")
    out.append(f"  {MIN_FORMULA}")
    out.append(f"  {MAX_FORMULA}")
    names = {
        "to_high": "to_high (gap before the high-side switch turns on)",
        "to_low": "to_low (gap before the low-side switch turns on)",
    }
    for edge in EDGES:
        w = window.edges[edge]
        out.append("")
        out.append(names[edge])
        out.extend(_line(t) for t in w.breakdown)
        out.extend(_line(t) for t in w.max_breakdown)
        out.append(f"  window: {_window_span(w)}")
    out.append("")
    out.append(caution.SHORT)
    return "\n".join(out) + "\n"


# ---------------------------------------------------------------------------------------------


@click.command(name="window")
@stage_options
@click.option("--dead-time", help="A chosen dead time for both edges: costs and verdict.")
@click.option("--to-high", help="A chosen to_high dead time (overrides --dead-time).")
@click.option("--to-low", help="A chosen to_low dead time (overrides --dead-time).")
@json_option
def command(**values: Any) -> None:
    """Derive the power stage's dead-time window per edge, its breakdown and its costs.

    The minimum is the sum of delays and skews times a margin (common practice); the maximum is
    what the loss budget allows. Exit 1 on an empty window (or a chosen dead time outside it),
    2 on bad input. A design aid: verify on the bench at reduced voltage with current limiting.
    """
    dw: DesignWindow | None = None
    if values.get("design") is not None:
        spec_from_options(values)  # refuses stage options given beside --design
        spec, dw = design_window_of_file(Path(values["design"]))
        window = dw.stage
    else:
        spec = spec_from_options(values)
        window = stage_window(spec)
    bounds = (
        dw.bounds
        if dw is not None and dw.bounds is not None
        else {e: (window.edges[e].min_s, window.edges[e].max_s) for e in EDGES}
    )
    chosen: dict[str, Fraction] = {}
    for edge, option in (("to_high", "to_high"), ("to_low", "to_low")):
        text = values.get(option) or values.get("dead_time")
        if text is not None:
            name = option if values.get(option) else "dead_time"
            chosen[edge] = parse_quantity(text, "s", "--" + name.replace("_", "-"), allow_zero=True)
    judged: dict[str, tuple[str, Fraction, Fraction | None]] | None = None
    if chosen and len(chosen) != len(EDGES):
        missing = next(edge for edge in EDGES if edge not in chosen)
        option = "--" + missing.replace("_", "-")
        raise GapforgeError("give both --to-high and --to-low, or --dead-time", option)
    if chosen:
        judged = {}
        for e in EDGES:
            v, low, high = judge_bounds(bounds[e][0], bounds[e][1], chosen[e], chosen[e])
            judged[e] = (v, low if low is not None else chosen[e], high)
        dead_times = chosen
    else:
        dead_times = {e: bounds[e][0] or Fraction(0) for e in EDGES}
    costs = stage_costs(spec, dead_times)
    if window.empty or (dw is not None and dw.empty):
        reason = "empty-window"
    elif judged is not None:
        bad = [judged[edge][0] for edge in EDGES if judged[edge][0] != "ok"]
        reason = bad[0] if bad else ""
    else:
        reason = ""
    verdict = verdict_word(reason or "ok")
    if values["as_json"]:
        doc = window_json(window, costs, dead_times, judged, verdict, reason)
        if dw is not None:
            doc["design"] = design_json(dw)
        click.echo(json.dumps(doc, indent=2))
    else:
        text = window_text(window, costs, dead_times, judged, verdict, reason)
        if dw is not None:
            # the answer stays the first line; the design's policy block follows it
            answer, _, rest = text.partition("\n")
            text = answer + "\n" + design_text(dw) + "\n" + rest
        click.echo(text, nl=False)
    if verdict != "ok":
        raise SystemExit(1)
