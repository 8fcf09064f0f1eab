"""The resolution a sampled capture implies, beyond the time unit its file is written in.

A logic analyser samples at its own rate and may write a file in a finer time unit (16 MHz
samples in a VCD of 100 ps ticks: every change lies on a multiple of 625 ticks). Judging such a
capture with one tick of the file's unit would claim a precision the instrument never had (the
unsafe direction). So a VCD's resolution is, in this order:

1. the sample period the file states (a header `$comment` such as "... at 16 MHz"), rounded up
   to whole ticks;
2. else the common step of every change time of the chosen signals (their greatest common
   divisor, counted from the first change), when it is at least `STEP_MIN` ticks: a larger
   resolution is the safe direction;
3. else one tick.

`gapforge measure --resolution` overrides 1 and 2 (never below the file's own floor, one tick).
Every measurement prints the resolution used and where it came from.
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import numpy.typing as npt

from gapforge.base.quantities import ceil_fraction

STEP_MIN = 10  # a common step of at least this many ticks is taken as the sample period


def rate_ticks(rate_hz: Fraction, tick_s: Fraction) -> int:
    """One sample period of `rate_hz` in ticks, rounded up (the safe side)."""
    return max(1, ceil_fraction(1 / (rate_hz * tick_s)))


class StepWatch:
    """The greatest common divisor of every change time's distance from the first change,
    updated chunk by chunk (0 until two distinct times were seen)."""

    def __init__(self) -> None:
        self.first: int | None = None
        self.step = 0

    def reset(self) -> None:
        """Start a new pass."""
        self.first, self.step = None, 0

    def see(self, times: npt.NDArray[np.int64]) -> None:
        if times.size == 0:
            return
        if self.first is None:
            self.first = int(times[0])
        offsets = np.abs(times - np.int64(self.first))
        self.step = math.gcd(self.step, int(np.gcd.reduce(offsets)))

    def inferred(self, rate_hz: Fraction | None, tick_s: Fraction, unit_text: str,
                 ) -> tuple[int, str] | None:
        """The resolution the file implies (ticks, where it comes from in words), or None."""
        from gapforge.base.display import format_si

        if rate_hz is not None:
            ticks = rate_ticks(rate_hz, tick_s)
            return ticks, (f"one sample period at the {format_si(rate_hz, 'Hz')} the file states "
                           "(its $comment)")
        if self.step >= STEP_MIN:
            return self.step, (f"the common step of every change time ({self.step} ticks of "
                               f"{unit_text}): taken as the sample period, the safe side")
        return None
