"""The analog reference network: what an RC-diode-Schmitt dead-time network really delivers.

One channel: a CMOS driver (supply VDD, output resistance Rout, propagation delay) drives a
resistor R bridged by a fast diode into a capacitor C (plus the Schmitt input capacitance Cin and a
stray term); a Schmitt-trigger buffer (thresholds VT+ and VT-, propagation delay) reads the node;
an optional output inverter follows. A complementary pair is two such channels, the low one
behind an inverter, with independent parts (channel mismatch).

The edge model. Without a diode both edges are the textbook single-time-constant form
    t = (R + Rout)(C + Cin + Cstray) ln(|Vfinal - Vstart| / |Vfinal - Vth|).
With one, both edges come from the charge integral (`diode_edge_delay`): the diode's own SPICE
law (forward on the bypassed edge, leakage on the other) and its junction charge, integrated
over the node voltage by Gauss-Legendre quadrature, with no time-stepping. Why not the textbook
two-slope form on the bypassed edge (fast through Rout + RS until within the diode's knee of the
final value, then through R)? It treats the diode as a switch, but a real diode's current falls
exponentially as the node approaches the knee, so the form underestimates the bypassed edge
(2.51 ns against 4.26 ns simulated for 4.7k / 100p, 1.28 against 2.23 ns in the gan-buck
example), and the dead time of the pair - one channel's slow edge minus the other's bypassed
edge - comes out too long: the unsafe direction. The charge integral matches the transient and
ngspice within 0.01 % without junction capacitance; with it the bypassed edge is bounded from
above (0 to 9 % slow) and the resistor edge is at most 0.25 % fast, so both errors shorten the
dead time. It is vectorised like the closed form, so the corners and the Monte Carlo use it
directly (about 10 us per sample for both edges of both channels: `gapforge build` keeps to
0.5 s); the transient itself (simulate.py, milliseconds per edge) would not fit there. The
textbook forms stay available (`channel_edge_delays(textbook=True)`) for display only.
tests/test_analog_model.py holds the model to ngspice's recorded results and checks, over a
grid of networks (1.8 / 3.3 / 5 V, small and large R and C, both orientations, 27 and 125 C),
that the dead-time range always contains the simulated one. `gapforge analog --simulate` warns
loudly when model and simulation still differ by more than --model-warn on any edge.

`reference_findings` gives the one-line warnings every output built from the network repeats
(`analog` prints the same lines and exits 1 on the first two): a dead time whose worst-case
minimum is <= 0 (the network itself can shoot through), diode leakage taking more than a share
of a slow edge at the hottest temperature (`slow_edge_leakage`: the charge integral with and
without the leakage, typical parts, a few milliseconds; it agrees with the transient within 1 %),
and a bypassed edge whose threshold lies inside the diode's knee.

Every parameter is a `Band` (min/typ/max); the same table of parameters (`PARAMETERS`) feeds the
design file's `[reference]` section and the `gapforge analog` options, so they cannot drift apart.
numpy is imported only inside the functions that evaluate arrays.

Contributor rules: frozen dataclasses for values, no global mutable state, floats only for
physics; the ranges handed to the fit are Fractions rounded to the safe side.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, replace
from fractions import Fraction
from typing import TYPE_CHECKING, Any

from gapforge import caution
from gapforge.errors import GapforgeError
from gapforge.quantities import (
    format_quantity,
    format_tolerance,
    parse_quantity,
    parse_tolerance,
    picoseconds_ceil,
    picoseconds_floor,
    picoseconds_nearest,
)

if TYPE_CHECKING:
    import numpy as np
    import numpy.typing as npt

    from gapforge.schema import Table

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


@dataclass(frozen=True)
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


@dataclass(frozen=True)
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


@dataclass(frozen=True)
class LevelBand:
    min: Level
    typ: Level
    max: Level

    def levels(self) -> tuple[Level, Level, Level]:
        return self.min, self.typ, self.max


@dataclass(frozen=True)
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
# The default bypass diode: an invented generic small-signal silicon diode (not any real part).
DEFAULT_DIODE_TEXT = "IS=4n N=1.9 RS=0.6 CJO=1.5p VJ=0.7 M=0.4 EG=1.11 XTI=3 BV=75"

_DIODE_KEYS: dict[str, tuple[str, str, bool]] = {
    # key: (attribute, unit, allow_negative)
    "IS": ("is_", "A", False),
    "N": ("n", "", False),
    "RS": ("rs", "ohm", False),
    "CJO": ("cjo", "F", False),
    "CJ0": ("cjo", "F", False),
    "VJ": ("vj", "V", False),
    "M": ("m", "", False),
    "EG": ("eg", "", False),
    "XTI": ("xti", "", False),
    "TNOM": ("tnom", "", True),
    "BV": ("bv", "V", False),
    "FC": ("fc", "", False),
}


def parse_diode(text: object, where: str) -> DiodeModel:
    """'IS=1e-6 N=1.05 RS=1 CJO=20p VJ=0.4 M=0.5': SPICE diode parameters, defaults for the rest."""
    if not isinstance(text, str):
        raise GapforgeError(f"expected diode parameters such as 'IS=1n N=1.8', got {text!r}", where)
    values: dict[str, float] = {}
    for token in text.replace(",", " ").split():
        if "=" not in token:
            raise GapforgeError(f"expected NAME=value, got {token!r}", where)
        name, _, value = token.partition("=")
        key = name.strip().upper()
        if key not in _DIODE_KEYS:
            known = ", ".join(k for k in _DIODE_KEYS if k != "CJ0")
            raise GapforgeError(
                f"unknown diode parameter {name!r} (expected one of: {known})", where
            )
        attr, unit, negative = _DIODE_KEYS[key]
        allow_zero = attr in ("rs", "cjo", "xti", "tnom")
        value = value.strip()
        if attr == "tnom" and value[-1:].upper() == "C":
            value = value[:-1]
        number = parse_quantity(value, unit, where, allow_zero=allow_zero, allow_negative=negative)
        values[attr] = float(number)
    model = replace(SPICE_DIODE_DEFAULTS, **values)
    if not 0.0 < model.m < 1.0:
        raise GapforgeError(f"diode M={model.m:g} must lie between 0 and 1", where)
    if not 0.0 <= model.fc < 1.0:
        raise GapforgeError(f"diode FC={model.fc:g} must lie in 0..1", where)
    return model


@dataclass(frozen=True)
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
    vf: Band | None  # V, closed-form knee; None = derived from the diode model
    vt_plus: LevelBand
    vt_minus: LevelBand
    schmitt_delay: Band  # s
    output_inverter: bool
    inverter_delay: Band  # s, the output inverter and the pair's input inverter
    temp: Band  # degrees C
    defaults: tuple[str, ...] = ()  # parameter names left at their default

    def r_band(self) -> Band:
        return Band(self.r * (1 - self.r_tol), self.r, self.r * (1 + self.r_tol))

    def c_band(self) -> Band:
        return Band(self.c * (1 - self.c_tol), self.c, self.c * (1 + self.c_tol))

    def slow_edges(self) -> tuple[str, ...]:
        """The input edges that go through R (the delaying edges)."""
        return tuple(e for e in EDGES if e != self.bypass)


@dataclass(frozen=True)
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
        if not math.isfinite(value):
            raise GapforgeError(f"the network gives a non-finite delay ({value})", "reference")
    return EdgeRange(
        Fraction(picoseconds_floor(Fraction(lo)), 10**12),
        Fraction(picoseconds_nearest(Fraction(typ)), 10**12),
        Fraction(picoseconds_ceil(Fraction(hi)), 10**12),
        Fraction(picoseconds_ceil(Fraction(lo)), 10**12),
        Fraction(picoseconds_floor(Fraction(hi)), 10**12),
    )


# --------------------------------------------------------------------------------------------
# The parameter table shared by the design file and the CLI


@dataclass(frozen=True)
class Parameter:
    name: str  # design-file key; the CLI option is --name with '_' -> '-'
    kind: str  # band | value | tolerance | tempco | level | choice | diode | flag
    unit: str
    default: str | None  # None = required
    help: str
    source: str = ""  # where the default comes from


PARAMETERS: tuple[Parameter, ...] = (
    Parameter(
        "vdd",
        "band",
        "V",
        "3.0:3.3:3.6",
        "driver and Schmitt supply, min:typ:max",
        "JESD8C.01 3.3 V supply range",
    ),
    Parameter(
        "rout",
        "band",
        "ohm",
        "15:25:50",
        "driver output resistance",
        "common practice for CMOS logic outputs, from memory",
    ),
    Parameter(
        "driver_delay",
        "band",
        "s",
        "0",
        "driver propagation delay (enter the part's)",
        "none: enter the driver's data",
    ),
    Parameter("r", "value", "ohm", None, "timing resistor"),
    Parameter("r_tol", "tolerance", "", "1%", "resistor tolerance", "E96 usual tolerance"),
    Parameter(
        "r_tempco",
        "tempco",
        "",
        "100ppm",
        "resistor temperature coefficient, +/- per K",
        "common practice for thick-film resistors",
    ),
    Parameter("c", "value", "F", None, "timing capacitor"),
    Parameter("c_tol", "tolerance", "", "5%", "capacitor tolerance", "common practice"),
    Parameter(
        "c_tempco",
        "tempco",
        "",
        "30ppm",
        "capacitor temperature coefficient, +/- per K",
        "EIA-198 C0G",
    ),
    Parameter(
        "cin", "band", "F", "3p:5p:8p", "Schmitt input capacitance", "common practice, from memory"
    ),
    Parameter(
        "cstray",
        "band",
        "F",
        "1p:2p:3p",
        "stray capacitance at the node",
        "common practice, from memory",
    ),
    Parameter(
        "bypass", "choice", "", "falling", "input edge the diode bypasses: rising|falling|none"
    ),
    Parameter(
        "diode",
        "diode",
        "",
        DEFAULT_DIODE_TEXT,
        "SPICE diode parameters",
        "invented generic small-signal silicon diode; SPICE defaults for the rest",
    ),
    Parameter(
        "vf",
        "band",
        "V",
        "",
        "diode knee voltage: the diode's IS is set so it carries R's current at this voltage",
        "derived from the diode model: where its current equals the resistor's",
    ),
    Parameter(
        "vt_plus",
        "level",
        "V",
        "50%:60%:70%",
        "Schmitt VT+ (volts, or % / 'vdd' of VDD)",
        "common practice for CMOS Schmitt inputs",
    ),
    Parameter(
        "vt_minus",
        "level",
        "V",
        "30%:40%:50%",
        "Schmitt VT- (volts, or % / 'vdd' of VDD)",
        "common practice for CMOS Schmitt inputs",
    ),
    Parameter(
        "schmitt_delay",
        "band",
        "s",
        "0",
        "Schmitt buffer propagation delay (enter the part's)",
        "none: enter the buffer's data",
    ),
    Parameter("output_inverter", "flag", "", "false", "an inverter follows the Schmitt buffer"),
    Parameter(
        "inverter_delay",
        "band",
        "s",
        "0",
        "inverter propagation delay (output and pair)",
        "none: enter the inverter's data",
    ),
    Parameter(
        "temp",
        "band",
        "C",
        "-40:25:125",
        "ambient temperature, min:typ:max in C",
        "common practice industrial range",
    ),
)
PARAMETER_NAMES = frozenset(p.name for p in PARAMETERS)

# Threshold presets from the JEDEC interface standards (reference-facts: JESD8C.01, JESD8-5,
# JESD8-7; values from memory, corroborated by public tables). A Schmitt input meeting a standard
# has VT+ <= VIH min and VT- >= VIL max; the other ends are common practice (0.5 / 0.5 VDD).
LEVEL_PRESETS: dict[str, dict[str, str]] = {
    "jedec-3v3": {"vdd": "3.0:3.3:3.6", "vt_plus": "50%:55%:2.0V", "vt_minus": "0.8V:40%:50%"},
    "jedec-2v5": {"vdd": "2.3:2.5:2.7", "vt_plus": "50%:55%:1.7V", "vt_minus": "0.7V:40%:50%"},
    "jedec-1v8": {"vdd": "1.65:1.8:1.95", "vt_plus": "50%:55%:65%", "vt_minus": "35%:40%:50%"},
}


def parameter(name: str) -> Parameter:
    for p in PARAMETERS:
        if p.name == name:
            return p
    raise KeyError(name)


def _parse_band(text: object, unit: str, where: str, *, allow_zero: bool, negative: bool) -> Band:
    if isinstance(text, list):
        parts: list[object] = list(text)
    elif isinstance(text, str):
        parts = [s for s in text.split(":")]
    else:
        parts = [text]
    if len(parts) == 1:
        parts = parts * 3
    if len(parts) != 3:
        raise GapforgeError(f"expected one value or min:typ:max, got {text!r}", where)
    values = []
    for part in parts:
        if isinstance(part, str) and unit == "C":
            part = part.strip().removesuffix("C").removesuffix("\u00b0").strip()
            values.append(parse_quantity(part, "", where, allow_zero=True, allow_negative=True))
        else:
            values.append(
                parse_quantity(part, unit, where, allow_zero=allow_zero, allow_negative=negative)
            )
    lo, typ, hi = values
    if not lo <= typ <= hi:
        raise GapforgeError(f"{text!r}: expected min <= typ <= max", where)
    return Band(lo, typ, hi)


def _parse_level(text: object, where: str) -> Level:
    if isinstance(text, str):
        s = text.strip()
        low = s.lower()
        if s.endswith("%"):
            return Level(parse_quantity(s[:-1], "", where) / 100, True)
        if low.endswith("vdd"):
            head = s[:-3].strip().rstrip("*").strip()
            return Level(parse_quantity(head or "1", "", where), True)
    return Level(parse_quantity(text, "V", where), False)


def _parse_level_band(text: object, where: str) -> LevelBand:
    if isinstance(text, list):
        parts: list[object] = list(text)
    elif isinstance(text, str):
        parts = list(text.split(":"))
    else:
        parts = [text]
    if len(parts) == 1:
        parts = parts * 3
    if len(parts) != 3:
        raise GapforgeError(f"expected one threshold or min:typ:max, got {text!r}", where)
    a, b, c = (_parse_level(p, where) for p in parts)
    return LevelBand(a, b, c)


def _parse_flag(text: object, where: str) -> bool:
    if isinstance(text, bool):
        return text
    if isinstance(text, str) and text.strip().lower() in ("true", "yes", "1", "on"):
        return True
    if isinstance(text, str) and text.strip().lower() in ("false", "no", "0", "off"):
        return False
    raise GapforgeError(f"expected true or false, got {text!r}", where)


def build_network(
    raw: Mapping[str, object], problem: Callable[[str, str], None]
) -> ReferenceNetwork:
    """A network from raw values (strings, TOML values) keyed by parameter name.

    Every problem is passed to `problem(name, message)`; a default stands in for a bad value so
    the remaining checks still run. `levels` (a JEDEC preset name) fills vdd and the thresholds
    unless they are given.
    """
    values: dict[str, object] = dict(raw)
    preset = values.pop("levels", None)
    if preset is not None:
        if not isinstance(preset, str) or preset not in LEVEL_PRESETS:
            problem("levels", f"{preset!r} is not one of {', '.join(LEVEL_PRESETS)}")
        else:
            for key, preset_text in LEVEL_PRESETS[preset].items():
                values.setdefault(key, preset_text)
    defaults: list[str] = []
    parsed: dict[str, Any] = {}
    for p in PARAMETERS:
        given = p.name in values and values[p.name] is not None
        text: object = values[p.name] if given else p.default
        if not given:
            defaults.append(p.name)
        if text is None:
            problem(p.name, "required value is missing")
            parsed[p.name] = Fraction(1)
            continue
        try:
            parsed[p.name] = _parse_one(p, text)
        except GapforgeError as exc:
            problem(p.name, exc.message)
            parsed[p.name] = _parse_one(p, p.default) if p.default is not None else Fraction(1)
    net = ReferenceNetwork(**parsed, defaults=tuple(defaults))
    for name, message in check_network(net):
        problem(name, message)
    return net


def _parse_one(p: Parameter, text: object) -> Any:
    where = p.name
    if p.kind == "band":
        if p.name == "vf" and text == "":
            return None
        zero_ok = p.unit in ("s",) or p.name in ("cin", "cstray")
        return _parse_band(text, p.unit, where, allow_zero=zero_ok, negative=p.unit == "C")
    if p.kind == "value":
        return parse_quantity(text, p.unit, where)
    if p.kind == "tolerance":
        return parse_tolerance(text, where)
    if p.kind == "tempco":
        if isinstance(text, str) and text.strip().lower().endswith("/k"):
            text = text.strip()[:-2]
        return parse_tolerance(text, where, limit=Fraction(1, 100))
    if p.kind == "level":
        return _parse_level_band(text, where)
    if p.kind == "choice":
        if text not in BYPASS_CHOICES:
            raise GapforgeError(f"{text!r} is not one of {', '.join(BYPASS_CHOICES)}", where)
        return text
    if p.kind == "diode":
        return parse_diode(text, where)
    if p.kind == "flag":
        return _parse_flag(text, where)
    raise AssertionError(p.kind)


def check_network(net: ReferenceNetwork) -> list[tuple[str, str]]:
    """Cross-parameter checks: thresholds inside 0..VDD and VT- <= VT+ at every supply corner."""
    problems: list[tuple[str, str]] = []
    for vdd in sorted(set(net.vdd.floats())):
        for name, band in (("vt_plus", net.vt_plus), ("vt_minus", net.vt_minus)):
            volts = [lv.volts(vdd) for lv in band.levels()]
            if any(not 0.0 < v < vdd for v in volts):
                problems.append((name, f"threshold outside 0..VDD at VDD = {vdd:g} V"))
                return problems
            if not volts[0] <= volts[1] <= volts[2]:
                problems.append((name, f"expected min <= typ <= max at VDD = {vdd:g} V"))
                return problems
        plus = [lv.volts(vdd) for lv in net.vt_plus.levels()]
        minus = [lv.volts(vdd) for lv in net.vt_minus.levels()]
        if any(m > p for m, p in zip(minus, plus, strict=True)):
            problems.append(("vt_minus", f"VT- above VT+ at VDD = {vdd:g} V"))
            return problems
    lo_c, hi_c = TEMP_RANGE_C
    if not (lo_c <= net.temp.min and net.temp.max <= hi_c):
        problems.append(("temp", f"temperature outside {lo_c:g}..{hi_c:g} C, the range the model "
                                 "holds over"))
        return problems
    d = net.diode
    if not lo_c <= d.tnom <= hi_c:
        problems.append(("diode", f"TNOM={d.tnom:g} outside {lo_c:g}..{hi_c:g} C"))
        return problems
    for key, value, (low, high) in (("IS", d.is_, DIODE_IS_RANGE), ("N", d.n, DIODE_N_RANGE),
                                    ("EG", d.eg, DIODE_EG_RANGE), ("XTI", d.xti, (0.0, 10.0))):
        if not low <= value <= high:
            problems.append(("diode", f"{key}={value:g} outside {low:g}..{high:g}"))
            return problems
    if d.cjo > 0.0:
        vj_hot = _junction_potential(d, float(net.temp.max))
        if vj_hot <= 0.05:  # the depletion-charge formula divides by VJ(T)
            problems.append(("diode", f"the junction potential VJ={d.vj:g} V falls to "
                                      f"{vj_hot:.3g} V (at most 50 mV) at "
                                      f"{float(net.temp.max):g} C (SPICE temperature scaling): "
                                      "give a larger VJ"))
            return problems
    if net.diode.bv is not None and net.diode.bv <= float(net.vdd.max):
        problems.append(("diode", f"BV={net.diode.bv:g} V must exceed the largest VDD"))
    if net.vf is not None and net.vf.min <= 0:
        problems.append(("vf", "the knee voltage must be greater than zero"))
    return problems


def _junction_potential(diode: DiodeModel, temp_c: float) -> float:
    """VJ at a temperature (the SPICE scaling; it falls with temperature). No numpy here:
    reading a design must not import it."""
    from gapforge.simulate import junction

    return junction(diode, temp_c).vj


def read_reference(table: Table) -> ReferenceNetwork:
    """A design file's `[reference]` table; problems go to the table's Reader, never raised."""
    allowed = set(PARAMETER_NAMES) | {"levels"}
    table.check_keys(allowed, required={"r", "c"})
    raw = {k: v for k, v in table.data.items() if k in allowed}
    reported: set[str] = set()

    def problem(name: str, message: str) -> None:
        if name in ("r", "c") and name not in table.data:
            return  # already reported by check_keys as missing
        if name not in reported:
            reported.add(name)
            table.reader.problem(table.key_path(name), message)

    return build_network(raw, problem)


def network_from_options(raw: Mapping[str, object]) -> ReferenceNetwork:
    """A network from command-line values; the first problem raises, located at its option."""
    problems: list[tuple[str, str]] = []
    net = build_network(raw, lambda name, message: problems.append((name, message)))
    if problems:
        name, message = problems[0]
        raise GapforgeError(message, "--" + name.replace("_", "-"))
    return net


# --------------------------------------------------------------------------------------------
# Closed forms


def diode_knee_voltage(diode: DiodeModel, r_ohm: float, temp_c: float) -> float:
    """The forward voltage at which the diode carries as much current as R at the same voltage.

    Solves IS(T) (exp(v / (N VT)) - 1) = v / R by fixed-point iteration. Below this voltage R
    carries the charge; above it the diode does. 0 when the diode's zero-bias conductance already
    exceeds 1/R (a leaky diode shunts R entirely).
    """
    import numpy as np

    value = knee_voltage_array(
        diode, np.asarray([r_ohm], dtype=float), np.asarray([temp_c], dtype=float)
    )
    return float(value[0])


def knee_voltage_array(diode: DiodeModel, r_ohm: FloatArray, temp_c: FloatArray) -> FloatArray:
    """Vectorised knee voltage: root of v = N VT ln(1 + v / (R IS(T))) (0 if none above 0)."""
    import numpy as np

    t = temp_c + ZERO_CELSIUS
    tn = diode.tnom + ZERO_CELSIUS
    vte = diode.n * K_OVER_Q * t
    sat = diode.is_ * np.exp((t / tn - 1.0) * diode.eg / vte + diode.xti / diode.n * np.log(t / tn))
    return _knee(r_ohm * sat, vte)


def _knee(ris: FloatArray, vte: FloatArray) -> FloatArray:
    """Root of v = vte ln(1 + v / ris) above 0 (0 if none): ris = R IS, vte = N kT/q."""
    import numpy as np

    # g(v) = v - vte ln(1 + v/ris) is convex; one fixed-point step from 2 V lands right of the
    # root, from where Newton converges monotonically.
    v = vte * np.log1p(2.0 / ris)
    for _ in range(12):
        v = v - (v - vte * np.log1p(v / ris)) / (1.0 - vte / (ris + v))
    result: FloatArray = np.where(vte <= ris, 0.0, np.maximum(v, 0.0))
    return result


def node_delay(
    edge_bypassed: FloatArray | bool,
    span: FloatArray,
    distance: FloatArray,
    tau_slow: FloatArray,
    tau_fast: FloatArray,
    knee: FloatArray,
) -> FloatArray:
    """Node delay from an ideal input step to the threshold crossing (no propagation delays).

    span = |Vfinal - Vstart|, distance = |Vfinal - Vth|. On the resistor edge
    t = tau_slow ln(span / distance). On the bypassed edge the node moves with tau_fast until it is
    within `knee` of the final value, then with tau_slow.
    """
    import numpy as np

    slow: FloatArray = tau_slow * np.log(span / distance)
    if edge_bypassed is False:
        return slow
    k = np.minimum(knee, span)
    inside = distance >= k
    safe_k = np.maximum(k, 1e-300)
    fast_direct = tau_fast * np.log(span / distance)
    fast_then_slow = tau_fast * np.log(span / safe_k) + tau_slow * np.log(safe_k / distance)
    bypassed: FloatArray = np.where(inside, fast_direct, fast_then_slow)
    if edge_bypassed is True:
        return bypassed
    result: FloatArray = np.where(edge_bypassed, bypassed, slow)
    return result


# --------------------------------------------------------------------------------------------
# The diode edges: the quasi-static charge integral

GMIN = 1e-12  # S across the junction, as circuit simulators (and simulate.py) add it
_REF_K = 300.15  # K, reference temperature of the SPICE junction-potential scaling
_BOLTZMANN = 1.380649e-23
_CHARGE = 1.602176634e-19
_BLOCK = 16_384  # samples per block of the charge integral
QUADRATURE_NODES = 8  # Gauss-Legendre nodes per panel; tests hold it to 1e-4 of a fine sum


@dataclass(frozen=True, eq=False)
class JunctionArrays:
    """A diode's temperature-adjusted SPICE level-1 parameters, one value per sample."""

    sat: FloatArray  # A
    vte: FloatArray  # N kT/q, V
    cj: FloatArray  # F
    vj: FloatArray  # V
    fc_v: FloatArray  # FC * VJ(T)
    f1: FloatArray
    f2: float
    f3: float
    m: float


