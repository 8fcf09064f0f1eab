"""The window of a design, by its dead-time policy: the one function every command asks.

A design's `[dead_time] source` names its policy (names of our own, in the trade's words):

    explicit                 the values given; judged against the stage window when there is one
    window                   fit the stage window: request its minimum, judge against its maximum
    reference-typical        reproduce the old network's typical dead time
    reference-minimum        reproduce the old network's worst-case minimum
    window-within-reference  stay inside the range the old board proved (an explicit opt-in)

The old network ([reference]) is evidence: its worst-case range is reported beside the window,
and where it lay outside the stage window that is a warning about the old board, never a failure
of the new design. Only `window-within-reference` narrows the window to that range (min up, max
down, to 1 ps); an empty intersection names the side that is empty and why.

`design_window` is the only place the window of a design is computed: `build`, `window
--design`, `sweep --design`, the report and the header comment all show its numbers.
"""

from __future__ import annotations

from fractions import Fraction
from typing import Any

from gapforge.base.display import format_si
from gapforge.base.records import record
from gapforge.timer.layouts import EDGES

Bounds = tuple[Fraction | None, Fraction | None]

# policy -> (what it means, when to choose it); shown by the README and `window --design`
POLICIES: dict[str, tuple[str, str]] = {
    "explicit": (
        "the dead times given in [dead_time], judged against the stage window when there is one",
        "to keep a dead time you already trust",
    ),
    "window": (
        "fit the power stage's window: request its minimum, judge against its maximum",
        "for a new design with a [stage] section (the default there)",
    ),
    "reference-typical": (
        "reproduce the old network's typical dead time, judged against the stage window when "
        "there is one",
        "to behave like the old board did on an ordinary day",
    ),
    "reference-minimum": (
        "reproduce the old network's worst-case minimum (never shorter than the old board at "
        "its worst tolerance corner), judged against the stage window when there is one",
        "to migrate a board without a [stage] analysis (the default without [stage])",
    ),
    "window-within-reference": (
        "stay inside the range the old board proved: the stage window narrowed to the old "
        "network's worst-case range (that range alone without [stage]); request its minimum",
        "only when the old board's field record must bound the new one",
    ),
}
SOURCES = tuple(POLICIES)


@record
class DesignWindow:
    """What a design's dead time must fit, and the evidence beside it."""

    policy: str
    stage: Any  # gapforge.stage.window.Window (breakdown, costs) or None
    stage_bounds: dict[str, Bounds] | None
    reference: dict[str, Any] | None  # edge -> gapforge.analog.network.EdgeRange
    bounds: dict[str, Bounds] | None  # the window the fitted dead time is judged against
    empty: dict[str, str]  # edge -> why no dead time fits (the side that is empty)
    evidence: tuple[str, ...]  # the old network against the stage window: warnings only

    @property
    def basis(self) -> str:
        """What the window is made of, in words (for the report and the header comment)."""
        if self.bounds is None:
            return "none"
        if self.policy == "window-within-reference":
            if self.stage_bounds is None:
                return "the old network's worst-case range"
            return "power stage within the old network's worst-case range"
        return "power stage"


def _t(value: Fraction) -> str:
    return format_si(value, "s")


def window_of(design: Any) -> DesignWindow:
    """The window of a loaded design (gapforge.pipeline.design.Design)."""
    return design_window(design.stage, design.reference, design.source)


def design_window(stage_spec: Any, network: Any, policy: str) -> DesignWindow:
    """The window of a design from its [stage] spec, its [reference] network and its policy."""
    reference = None
    if network is not None:
        from gapforge.analog.tolerance import reference_dead_times

        reference = reference_dead_times(network)
    stage = None
    stage_bounds: dict[str, Bounds] | None = None
    if stage_spec is not None:
        from gapforge.stage.window import stage_window

        stage = stage_window(stage_spec)
        stage_bounds = {e: (stage.edges[e].min_s, stage.edges[e].max_s) for e in EDGES}
    bounds = dict(stage_bounds) if stage_bounds is not None else None
    empty: dict[str, str] = {}
    if stage_bounds is not None:
        assert stage is not None
        empty.update(_stage_empty(stage_bounds, {e: stage.edges[e].max_reason for e in EDGES}))
    if policy == "window-within-reference" and reference is not None:
        bounds = {}
        for e in EDGES:
            r = reference[e]
            lo, hi = stage_bounds[e] if stage_bounds is not None else (None, None)
            bounds[e] = (
                r.limit_min_s if lo is None else max(lo, r.limit_min_s),
                r.limit_max_s if hi is None else min(hi, r.limit_max_s),
            )
            if e not in empty and stage_bounds is not None:
                why = _intersection_empty(e, stage_bounds[e], r)
                if why:
                    empty[e] = why
    evidence = _evidence(reference, stage_bounds) if stage_bounds is not None else ()
    return DesignWindow(policy, stage, stage_bounds, reference, bounds, empty, evidence)


def _stage_empty(stage_bounds: dict[str, Bounds], reasons: dict[str, str]) -> dict[str, str]:
    """Why an edge's stage window is empty, in the words `window` uses (the maximum's reason)."""
    out: dict[str, str] = {}
    for e in EDGES:
        lo, hi = stage_bounds[e]
        if lo is not None and hi is not None and lo > hi:
            if hi == 0 and "no loss budget left" in reasons[e]:
                # issue 23: not "above the loss budget's maximum 0 s"
                out[e] = (f"{e}: the stage window is empty: {reasons[e]} (the minimum is "
                          f"{_t(lo)})")
            else:
                out[e] = (f"{e}: the stage window is empty: its minimum {_t(lo)} is above the "
                          f"loss budget's maximum {_t(hi)}")
    return out


def _intersection_empty(edge: str, stage: Bounds, r: Any) -> str:
    """Why the stage window and the old board's range have nothing in common ('' if they do)."""
    lo, hi = stage
    if lo is not None and r.limit_max_s < lo:
        return (
            f"{edge}: nothing fits at or above the stage minimum {_t(lo)}: the old board's "
            f"worst-case range {_t(r.min_s)} .. {_t(r.max_s)} lies wholly below it (the stage "
            f"needs {_t(lo - r.limit_max_s)} more than the old board ever gave; choose source "
            "'window' to fit the stage)"
        )
    if hi is not None and r.limit_min_s > hi:
        return (
            f"{edge}: nothing fits at or below the stage maximum {_t(hi)}: the old board's "
            f"worst-case range {_t(r.min_s)} .. {_t(r.max_s)} lies wholly above it (the loss "
            f"budget allows {_t(r.limit_min_s - hi)} less than the old board's shortest gap)"
        )
    return ""


def _evidence(reference: dict[str, Any] | None, stage_bounds: dict[str, Bounds]) -> tuple[str, ...]:
    """Where the old network's worst-case range lay outside the stage window (a finding about
    the old board, not a failure of the new design)."""
    out: list[str] = []
    if reference is None:
        return ()
    for e in EDGES:
        lo, hi = stage_bounds[e]
        r = reference[e]
        if lo is not None and r.min_s < lo:
            out.append(
                f"{e}: the old network's worst-case minimum {_t(r.min_s)} is {_t(lo - r.min_s)} "
                f"short of the stage minimum {_t(lo)}: the old network was not safe at every "
                "tolerance corner (a finding about the old board, not the new design)"
            )
        if hi is not None and r.max_s > hi:
            out.append(
                f"{e}: the old network's worst-case maximum {_t(r.max_s)} is {_t(r.max_s - hi)} "
                f"above the stage maximum {_t(hi)} (at that corner the old board exceeded the loss budget)"
            )
    return tuple(out)
