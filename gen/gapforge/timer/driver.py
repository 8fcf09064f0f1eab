"""Gate-driver limits on the usable duty: minimum pulse width and bootstrap refresh (issue 12).

Both optional, from a design's `[gate_driver]` section:

    [gate_driver]
    min_pulse = "150ns"       # the driver swallows or distorts shorter input pulses
    bootstrap_on = "1us"      # the low side must be on at least this long ...
    bootstrap_every = 10      # ... at least once every this many PWM periods

Counts as in `limits`: compare c keeps the high-side command on for per x c timer clocks
(per = 1 edge-aligned, 2 centre-aligned) out of per x N, less one clock on a centre-aligned
counter that turns at the top once (or whose convention is not stated: `limits.PwmSpec.short`). Each output's pulse is its command minus
the dead time before it. Common practice: drivers specify a minimum input pulse width; a
bootstrap high-side supply recharges only while the low side is on.

A time becomes clocks at the FASTEST clock (t x f_clk x (1 + tol), rounded up): the same count
then lasts at least t at every clock inside the tolerance. So

    high-side pulse >= min_pulse  <=>  c >= (dead_to_high + sh + P) / per      (rounded up)
    low-side pulse  >= min_pulse  <=>  c <= N - (dead_to_low + sl + P) / per   (rounded down)
    bootstrap refresh             <=>  c <= N - (dead_to_low + sl + B) / per   (rounded down) in at
                                       least one of every `bootstrap_every` periods

with (sh, sl) the clocks by which each command falls short of per x c (`limits.PwmSpec.short`).

With a current-indexed table the longest dead time of each edge over the table is used, and
every bin is judged on its own as well (gapforge.pipeline.adaptive_limits).
"""

from __future__ import annotations

from fractions import Fraction

from gapforge.base.quantities import ceil_fraction
from gapforge.base.records import record
from gapforge.base.schema import Table
from gapforge.timer.limits import PwmLimits, duty_range

DRIVER_KEYS = frozenset({"min_pulse", "bootstrap_on", "bootstrap_every"})


@record
class GateDriverSpec:
    min_pulse_s: Fraction | None = None
    bootstrap_on_s: Fraction | None = None
    bootstrap_every: int = 1


@record
class DriverLimits:
    spec: GateDriverSpec
    min_pulse_clocks: int | None  # at the fastest clock, rounded up
    bootstrap_clocks: int | None
    duty_min_counts: int  # smallest compare value giving a high-side pulse >= min_pulse
    duty_max_counts: int  # largest giving a low-side pulse >= min_pulse (and the refresh if every = 1)
    binds_min: str  # "dead time" or "minimum pulse"
    binds_max: str  # "dead time", "minimum pulse" or "bootstrap refresh"
    bootstrap_compare_max: int | None  # refresh periods need compare <= this
    verdict: str  # "ok" or "too-long" (no compare value left)
    reason: str


def read_gate_driver(top: Table) -> GateDriverSpec | None:
    table = top.sub("gate_driver")
    if table is None:
        return None
    table.check_keys(DRIVER_KEYS)
    on = table.quantity("bootstrap_on", "s", required=False)
    every = table.integer("bootstrap_every", 1, 1, 1_000_000)
    if table.has("bootstrap_every") and on is None:
        table.reader.problem(table.key_path("bootstrap_every"), "needs bootstrap_on")
    return GateDriverSpec(
        min_pulse_s=table.quantity("min_pulse", "s", required=False),
        bootstrap_on_s=on,
        bootstrap_every=every,
    )


def _clocks(seconds: Fraction | None, clock_hz: Fraction, tol: Fraction) -> int | None:
    return None if seconds is None else ceil_fraction(seconds * clock_hz * (1 + tol))


def driver_limits(
    limits: PwmLimits,
    spec: GateDriverSpec,
    clock_hz: Fraction,
    tol: Fraction,
    dead_clocks: dict[str, Fraction],
) -> DriverLimits:
    """The duty range the driver leaves; `dead_clocks` per edge (the longest in use)."""
    spec_pwm = limits.spec
    n = limits.counts
    pulse = _clocks(spec.min_pulse_s, clock_hz, tol)
    boot = _clocks(spec.bootstrap_on_s, clock_hz, tol)
    dmin, dmax = duty_range(spec_pwm, n, dead_clocks)
    binds_min = binds_max = "dead time"
    if pulse is not None:
        by_pulse_min, by_pulse_max = duty_range(spec_pwm, n, dead_clocks, max(pulse, 1))
        if by_pulse_min > dmin:
            dmin, binds_min = by_pulse_min, "minimum pulse"
        if by_pulse_max < dmax:
            dmax, binds_max = by_pulse_max, "minimum pulse"
    boot_max = None
    if boot is not None:
        _, boot_max = duty_range(spec_pwm, n, dead_clocks, max(boot, 1))
        if spec.bootstrap_every == 1 and boot_max < dmax:
            dmax, binds_max = boot_max, "bootstrap refresh"
    verdict, reason = "ok", ""
    if boot_max is not None and boot_max < 0:
        verdict = "too-long"
        reason = "the bootstrap refresh does not fit one PWM period after the dead time"
    elif dmin > dmax:
        verdict = "too-long"
        reason = "with the gate driver's limits no compare value gives a pulse on both outputs"
    return DriverLimits(
        spec=spec,
        min_pulse_clocks=pulse,
        bootstrap_clocks=boot,
        duty_min_counts=dmin,
        duty_max_counts=dmax,
        binds_min=binds_min,
        binds_max=binds_max,
        bootstrap_compare_max=boot_max,
        verdict=verdict,
        reason=reason,
    )
