"""Load-dependent dead time: which edge the load current commutates, how long the swing takes.

Sign convention (as in `window`): current is positive flowing OUT of the switch node into the
load. Edges: `to_high` is the gap before the high-side switch turns on, `to_low` before the low
side turns on.

Soft and hard transitions (common practice; textbook background: Erickson & Maksimovic,
Fundamentals of Power Electronics, 2nd ed., ch. 20 on zero-voltage switching; Mohan, Undeland &
Robbins, Power Electronics, 3rd ed., ch. 8 on blanking time):

- With I > 0 the current keeps pulling the node down when the high side turns off: the
  transition before the low side turns on (`to_low`) is *commutated by the load* (soft, a
  zero-voltage transition). Before `to_high` the node stays low until the high side turns on:
  that edge is *hard*, and only the turn-off chain sets its minimum. With I < 0 it is the
  other way round.
- On a soft edge, after the turning-off switch's channel is off, the current charges one output
  capacitance and discharges the other. The node swings in

      t_swing = (Qoss,high + Qoss,low + C_node x Vbus) / |I|

  with Qoss each switch's output charge at the bus voltage and C_node the node's other
  capacitance (inductor winding, layout, a snubber; `[stage] c_node`): charge balance Q = C x V,
  the current moves all of it (Erickson & Maksimovic ch. 20; Mohan et al. ch. 9 on resonant
  transitions). The switches' Qoss alone understates the swing where the node carries more. We use the CHARGE (equivalently the
  time-related, charge-equivalent capacitance x bus voltage), not the energy-related
  capacitance: the swing time is set by how much charge the current must move. The inductor
  current is taken as constant during the dead time (common practice: the dead time is far
  shorter than L / R). The swing time is rounded UP to a whole picosecond (the safe side).

- The part of the turn-off chain that precedes the swing (`pre_swing_s`): every term of the
  stage minimum except the fall time of the switch turning off, i.e.

      td_off,max(off) - td_on,min(on) + (tpd,max(off channel) - tpd,min(on channel))
      + mismatch + isolator skew + timer skew

  (not below zero). The fall time is left out because in a soft transition the node's fall IS
  the swing, counted by t_swing; the turn-on delay of the other switch stays as a credit because
  its channel does not conduct before it has passed. The dead time that lets the swing finish
  before the other switch conducts is at least pre_swing + t_swing. Since the stage minimum is
  margin x (pre_swing + t_fall) with margin >= 1, stage minimum + t_swing (the soft edge's
  request) is always at least that.

- Below some current the swing cannot finish inside the window's maximum. The user chooses
  (`below_swing`): `max` keeps the dead time at the longest code inside the maximum (the swing
  may still not finish; reverse conduction at light load is cheap), `hard` accepts the hard
  transition at the stage minimum (costs at most (Qoss,high + Qoss,low) x Vbus per hard
  turn-on, an upper bound since Eoss <= Qoss x V; common practice).

Exact Fractions for everything that bounds safety; floats only where pi enters (inverter
averages, display).
"""

from __future__ import annotations

import math
from fractions import Fraction

from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import ceil_fraction
from gapforge.base.records import record
from gapforge.base.schema import Table
from gapforge.stage.window import OFF_SIDE, ON_SIDE, StageSpec

SIGNS = ("positive", "negative")
POLICIES = ("max", "hard")
PICOSECOND = Fraction(1, 10**12)
MAX_BINS = 64
# The edge the load current commutates (the soft one) for each current sign.
COMMUTATED = {"positive": "to_low", "negative": "to_high"}

ADAPTIVE_KEYS = frozenset(
    {
        "currents",
        "below_swing",
        "current_error",
        "adc_zero",
        "adc_amps_per_code",
        "adc_bits",
        "peak_current",
        "sign_band",
        "hysteresis",
    }
)
# Bin edges are compared with a C `long` of milliamperes in the generated bin selector (at least
# 32 bits in every C standard): an edge above this cannot be written (issue 19 item 10).
EDGE_MA_MAX = (1 << 31) - 1


