"""The current-indexed dead-time table: each bin fitted with the same exact, worst-case-safe fit.

For every bin of |I| ([0, c0), [c0, c1), ..., [c_last, no maximum)) and each current sign, the
edge the load current commutates (gapforge.stage.adaptive) asks for

    max(floor, stage minimum (the design window's minimum, rounded up) + the bin's worst swing)

where the worst swing is the one at the bin's smallest |I| (less the declared current error),
and the other (hard) edge asks for the floor. The floor of each edge is max(stage minimum, the
dead-time policy's request): a table never goes below what the fixed word was asked for
(issue 19). Both go through `gapforge.timer.fit.fit`
with `safe` rounding at the divider the fixed fit chose, so only the edge fields change between
bins and every entry's worst case (fastest clock) is at least its request. An entry is `soft`
when its code also stays inside the window's maximum at the slowest clock; otherwise the swing
cannot finish inside the window and the bin follows the user's `below_swing` policy (`max`: the
longest code whose slowest-clock value is inside the maximum; `hard`: the floor).
Adjacent bins with the same codes merge, keeping the lower bin's (worst-case) description.

Costs use common-practice formulas (gapforge.stage.adaptive), each at the current in the bin
where it is worst, counting the current error (the firmware picks a bin by the measured current):
reverse conduction at the slowest clock (the longest dead time) and the bin's largest current
plus the error (the top bin, which has no largest: at its lower edge); the hard turn-on at the
fastest clock (the shortest dead time) and the bin's smallest current less the error (issue 19).
Every entry is judged against the PWM period by gapforge.pipeline.adaptive_limits.
"""

from __future__ import annotations

import bisect
import math
from dataclasses import replace
from fractions import Fraction

from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import floor_fraction
from gapforge.base.records import record
from gapforge.stage import adaptive as phys
from gapforge.stage.adaptive import COMMUTATED, SIGNS, AdaptiveSpec
from gapforge.stage.window import StageSpec
from gapforge.timer.fit import FitRequest, FitResult, fit
from gapforge.timer.layouts import EDGES, Layout
from gapforge.timer.limits import PwmLimits

Bounds = tuple[Fraction | None, Fraction | None]


@record
class Entry:
    """One edge, one current sign, one bin. Seconds as exact fractions."""

    edge: str
    sign: str
    commutated: bool  # the load current of this sign commutates this edge
    soft: bool  # the code covers the bin's worst swing inside the window
    below_swing: bool  # commutated, but the swing cannot finish inside the window
    requested_s: Fraction
    code: int
    steps: int
    achieved_s: Fraction
    achieved_min_s: Fraction
    achieved_max_s: Fraction
    swing_s: Fraction  # the swing the code covers (0 unless soft)
    swing_needed_s: Fraction | None  # the bin's worst swing on a commutated edge (None: 0 A)


@record
class SignCosts:
    """Per bin and sign, at `current_a` (W; exact)."""

    current_a: Fraction  # where reverse conduction is worst (largest |I| + error)
    fixed_w: Fraction
    adaptive_w: Fraction
    fixed_hard_w: Fraction | None  # upper bound of the hard turn-on when the swing is cut short
    adaptive_hard_w: Fraction | None
    hard_current_a: Fraction = Fraction(0)  # where the hard turn-on is worst (smallest |I| - error)


@record
class Bin:
    current_min_a: Fraction
    current_max_a: Fraction | None
    entries: dict[str, dict[str, Entry]]  # sign -> edge -> entry
    registers: dict[str, int]  # sign -> packed register word
    compensation: dict[str, int]  # sign -> compare counts (add for positive, subtract negative)
    costs: dict[str, SignCosts] | None = None
    adc_codes: tuple[int, int] | None = None  # (positive, negative) code at the lower edge

    def codes(self) -> tuple[int, ...]:
        return tuple(self.entries[s][e].code for s in SIGNS for e in EDGES)


@record
class Inverter:
    """Sinusoidal current of amplitude peak_current_a (floats where pi enters)."""

    peak_current_a: Fraction
    mean_abs_current_a: float  # 2 Ipk / pi
    error_positive_v: Fraction  # Vd x t_dead(to_high) x fsw in the top bin, the loss while I > 0
    error_negative_v: Fraction  # Vd x t_dead(to_low) x fsw in the top bin, the gain while I < 0
    fundamental_v: float  # the error wave's fundamental integrated over the bins (Fourier)
    loss_fixed_w: float  # reverse conduction averaged over the sine, fixed dead time
    loss_adaptive_w: float  # the same with the table
    band_a: Fraction  # compensation dead band: |I| below it, no compensation


