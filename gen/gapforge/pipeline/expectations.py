"""What a bench capture is judged against when a design is given (`gapforge measure --design`).

Per edge: the design's window and a prediction (the achieved range over the clock tolerance) of
one named output. A design with several outputs needs the output's name (its `prefix`); with a
load-indexed table (`[adaptive]`) the prediction is the entry of the bin at the operating
current (`--current`, signed: a negative current selects the negative-current entries), since
that entry is what the firmware runs at that load. `source` says which output and which entry
were used, in words.
"""

from __future__ import annotations

from dataclasses import replace
from fractions import Fraction
from pathlib import Path
from typing import Any

from gapforge.base.errors import GapforgeError
from gapforge.base.records import record
from gapforge.pipeline.build import BuildPlan, Expectation, OutputPlan, plan_design
from gapforge.timer.layouts import EDGES


@record
class CaptureExpectation:
    per_edge: dict[str, Expectation]  # edge -> (window min, window max, predicted min, max)
    source: str  # which output and entry the prediction is from, in words
    # why a gap inside these limits proves nothing (a design without [stage]: issue 19 item 2)
    unjudged: str = ""


def _window(plan: BuildPlan, edge: str) -> tuple[Fraction | None, Fraction | None]:
    if plan.window is not None:
        return plan.window[edge]
    # without a window, its minimum is the requested dead time (what the design says it needs)
    return (plan.request.requested(edge) if plan.request is not None else None), None


def _pick_output(plan: BuildPlan, name: str | None, where: str,
                 option: str) -> OutputPlan | None:
    names = [op.output.prefix for op in plan.outputs]
    if name is None:
        if len(plan.outputs) > 1:
            raise GapforgeError(f"the design has {len(names)} outputs ({', '.join(names)}): name "
                                f"the one the capture runs with {option}", where)
        return plan.outputs[0] if plan.outputs else None
    for op in plan.outputs:
        if op.output.prefix.lower() == name.lower():
            return op
    shown = ", ".join(names) if names else "none (no fitted output)"
    raise GapforgeError(f"no output {name[:40]!r} in the design; its outputs: {shown}", option)


def _bin_at(adaptive: Any, current_a: Fraction) -> tuple[Any, str]:
    """The table's bin holding |current| and the sign of the current."""
    magnitude = abs(current_a)
    sign = "positive" if current_a >= 0 else "negative"
    for b in adaptive.table.bins:
        if magnitude >= b.current_min_a and (b.current_max_a is None
                                             or magnitude < b.current_max_a):
            return b, sign
    return adaptive.table.bins[-1], sign  # not reached: the bins cover every |I| from 0 A


def _amps(value: Fraction) -> str:
    from gapforge.base.display import format_si

    return format_si(value, "A")


def expectation_for(plan: BuildPlan, output: str | None = None,
                    current_a: Fraction | None = None, where: str = "",
                    option: str = "--output") -> CaptureExpectation:
    """The window and the prediction of the named output (the table entry at `current_a`)."""
    exp = _expectation(plan, output, current_a, where, option)
    if plan.stage is None:
        return replace(exp, unjudged=UNJUDGED)
    return exp


UNJUDGED = ("not judged against a power stage (the design has no [stage] section: its requested "
            "dead time is no proven minimum; give --window from the switches' datasheets)")


def _expectation(plan: BuildPlan, output: str | None, current_a: Fraction | None,
                 where: str, option: str) -> CaptureExpectation:
    op = _pick_output(plan, output, where, option)
    per_edge: dict[str, Expectation] = {}
    windows = {e: _window(plan, e) for e in EDGES}
    if op is None or not op.fit.ok:
        label = "no fitted output" if op is None else f"output {op.output.prefix} (no fit)"
        for e in EDGES:
            per_edge[e] = (*windows[e], None, None)
        return CaptureExpectation(per_edge, f"the design's window only ({label}: no prediction)")
    prefix = op.output.prefix
    if op.adaptive is None:
        if current_a is not None:
            raise GapforgeError(f"output {prefix} has no load-indexed table ([adaptive]): "
                                "--current selects a table entry; leave it out", "--current")
        for e in EDGES:
            edge = op.fit.edges[e]
            per_edge[e] = (*windows[e], edge.achieved_min_s, edge.achieved_max_s)
        return CaptureExpectation(per_edge, f"output {prefix}: its fixed fit")
    if current_a is None:
        raise GapforgeError(f"output {prefix} has a load-indexed table ([adaptive]): give the "
                            "operating current with --current (e.g. 5A, or -5A for the "
                            "negative-current entries) to compare with its entry", "--current")
    found, sign = _bin_at(op.adaptive, current_a)
    top = "no maximum" if found.current_max_a is None else _amps(found.current_max_a)
    for e in EDGES:
        entry = found.entries[sign][e]
        per_edge[e] = (*windows[e], entry.achieved_min_s, entry.achieved_max_s)
    index = op.adaptive.table.bins.index(found)
    return CaptureExpectation(per_edge, (
        f"output {prefix}: table entry of bin {index} ({_amps(found.current_min_a)} .. {top}, "
        f"{sign} current) at --current {_amps(current_a)}"))


def design_expectation(path: Path, output: str | None = None,
                       current_a: Fraction | None = None,
                       option: str = "--output") -> CaptureExpectation:
    """expectation_for of a design file (`option`: the command's option naming the output)."""
    from gapforge.pipeline.design import load_design

    return expectation_for(plan_design(load_design(path)), output, current_a, str(path), option)
