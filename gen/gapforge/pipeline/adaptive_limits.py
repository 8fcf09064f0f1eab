"""Every entry of the current-indexed table judged against the PWM, as the fixed word is (issue 19).

The firmware runs each bin's codes for as long as the measured current stays in the bin, so each
bin and current sign must leave what the fixed dead time must leave (gapforge.timer.limits and
gapforge.timer.driver, the same functions): no dead time of half the PWM period or more, a
compare value that still pulses both outputs under the counting convention, and (with
`[gate_driver]`) one that meets the driver's minimum pulse and the bootstrap refresh. A bin that
fails is named in the reason.

The duty limits written for the table (`table_dead_clocks`) are those of the longest dead time
per edge over every entry and the fixed word: they hold whichever bin the firmware is in.
"""

from __future__ import annotations

from fractions import Fraction
from typing import Any

from gapforge.base.display import format_si
from gapforge.pipeline.adaptive_plan import AdaptivePlan, Bin
from gapforge.stage.adaptive import SIGNS
from gapforge.timer.layouts import EDGES
from gapforge.timer.limits import PwmLimits, judge_dead

TABLE_BASIS = "every entry of the current-indexed table and the fixed word"


def entry_clocks(plan: AdaptivePlan, steps: int) -> Fraction:
    """Timer clocks of `steps` dead-time steps at the table's divider (exact)."""
    assert plan.fixed.divider is not None
    return Fraction(steps * plan.fixed.divider, plan.layout.sub_steps)


def bin_clocks(plan: AdaptivePlan, b: Bin, sign: str) -> dict[str, Fraction]:
    return {e: entry_clocks(plan, b.entries[sign][e].steps) for e in EDGES}


def table_dead_clocks(plan: AdaptivePlan) -> dict[str, Fraction]:
    """The longest dead time per edge over the table's entries (clocks)."""
    return {
        e: max(bin_clocks(plan, b, s)[e] for b in plan.table.bins for s in SIGNS) for e in EDGES
    }


def bin_label(b: Bin) -> str:
    top = "up" if b.current_max_a is None else format_si(b.current_max_a, "A")
    return f"bin {format_si(b.current_min_a, 'A')} .. {top}"


def judge_table(
    plan: AdaptivePlan,
    limits: PwmLimits,
    driver_spec: Any = None,
    clock_hz: Fraction | None = None,
    tol: Fraction = Fraction(0),
) -> list[str]:
    """Why bins fail against the PWM (and the gate driver), one reason per bin and sign; []
    when every entry leaves a usable duty range."""
    reasons: list[str] = []
    for b in plan.table.bins:
        for sign in SIGNS:
            dead = bin_clocks(plan, b, sign)
            verdict, why = judge_dead(limits.spec, limits.counts, dead)
            if verdict == "ok" and driver_spec is not None and clock_hz is not None:
                from gapforge.timer.driver import driver_limits

                d = driver_limits(limits, driver_spec, clock_hz, tol, dead)
                if d.verdict != "ok":
                    verdict, why = d.verdict, d.reason
            if verdict != "ok":
                reasons.append(f"{bin_label(b)}, {sign} current: {why}")
    return reasons