@record
class AdaptiveTable:
    """One policy's bins. `fixed` is what a firmware without a current measurement would need
    to reach the same transitions: per edge the table's longest entry (over bins and signs),
    used on every bin; the costs compare the table against it."""

    policy: str
    bins: tuple[Bin, ...]
    fixed: dict[str, Entry]


@record
class AdaptivePlan:
    spec: AdaptiveSpec
    stage: StageSpec
    layout: Layout
    divider_code: int
    per: int  # timer clocks per compare count (1 edge-aligned, 2 centre-aligned)
    window: dict[str, Bounds]
    pre_swing_s: dict[str, Fraction]
    # sign -> smallest measured |I| whose swing fits the window (the current error included)
    threshold_a: dict[str, Fraction | None]
    floor_s: dict[str, Fraction]  # edge -> max(stage minimum, the policy's request)
    policy_source: str  # the design's dead-time policy (`[dead_time] source`)
    fixed: FitResult
    table: AdaptiveTable  # the chosen policy
    other: AdaptiveTable | None  # the other policy, for comparison (None where it cannot apply)
    inverter: Inverter | None
    notes: tuple[str, ...]


def plan_adaptive(
    spec: AdaptiveSpec,
    stage: StageSpec,
    fixed: FitResult,
    window: dict[str, Bounds],
    limits: PwmLimits | None,
    where: str,
    policy_source: str = "window",
) -> AdaptivePlan:
    """The table for one fitted output (`fixed` must be ok). Raises GapforgeError when the
    policy `max` has no window maximum to stay at."""
    assert fixed.ok and fixed.divider_code is not None
    no_max = [e for e in EDGES if window[e][1] is None]
    if spec.below_swing == "max" and no_max:
        raise GapforgeError(
            "below_swing 'max' needs the window's maximum: give [stage] loss_budget, or choose"
            " 'hard'",
            f"{where}: adaptive.below_swing",
        )
    per = 1 if limits is None else limits.spec.per
    ctx = _Context(spec, stage, fixed, window, per)
    table = ctx.table(spec.below_swing)
    other_policy = "hard" if spec.below_swing == "max" else "max"
    other = None if (other_policy == "max" and no_max) else ctx.table(other_policy)
    notes = list(ctx.notes(table))
    inverter = ctx.inverter(table) if spec.peak_current is not None else None
    thresholds: dict[str, Fraction | None] = {}
    for sign in SIGNS:
        lo, hi = window[COMMUTATED[sign]]
        assert lo is not None
        thr = None if hi is None else phys.threshold_current(spec.swing_charge, hi - lo)
        thresholds[sign] = None if thr is None else thr + spec.current_error
    return AdaptivePlan(
        spec=spec,
        stage=stage,
        layout=fixed.layout,
        divider_code=fixed.divider_code,
        per=per,
        window=window,
        pre_swing_s={e: phys.pre_swing_s(stage, e) for e in EDGES},
        threshold_a=thresholds,
        floor_s=dict(ctx.floor),
        policy_source=policy_source,
        fixed=fixed,
        table=table,
        other=other,
        inverter=inverter,
        notes=tuple(notes),
    )


