"""The design report: one self-contained HTML page with inline SVG figures and tables.

    plan (build.plan_design) --+--> figure data --> figures (one function per figure, SVG text)
    capture (measure result) --+--> tables (rows of prepared strings)
                                      --> templates/report.html.j2 (Jinja2, StrictUndefined,
                                          loops only, no arithmetic) --> text

This module gathers the data (the pair's timing, the reference's node ramps, the staircases,
the Monte Carlo samples), builds the tables and renders the template; `figures` draws.

Length (issue 23): the first screen answers (verdict, chosen words, window, worst case,
margins, caution), the decision plots follow, the rest is folded in <details> (open in print).

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

import re
from typing import TYPE_CHECKING

from gapforge import __version__
from gapforge.base.caution import TEXT as CAUTION
from gapforge.base.display import verdict_word
from gapforge.outputs.report_data import MC_SAMPLES, MC_SEED, SIM_BEYOND
from gapforge.outputs.report_sections import (
    Section,
    adaptive_sections,
    analog_section,
    capture_section,
    decision_section,
    staircase_section,
    timing_section,
)
from gapforge.outputs.report_tables import (
    input_tables,
    result_tables,
    summary_tables,
    window_tables,
)
from gapforge.outputs.templating import environment
from gapforge.pipeline.build import BuildPlan
from gapforge.timer.layouts import EDGES

if TYPE_CHECKING:
    from gapforge.bench.measure import Limits, Measurement

__all__ = ["MC_SAMPLES", "MC_SEED", "REPORT_FORMAT", "SIM_BEYOND", "capture_limits", "render_report"]

REPORT_FORMAT = 1


def capture_limits(plan: BuildPlan) -> dict[str, Limits]:
    """What a capture is judged against: the window and the first fitted output's range."""
    from gapforge.bench.measure import Limits
    from gapforge.pipeline.build import capture_expectations

    return {e: Limits(*x) for e, x in capture_expectations(plan).items()}


_EDGE_LINE = re.compile(r"^(to_high|to_low)(?: \([^)]*\))?: (.*)$", re.S)


def said_once(lines: list[str]) -> list[str]:
    """Warnings that say the same for both edges, said once as "both edges: ..." (in order)."""
    out: list[str] = []
    rests: dict[str, set[str]] = {}
    for line in lines:
        match = _EDGE_LINE.match(line)
        if match:
            rests.setdefault(match.group(2), set()).add(match.group(1))
    done: set[str] = set()
    for line in lines:
        match = _EDGE_LINE.match(line)
        if match and rests[match.group(2)] >= set(EDGES):
            if match.group(2) not in done:
                done.add(match.group(2))
                out.append(f"both edges: {match.group(2)}")
            continue
        if line not in out:
            out.append(line)
    return out


def design_warnings(plan: BuildPlan) -> list[str]:
    """Every finding the verdict box must show: why it fails, then each design warning (an old
    network that can overlap, hot-board leakage, a window narrowed by policy, ...)."""
    per_output = [f"{op.output.prefix}: {w}" for op in plan.outputs for w in op.warnings]
    return said_once([*plan.reasons, *plan.warnings, *per_output])


def capture_word(verdict: str) -> str:
    """A capture's verdict in the one vocabulary (older words: pass, measured)."""
    return {"pass": "ok", "measured": "inconclusive"}.get(verdict, verdict_word(verdict))


def render_report(plan: BuildPlan, capture: Measurement | None = None,
                  extra: tuple[Section, ...] = ()) -> str:
    """The whole report as HTML text (self-contained: inline CSS and SVG, no scripts).

    Read once, quickly, by the engineer who signs it: the first screen holds the verdict, the
    chosen words, the window with the worst case and the margins, and the caution; the plots
    that carry the decision come next, then a given capture (it feeds the capture verdict);
    everything else is folded (HTML <details>, opened when printed): the full results, the
    window's breakdown, the analog reference, quantization, timing, load current, a missing
    capture, every input.
    """
    d = plan.design
    warnings = design_warnings(plan)
    if capture is not None and capture.failed:
        warnings = [*(f"capture: {r}" for r in capture.reasons), *warnings]
    summary = Section(
        "summary",
        "Window, chosen words and margins",
        (),
        (),
        tuple(summary_tables(plan)),
    )
    opened = [decision_section(plan)]
    folded = [
        Section(
            "results",
            "Results in full: dead times per edge, PWM limits, costs",
            (f"Design verdict: {verdict_word(plan.verdict)}.",),
            (),
            tuple(result_tables(plan)),
        ),
        Section(
            "window",
            "Window and its breakdown",
            (
                "Absent: the design has neither a [stage] nor a [reference] section, so there is no "
                "window; margins are not judged.",
            )
            if plan.window is None
            else (),
            (),
            tuple(window_tables(plan)) if plan.window is not None else (),
        ),
        analog_section(plan),
        staircase_section(plan),
        timing_section(plan),
        *adaptive_sections(plan),
        Section(
            "inputs",
            "Inputs",
            ("Every input the numbers come from, with its unit.",),
            (),
            tuple(input_tables(plan)),
        ),
    ]
    # a capture follows the verdict it feeds (its analog traces, issue 21, right after it); a
    # missing one is a folded note
    if capture is None:
        folded.insert(len(folded) - 1, capture_section(plan, capture))
    else:
        opened.append(capture_section(plan, capture))
    opened += extra  # issue 21: the analog capture's traces (outputs/scope_figure.py)
    design_word = verdict_word(plan.verdict)
    capture_verdict = "no capture given" if capture is None else capture_word(capture.verdict)
    if design_word != "ok" or (capture is not None and capture.failed):
        verdict_class = "fail"
    else:
        verdict_class = "warn" if warnings else "ok"
    return (
        environment(html=True)
        .get_template("report.html.j2")
        .render(
            title=f"gapforge design report: {d.name}",
            design=d.label,
            description=d.description,
            version=__version__,
            report_format=REPORT_FORMAT,
            verdict=design_word,
            capture_verdict=capture_verdict,
            verdict_class=verdict_class,
            warnings=warnings,
            caution=CAUTION,
            summary=summary,
            sections=opened,
            folded=folded,
            toc=[(s.ident, s.title) for s in (*opened, *folded)],
        )
    )
