"""PWM edge-case limits for a fitted dead time.

Counts are timer clock periods. Edge-aligned up-counting: the period is N counts (N = f_clk /
f_pwm rounded to the nearest whole count) and a compare value c keeps the high-side command on for
c counts. Centre-aligned up/down counting: the period is 2N counts and the command is on for
2c counts when the counter visits 0 and the top twice per period (two clocks at each turning
point, `turn_clocks = 2`), but 2c - 1 counts when it turns at the top once (0, 1, .., N, N-1, ..,
1: `turn_clocks = 1`; the low side then gets 2(N - c) + 1). Where the convention is not stated the
worse of the two is taken for each output (high side 2c - 1, low side 2(N - c)): minimum pulses
come out one clock pessimistic rather than optimistic (issue 19, common practice: timers of both
kinds exist). Duty = c / N in all modes.

The dead time delays each output's turn-on, so an output's pulse is its commanded on-time minus
the dead time before it; a command shorter than the dead time gives no pulse at all. Dead time
and PWM period are counted from the same clock, so their ratio (and so the usable duty range) does
not move with the clock tolerance; only the dead time in seconds does.
"""

from __future__ import annotations

import math
from fractions import Fraction

from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import ceil_fraction, floor_fraction
from gapforge.base.records import record
from gapforge.timer.fit import FitResult
from gapforge.timer.layouts import EDGES

COUNTINGS = ("edge", "center")
TURN_CLOCKS = (1, 2)


@record
class PwmSpec:
    frequency_hz: Fraction
    counting: str = "edge"
    counter_bits: int | None = None  # the PWM counter's width, when known
    # centre-aligned: clocks the counter spends at each turning point (2: compare c gives 2c
    # clocks; 1: 2c - 1); None: not stated, the worse of the two for each output
    turn_clocks: int | None = None

    def __post_init__(self) -> None:
        if self.frequency_hz <= 0:
            raise GapforgeError("the PWM frequency must be positive", "pwm frequency")
        if self.counting not in COUNTINGS:
            raise GapforgeError(f"counting must be one of {', '.join(COUNTINGS)}", "pwm counting")
        if self.turn_clocks is not None:
            if self.turn_clocks not in TURN_CLOCKS:
                raise GapforgeError("turn_clocks must be 1 or 2", "pwm turn_clocks")
            if self.counting != "center":
                raise GapforgeError(
                    "turn_clocks applies to centre-aligned counting only", "pwm turn_clocks"
                )

    @property
    def per(self) -> int:
        """Timer clocks per compare count (1 edge-aligned, 2 centre-aligned)."""
        return 1 if self.counting == "edge" else 2

    @property
    def short(self) -> tuple[int, int]:
        """Clocks by which the (high-side, low-side) command falls short of per x c and
        per x (N - c) (negative: longer). Edge-aligned and turn_clocks 2: (0, 0); turn_clocks 1:
        (1, -1); centre-aligned, not stated: (1, 0), the worse of the two for each output."""
        if self.counting == "edge" or self.turn_clocks == 2:
            return (0, 0)
        if self.turn_clocks == 1:
            return (1, -1)
        return (1, 0)

    @property
    def convention(self) -> str:
        """The counting convention in words."""
        if self.counting == "edge":
            return "edge-aligned up: compare c gives c clocks"
        if self.turn_clocks == 2:
            return "centre-aligned, two clocks at 0 and at the top: compare c gives 2c clocks"
        if self.turn_clocks == 1:
            return "centre-aligned, turning at the top once: compare c gives 2c - 1 clocks"
        return (
            "centre-aligned, turning convention not stated ([pwm] turn_clocks): the worse of"
            " 2c and 2c - 1 clocks for each output"
        )


@record
class EdgeLimits:
    dead_counts: Fraction  # dead time in timer clock periods (exact)
    share: Fraction  # dead time / PWM period
    # share of this output's gate command lost per period (same as share); the switch node's
    # duty changes by it only where the current's sign holds the node at the other rail
    lost_duty: Fraction
    tol_minus_s: Fraction  # achieved - achieved_min (how far a fast clock shortens the gap)
    tol_plus_s: Fraction  # achieved_max - achieved (how far a slow clock lengthens it)


@record
class PwmLimits:
    spec: PwmSpec
    counts: int  # N: compare range 0..N
    period_counts: int  # timer clock periods per PWM period (N or 2N)
    real_frequency_hz: Fraction
    exact: bool  # the requested PWM frequency is a whole number of counts
    duty_bits: float
    duty_min_counts: int  # smallest compare value that still gives a high-side pulse
    duty_max_counts: int  # largest compare value that still gives a low-side pulse
    edges: dict[str, EdgeLimits]
    verdict: str  # "ok" or "too-long" (dead time >= half a period, or no usable duty)
    reason: str
    # what the duty limits hold for: the fixed dead time, or every entry of a current-indexed
    # table (the longest dead time per edge over the table and the fixed word)
    duty_basis: str = "the fixed dead time"

    @property
    def duty_min(self) -> Fraction:
        return Fraction(self.duty_min_counts, self.counts)

    @property
    def duty_max(self) -> Fraction:
        return Fraction(self.duty_max_counts, self.counts)

    @property
    def both_off_share(self) -> Fraction:
        return sum((e.share for e in self.edges.values()), Fraction(0))