def _depletion(
    vd: FloatArray, cj: FloatArray, vj: FloatArray, fc_v: FloatArray, f1: FloatArray,
    j: JunctionArrays,
) -> tuple[FloatArray, FloatArray]:
    """SPICE depletion charge and capacitance at junction voltage vd (linear beyond FC * VJ)."""
    import numpy as np

    m = j.m
    below = vd < fc_v
    arg = np.maximum(1.0 - vd / vj, 1.0 - fc_v / vj)  # > 0: the network check keeps VJ(T) > 0
    s = np.exp(-m * np.log(arg)) if below.any() else np.ones_like(arg)
    c2 = cj / j.f2
    q = np.where(
        below,
        vj * cj * (1.0 - arg * s) / (1.0 - m),
        cj * f1 + c2 * (j.f3 * (vd - fc_v) + m / (2.0 * vj) * (vd * vd - fc_v * fc_v)),
    )
    c = np.where(below, cj * s, c2 * (j.f3 + m * vd / vj))
    return q, c


def _gap_term(temp_k: FloatArray) -> FloatArray:
    """SPICE's band-gap term of the junction potential versus temperature (silicon)."""
    import numpy as np

    egfet = 1.16 - (7.02e-4 * temp_k * temp_k) / (temp_k + 1108.0)
    arg = -egfet / (2.0 * _BOLTZMANN * temp_k) + 1.1150877 / (_BOLTZMANN * 2.0 * _REF_K)
    result: FloatArray = -2.0 * (K_OVER_Q * temp_k) * (
        1.5 * np.log(temp_k / _REF_K) + _CHARGE * arg
    )
    return result


