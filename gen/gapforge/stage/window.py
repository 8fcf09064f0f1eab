"""The power stage's dead-time window and the cost of a chosen dead time.

A dead time is right only relative to the power stage. It must be long enough that the switch
turning off is really off before the other one turns on, with every delay and skew of the chain
counted (the *minimum*), and short enough not to waste power in reverse conduction (the *maximum*
a loss budget allows).

Edges, as everywhere in gapforge: `to_high` is the gap before the high-side switch turns on (the
low-side switch is turning off), `to_low` the gap before the low-side switch turns on.

Minimum per edge (common practice, no single published source; textbook background in Mohan,
Undeland & Robbins, Power Electronics, 3rd ed., ch. 8, blanking time longer than turn-off):

    t_min = margin x ( td_off,max(switch turning off) + t_fall,max(switch turning off)
                       - td_on,min(switch turning on)
                       + tpd,max(driver channel turning off) - tpd,min(driver channel turning on)
                       + channel mismatch + isolator/level-shifter skew + timer output skew )

rounded UP to a whole picosecond. The rise time of the switch turning on is shown but not
counted: it only delays the overlap, and leaving it out keeps it as reserve.

Maximum (common practice): each dead-time interval in which the load current flows, one device
reverse-conducts at Vsd, costing Vsd x |I| x t_dead x f_sw. With the same maximum on both edges,
Vsd x f_sw x (|I_to_high| + |I_to_low|) x t_max + recovery loss <= budget, rounded DOWN to a whole
picosecond, and never beyond half a switching period. GaN conducts in the third quadrant at about
its threshold plus the magnitude of a negative gate-off voltage.

Exact Fractions throughout; floats only for display.
"""

from __future__ import annotations

from fractions import Fraction

from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import ceil_fraction, floor_fraction, format_quantity
from gapforge.base.records import record

EDGES = ("to_high", "to_low")
SIDES = ("high", "low")
KINDS = ("silicon", "sic", "gan")
VERDICTS = ("ok", "too-short", "too-long", "empty-window")
DEFAULT_MARGIN = Fraction(6, 5)
PICOSECOND = Fraction(1, 10**12)

# Reverse-conduction voltage used when none is given: the upper end of the usual range for each
# kind (common practice: silicon body diode 0.7-1.2 V, SiC body diode 2.5-4 V, GaN third quadrant
# 1.5-3 V before the gate-off voltage). The upper end makes the loss larger and the maximum
# shorter, which is the safe side.
DEFAULT_VSD: dict[str, Fraction] = {
    "silicon": Fraction(12, 10),
    "sic": Fraction(4),
    "gan": Fraction(3),
}

# Which switch turns off / on before each edge, and which driver channel.
OFF_SIDE = {"to_high": "low", "to_low": "high"}
ON_SIDE = {"to_high": "high", "to_low": "low"}

# Keys of the [stage] table.
TIMING_KEYS = frozenset({"td_off", "t_fall", "td_on", "t_rise", "prop_delay"})
# qoss (output charge at the bus voltage, per switch) is read by gapforge.stage.adaptive
QOSS_KEYS = frozenset({"qoss"})
SHARED_KEYS = frozenset(
    {
        "kind",
        "margin",
        "mismatch",
        "isolator_skew",
        "timer_skew",
        "vsd",
        "vsd_at_gate_off",
        "gate_off",
        "current",
        "current_to_high",
        "current_to_low",
        "fsw",
        "loss_budget",
        "qrr",
        "bus_voltage",
    }
)
# c_node: the switch node's other capacitance (inductor winding, layout), read with qoss
STAGE_KEYS = TIMING_KEYS | QOSS_KEYS | SHARED_KEYS | frozenset({"high", "low", "note", "c_node"})
SIDE_KEYS = TIMING_KEYS | QOSS_KEYS


@record
class SwitchTiming:
    """One switch and its driver channel: worst-case datasheet timing (seconds)."""

    td_off_max: Fraction
    t_fall_max: Fraction
    td_on_min: Fraction
    t_rise: Fraction
    prop_min: Fraction
    prop_max: Fraction