def compare_counts(clock_hz: Fraction, spec: PwmSpec) -> int:
    """N, the compare range 0..N: the PWM period in counts, rounded to the nearest whole count.

    Raises a GapforgeError without a location (the caller names the option or key) when the
    period is shorter than 2 counts.
    """
    per = 1 if spec.counting == "edge" else 2
    ideal = clock_hz / (spec.frequency_hz * per)
    counts = floor_fraction(ideal + Fraction(1, 2))
    if counts < 2:
        raise GapforgeError(
            f"the PWM frequency {float(spec.frequency_hz):.6g} Hz gives {float(ideal):.3g} counts "
            f"per period at the {float(clock_hz):.6g} Hz timer clock ({spec.counting}-aligned); "
            "at least 2 are needed"
        )
    return counts


def counter_problem(lim: PwmLimits) -> str:
    """Why the PWM counts do not fit the counter width ("" when they do, or no width is given).

    The counter runs 0..N-1 and the compare value reaches N (100 % duty), so N itself must fit:
    N <= 2^bits - 1.
    """
    bits = lim.spec.counter_bits
    if bits is None or lim.counts <= (1 << bits) - 1:
        return ""
    return (
        f"the PWM needs a compare value of {lim.counts} counts (top count {lim.counts - 1}), "
        f"more than a {bits}-bit counter holds ({(1 << bits) - 1}): lower the timer clock, use a "
        "prescaler or raise the PWM frequency"
    )


def pwm_limits(result: FitResult, spec: PwmSpec) -> PwmLimits:
    """The PWM limits for a fitted result (which must have verdict ok)."""
    if not result.ok or result.divider is None:
        raise ValueError("pwm_limits needs a fitted result")
    clock = result.request.clock_hz
    per = 1 if spec.counting == "edge" else 2
    ideal = clock / (spec.frequency_hz * per)
    counts = compare_counts(clock, spec)
    period_counts = counts * per
    real = clock / period_counts
    edges: dict[str, EdgeLimits] = {}
    for edge in EDGES:
        e = result.edges[edge]
        assert e.steps is not None and e.achieved_s is not None
        assert e.achieved_min_s is not None and e.achieved_max_s is not None
        dead_counts = Fraction(e.steps * result.divider, result.layout.sub_steps)
        share = dead_counts / period_counts
        edges[edge] = EdgeLimits(
            dead_counts=dead_counts,
            share=share,
            lost_duty=share,
            tol_minus_s=e.achieved_s - e.achieved_min_s,
            tol_plus_s=e.achieved_max_s - e.achieved_s,
        )
    dead = {e: edges[e].dead_counts for e in EDGES}
    duty_min, duty_max = duty_range(spec, counts, dead)
    verdict, reason = judge_dead(spec, counts, dead)
    return PwmLimits(
        spec=spec,
        counts=counts,
        period_counts=period_counts,
        real_frequency_hz=real,
        exact=ideal == counts,
        duty_bits=math.log2(counts),
        duty_min_counts=duty_min,
        duty_max_counts=duty_max,
        edges=edges,
        verdict=verdict,
        reason=reason,
    )


def duty_range(
    spec: PwmSpec, counts: int, dead: dict[str, Fraction], pulse: int = 0
) -> tuple[int, int]:
    """(smallest, largest) compare value whose outputs both pulse: the high-side command
    (per x c - short) less the to_high dead time, and the low side's (per x (N - c) - short) less
    the to_low dead time, each longer than `pulse` - 1 clocks (pulse 0: any pulse at all).

        high side: per x c - sh - D_high >= pulse + [pulse = 0]
        low side:  per x (N - c) - sl - D_low >= pulse + [pulse = 0]
    """
    per = spec.per
    sh, sl = spec.short
    if pulse > 0:
        low = ceil_fraction((dead["to_high"] + sh + pulse) / per)
        high = floor_fraction(counts - (dead["to_low"] + sl + pulse) / per)
    else:  # strictly longer than nothing
        low = floor_fraction((dead["to_high"] + sh) / per) + 1
        high = ceil_fraction(counts - (dead["to_low"] + sl) / per) - 1
    return low, high


def judge_dead(spec: PwmSpec, counts: int, dead: dict[str, Fraction]) -> tuple[str, str]:
    """("ok", "") or ("too-long", why) for dead times (clocks per edge) against half the PWM
    period and the duty range they leave (the same test for the fixed word and every table
    entry)."""
    period = counts * spec.per
    worst = max(EDGES, key=lambda e: dead[e])
    share = dead[worst] / period
    if share >= Fraction(1, 2):
        return "too-long", (
            f"{worst} {_clocks(dead[worst])} is {float(share) * 100:.4g} % of the PWM period"
            f" ({period} clocks): at least half a period"
        )
    low, high = duty_range(spec, counts, dead)
    if low > high:
        return "too-long", (
            "no commanded duty gives a pulse on both outputs (to_high "
            f"{_clocks(dead['to_high'])}, to_low {_clocks(dead['to_low'])} in a period of"
            f" {period} clocks, {spec.convention})"
        )
    return "ok", ""


def _clocks(x: Fraction) -> str:
    text = str(x.numerator) if x.denominator == 1 else f"{float(x):.6g}"
    return f"{text} clock" + ("" if x == 1 else "s")


def with_table(lim: PwmLimits, longest: dict[str, Fraction], basis: str) -> PwmLimits:
    """The limits again with the duty range for dead times up to `longest` per edge (clocks; a
    current-indexed table's longest entries), named by `basis`."""
    from dataclasses import replace

    dead = {e: max(lim.edges[e].dead_counts, longest[e]) for e in EDGES}
    low, high = duty_range(lim.spec, lim.counts, dead)
    verdict, reason = (lim.verdict, lim.reason)
    if verdict == "ok":
        verdict, reason = judge_dead(lim.spec, lim.counts, dead)
        if verdict != "ok":
            reason = f"over {basis}: {reason}"
    return replace(
        lim, duty_min_counts=low, duty_max_counts=high, verdict=verdict, reason=reason,
        duty_basis=basis,
    )