def junction_arrays(diode: DiodeModel, temp_c: FloatArray) -> JunctionArrays:
    """The SPICE level-1 temperature scaling of IS, CJO and VJ, vectorised over samples."""
    import numpy as np

    t = np.asarray(temp_c, dtype=float) + ZERO_CELSIUS
    tn = diode.tnom + ZERO_CELSIUS
    vte = diode.n * K_OVER_Q * t
    sat = diode.is_ * np.exp((t / tn - 1.0) * diode.eg / vte + diode.xti / diode.n * np.log(t / tn))
    tn_arr = np.asarray(tn, dtype=float)
    pbo = (diode.vj - _gap_term(tn_arr)) / (tn / _REF_K)
    gma_old = (diode.vj - pbo) / pbo
    cj0 = diode.cjo / (1.0 + diode.m * (400e-6 * (tn - _REF_K) - gma_old))
    vj = _gap_term(t) + (t / _REF_K) * pbo
    gma_new = (vj - pbo) / pbo
    cj = cj0 * (1.0 + diode.m * (400e-6 * (t - _REF_K) - gma_new))
    fc = diode.fc
    if fc > 0.0:
        vj = np.minimum(vj, 1.0 / fc)
    xfc = math.log(1.0 - fc)
    f1 = vj * (1.0 - math.exp((1.0 - diode.m) * xfc)) / (1.0 - diode.m)
    f2 = math.exp((1.0 + diode.m) * xfc)
    f3 = 1.0 - fc * (1.0 + diode.m)
    return JunctionArrays(sat, vte, cj, vj, fc * vj, f1, f2, f3, diode.m)


