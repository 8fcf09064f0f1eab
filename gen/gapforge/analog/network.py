"""The analog reference network's data model: values with bands, the SPICE diode model, the
network, and the constants every evaluator shares. Nothing here evaluates the network."""

from __future__ import annotations

import math
import re
from dataclasses import replace
from fractions import Fraction
from typing import TYPE_CHECKING

from gapforge.base import caution
from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import (
    format_quantity,
    picoseconds_ceil,
    picoseconds_floor,
    picoseconds_nearest,
)
from gapforge.base.records import record

if TYPE_CHECKING:
    import numpy as np
    import numpy.typing as npt


    FloatArray = npt.NDArray[np.float64]


EDGES = ("rising", "falling")
BYPASS_CHOICES = ("rising", "falling", "none")
PAIR_KEYS = ("to_high", "to_low")

# Boltzmann constant over elementary charge (exact SI 2019 constants), V/K.
K_OVER_Q = 1.380649e-23 / 1.602176634e-19
ZERO_CELSIUS = 273.15
REFERENCE_TEMP_C = 25.0  # temperature at which R and C are specified (common practice)

# Temperatures the model accepts (ambient and the diode's TNOM), degrees C. -55..+125 C spans the
# military and automotive ratings and junctions are rated to +150..+200 C; beyond that the SPICE
# temperature equations (band gap, junction potential) leave the range they were fitted for, and
# at -273.15 C they divide by zero. A typo such as -300 or 500 is refused, not computed.
TEMP_RANGE_C = (-60.0, 200.0)
# Diode parameters that keep the model finite (exp() of V / (N kT/q) within range): real small-
# signal and Schottky diodes have IS 1e-18..1e-4 A, N 1..2 and EG 0.6..1.2 eV (SiC 3.2); the
# bounds are wider than that and only catch nonsense (Sedra & Smith ch. 3, from memory).
DIODE_IS_RANGE = (1e-24, 1e-2)
DIODE_N_RANGE = (0.5, 5.0)
DIODE_EG_RANGE = (0.1, 5.0)

# The one caution every human-facing output carries (re-exported for the analog command).
CAUTION = caution.TEXT
# Diode leakage may take at most this share of a slow edge at the hottest corner before `analog`
# and `build` warn (and `analog` exits 1): `--leakage-warn`'s default.
DEFAULT_LEAKAGE_SHARE = Fraction(1, 5)


# --------------------------------------------------------------------------------------------
# Values


@record
class Band:
    """min/typ/max of one quantity (exact)."""

    min: Fraction
    typ: Fraction
    max: Fraction

    @staticmethod
    def exact(value: Fraction | int) -> Band:
        v = Fraction(value)
        return Band(v, v, v)

    def scaled(self, factor: Fraction) -> Band:
        return Band(self.min * factor, self.typ * factor, self.max * factor)

    def floats(self) -> tuple[float, float, float]:
        return float(self.min), float(self.typ), float(self.max)


@record
class Level:
    """A Schmitt threshold: volts, or a fraction of VDD when `relative`."""

    value: Fraction
    relative: bool

    def volts(self, vdd: float) -> float:
        return float(self.value) * vdd if self.relative else float(self.value)

    def text(self) -> str:
        if self.relative:
            return f"{float(self.value * 100):g} % VDD"
        return format_quantity(self.value, "V")


@record
class LevelBand:
    min: Level
    typ: Level
    max: Level

    def levels(self) -> tuple[Level, Level, Level]:
        return self.min, self.typ, self.max


@record
class DiodeModel:
    """SPICE level-1 diode parameters (floats: physics, not limits). `bv` None = no breakdown."""

    is_: float = 1e-14
    n: float = 1.0
    rs: float = 0.0
    cjo: float = 0.0
    vj: float = 1.0
    m: float = 0.5
    eg: float = 1.11
    xti: float = 3.0
    tnom: float = 27.0
    bv: float | None = None
    fc: float = 0.5

    def card(self) -> str:
        """The parameters as a SPICE .model body."""
        parts = [
            f"IS={self.is_:.6g}",
            f"N={self.n:.6g}",
            f"RS={self.rs:.6g}",
            f"CJO={self.cjo:.6g}",
            f"VJ={self.vj:.6g}",
            f"M={self.m:.6g}",
            f"EG={self.eg:.6g}",
            f"XTI={self.xti:.6g}",
            f"TNOM={self.tnom:.6g}",
            f"FC={self.fc:.6g}",
        ]
        if self.bv is not None:
            parts.append(f"BV={self.bv:.6g}")
        return " ".join(parts)

    def saturation_current(self, temp_c: float) -> float:
        """IS at a temperature: the usual SPICE scaling with EG and XTI."""
        t = temp_c + ZERO_CELSIUS
        tn = self.tnom + ZERO_CELSIUS
        vte = self.n * K_OVER_Q * t
        return self.is_ * math.exp(
            (t / tn - 1.0) * self.eg / vte + self.xti / self.n * math.log(t / tn)
        )