class _Context:
    """What every bin's fit shares: the fixed fit's divider, the window, the stage."""

    def __init__(
        self,
        spec: AdaptiveSpec,
        stage: StageSpec,
        fixed: FitResult,
        window: dict[str, Bounds],
        per: int,
    ) -> None:
        self.spec, self.stage, self.fixed, self.window, self.per = spec, stage, fixed, window, per
        assert fixed.divider_code is not None and fixed.divider is not None
        self.layout = fixed.layout
        self.request0 = fixed.request
        self.divider_code = fixed.divider_code
        self.scale = Fraction(fixed.divider) / (self.layout.sub_steps * self.request0.clock_hz)
        # the floor per edge: max(stage minimum, the dead-time policy's request)
        self.floor = {
            e: max(window[e][0] or Fraction(0), self.request0.requested(e)) for e in EDGES
        }

    # --- one bin, one sign ------------------------------------------------------------------

    def _fit(self, requests: dict[str, Fraction]) -> FitResult:
        request = FitRequest(
            clock_hz=self.request0.clock_hz,
            clock_tol=self.request0.clock_tol,
            to_high_s=requests["to_high"],
            to_low_s=requests["to_low"],
            rounding="safe",
        )
        return fit(self.layout, request, divider_code=self.divider_code)

    def _inside(self, result: FitResult) -> bool:
        if not result.ok:
            return False
        for e in EDGES:
            hi = self.window[e][1]
            top = result.edges[e].achieved_max_s
            assert top is not None
            if hi is not None and top > hi:
                return False
        return True

    def _longest_inside(self, edge: str) -> Fraction:
        """The worst-case minimum of the longest code whose slowest-clock value is <= the max."""
        hi = self.window[edge][1]
        lo = self.window[edge][0]
        assert hi is not None and lo is not None
        tol = self.request0.clock_tol
        values = self.layout.edge_field(edge).table[0]
        bound = floor_fraction(hi * (1 - tol) / self.scale)
        i = bisect.bisect_right(values, bound) - 1
        if i < 0:
            return self.floor[edge]
        return max(self.floor[edge], values[i] * self.scale / (1 + tol))

    def _sign(self, sign: str, low_a: Fraction, policy: str) -> tuple[dict[str, Entry], FitResult]:
        soft_edge = COMMUTATED[sign]
        lows = dict(self.floor)
        stage_min = self.window[soft_edge][0] or Fraction(0)
        worst_i = max(Fraction(0), low_a - self.spec.current_error)
        swing = phys.swing_s(self.spec.swing_charge, worst_i)
        requests = dict(lows)
        soft = False
        if swing is not None:
            requests[soft_edge] = max(lows[soft_edge], stage_min + swing)
            result = self._fit(requests)
            soft = self._inside(result)
        if not soft:
            requests = dict(lows)
            if policy == "max":
                requests[soft_edge] = self._longest_inside(soft_edge)
            result = self._fit(requests)
        if not result.ok:
            raise GapforgeError(
                f"{sign} current from {float(low_a):.6g} A: the request is beyond the layout at"
                " the fixed fit's divider",
                "adaptive",
            )
        entries = {}
        for e in EDGES:
            x = result.edges[e]
            assert x.code is not None and x.steps is not None and x.achieved_s is not None
            assert x.achieved_min_s is not None and x.achieved_max_s is not None
            is_c = e == soft_edge
            entries[e] = Entry(
                edge=e,
                sign=sign,
                commutated=is_c,
                soft=is_c and soft,
                below_swing=is_c and not soft,
                requested_s=requests[e],
                code=x.code,
                steps=x.steps,
                achieved_s=x.achieved_s,
                achieved_min_s=x.achieved_min_s,
                achieved_max_s=x.achieved_max_s,
                swing_s=swing if (is_c and soft and swing is not None) else Fraction(0),
                swing_needed_s=swing if is_c else Fraction(0),
            )
        return entries, result

    # --- the table --------------------------------------------------------------------------

    def table(self, policy: str) -> AdaptiveTable:
        bins: list[Bin] = []
        for low, high in self.spec.bins():
            entries: dict[str, dict[str, Entry]] = {}
            registers: dict[str, int] = {}
            comp: dict[str, int] = {}
            for sign in SIGNS:
                entries[sign], result = self._sign(sign, low, policy)
                assert result.register is not None
                registers[sign] = result.register
                comp[sign] = self.compensation(result, sign)
            b = Bin(low, high, entries, registers, comp)
            if bins and bins[-1].codes() == b.codes():
                bins[-1] = replace(bins[-1], current_max_a=high)
            else:
                bins.append(b)
        fixed = {
            e: max((b.entries[s][e] for b in bins for s in SIGNS), key=lambda x: x.steps)
            for e in EDGES
        }
        bins = [self._costed(b, fixed) for b in bins]
        return AdaptiveTable(policy, tuple(bins), fixed)

    def compensation(self, result: FitResult, sign: str) -> int:
        """Compare counts that make up the hard edge's dead time (nearest, ties up): Jeong &
        Park 1991; Mohan et al. ch. 8. Positive current: the output loses the to_high dead
        time (add); negative: it gains the to_low dead time (subtract)."""
        edge = "to_high" if sign == "positive" else "to_low"
        steps = result.edges[edge].steps
        assert steps is not None and result.divider is not None
        clocks = Fraction(steps * result.divider, self.layout.sub_steps)
        return floor_fraction(clocks / self.per + Fraction(1, 2))

    def _costed(self, b: Bin, fixed: dict[str, Entry]) -> Bin:
        adc = None
        if self.spec.adc is not None and b.current_min_a > 0:
            adc = self.spec.adc.edge_codes(b.current_min_a)
        fsw = self.stage.fsw
        if fsw is None:
            return replace(b, adc_codes=adc)
        err = self.spec.current_error
        # reverse conduction is worst at the largest true current that selects the bin, the
        # hard turn-on at the smallest (where the swing takes longest)
        at = b.current_max_a + err if b.current_max_a is not None else b.current_min_a
        hard_at = max(Fraction(0), b.current_min_a - err)
        costs = {}
        fixed_t = {e: fixed[e].achieved_max_s for e in EDGES}
        fixed_min = {e: fixed[e].achieved_min_s for e in EDGES}
        for sign in SIGNS:
            table_t = {e: b.entries[sign][e].achieved_max_s for e in EDGES}
            table_min = {e: b.entries[sign][e].achieved_min_s for e in EDGES}
            costs[sign] = SignCosts(
                current_a=at,
                fixed_w=self.loss(sign, at, fixed_t),
                adaptive_w=self.loss(sign, at, table_t),
                fixed_hard_w=self.hard(sign, hard_at, fixed_min),
                adaptive_hard_w=self.hard(sign, hard_at, table_min),
                hard_current_a=hard_at,
            )
        return replace(b, costs=costs, adc_codes=adc)

    def loss(self, sign: str, current: Fraction, times: dict[str, Fraction]) -> Fraction:
        return reverse_conduction_w(self.stage, self.spec, sign, current, times)

    def hard(self, sign: str, current: Fraction, shortest: dict[str, Fraction]) -> Fraction | None:
        """Upper bound of the hard turn-on loss where the swing (after the chain before it)
        does not fit the shortest dead time; None without a bus voltage."""
        if self.stage.bus_voltage is None or self.stage.fsw is None:
            return None
        edge = COMMUTATED[sign]
        swing = phys.exact_swing_s(self.spec.swing_charge, current)
        needed = None if swing is None else phys.pre_swing_s(self.stage, edge) + swing
        if needed is not None and shortest[edge] >= needed:
            return Fraction(0)
        return phys.hard_turn_on_w(self.spec.swing_charge, self.stage.bus_voltage, self.stage.fsw)

    def notes(self, table: AdaptiveTable) -> list[str]:
        out = []
        if self.layout.shared:
            out.append(
                "the layout has one field for both edges: the hard edge takes the soft edge's"
                " code (longer than needed; reverse conduction costs more)"
            )
        for sign in SIGNS:
            below = [b for b in table.bins if b.entries[sign][COMMUTATED[sign]].below_swing]
            if below:
                top = below[-1].current_max_a
                upto = f"below {float(top):.6g} A" if top is not None else "at every current"
                out.append(
                    f"{sign} current: {COMMUTATED[sign]} swing cannot finish inside the window "
                    f"{upto}; policy '{table.policy}' applies there"
                )
        return out

    # --- inverter ---------------------------------------------------------------------------

    def inverter(self, table: AdaptiveTable) -> Inverter | None:
        spec, stage = self.spec, self.stage
        if spec.peak_current is None or stage.bus_voltage is None or stage.fsw is None:
            return None
        vd, fsw, peak = stage.bus_voltage, stage.fsw, spec.peak_current
        top = table.bins[-1]
        t_pos = top.entries["positive"]["to_high"].achieved_s
        t_neg = top.entries["negative"]["to_low"].achieved_s
        err_pos, err_neg = vd * t_pos * fsw, vd * t_neg * fsw
        samples = 720
        fixed_t = {e: table.fixed[e].achieved_max_s for e in EDGES}
        fixed_sum = adaptive_sum = 0.0
        for k in range(samples):
            theta = (k + 0.5) * 2 * math.pi / samples
            value = float(peak) * math.sin(theta)
            sign = "positive" if value >= 0 else "negative"
            current = Fraction(abs(value)).limit_denominator(10**6)
            b = _bin_of(table, current)
            times = {e: b.entries[sign][e].achieved_max_s for e in EDGES}
            fixed_sum += float(self.loss(sign, current, fixed_t))
            adaptive_sum += float(self.loss(sign, current, times))
        return Inverter(
            peak_current_a=peak,
            mean_abs_current_a=phys.mean_abs_sine(float(peak)),
            error_positive_v=err_pos,
            error_negative_v=err_neg,
            fundamental_v=error_fundamental_over_bins(table, vd * fsw, peak),
            loss_fixed_w=fixed_sum / samples,
            loss_adaptive_w=adaptive_sum / samples,
            band_a=spec.band,
        )