def knee_saturation_current(knee: FloatArray, r_ohm: FloatArray, vte: FloatArray) -> FloatArray:
    """The saturation current whose diode carries as much current as R at `knee` volts."""
    import numpy as np

    with np.errstate(over="ignore"):
        result: FloatArray = knee / (r_ohm * np.expm1(knee / vte))
    return result


def diode_edge_delay(
    diode: DiodeModel,
    forward: bool,
    span: FloatArray,
    distance: FloatArray,
    r: FloatArray,
    rout: FloatArray,
    c_node: FloatArray,
    temp_c: FloatArray,
    sat: FloatArray | None = None,
) -> FloatArray:
    """Node delay of an edge with the diode across R, by the quasi-static charge integral.

    The driver (Rout) feeds R in parallel with the diode (its series RS inside) into the node
    capacitance; the diode conducts forward on the bypassed edge (`forward`) and leaks in
    reverse on the resistor edge. With x the voltage across the diode's junction (forward) or
    across R (reverse), everything is explicit in x: the current i(x) through R and the diode,
    the node's distance D(x) = x + RS Id + Rout i from its final value, and the junction's
    depletion charge Q(x). Charge conservation at the node, C dD + dQ = -i dt, gives

        t = integral from x_th to x_1 of (C D'(x) + Q'(x)) / i(x) dx,    D(x_th) = |Vfinal - Vth|

    by Gauss-Legendre quadrature in ln x, with no time-stepping and exact for an RC with an
    ideal diode (then i = x / R, D = x (1 + Rout / R): t = (R + Rout) C ln(span / d)).

    The start x_1: on the resistor edge, the state just after the input step, when the junction
    capacitance has shared its charge with C: C (span - D(x_1)) = Q(x_1); that matches the
    transient (and ngspice) to 0.25 %, a shade fast. On the bypassed edge the sharing takes
    time (the driver node charges through Rout), so the integral starts from the full step,
    D(x_1) = span, and counts the junction capacitance as more node capacitance without its
    coupling: a bound from above, 0 to 9 % slow against ngspice over the recorded matrix, exact
    without junction capacitance. Both errors fall on the safe side of a dead time (slow edge
    minus bypassed edge).
    `sat` overrides the saturation current per sample (a knee voltage given by the user).
    Breakdown is not modelled (the network check keeps BV above every VDD).
    """
    import numpy as np

    flat = [np.ravel(a) for a in np.broadcast_arrays(
        *(np.asarray(a, dtype=float) for a in (span, distance, r, rout, c_node, temp_c))
    )]
    shape = np.broadcast_shapes(*(np.shape(a) for a in (span, distance, r, rout, c_node, temp_c)))
    span_a, distance_a, r_a, rout_a, c_a, temp_a = flat
    n = span_a.size
    if n > _BLOCK:  # in blocks: the nodes' temporaries stay in cache
        sat_flat = None if sat is None else np.ravel(np.broadcast_to(sat, shape))
        parts = []
        for k in range(0, n, _BLOCK):
            part = slice(k, k + _BLOCK)
            parts.append(diode_edge_delay(
                diode, forward, span_a[part], distance_a[part], r_a[part], rout_a[part],
                c_a[part], temp_a[part], None if sat_flat is None else sat_flat[part]))
        blocked: FloatArray = np.concatenate(parts).reshape(shape)
        return blocked
    j = junction_arrays(diode, temp_a)
    vte = np.broadcast_to(j.vte, (n,))
    sat_a = np.broadcast_to(j.sat, (n,)) if sat is None else np.ravel(np.broadcast_to(sat, shape))
    # per-sample parameters, gathered for the samples in work (rows) and broadcast over nodes
    table = (sat_a, vte, r_a, rout_a, c_a, *(np.broadcast_to(a, (n,))
                                             for a in (j.cj, j.vj, j.fc_v, j.f1)))
    rs = diode.rs
    with_charge = diode.cjo > 0.0

    def gather(rows: npt.NDArray[np.intp], column: bool) -> tuple[FloatArray, ...]:
        return tuple(a[rows][:, None] if column else a[rows] for a in table)

    def state(
        x: FloatArray, p: tuple[FloatArray, ...], charge: bool = True
    ) -> tuple[FloatArray, ...]:
        """i, D, D', Q, Q' at x (p: gathered parameters; Q, Q' zero unless `charge`)."""
        s_, v_, r_, ro, _c, cj, vj, fc_v, f1 = p
        if forward:
            e = np.exp(np.minimum(x / v_, 700.0))
            idd = s_ * (e - 1.0) + GMIN * x
            gd = s_ * e / v_ + GMIN
            vp = x + rs * idd
            vpp = 1.0 + rs * gd
        else:  # the SPICE reverse law: exponential to -3 N VT, then a cubic approach to -IS
            xc = np.maximum(x, 1e-300)
            e = np.exp(-np.minimum(x, 3.0 * v_) / v_)
            a = (3.0 * v_ / (math.e * xc)) ** 3
            small = x <= 3.0 * v_
            idd = s_ * np.where(small, 1.0 - e, 1.0 - a) + GMIN * x
            gd = np.where(small, s_ * e / v_, 3.0 * s_ * a / xc) + GMIN
            vp = x
            vpp = np.ones_like(x)
        i = vp / r_ + idd
        d = vp + ro * i
        dp = vpp + ro * (vpp / r_ + gd)
        if not (with_charge and charge):
            return i, d, dp, 0.0 * x, 0.0 * x
        q, qp = _depletion(x if forward else -x, cj, vj, fc_v, f1, j)
        return i, d, dp, (q if forward else -q), qp

    def solve(jump: bool, target: FloatArray) -> FloatArray:
        """The x where D (or C D + Q for the jump) reaches target (both increase with x).

        Newton from a bound on the side where it converges monotonically (D is convex in the
        forward junction voltage, concave in the reverse one), kept inside a bracket with a
        bisection fallback; converged samples leave the active set.
        """
        lo = np.zeros(n)
        hi = np.array(span_a, dtype=float)
        if forward:  # D >= (Rout + RS) Id(x): an upper bound of the root
            with np.errstate(divide="ignore", over="ignore"):
                x = vte * np.log1p(target / ((rout_a + rs) * sat_a))
        else:  # D <= x (1 + Rout/R + Rout g(0)), C D + Q <= x (C (...) + Cj): a lower bound
            slope = 1.0 + rout_a / r_a + rout_a * (sat_a / vte + GMIN)
            x = target / (slope * c_a + table[5]) if jump else target / slope
        x = np.where(np.isfinite(x), np.minimum(x, hi), hi)
        active = np.arange(n)
        for _ in range(100):
            xa = x[active]
            p = gather(active, False)
            _i, d, dp, q, qp = state(xa, p, jump)
            if jump:
                f, fp = p[4] * d + q - target[active], p[4] * dp + qp
            else:
                f, fp = d - target[active], dp
            lo_a = np.where(f <= 0.0, xa, lo[active])
            hi_a = np.where(f >= 0.0, xa, hi[active])
            newton = xa - f / fp
            x_new = np.where((newton >= lo_a) & (newton <= hi_a), newton, 0.5 * (lo_a + hi_a))
            lo[active], hi[active], x[active] = lo_a, hi_a, x_new
            active = active[np.abs(x_new - xa) > 1e-12 * span_a[active]]
            if active.size == 0:
                break
        return x

    x_th = solve(False, distance_a)
    # the bypassed edge starts from the full step (the junction capacitance counted as more
    # node capacitance, its coupling ignored: a bound from above); the resistor edge starts
    # after the junction capacitance shared its charge with C (close, and a shade fast)
    x_1 = solve(False, span_a) if forward else solve(True, c_a * span_a)
    result = np.zeros(n)
    live = np.flatnonzero(x_1 > x_th)
    if live.size == 0:
        return result.reshape(shape)
    lo_x, hi_x = x_th[live], x_1[live]
    # Below the diode's knee R carries the current and the integrand goes as 1/x: integrate in
    # ln x. Above it the diode does and the integrand is smooth in x itself: integrate in x.
    if forward:
        with np.errstate(divide="ignore", over="ignore"):
            knee = np.clip(_knee(r_a[live] * sat_a[live], vte[live]), lo_x, hi_x)
    else:
        knee = hi_x
    nodes, weights = np.polynomial.legendre.leggauss(QUADRATURE_NODES)

    def panel(rows: npt.NDArray[np.intp], a: FloatArray, b: FloatArray, log: bool) -> FloatArray:
        half = 0.5 * (b - a)
        u = (a + half)[:, None] + half[:, None] * nodes[None, :]
        x = np.exp(u) if log else u
        p = gather(rows, True)
        i, _d, dp, _q, qp = state(x, p)
        integrand = (p[4] * dp + qp) / i
        if log:
            integrand *= x
        total: FloatArray = half * (integrand @ weights)
        return total

    result[live] = panel(live, np.log(lo_x), np.log(knee), True)
    upper = np.flatnonzero(hi_x > knee)
    if upper.size:
        result[live[upper]] += panel(live[upper], knee[upper], hi_x[upper], False)
    out: FloatArray = result.reshape(shape)
    return out