# SPICE defaults for parameters the user leaves out of --diode (the usual level-1 defaults).
SPICE_DIODE_DEFAULTS = DiodeModel()
# The default bypass diode: a generic small-signal silicon diode, from memory (values of the
# order of the model cards circulated for common switching diodes, rounded; not a measured part).
# No worst case rests on it silently: `analog` and every build say so when it is used.
DEFAULT_DIODE_TEXT = "IS=4n N=1.9 RS=0.6 CJO=1.5p VJ=0.7 M=0.4 EG=1.11 XTI=3 BV=75"

_DIODE_KEYS: dict[str, tuple[str, tuple[float, float], bool]] = {
    # key: (attribute, accepted range (nonsense only: real parts lie well inside), zero allowed)
    "IS": ("is_", DIODE_IS_RANGE, False),
    "N": ("n", DIODE_N_RANGE, False),
    "RS": ("rs", (0.0, 1e6), True),
    "CJO": ("cjo", (0.0, 1e-6), True),
    "CJ0": ("cjo", (0.0, 1e-6), True),
    "VJ": ("vj", (0.05, 10.0), False),
    "M": ("m", (0.0, 1.0), False),
    "EG": ("eg", DIODE_EG_RANGE, False),
    "XTI": ("xti", (0.0, 10.0), True),
    "TNOM": ("tnom", TEMP_RANGE_C, True),
    "BV": ("bv", (1e-3, 1e6), False),
    "FC": ("fc", (0.0, 1.0), True),
}

# SPICE scale factors (SPICE3 / ngspice manuals, "numbers and scale factors"): case-insensitive,
# M is milli and MEG mega, MIL 25.4e-6; letters after a scale factor (or instead of one) are
# ignored, so "10pF" is 10e-12 and "600M" 0.6.
SPICE_SCALE = (("MEG", 1e6), ("MIL", 25.4e-6), ("T", 1e12), ("G", 1e9), ("K", 1e3),
               ("M", 1e-3), ("U", 1e-6), ("N", 1e-9), ("P", 1e-12), ("F", 1e-15))
_SPICE_NUMBER = re.compile(r"([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d{1,3})?)([A-Za-z]*)")
_MAX_NUMBER_TEXT = 40


def spice_number(text: str, where: str) -> float:
    """A number in SPICE model-card notation: '600M' = 0.6, '2MEG' = 2e6, '10pF' = 1e-11."""
    if len(text) > _MAX_NUMBER_TEXT:
        raise GapforgeError(f"{text[:_MAX_NUMBER_TEXT]!r}... is too long for a number", where)
    match = _SPICE_NUMBER.fullmatch(text.strip())
    if match is None:
        raise GapforgeError(f"{text!r} is not a SPICE number (such as 2.5n, 600m, 1MEG)", where)
    value = float(match.group(1))
    letters = match.group(2).upper()
    for prefix, scale in SPICE_SCALE:
        if letters.startswith(prefix):
            value *= scale
            break
    if not math.isfinite(value):
        raise GapforgeError(f"{text!r} is out of range", where)
    return value


def parse_diode(text: object, where: str) -> DiodeModel:
    """'IS=1e-6 N=1.05 RS=1 CJO=20p VJ=0.4 M=0.5': SPICE diode parameters, defaults for the rest.

    Numbers follow SPICE's own rules (`spice_number`: M is milli, MEG mega, case-insensitive),
    so a model card pasted from a simulator library reads as the simulator reads it.
    """
    if not isinstance(text, str):
        raise GapforgeError(f"expected diode parameters such as 'IS=1n N=1.8', got {text!r}", where)
    if len(text) > 1000:
        raise GapforgeError("the diode parameters are too long (at most 1000 characters)", where)
    values: dict[str, float] = {}
    for token in text.replace(",", " ").split():
        if "=" not in token:
            raise GapforgeError(f"expected NAME=value, got {token[:40]!r}", where)
        name, _, value = token.partition("=")
        key = name.strip().upper()
        if key not in _DIODE_KEYS:
            known = ", ".join(k for k in _DIODE_KEYS if k != "CJ0")
            raise GapforgeError(
                f"unknown diode parameter {name[:20]!r} (expected one of: {known})", where
            )
        attr, (low, high), zero_ok = _DIODE_KEYS[key]
        number = spice_number(value, where)
        if not (low <= number <= high) or (number == 0.0 and not zero_ok):
            raise GapforgeError(f"diode {key}={value[:40]} outside {low:g}..{high:g}"
                                + ("" if zero_ok else " (not zero)"), where)
        values[attr] = number
    model = replace(SPICE_DIODE_DEFAULTS, **values)
    if not 0.0 < model.m < 1.0:
        raise GapforgeError(f"diode M={model.m:g} must lie between 0 and 1", where)
    if not 0.0 <= model.fc < 1.0:
        raise GapforgeError(f"diode FC={model.fc:g} must lie in 0..1", where)
    return model