def reverse_conduction_w(
    stage: StageSpec, spec: AdaptiveSpec, sign: str, current: Fraction, times: dict[str, Fraction]
) -> Fraction:
    """Vsd x |I| x (reverse conduction per period) x fsw (common practice; k = 2 intervals, the
    soft one shortened by the swing)."""
    assert stage.fsw is not None
    swing = phys.exact_swing_s(spec.swing_charge, current)
    conduct = sum(
        (phys.conduction_s(times[e], swing, e == COMMUTATED[sign]) for e in EDGES), Fraction(0)
    )
    return stage.reverse_voltage * abs(current) * conduct * stage.fsw


def error_fundamental_over_bins(table: AdaptiveTable, vd_fsw: Fraction, peak: Fraction) -> float:
    """Fundamental amplitude of the dead-time voltage error over a sinusoidal current of peak
    `peak`, each bin's hard-edge dead time applied where |I| lies in the bin (issue 19).

    The error wave is e(theta) = -Vd fsw t_to_high(bin(|I|)) while I > 0 and
    +Vd fsw t_to_low(bin(|I|)) while I < 0 (Mohan, Undeland & Robbins ch. 8; Jeong & Park
    1991). Its fundamental in step with the current is the Fourier coefficient
    (1/pi) x integral of |e| |sin theta| over a period; over the angles where Ipk |sin theta|
    lies in [a, b) (twice per half period) the integral of |sin| is
    2 (sqrt(1 - (a/Ipk)^2) - sqrt(1 - (b/Ipk)^2)), so

        b1 = (2/pi) x sum over bins and signs of A(bin) x (sqrt(1 - x_lo^2) - sqrt(1 - x_hi^2))

    with x clipped to 1; one dead time for every bin gives (2/pi)(A+ + A-), 4A/pi for A+ = A-
    (the square wave's fundamental). Floats: pi enters.
    """
    total = 0.0
    ipk = float(peak)
    for b in table.bins:
        lo = min(1.0, float(b.current_min_a) / ipk)
        hi = 1.0 if b.current_max_a is None else min(1.0, float(b.current_max_a) / ipk)
        if hi <= lo:
            continue
        weight = math.sqrt(1 - lo * lo) - math.sqrt(1 - hi * hi)
        amp = float(vd_fsw) * float(
            b.entries["positive"]["to_high"].achieved_s + b.entries["negative"]["to_low"].achieved_s
        )
        total += amp * weight
    return 2 * total / math.pi