@record
class AdcScale:
    """code = zero + I / amps_per_code (code rises with current), codes 0 .. 2**bits - 1."""

    zero: int
    amps_per_code: Fraction
    bits: int

    def edge_codes(self, current: Fraction) -> tuple[int, int]:
        """(positive, negative) ADC codes at which a bin starting at |I| = current begins.

        Rounded AWAY from zero current: the firmware enters the bin only once the code says the
        current is at least the edge (the safe side: a bin's codes assume at least its edge).
        A mid-tread converter outputs a code from half an LSB below it, so it enters a code half
        an LSB early: `current_error` must include that half LSB (with the sensor's error).
        """
        steps = ceil_fraction(current / self.amps_per_code)
        return self.zero + steps, self.zero - steps


@record
class AdaptiveSpec:
    """The [adaptive] section with the stage's output charges. Amperes, coulombs."""

    currents: tuple[Fraction, ...]  # bin edges, ascending, positive
    below_swing: str
    qoss_high: Fraction
    qoss_low: Fraction
    current_error: Fraction = Fraction(0)
    adc: AdcScale | None = None
    peak_current: Fraction | None = None
    sign_band: Fraction | None = None
    c_node: Fraction | None = None  # the node's other capacitance, F ([stage] c_node)
    node_charge: Fraction = Fraction(0)  # c_node x bus voltage, C
    hysteresis: Fraction | None = None  # the selector's band as given (None: the default)

    @property
    def default_hysteresis(self) -> Fraction:
        """The bin selector's band by default: the current error, plus half an ADC step where
        the current is read by an ADC (a mid-tread converter changes code half a step early)."""
        half = self.adc.amps_per_code / 2 if self.adc is not None else Fraction(0)
        return self.current_error + half

    @property
    def hysteresis_band(self) -> Fraction:
        """The band the bin selector uses (the design may only widen the default)."""
        return self.hysteresis if self.hysteresis is not None else self.default_hysteresis

    @property
    def qoss_total(self) -> Fraction:
        return self.qoss_high + self.qoss_low

    @property
    def swing_charge(self) -> Fraction:
        """The charge the load current moves in a swing: Qoss,high + Qoss,low + C_node x Vbus
        (charge balance Q = C x V)."""
        return self.qoss_total + self.node_charge

    @property
    def band(self) -> Fraction:
        """Compensation dead band: |I| below it the sign is taken as unknown (default: the
        first bin edge)."""
        return self.sign_band if self.sign_band is not None else self.currents[0]

    def bins(self) -> list[tuple[Fraction, Fraction | None]]:
        """(current_min, current_max) per bin: [0, c0), [c0, c1), ..., [c_last, no maximum)."""
        lows = (Fraction(0), *self.currents)
        highs: tuple[Fraction | None, ...] = (*self.currents, None)
        return list(zip(lows, highs, strict=True))


def commutated(sign: str, edge: str) -> bool:
    """True where the load current of this sign commutates this edge (the soft edge)."""
    return COMMUTATED[sign] == edge


def pre_swing_s(spec: StageSpec, edge: str) -> Fraction:
    """The part of the turn-off chain before the swing starts (module docstring), >= 0."""
    off, on = spec.side(OFF_SIDE[edge]), spec.side(ON_SIDE[edge])
    total = (
        off.td_off_max
        - on.td_on_min
        + (off.prop_max - on.prop_min)
        + spec.mismatch
        + spec.isolator_skew
        + spec.timer_skew
    )
    return max(Fraction(0), total)


def swing_s(qoss_total: Fraction, current: Fraction) -> Fraction | None:
    """(Qoss,high + Qoss,low) / |I| rounded up to 1 ps; None when |I| = 0 (it never finishes)."""
    if current == 0:
        return None
    return ceil_fraction(qoss_total / abs(current) / PICOSECOND) * PICOSECOND


def exact_swing_s(qoss_total: Fraction, current: Fraction) -> Fraction | None:
    """The same, exact (for costs at a given current)."""
    return None if current == 0 else qoss_total / abs(current)


def threshold_current(qoss_total: Fraction, room_s: Fraction) -> Fraction | None:
    """The smallest |I| whose swing fits in `room_s` (window maximum - stage minimum)."""
    return None if room_s <= 0 else qoss_total / room_s


# ---------------------------------------------------------------------------------------------
# costs (common practice; see window.stage_costs for the fixed dead time)


def conduction_s(dead_s: Fraction, swing: Fraction | None, is_commutated: bool) -> Fraction:
    """How long a device reverse-conducts in one dead interval.

    Hard edge: the whole dead time. Soft edge: the dead time after the swing, or nothing when
    the swing does not finish (the other switch then turns on hard, partly charged).
    """
    if not is_commutated:
        return dead_s
    if swing is None or dead_s < swing:
        return Fraction(0)
    return dead_s - swing