# Monte Carlo samples that check the corners of `reference_dead_times` (used by every build; the
# charge integral costs about 10 us per sample for both channels, and `analog` checks 20,000).
REFERENCE_CHECK_SAMPLES = 5_000

# The per-channel random parameters (names used by corners, RSS and Monte Carlo).
CHANNEL_PARAMS = (
    "rout",
    "driver_delay",
    "r",
    "c",
    "r_tc",
    "c_tc",
    "cin",
    "cstray",
    "vf",
    "vt_plus",
    "vt_minus",
    "schmitt_delay",
    "inverter_delay",
)
SHARED_PARAMS = ("vdd", "temp", "pair_inverter_delay")
# The additive propagation delays (their extremes are their band ends, no corners needed).
DELAY_PARAMS = ("driver_delay", "schmitt_delay", "inverter_delay")


def parameter_bands(net: ReferenceNetwork) -> dict[str, tuple[float, float, float]]:
    """min/typ/max of every random parameter as floats (thresholds: see `values_at`)."""
    bands: dict[str, tuple[float, float, float]] = {
        "vdd": net.vdd.floats(),
        "temp": net.temp.floats(),
        "pair_inverter_delay": net.inverter_delay.floats(),
        "rout": net.rout.floats(),
        "driver_delay": net.driver_delay.floats(),
        "r": net.r_band().floats(),
        "c": net.c_band().floats(),
        "r_tc": (-float(net.r_tempco), 0.0, float(net.r_tempco)),
        "c_tc": (-float(net.c_tempco), 0.0, float(net.c_tempco)),
        "cin": net.cin.floats(),
        "cstray": net.cstray.floats(),
        "vf": net.vf.floats() if net.vf is not None else (0.0, 0.0, 0.0),
        "vt_plus": (0.0, 0.5, 1.0),
        "vt_minus": (0.0, 0.5, 1.0),
        "schmitt_delay": net.schmitt_delay.floats(),
        "inverter_delay": net.inverter_delay.floats() if net.output_inverter else (0.0, 0.0, 0.0),
    }
    return bands