@record
class Knee:
    """A diode's knee voltage at one stated temperature: the diode carries as much current as
    the nominal R at `volts`; its IS is solved there and the SPICE law carries it elsewhere."""

    volts: Fraction
    temp_c: Fraction


@record
class ReverseLimit:
    """A datasheet's maximum reverse current at a stated temperature and reverse voltage."""

    amps: Fraction
    temp_c: Fraction
    volts: Fraction


@record
class ReferenceNetwork:
    """One channel's parts (each channel of the pair draws its own parts from these bands)."""

    vdd: Band  # V
    rout: Band  # ohm, driver output resistance
    driver_delay: Band  # s
    r: Fraction  # ohm
    r_tol: Fraction  # relative
    r_tempco: Fraction  # per kelvin, +/- band
    c: Fraction  # F
    c_tol: Fraction
    c_tempco: Fraction
    cin: Band  # F, Schmitt input capacitance
    cstray: Band  # F
    bypass: str  # which input edge the diode bypasses: rising | falling | none
    diode: DiodeModel
    vf: Knee | None  # the knee the diode's IS was solved for; None = the model card's IS
    vt_plus: LevelBand
    vt_minus: LevelBand
    schmitt_delay: Band  # s
    output_inverter: bool
    inverter_delay: Band  # s, the output inverter and the pair's input inverter
    temp: Band  # degrees C
    defaults: tuple[str, ...] = ()  # parameter names left at their default
    ir_max: ReverseLimit | None = None  # the datasheet's maximum reverse current, if given
    leakage_scale: float = 1.0  # IS factor on the resistor edge: ir_max over the model's leakage

    def leaking_diode(self) -> DiodeModel:
        """The diode as it leaks on the resistor edge: the worse of the model card's leakage and
        the datasheet's `ir_max` (its IS scaled up when the datasheet allows more)."""
        if self.leakage_scale <= 1.0:
            return self.diode
        return replace(self.diode, is_=self.diode.is_ * self.leakage_scale)

    def r_band(self) -> Band:
        return Band(self.r * (1 - self.r_tol), self.r, self.r * (1 + self.r_tol))

    def c_band(self) -> Band:
        return Band(self.c * (1 - self.c_tol), self.c, self.c * (1 + self.c_tol))

    def slow_edges(self) -> tuple[str, ...]:
        """The input edges that go through R (the delaying edges)."""
        return tuple(e for e in EDGES if e != self.bypass)


@record
class EdgeRange:
    """A range of a time, in seconds, to 1 ps.

    `min_s` / `max_s` (rounded down / up) state what the network delivers, widened; `limit_min_s`
    / `limit_max_s` (rounded up / down) are the same range narrowed, for use as limits that a
    digital dead time must stay within (a minimum rounds up, a maximum down).
    """

    min_s: Fraction
    typ_s: Fraction
    max_s: Fraction
    limit_min_s: Fraction
    limit_max_s: Fraction


def edge_range(lo: float, typ: float, hi: float) -> EdgeRange:
    """Floats to exact ranges: widened (min down, max up) and narrowed (min up, max down)."""
    for value in (lo, typ, hi):
        if math.isnan(value):
            raise GapforgeError("the model cannot resolve an edge of this network at some "
                                "tolerance corner (the diode's conduction rises by more than the "
                                "step between two adjacent floats: check its model card's IS and "
                                "N against the temperature range)", "reference")
        if not math.isfinite(value):
            raise GapforgeError(f"the network gives a non-finite delay ({value})", "reference")
    return EdgeRange(
        Fraction(picoseconds_floor(Fraction(lo)), 10**12),
        Fraction(picoseconds_nearest(Fraction(typ)), 10**12),
        Fraction(picoseconds_ceil(Fraction(hi)), 10**12),
        Fraction(picoseconds_ceil(Fraction(lo)), 10**12),
        Fraction(picoseconds_floor(Fraction(hi)), 10**12),
    )




@record
class SlowEdgePoint:
    """A slow (resistor) edge's node delay at one temperature, with and without diode leakage."""

    temp_c: float
    edge: str
    delay_s: float  # with the diode as modelled
    delay_no_leakage_s: float  # the same with the diode's leakage removed (capacitance kept)

    @property
    def erosion(self) -> float:
        """The share of the delay that leakage takes away (0 = none, 1 = all).

        0 when the edge has no delay even without leakage (the junction capacitance's coupled
        step alone passes the threshold: nothing left for leakage to take; the coupling has a
        finding of its own)."""
        if not self.delay_no_leakage_s > 0.0:
            return 0.0
        return max(0.0, 1.0 - self.delay_s / self.delay_no_leakage_s)