def hard_turn_on_w(qoss_total: Fraction, bus_voltage: Fraction, fsw: Fraction) -> Fraction:
    """Upper bound of the loss of one hard turn-on per period: (Qoss,h + Qoss,l) x V x f."""
    return qoss_total * bus_voltage * fsw


def mean_abs_sine(peak: float) -> float:
    """Mean of |Ipk sin| over a period: 2 Ipk / pi (computed: mean |sin| = 2 / pi)."""
    return 2 * peak / math.pi


def error_fundamental(amplitude_pos_v: float, amplitude_neg_v: float) -> float:
    """Fundamental amplitude of a square wave +A1 for half the period, -A2 for the other half:
    (2 / pi) x (A1 + A2); 4 A / pi when A1 = A2 = A (Fourier series; Mohan et al. ch. 8 and Jeong
    & Park 1991 for the dead-time error as such a wave in step with the current's sign)."""
    return 2 * (amplitude_pos_v + amplitude_neg_v) / math.pi


# ---------------------------------------------------------------------------------------------
# reading [adaptive] and the stage's qoss


def read_qoss(stage: Table) -> tuple[Fraction | None, Fraction | None]:
    """qoss per switch: [stage] qoss applies to both, [stage.high] / [stage.low] override."""
    shared = stage.quantity("qoss", "C", required=False)
    out: list[Fraction | None] = []
    for side in ("high", "low"):
        value = shared
        data = stage.data.get(side)
        if isinstance(data, dict) and "qoss" in data:
            sub = stage.reader.table(data, stage.key_path(side))
            value = sub.quantity("qoss", "C", required=False)
        out.append(value)
    return out[0], out[1]


def read_adaptive(top: Table, stage: StageSpec | None) -> AdaptiveSpec | None:
    """The [adaptive] section (None when absent). Problems are recorded on the Reader."""
    stage_t = top.sub("stage")
    qoss: tuple[Fraction | None, Fraction | None] = (None, None)
    if stage_t is not None:
        qoss = read_qoss(stage_t)
    table = top.sub("adaptive")
    if table is None:
        return None
    table.check_keys(ADAPTIVE_KEYS, {"currents", "below_swing"})
    if stage_t is None:
        table.reader.problem("adaptive", "[adaptive] needs a [stage] section (with qoss)")
    else:
        for side, value in zip(("high", "low"), qoss, strict=True):
            if value is None:
                table.reader.problem(
                    stage_t.key_path("qoss"),
                    f"[adaptive] needs the {side}-side switch's output charge at the bus voltage "
                    "(qoss, the datasheet maximum: only the part can say)",
                )
    currents = _read_currents(table)
    policy = table.string("below_swing", "max", POLICIES)  # required: checked above
    # The measured current picks the bin: its worst error is only known from the sensing chain
    # (sensor, amplifier, half an ADC step, sampling latency and ripple), so it is required.
    if not table.has("current_error"):
        table.reader.problem(
            table.key_path("current_error"),
            "required: the current measurement's worst error (sensor and amplifier datasheets,"
            " half an ADC step, the ripple over the sampling latency); each bin is judged at its"
            " edge minus it; give 0A only for a current known exactly",
        )
    error = table.quantity("current_error", "A", Fraction(0), allow_zero=True)
    c_node, node_charge = _read_c_node(stage_t, stage)
    spec = AdaptiveSpec(
        currents=tuple(currents) or (Fraction(1),),
        below_swing=policy,
        qoss_high=qoss[0] or Fraction(0),
        qoss_low=qoss[1] or Fraction(0),
        current_error=error if error is not None else Fraction(0),
        adc=_read_adc(table, currents),
        peak_current=table.quantity("peak_current", "A", required=False),
        sign_band=table.quantity("sign_band", "A", required=False, allow_zero=True),
        c_node=c_node,
        node_charge=node_charge,
        hysteresis=table.quantity("hysteresis", "A", required=False, allow_zero=True),
    )
    for key, band in (("hysteresis", spec.hysteresis_band), ("sign_band", spec.band)):
        if ceil_fraction(band * 1000) > EDGE_MA_MAX:
            table.reader.problem(table.key_path(key), f"at most {EDGE_MA_MAX} mA (a C long)")
    if spec.hysteresis is not None and spec.hysteresis < spec.default_hysteresis:
        table.reader.problem(
            table.key_path("hysteresis"),
            f"the bin selector's band may only be widened: at least current_error plus half an"
            f" ADC step, {float(spec.default_hysteresis):.6g} A",
        )
    _check_band(table, spec)
    if stage is not None and stage.fsw is None and spec.peak_current is not None:
        table.reader.problem(
            table.key_path("peak_current"), "the inverter figures need stage.fsw or [pwm]"
        )
    return spec