def spread_parameters(net: ReferenceNetwork) -> list[str]:
    """The parameters whose band is not a single value (the ones that vary)."""
    bands = parameter_bands(net)
    names = [k for k, (lo, _, hi) in bands.items() if lo != hi]
    for key, band in (("vt_plus", net.vt_plus), ("vt_minus", net.vt_minus)):
        if band.min == band.typ == band.max and key in names:
            names.remove(key)
    if net.temp.min == net.temp.max:
        names = [n for n in names if n not in ("r_tc", "c_tc")]
    return names


def _through(position: FloatArray, lo: float, typ: float, hi: float) -> FloatArray:
    """Piecewise linear through (0, lo), (0.5, typ), (1, hi), extrapolated beyond."""
    import numpy as np

    result: FloatArray = np.where(
        position <= 0.5,
        lo + (typ - lo) * (position * 2.0),
        typ + (hi - typ) * (position * 2.0 - 1.0),
    )
    return result


def values_at(net: ReferenceNetwork, positions: Mapping[str, FloatArray]) -> dict[str, FloatArray]:
    """Physical values from positions: 0 = min, 0.5 = typ, 1 = max of each parameter's band.

    Thresholds are mapped at the sample's own VDD (a threshold given as a fraction of VDD moves
    with the supply). Parameters absent from `positions` take their typical value.
    """
    import numpy as np

    bands = parameter_bands(net)
    shape = np.broadcast_shapes(*(np.shape(v) for v in positions.values())) if positions else (1,)
    out: dict[str, FloatArray] = {}
    for name, (lo, typ, hi) in bands.items():
        if name in ("vt_plus", "vt_minus"):
            continue
        pos = positions.get(name)
        if pos is None or lo == hi:
            out[name] = np.asarray(typ, dtype=float)  # a constant broadcasts (cheaper than full)
        else:
            out[name] = np.broadcast_to(_through(np.asarray(pos, dtype=float), lo, typ, hi), shape)
    vdd = out["vdd"]
    for name, band in (("vt_plus", net.vt_plus), ("vt_minus", net.vt_minus)):
        lo_v, typ_v, hi_v = (
            vdd * float(lv.value) if lv.relative else np.full(shape, float(lv.value))
            for lv in band.levels()
        )
        pos = np.broadcast_to(np.asarray(positions.get(name, 0.5), dtype=float), shape)
        out[name] = np.where(
            pos <= 0.5,
            lo_v + (typ_v - lo_v) * (pos * 2.0),
            typ_v + (hi_v - typ_v) * (pos * 2.0 - 1.0),
        )
    return out