@record
class StageSpec:
    """Everything the window and the costs are computed from. Seconds, volts, amperes, hertz."""

    high: SwitchTiming
    low: SwitchTiming
    # every term of the minimum's sum is stated (issue 19): no zero is assumed for a left-out
    # mismatch or skew; 0 given means "checked, there is none"
    mismatch: Fraction
    isolator_skew: Fraction
    timer_skew: Fraction
    margin: Fraction = DEFAULT_MARGIN
    kind: str = "silicon"
    vsd: Fraction | None = None
    gate_off: Fraction = Fraction(0)
    vsd_at_gate_off: bool = False  # GaN: the given vsd was measured at the gate-off bias
    current_to_high: Fraction = Fraction(0)
    current_to_low: Fraction = Fraction(0)
    fsw: Fraction | None = None
    loss_budget: Fraction | None = None
    qrr: Fraction | None = None
    bus_voltage: Fraction | None = None
    # keys that took a documented default when read from a file or options ("margin",
    # "high.t_rise", "vsd", ...): the breakdown and the JSON say which terms were not given
    defaulted: frozenset[str] = frozenset()

    def side(self, name: str) -> SwitchTiming:
        return self.high if name == "high" else self.low

    def current(self, edge: str) -> Fraction:
        return self.current_to_high if edge == "to_high" else self.current_to_low

    @property
    def reverse_voltage(self) -> Fraction:
        """Reverse-conduction voltage: Vsd (or the kind's default), plus |gate-off| for GaN.

        A GaN vsd is read at a gate voltage of 0 V (the datasheet's third-quadrant curve) and the
        gate-off bias is added once; a vsd measured at the gate-off bias already holds it
        (`vsd_at_gate_off`), so nothing is added."""
        base = self.vsd if self.vsd is not None else DEFAULT_VSD[self.kind]
        if self.kind != "gan" or (self.vsd_at_gate_off and self.vsd is not None):
            return base
        return base + abs(self.gate_off)


@record
class Term:
    """One line of a breakdown: a named contribution in seconds (or a plain factor)."""

    name: str
    value: Fraction
    unit: str = "s"
    note: str = ""
    counted: bool = True
    given: bool = True  # False: a documented default stood in (never for a counted term)


@record
class WindowEdge:
    """The window for one edge: min_s rounded up, max_s rounded down (None: no upper limit)."""

    min_s: Fraction
    max_s: Fraction | None
    raw_sum_s: Fraction
    breakdown: tuple[Term, ...]
    max_breakdown: tuple[Term, ...]
    max_reason: str

    @property
    def empty(self) -> bool:
        return self.max_s is not None and self.max_s < self.min_s


@record
class Window:
    edges: dict[str, WindowEdge]
    margin: Fraction

    @property
    def breakdown(self) -> dict[str, tuple[Term, ...]]:
        return {edge: self.edges[edge].breakdown for edge in EDGES}

    @property
    def empty(self) -> bool:
        return any(self.edges[edge].empty for edge in EDGES)


@record
class EdgeCosts:
    dead_time_s: Fraction
    current_a: Fraction
    reverse_conduction_w: Fraction
    recovery_w: Fraction
    voltage_error_v: Fraction
    recovers: bool


@record
class Costs:
    """What the chosen dead times cost, per edge and in total (exact)."""

    edges: dict[str, EdgeCosts]
    reverse_conduction_w: Fraction
    recovery_w: Fraction
    dead_share: Fraction | None
    duty_lost: Fraction | None
    voltage_error_v: Fraction | None
    reverse_voltage_v: Fraction


# ---------------------------------------------------------------------------------------------
# checks shared by the file reader and the command line