def _bin_of(table: AdaptiveTable, current: Fraction) -> Bin:
    """The bin the firmware selects for |I| = current."""
    lows = [b.current_min_a for b in table.bins]
    return table.bins[max(0, bisect.bisect_right(lows, abs(current)) - 1)]


def curve(
    plan: AdaptivePlan, table: AdaptiveTable, sign: str, points: int = 120
) -> list[tuple[float, float, float, float | None, float | None]]:
    """Rows (|I| A, commutated-edge dead time s, hard-edge dead time s, reverse-conduction W with
    the table, the same with the fixed dead time) from 0 to 1.5 x the top bin edge, at the
    slowest clock. Floats: display only. Losses are None without a switching frequency."""
    top = plan.spec.currents[-1] * Fraction(3, 2)
    soft_edge = COMMUTATED[sign]
    hard_edge = "to_high" if soft_edge == "to_low" else "to_low"
    fixed_t = {e: table.fixed[e].achieved_max_s for e in EDGES}
    out: list[tuple[float, float, float, float | None, float | None]] = []
    for k in range(points + 1):
        amps = top * k / points
        b = _bin_of(table, amps)
        times = {e: b.entries[sign][e].achieved_max_s for e in EDGES}
        loss = fixed = None
        if plan.stage.fsw is not None:
            loss = float(reverse_conduction_w(plan.stage, plan.spec, sign, amps, times))
            fixed = float(reverse_conduction_w(plan.stage, plan.spec, sign, amps, fixed_t))
        out.append(
            (float(amps), float(times[soft_edge]), float(times[hard_edge]), loss, fixed)
        )
    return out