def channel_edge_delays(
    net: ReferenceNetwork,
    v: Mapping[str, FloatArray],
    edges: tuple[str, ...] = EDGES,
    *,
    textbook: bool = False,
) -> dict[str, FloatArray]:
    """Per input edge: the node delay and the channel delay (input edge to output edge).

    `v` maps every name in CHANNEL_PARAMS and 'vdd', 'temp' to physical values (thresholds in
    volts), arrays or 0-d constants that broadcast. Returns arrays keyed 'node_<edge>' (ideal
    step to threshold crossing) and '<edge>' (plus driver, Schmitt and output-inverter delays).

    Without a diode both edges are the RC closed form. With one, both edges come from the
    charge integral (`diode_edge_delay`): forward on the bypassed edge, leaking on the other.
    `textbook=True` gives the textbook closed forms instead (RC, and the two-slope knee
    approximation on the bypassed edge), for display only: the knee approximation underestimates
    the bypassed edge, i.e. overestimates the dead time, so no range is built from it.
    """
    import numpy as np

    # in-place arithmetic: fewer fresh temporaries keeps a 1M-sample evaluation near the bare
    # expression's speed
    dt = v["temp"] - REFERENCE_TEMP_C
    r = v["r_tc"] * dt
    r += 1.0
    r *= v["r"]
    c_total = v["c_tc"] * dt
    c_total += 1.0
    c_total *= v["c"]
    c_total += v["cin"]
    c_total += v["cstray"]
    vdd = v["vdd"]
    fixed = v["driver_delay"] + v["schmitt_delay"]
    if net.output_inverter:
        fixed += v["inverter_delay"]
    sat: FloatArray | None = None
    if net.vf is not None and net.bypass != "none" and not textbook:
        t_k = v["temp"] + ZERO_CELSIUS
        sat = knee_saturation_current(v["vf"], r, net.diode.n * K_OVER_Q * t_k)
    out: dict[str, FloatArray] = {}
    for edge in edges:
        distance = vdd - v["vt_plus"] if edge == "rising" else v["vt_minus"]
        if net.bypass == "none" or (textbook and net.bypass != edge):
            tau_slow = r + v["rout"]
            tau_slow *= c_total
            node = np.divide(vdd, distance)
            np.log(node, out=node)
            node *= tau_slow
        elif textbook:
            rs = net.diode.rs
            tau_slow = (r + v["rout"]) * c_total
            tau_fast = (v["rout"] + (rs * r / (rs + r) if rs > 0 else 0.0)) * c_total
            knee = v["vf"] if net.vf is not None else knee_voltage_array(net.diode, r, v["temp"])
            node = node_delay(True, vdd, distance, tau_slow, tau_fast, knee)
        else:
            node = diode_edge_delay(net.diode, net.bypass == edge, vdd, distance, r, v["rout"],
                                    c_total, v["temp"], sat)
        out["node_" + edge] = node
        constant_zero = np.ndim(fixed) == 0 and float(fixed) == 0.0
        out[edge] = node if constant_zero else fixed + node
    return out


def pair_roles(net: ReferenceNetwork) -> dict[str, tuple[str, str]]:
    """For each dead time, (input edge of the high channel, input edge of the low channel).

    The high channel sees the PWM input, the low channel its inverse. A dead time is the turn-on
    of one output minus the turn-off of the other on the same PWM edge. The high output turns on
    on the PWM edge that makes its channel output rise.
    """
    rise_on = "falling" if net.output_inverter else "rising"  # channel input edge that turns on
    other = {"rising": "falling", "falling": "rising"}
    # to_high: the high channel's input edge is its turn-on edge; the low channel sees the other.
    return {
        "to_high": (rise_on, other[rise_on]),
        "to_low": (other[rise_on], rise_on),
    }


def pair_dead_times(
    net: ReferenceNetwork,
    high: Mapping[str, FloatArray],
    low: Mapping[str, FloatArray],
    pair_inverter_delay: FloatArray,
) -> dict[str, FloatArray]:
    """to_high / to_low from both channels' edge delays (channel_edge_delays outputs)."""
    roles = pair_roles(net)
    hi_on, lo_off = roles["to_high"]
    hi_off, lo_on = roles["to_low"]
    to_high = high[hi_on] - (pair_inverter_delay + low[lo_off])
    to_low = (pair_inverter_delay + low[lo_on]) - high[hi_off]
    return {"to_high": to_high, "to_low": to_low}


def reference_dead_times(net: ReferenceNetwork) -> dict[str, EdgeRange]:
    """Worst-case dead-time ranges of the complementary pair over all tolerances.

    Keys 'to_high' and 'to_low'. Corners over the min/typ/max combinations of both channels'
    independent parts and the shared supply, temperature and pair inverter (band ends only for
    the resistances and capacitances, which the delay grows with), checked against a seeded
    Monte Carlo of REFERENCE_CHECK_SAMPLES so a non-monotonic response is not missed (the range
    is widened if the Monte Carlo finds a value outside it). Min rounded down and max up to
    1 ps. With a diode the edges come from the charge integral, which bounds the bypassed edge
    from above, so the range does not overstate the dead time (see the module docstring).
    """
    from gapforge.tolerance import worst_case

    result = worst_case(net, check_samples=REFERENCE_CHECK_SAMPLES)
    return {key: result.pair[key] for key in PAIR_KEYS}


@dataclass(frozen=True)
class SlowEdgePoint:
    """A slow (resistor) edge's node delay at one temperature, with and without diode leakage."""

    temp_c: float
    edge: str
    delay_s: float  # with the diode as modelled
    delay_no_leakage_s: float  # the same with the diode's leakage removed (capacitance kept)

    @property
    def erosion(self) -> float:
        """The share of the delay that leakage takes away (0 = none, 1 = all)."""
        return 1.0 - self.delay_s / self.delay_no_leakage_s


def without_leakage(net: ReferenceNetwork) -> ReferenceNetwork:
    """The same network with the diode's saturation current scaled to nothing (a given knee
    voltage dropped with it, since it sets the saturation current); junction capacitance kept."""
    return replace(net, vf=None, diode=replace(net.diode, is_=net.diode.is_ * 1e-30))


def slow_edge_leakage(net: ReferenceNetwork) -> list[SlowEdgePoint]:
    """The slow edges' node delays at the temperature band's min, typ and max, by the model.

    All parts typical, R and C at their nominal values (as `simulate.slow_edge_over_temperature`
    does with the transient): the charge integral with the diode's reverse law, against the same
    integral with the leakage removed. A few milliseconds, so every `build` can afford it.
    """
    import numpy as np

    temps = [float(t) for t in (net.temp.min, net.temp.typ, net.temp.max)]
    edges = net.slow_edges()
    v = values_at(net, {"temp": np.asarray([0.0, 0.5, 1.0])})  # the band's min, typ, max
    leaky = channel_edge_delays(net, v, edges)
    clean = leaky if net.bypass == "none" else channel_edge_delays(without_leakage(net), v, edges)
    points: list[SlowEdgePoint] = []
    for edge in edges:
        with_leak = np.broadcast_to(leaky["node_" + edge], (3,))
        without = np.broadcast_to(clean["node_" + edge], (3,))
        seen: set[float] = set()
        for k in sorted(range(3), key=lambda i: temps[i]):
            if temps[k] not in seen:
                seen.add(temps[k])
                points.append(
                    SlowEdgePoint(temps[k], edge, float(with_leak[k]), float(without[k]))
                )
    return points