def stage_problems(spec: StageSpec) -> list[tuple[str, str, str]]:
    """Problems of a spec as (side or '', key, message); empty when the spec is usable."""
    problems: list[tuple[str, str, str]] = []
    if spec.margin < 1:
        problems.append(("", "margin", f"margin factor {_factor(spec.margin)} must be at least 1"))
    if spec.kind not in KINDS:
        problems.append(("", "kind", f"{spec.kind!r} is not one of {', '.join(KINDS)}"))
    for side in SIDES:
        timing = spec.side(side)
        if timing.prop_min > timing.prop_max:
            problems.append((side, "prop_delay", "propagation delay MIN:MAX has MIN above MAX"))
    for edge in EDGES:
        on = ON_SIDE[edge]
        total = _raw_sum(spec, edge)
        if total <= 0:
            td_on = spec.side(on).td_on_min
            rest = total + td_on
            problems.append(
                (
                    on,
                    "td_on",
                    f"{edge}: the {on}-side turn-on delay min ({format_quantity(td_on, 's')}) "
                    f"is not below the sum of every other term ({format_quantity(rest, 's')}), "
                    "so the minimum dead time would be zero or negative; check that td_on is "
                    "the minimum turn-on delay and the units",
                )
            )
    if spec.kind != "gan" and spec.gate_off != 0:
        problems.append(("", "gate_off", "gate_off applies to kind 'gan' only"))
    if spec.vsd_at_gate_off and (spec.kind != "gan" or spec.vsd is None):
        problems.append(("", "vsd_at_gate_off", "applies to kind 'gan' with a given vsd only"))
    if spec.kind == "gan" and spec.qrr not in (None, Fraction(0)):
        problems.append(("", "qrr", "GaN has no reverse-recovery charge; leave qrr out"))
    if spec.qrr is not None and spec.qrr > 0 and spec.bus_voltage is None:
        problems.append(("", "bus_voltage", "qrr needs bus_voltage (recovery loss = Qrr x V x f)"))
    if spec.loss_budget is not None and spec.fsw is None:
        problems.append(("", "fsw", "loss_budget needs the switching frequency fsw"))
    return problems


def _raw_sum(spec: StageSpec, edge: str) -> Fraction:
    return sum((t.value for t in _min_terms(spec, edge) if t.counted), Fraction(0))


def _min_terms(spec: StageSpec, edge: str) -> list[Term]:
    off_side, on_side = OFF_SIDE[edge], ON_SIDE[edge]
    off, on = spec.side(off_side), spec.side(on_side)
    rise_given = f"{on_side}.t_rise" not in spec.defaulted
    terms = [
        Term(f"turn-off delay max, {off_side}-side switch", off.td_off_max),
        Term(f"fall time max, {off_side}-side switch", off.t_fall_max),
        Term(f"turn-on delay min, {on_side}-side switch", -on.td_on_min),
        Term(
            f"driver delay spread: {off_side} channel max - {on_side} channel min",
            off.prop_max - on.prop_min,
            note=f"{format_quantity(off.prop_max, 's')} - {format_quantity(on.prop_min, 's')}",
        ),
        Term("driver channel-to-channel mismatch", spec.mismatch),
        Term("isolator / level-shifter skew", spec.isolator_skew),
        Term("timer output skew", spec.timer_skew),
    ]
    # a counted term is always stated (issue 19); a stated 0 is echoed as such
    terms = [
        t if t.value != 0 or t.note else Term(t.name, t.value, note="given as 0: checked, none")
        for t in terms
    ]
    terms.append(
        Term(
            f"rise time, {on_side}-side switch",
            on.t_rise,
            note="not counted: it only delays the overlap; kept as reserve"
            + ("" if rise_given else "; not given"),
            counted=False,
            given=rise_given,
        )
    )
    return terms


def _check(spec: StageSpec) -> None:
    problems = stage_problems(spec)
    if problems:
        side, key, message = problems[0]
        raise GapforgeError(message, f"stage.{side}.{key}" if side else f"stage.{key}")


# ---------------------------------------------------------------------------------------------
# the window