def _read_c_node(
    stage_t: Table | None, stage: StageSpec | None
) -> tuple[Fraction | None, Fraction]:
    """[stage] c_node (F) and its charge at the bus voltage (Q = C x V), when given."""
    if stage_t is None or not stage_t.has("c_node"):
        return None, Fraction(0)
    c_node = stage_t.quantity("c_node", "F", required=False, allow_zero=True)
    if c_node is None:
        return None, Fraction(0)
    if stage is None or stage.bus_voltage is None:
        stage_t.reader.problem(
            stage_t.key_path("c_node"), "c_node needs bus_voltage (its charge is c_node x Vbus)"
        )
        return c_node, Fraction(0)
    return c_node, c_node * stage.bus_voltage


def _check_band(table: Table, spec: AdaptiveSpec) -> None:
    """The compensation band must be at least the current error: a measured |I| inside the
    error may belong to a current of the other sign, and compensation would then be applied
    with the wrong sign (doubling the error instead of cancelling it). Refused as bad input:
    no build can be judged safe with it."""
    if spec.band >= spec.current_error:
        return
    key = "sign_band" if spec.sign_band is not None else "currents"
    what = "sign_band" if spec.sign_band is not None else "the first bin edge (the default band)"
    table.reader.problem(
        table.key_path(key),
        f"{what} {float(spec.band):.6g} A is below current_error {float(spec.current_error):.6g}"
        " A: a measured current inside the error may have the other sign, so compensation would"
        " apply with the wrong sign; make sign_band at least current_error",
    )


def _read_currents(table: Table) -> list[Fraction]:
    raw = table.raw("currents", [])
    where = table.key_path("currents")
    if not isinstance(raw, list) or not raw:
        if table.has("currents"):
            table.reader.problem(where, "expected a non-empty list such as ['2A', '5A']")
        return []
    if len(raw) > MAX_BINS - 1:
        table.reader.problem(where, f"at most {MAX_BINS - 1} bin edges")
        return []
    from gapforge.base.quantities import parse_quantity

    values: list[Fraction] = []
    for i, item in enumerate(raw):
        try:
            values.append(parse_quantity(item, "A", f"{where}[{i}]"))
        except GapforgeError as exc:
            table.reader.problem(f"{where}[{i}]", exc.message)
            return []
    for i, value in enumerate(values):
        if ceil_fraction(value * 1000) > EDGE_MA_MAX:
            table.reader.problem(
                f"{where}[{i}]",
                f"a bin edge must fit the header's milliampere type (a C long): at most"
                f" {EDGE_MA_MAX} mA",
            )
            return []
    for i in range(1, len(values)):
        if values[i] <= values[i - 1]:
            table.reader.problem(f"{where}[{i}]", "bin edges must be strictly ascending")
            return []
    return values


def _read_adc(table: Table, currents: list[Fraction]) -> AdcScale | None:
    keys = ("adc_zero", "adc_amps_per_code", "adc_bits")
    given = [table.has(k) for k in keys]
    if not any(given):
        return None
    if not all(given):
        missing = keys[given.index(False)]
        table.reader.problem(
            table.key_path(missing), "ADC scaling needs adc_zero, adc_amps_per_code and adc_bits"
        )
        return None
    bits = table.integer("adc_bits", None, 1, 24)
    zero = table.integer("adc_zero", None, 0, (1 << bits) - 1)
    lsb = table.quantity("adc_amps_per_code", "A")
    if lsb is None or table.reader.problems:
        return None
    adc = AdcScale(zero=zero, amps_per_code=lsb, bits=bits)
    top = (1 << bits) - 1
    for i, c in enumerate(currents):
        pos, neg = adc.edge_codes(c)
        if pos > top or neg < 0:
            table.reader.problem(
                f"{table.key_path('currents')}[{i}]",
                f"{float(c):.6g} A lies outside the ADC's codes 0..{top} (zero at {zero})",
            )
            return None
    return adc