def leakage_warning(point: SlowEdgePoint, share: Fraction, source: str) -> str | None:
    """The loud one-line warning when leakage takes more than `share` of a slow edge, else None.

    `source` names what computed the point ('model' or 'simulation').
    """
    if not point.erosion > float(share):
        return None
    return (
        f"WARNING: DIODE LEAKAGE AT {point.temp_c:g} C TAKES {point.erosion * 100:.0f} % OF THE "
        f"SLOW {point.edge.upper()} EDGE ({format_quantity(point.delay_no_leakage_s, 's')} -> "
        f"{format_quantity(point.delay_s, 's')}, {source}, typical parts; more than "
        f"{format_tolerance(share)}): THE DEAD TIME SHRINKS ON A HOT BOARD. Choose a "
        "lower-leakage diode or a smaller R."
    )


def hottest_leakage_warnings(
    points: list[SlowEdgePoint], share: Fraction, source: str
) -> list[str]:
    """The leakage warnings at the hottest temperature of `points`."""
    if not points:
        return []
    hottest = max(p.temp_c for p in points)
    found = (leakage_warning(p, share, source) for p in points if p.temp_c == hottest)
    return [w for w in found if w is not None]


def pair_edge_text(net: ReferenceNetwork, key: str) -> str:
    """Which PWM edge a dead time belongs to and which output turns on, for messages."""
    pwm_edge = pair_roles(net)[key][0]  # the high channel sees the PWM itself
    side = "high" if key == "to_high" else "low"
    return f"on the PWM {pwm_edge} edge, before the {side} side turns on"


def overlap_finding(net: ReferenceNetwork, key: str, rng: EdgeRange) -> str | None:
    """The warning when a dead time's worst-case minimum is not positive (shoot-through)."""
    if rng.min_s > 0:
        return None
    return (
        f"{key} ({pair_edge_text(net, key)}): the worst-case minimum dead time is "
        f"{format_quantity(rng.min_s, 's')}, not positive (typ {format_quantity(rng.typ_s, 's')}):"
        " at that corner both outputs can be on together - the analog reference itself can "
        "shoot through (check the diode orientation and the output inverter)"
    )


def reference_findings(
    net: ReferenceNetwork,
    dead_times: Mapping[str, EdgeRange] | None = None,
    *,
    leakage_share: Fraction = DEFAULT_LEAKAGE_SHARE,
) -> list[str]:
    """One-line warnings about the reference network that every output built from it repeats.

    - a dead time whose worst-case minimum is <= 0 (the network can overlap: shoot-through),
      naming the dead time, its PWM edge and the corner value;
    - diode leakage taking more than `leakage_share` of a slow edge at the hottest temperature
      (the charge-integral model, typical parts: `slow_edge_leakage`);
    - the bypassed edge's threshold lying inside the diode's knee (`bypass_notes`).

    `dead_times` takes the result of `reference_dead_times(net)` when the caller already has it
    (it costs most of the time); without it, it is computed. An empty list: nothing to warn.
    """
    ranges = reference_dead_times(net) if dead_times is None else dead_times
    findings: list[str] = []
    for key in PAIR_KEYS:
        overlap = overlap_finding(net, key, ranges[key])
        if overlap is not None:
            findings.append(overlap)
    findings += hottest_leakage_warnings(slow_edge_leakage(net), leakage_share, "model")
    notes = bypass_notes(net)
    findings += [notes[e] for e in EDGES if e in notes]
    return findings


def describe_parameters(net: ReferenceNetwork) -> list[tuple[str, str, bool, str]]:
    """(name, value text, is_default, source) for display: every default is shown."""
    rows: list[tuple[str, str, bool, str]] = []
    for p in PARAMETERS:
        value = getattr(net, p.name)
        rows.append((p.name, _value_text(p, value, net), p.name in net.defaults, p.source))
    return rows


def _value_text(p: Parameter, value: Any, net: ReferenceNetwork) -> str:
    if value is None and p.name == "vf":
        import numpy as np

        temps = np.asarray(net.temp.floats())
        r = np.full(3, float(net.r))
        knees = knee_voltage_array(net.diode, r, temps)
        return "derived: " + " / ".join(
            f"{k * 1000:.0f} mV at {t:g} C" for k, t in zip(knees, temps, strict=True)
        )
    if isinstance(value, Band):
        unit = "C" if p.unit == "C" else p.unit
        if p.unit == "C":
            parts = [f"{float(v):g} C" for v in (value.min, value.typ, value.max)]
        else:
            parts = [format_quantity(v, unit) for v in (value.min, value.typ, value.max)]
        return parts[0] if value.min == value.max else " : ".join(parts)
    if isinstance(value, LevelBand):
        return " : ".join(lv.text() for lv in value.levels())
    if isinstance(value, DiodeModel):
        return value.card()
    if isinstance(value, bool):
        return "yes" if value else "no"
    if p.kind == "tolerance":
        return format_tolerance(value)
    if p.kind == "tempco":
        return f"+/- {float(value) * 1e6:g} ppm/K"
    if isinstance(value, Fraction):
        return format_quantity(value, p.unit)
    return str(value)


def bypass_notes(net: ReferenceNetwork) -> dict[str, str]:
    """For the bypassed edge: say so when the Schmitt threshold lies beyond the diode's knee.

    Then the diode stops conducting before the node reaches the threshold, the rest goes through
    R, and the "fast" edge is slow (it bites at low VDD and with a high forward voltage).
    """
    import numpy as np

    if net.bypass == "none":
        return {}
    edge = net.bypass
    vdd_lo, vdd_typ, _ = net.vdd.floats()
    band = net.vt_plus if edge == "rising" else net.vt_minus
    temps = np.asarray(net.temp.floats())
    r = np.full(3, float(net.r))
    if net.vf is not None:
        knee_typ, knee_max = float(net.vf.typ), float(net.vf.max)
    else:
        knees = knee_voltage_array(net.diode, r, temps)
        knee_typ, knee_max = float(knees[1]), float(knees.max())

    def distance(level: Level, vdd: float) -> float:
        v = level.volts(vdd)
        return vdd - v if edge == "rising" else v

    d_typ = distance(band.typ, vdd_typ)
    d_min = min(distance(lv, vdd) for lv in band.levels() for vdd in (vdd_lo, vdd_typ))
    if d_typ < knee_typ:
        return {
            edge: (
                f"the bypassed {edge} edge is NOT fast: the threshold lies {d_typ:.3g} V from the "
                f"final value, inside the diode's knee ({knee_typ:.3g} V), so the last "
                f"{knee_typ - d_typ:.3g} V go through R"
            )
        }
    if d_min < knee_max:
        return {
            edge: (
                f"the bypassed {edge} edge is slow at some corners: the threshold can lie "
                f"{d_min:.3g} V from the final value, inside the diode's knee (up to "
                f"{knee_max:.3g} V), and the rest goes through R"
            )
        }
    return {}