def stage_window(spec: StageSpec) -> Window:
    """The dead-time window per edge. Raises GapforgeError if the spec is not usable."""
    _check(spec)
    max_s, max_terms, reason = _maximum(spec)
    edges: dict[str, WindowEdge] = {}
    for edge in EDGES:
        terms = _min_terms(spec, edge)
        raw = sum((t.value for t in terms if t.counted), Fraction(0))
        with_margin = raw * spec.margin
        min_s = ceil_fraction(with_margin / PICOSECOND) * PICOSECOND
        breakdown = (
            *terms,
            Term("sum (common practice)", raw, counted=False),
            Term(
                "margin factor",
                spec.margin,
                unit="",
                note="" if "margin" not in spec.defaulted else "default, common practice",
                counted=False,
                given="margin" not in spec.defaulted,
            ),
            Term(
                "minimum = sum x margin, rounded up to 1 ps",
                min_s,
                note=f"before rounding: {format_quantity(with_margin, 's')}",
                counted=False,
            ),
        )
        edges[edge] = WindowEdge(
            min_s=min_s,
            max_s=max_s,
            raw_sum_s=raw,
            breakdown=breakdown,
            max_breakdown=max_terms,
            max_reason=reason,
        )
    return Window(edges=edges, margin=spec.margin)


def _maximum(spec: StageSpec) -> tuple[Fraction | None, tuple[Term, ...], str]:
    """The longest dead time the loss budget allows on both edges (rounded down to 1 ps)."""
    if spec.loss_budget is None or spec.fsw is None:
        return None, (), "no loss budget given"
    vsd = spec.reverse_voltage
    amps = abs(spec.current_to_high) + abs(spec.current_to_low)
    recovery = _recovery_total(spec)
    available = spec.loss_budget - recovery
    half_period = 1 / (2 * spec.fsw)
    terms: list[Term] = [
        Term("loss budget", spec.loss_budget, unit="W", counted=False),
        Term("recovery loss (does not shrink with dead time)", recovery, unit="W", counted=False),
        Term(
            "reverse-conduction voltage",
            vsd,
            unit="V",
            counted=False,
            note=_vsd_note(spec),
            given=spec.vsd is not None,
        ),
        Term("|I to_high| + |I to_low|", amps, unit="A", counted=False),
        Term("switching frequency", spec.fsw, unit="Hz", counted=False),
    ]
    if available <= 0:
        reason = "no loss budget left after the recovery loss"
        terms.append(Term("maximum", Fraction(0), note=reason, counted=False))
        return Fraction(0), tuple(terms), reason
    if amps == 0:
        bound, reason = half_period, "no load current: only half a switching period limits it"
    else:
        by_loss = available / (vsd * amps * spec.fsw)
        if by_loss < half_period:
            bound, reason = by_loss, "loss budget"
        else:
            bound, reason = half_period, "half a switching period (the loss budget allows more)"
    max_s = floor_fraction(bound / PICOSECOND) * PICOSECOND
    terms.append(
        Term(
            "maximum = (budget - recovery) / (Vsd x sum|I| x fsw), rounded down to 1 ps",
            max_s,
            note=reason,
            counted=False,
        )
    )
    return max_s, tuple(terms), reason


def _vsd_note(spec: StageSpec) -> str:
    given = "given" if spec.vsd is not None else f"default for {spec.kind}, common practice"
    if spec.kind == "gan" and spec.vsd_at_gate_off and spec.vsd is not None:
        return f"{given}, measured at the gate-off bias (nothing added)"
    if spec.kind == "gan":
        return f"{given} at 0 V gate, plus |gate-off| {format_quantity(abs(spec.gate_off), 'V')}"
    return given


def _recovers(spec: StageSpec, edge: str) -> bool:
    """True where the switch turning on takes the current from the other device's diode."""
    current = spec.current(edge)
    return current > 0 if edge == "to_high" else current < 0


def _recovery(spec: StageSpec, edge: str) -> Fraction:
    if not spec.qrr or spec.bus_voltage is None or spec.fsw is None:
        return Fraction(0)
    return spec.qrr * spec.bus_voltage * spec.fsw if _recovers(spec, edge) else Fraction(0)


def _recovery_total(spec: StageSpec) -> Fraction:
    return sum((_recovery(spec, edge) for edge in EDGES), Fraction(0))


# ---------------------------------------------------------------------------------------------
# costs of a chosen dead time


