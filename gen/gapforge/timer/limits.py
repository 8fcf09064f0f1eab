"""PWM edge-case limits for a fitted dead time.

Counts are timer clock periods. Edge-aligned up-counting: the period is N counts (N = f_clk /
f_pwm rounded to the nearest whole count) and a compare value c keeps the high-side command on for
c counts. Centre-aligned up/down counting: the period is 2N counts and the command is on for
2c counts. Duty = c / N in both modes.

The dead time delays each output's turn-on, so an output's pulse is its commanded on-time minus
the dead time before it; a command shorter than the dead time gives no pulse at all. Dead time
and PWM period are counted from the same clock, so their ratio (and so the usable duty range) does
not move with the clock tolerance; only the dead time in seconds does.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import ceil_fraction, floor_fraction
from gapforge.timer.fit import FitResult
from gapforge.timer.layouts import EDGES

COUNTINGS = ("edge", "center")


@dataclass(frozen=True)
class PwmSpec:
    frequency_hz: Fraction
    counting: str = "edge"
    counter_bits: int | None = None  # the PWM counter's width, when known

    def __post_init__(self) -> None:
        if self.frequency_hz <= 0:
            raise GapforgeError("the PWM frequency must be positive", "pwm frequency")
        if self.counting not in COUNTINGS:
            raise GapforgeError(f"counting must be one of {', '.join(COUNTINGS)}", "pwm counting")


@dataclass(frozen=True)
class EdgeLimits:
    dead_counts: Fraction  # dead time in timer clock periods (exact)
    share: Fraction  # dead time / PWM period
    # share of this output's gate command lost per period (same as share); the switch node's
    # duty changes by it only where the current's sign holds the node at the other rail
    lost_duty: Fraction
    tol_minus_s: Fraction  # achieved - achieved_min (how far a fast clock shortens the gap)
    tol_plus_s: Fraction  # achieved_max - achieved (how far a slow clock lengthens it)


@dataclass(frozen=True)
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
    # high-side pulse exists when per*c > dead_to_high; low-side when per*(N - c) > dead_to_low
    duty_min = floor_fraction(edges["to_high"].dead_counts / per) + 1
    duty_max = ceil_fraction(counts - edges["to_low"].dead_counts / per) - 1
    verdict, reason = "ok", ""
    worst = max(edges.values(), key=lambda x: x.share)
    if worst.share >= Fraction(1, 2):
        verdict = "too-long"
        reason = (
            f"a dead time of {float(worst.share) * 100:.4g} % of the PWM period is at least half a"
            " period"
        )
    elif duty_min > duty_max:
        verdict = "too-long"
        reason = "no commanded duty gives a pulse on both outputs"
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