def stage_costs(spec: StageSpec, dead_times: dict[str, Fraction]) -> Costs:
    """Reverse-conduction and recovery loss, duty lost and the inverter voltage error.

    Current is positive flowing out of the switch node into the load. In a dead time the current
    keeps flowing through one device's reverse path (k = 2 intervals per period for a
    synchronous buck with positive current). Where the current holds the node at the wrong rail
    (to_high with I > 0, to_low with I < 0) the output loses (gains) Vd x t_dead x f_sw on
    average: Mohan, Undeland & Robbins, Power Electronics, 3rd ed., ch. 8.
    """
    _check(spec)
    for edge in EDGES:
        if edge not in dead_times:
            raise GapforgeError("no dead time given for this edge", edge)
        if dead_times[edge] < 0:
            raise GapforgeError("dead time must not be negative", edge)
    vsd = spec.reverse_voltage
    fsw = spec.fsw
    edges: dict[str, EdgeCosts] = {}
    for edge in EDGES:
        t = dead_times[edge]
        current = spec.current(edge)
        loss = vsd * abs(current) * t * fsw if fsw is not None else Fraction(0)
        error = Fraction(0)
        if fsw is not None and spec.bus_voltage is not None:
            if edge == "to_high" and current > 0:
                error = -spec.bus_voltage * t * fsw
            elif edge == "to_low" and current < 0:
                error = spec.bus_voltage * t * fsw
        edges[edge] = EdgeCosts(
            dead_time_s=t,
            current_a=current,
            reverse_conduction_w=loss,
            recovery_w=_recovery(spec, edge),
            voltage_error_v=error,
            recovers=_recovers(spec, edge),
        )
    total_t = dead_times["to_high"] + dead_times["to_low"]
    lost: Fraction | None = None
    if fsw is not None:
        # The high-side output loses its dead time where the current holds the node low.
        lost = Fraction(0)
        if spec.current_to_high > 0:
            lost += dead_times["to_high"] * fsw
        if spec.current_to_low < 0:
            lost -= dead_times["to_low"] * fsw
    return Costs(
        edges=edges,
        reverse_conduction_w=sum((e.reverse_conduction_w for e in edges.values()), Fraction(0)),
        recovery_w=sum((e.recovery_w for e in edges.values()), Fraction(0)),
        dead_share=total_t * fsw if fsw is not None else None,
        duty_lost=lost,
        voltage_error_v=(
            sum((e.voltage_error_v for e in edges.values()), Fraction(0))
            if fsw is not None and spec.bus_voltage is not None
            else None
        ),
        reverse_voltage_v=vsd,
    )


# ---------------------------------------------------------------------------------------------
# judging a fit


def judge(
    window_edge: WindowEdge, achieved_min_s: Fraction, achieved_max_s: Fraction
) -> tuple[str, Fraction, Fraction | None]:
    """Verdict of a fitted dead time against one edge of a stage window (see judge_bounds)."""
    verdict, low, high = judge_bounds(
        window_edge.min_s, window_edge.max_s, achieved_min_s, achieved_max_s
    )
    assert low is not None
    return verdict, low, high


def judge_bounds(
    lo: Fraction | None, hi: Fraction | None, achieved_min_s: Fraction, achieved_max_s: Fraction
) -> tuple[str, Fraction | None, Fraction | None]:
    """Verdict of a fitted dead time (worst-case min/max over clock tolerance) against a window.

    Returns (verdict, margin_low_s, margin_high_s): margin_low = achieved_min - window min,
    margin_high = window max - achieved_max (None where the window has no such edge). Negative
    means violated. Verdicts: ok, too-short, too-long, empty-window.
    """
    low = None if lo is None else achieved_min_s - lo
    high = None if hi is None else hi - achieved_max_s
    if lo is not None and hi is not None and hi < lo:
        return "empty-window", low, high
    if low is not None and low < 0:
        return "too-short", low, high
    if high is not None and high < 0:
        return "too-long", low, high
    return "ok", low, high


def _factor(value: Fraction) -> str:
    return f"x {float(value):g}"
