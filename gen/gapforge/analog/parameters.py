"""The table of network parameters shared by the design file's `[reference]` section and the
`gapforge analog` options, their parsing and validation (so the two cannot drift apart)."""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import replace
from fractions import Fraction
from typing import TYPE_CHECKING, Any

from gapforge.analog.junction import GMIN, junction
from gapforge.analog.network import (
    BYPASS_CHOICES,
    DEFAULT_DIODE_TEXT,
    DIODE_EG_RANGE,
    DIODE_IS_RANGE,
    DIODE_N_RANGE,
    K_OVER_Q,
    REFERENCE_TEMP_C,
    TEMP_RANGE_C,
    ZERO_CELSIUS,
    Band,
    DiodeModel,
    Knee,
    Level,
    LevelBand,
    ReferenceNetwork,
    ReverseLimit,
    parse_diode,
)
from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import (
    parse_quantity,
    parse_tolerance,
)
from gapforge.base.records import record

if TYPE_CHECKING:
    import numpy as np
    import numpy.typing as npt

    from gapforge.base.schema import Table

    FloatArray = npt.NDArray[np.float64]

# --------------------------------------------------------------------------------------------
# The parameter table shared by the design file and the CLI


@record
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
        "SPICE diode parameters, read with SPICE's own number rules (M = milli, MEG = mega, "
        "case-insensitive; '10pF' = 10p)",
        "a generic small-signal silicon diode, from memory, not a measured part: give your "
        "diode's model card; SPICE defaults for the rest",
    ),
    Parameter(
        "vf",
        "knee",
        "V",
        "",
        "the diode's knee voltage at one temperature, e.g. '0.3V at 25C' (25 C when none is "
        "stated): IS is solved so the diode carries R's current there, and the SPICE "
        "temperature law (EG, XTI) carries it to every other temperature",
        "derived from the diode model: where its current equals the resistor's",
    ),
    Parameter(
        "ir_max",
        "reverse",
        "A",
        "",
        "the diode datasheet's maximum reverse current at a stated temperature and reverse "
        "voltage, e.g. '50uA at 125C 20V': the worse of it and the model card's leakage "
        "(scaled by the SPICE temperature law) is used on the slow edge",
        "the model card's leakage alone",
    ),
    Parameter(
        "vt_plus",
        "level",
        "V",
        "35%:60%:80%",
        "Schmitt VT+ (volts, or % / 'vdd' of VDD), min:typ:max from the part's table",
        "a wide band meant to contain generic CMOS Schmitt inputs (from memory, VT+ minima "
        "down to about 35 % of VDD), not any part's table: give yours for a tighter worst case",
    ),
    Parameter(
        "vt_minus",
        "level",
        "V",
        "20%:40%:55%",
        "Schmitt VT- (volts, or % / 'vdd' of VDD), min:typ:max from the part's table",
        "a wide band meant to contain generic CMOS Schmitt inputs (from memory, VT- maxima "
        "up to about 55 % of VDD), not any part's table: give yours for a tighter worst case",
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
        "-40..125 C, the AEC-Q100 grade 1 ambient range (from memory): wide on purpose",
    ),
)
PARAMETER_NAMES = frozenset(p.name for p in PARAMETERS)

@record
class LevelStandard:
    """What a JEDEC interface standard states for a Schmitt input that meets it: the supply
    range, VT+ <= VIH min and VT- >= VIL max. The other ends are the part's own."""

    citation: str
    vdd: str
    vih_min: str  # the highest VT+ a compliant input may have
    vil_max: str  # the lowest VT- a compliant input may have


# ../shared/reference-facts.md, "Logic levels": JESD8C.01 table (3.3 V LVCMOS/LVTTL), JESD8-5
# (2.5 V), JESD8-7 (1.8 V); values from memory, corroborated by public tables.
LEVEL_PRESETS: dict[str, LevelStandard] = {
    "jedec-3v3": LevelStandard("JESD8C.01", "3.0:3.3:3.6", "2.0V", "0.8V"),
    "jedec-2v5": LevelStandard("JESD8-5", "2.3:2.5:2.7", "1.7V", "0.7V"),
    "jedec-1v8": LevelStandard("JESD8-7", "1.65:1.8:1.95", "65%", "35%"),
}


def _split(text: object) -> list[object] | None:
    """A band's parts (None when the text is no band at all)."""
    if isinstance(text, list):
        return list(text)
    if isinstance(text, str):
        return list(text.split(":"))
    return None


def _apply_standard(
    values: dict[str, object], preset: str, problem: Callable[[str, str], None]
) -> None:
    """Fill what the standard states: the supply (unless given) and the standard's end of each
    threshold, which the user gives as the part's other two values (VT+ min:typ, VT- typ:max).
    A threshold given in full (min:typ:max) stays as given."""
    std = LEVEL_PRESETS[preset]
    values.setdefault("vdd", std.vdd)
    for key, end, label, wanted, index in (
        ("vt_plus", std.vih_min, f"VT+ <= VIH min = {std.vih_min}", "VT+ min:typ", 2),
        ("vt_minus", std.vil_max, f"VT- >= VIL max = {std.vil_max}", "VT- typ:max", 0),
    ):
        parts = _split(values.get(key))
        if parts is not None and len(parts) == 3:
            continue
        if parts is None or len(parts) != 2:
            problem(key, f"levels {preset} ({std.citation}) states only {label}: give the "
                         f"part's own {wanted} from its datasheet (two values; the standard "
                         "fills the third)")
            values[key] = None
            continue
        parts.insert(index, end)
        values[key] = ":".join(str(p) for p in parts)


# The values the model holds over (nonsense outside: a 1e-300 ohm resistor is a typo).
R_RANGE = (1e-3, 1e10)  # ohm
C_RANGE = (1e-16, 1.0)  # F


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
    the remaining checks still run. `levels` (a JEDEC preset name) fills vdd unless given and
    the one end of each threshold the standard states (`_apply_standard`).
    """
    values: dict[str, object] = dict(raw)
    preset = values.pop("levels", None)
    missing: set[str] = set()
    if preset is not None:
        if not isinstance(preset, str) or preset not in LEVEL_PRESETS:
            problem("levels", f"{str(preset)[:40]!r} is not one of {', '.join(LEVEL_PRESETS)}")
        else:
            _apply_standard(values, preset, problem)
            missing = {k for k in ("vt_plus", "vt_minus") if k in values and values[k] is None}
    defaults: list[str] = []
    parsed: dict[str, Any] = {}
    for p in PARAMETERS:
        given = p.name in values and values[p.name] is not None
        text: object = values[p.name] if given else p.default
        if not given and p.name not in missing:
            defaults.append(p.name)
        if text is None:
            if p.name not in missing:
                problem(p.name, "required value is missing")
            parsed[p.name] = _parse_one(p, p.default) if p.default else Fraction(1)
            continue
        try:
            parsed[p.name] = _parse_one(p, text)
        except GapforgeError as exc:
            problem(p.name, exc.message)
            parsed[p.name] = _parse_one(p, p.default) if p.default is not None else Fraction(1)
    ir_max = parsed.pop("ir_max")
    net = ReferenceNetwork(**parsed, defaults=tuple(defaults), ir_max=ir_max)
    problems = check_network(net)
    for name, message in problems:
        problem(name, message)
    if not problems:
        net = _calibrated(net, problem)
    return net


def _calibrated(net: ReferenceNetwork, problem: Callable[[str, str], None]) -> ReferenceNetwork:
    """The diode as the user's data make it: IS solved at the stated knee (`vf`), and the
    resistor edge's leakage raised to a datasheet's `ir_max` where that allows more."""
    diode = net.diode
    if net.vf is not None and net.bypass != "none":
        temp = float(net.vf.temp_c)
        vte = diode.n * K_OVER_Q * (temp + ZERO_CELSIUS)
        v = float(net.vf.volts)
        sat_t = v / (float(net.r) * math.expm1(min(v / vte, 700.0)))
        is_ = sat_t * diode.is_ / diode.saturation_current(temp)
        low, high = DIODE_IS_RANGE
        if not (low <= is_ <= high and math.isfinite(is_)):
            problem("vf", f"a knee of {v:g} V at {temp:g} C needs IS={is_:.3g} A at TNOM, outside "
                          f"{low:g}..{high:g}")
            return net
        diode = replace(diode, is_=is_)
    scale = 1.0
    if net.ir_max is not None and net.bypass != "none":
        j = junction(diode, float(net.ir_max.temp_c))
        vr = float(net.ir_max.volts)
        gmin = GMIN * vr  # the simulators' conductance across the junction is not the diode's
        modelled = -j.current(-vr)[0] - gmin
        wanted = float(net.ir_max.amps) - gmin
        scale = max(1.0, wanted / modelled) if modelled > 0 else 1.0
        if not diode.is_ * scale <= DIODE_IS_RANGE[1]:
            problem("ir_max", f"{float(net.ir_max.amps):g} A needs IS={diode.is_ * scale:.3g} A, "
                              f"above {DIODE_IS_RANGE[1]:g}")
            return net
    return replace(net, diode=diode, leakage_scale=scale)


def _parse_one(p: Parameter, text: object) -> Any:
    where = p.name
    if p.kind == "knee":
        return None if text == "" else _parse_knee(text, where)
    if p.kind == "reverse":
        return None if text == "" else _parse_reverse(text, where)
    if p.kind == "band":
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


def _temperature(text: str, where: str) -> Fraction:
    t = text.strip().removesuffix("C").removesuffix("c").removesuffix("\u00b0").strip()
    value = parse_quantity(t, "", where, allow_zero=True, allow_negative=True)
    lo_c, hi_c = TEMP_RANGE_C
    if not lo_c <= value <= hi_c:
        raise GapforgeError(f"{text!r} outside {lo_c:g}..{hi_c:g} C", where)
    return value


def _parse_knee(text: object, where: str) -> Knee:
    """'0.3V at 25C', '0.3V@85C' or '0.3' (at 25 C, where R and C are specified)."""
    if not isinstance(text, str):
        text = str(text)
    head, sep, tail = text.replace("@", " at ").partition(" at ")
    volts = parse_quantity(head.strip(), "V", where)
    temp = _temperature(tail, where) if sep else Fraction(REFERENCE_TEMP_C).limit_denominator()
    return Knee(volts, temp)


def _parse_reverse(text: object, where: str) -> ReverseLimit:
    """'50uA at 125C 20V': a current, the temperature and the reverse voltage it holds at."""
    words = str(text).replace("@", " at ").replace(",", " ").split()
    if len(words) != 4 or words[1].lower() != "at":
        raise GapforgeError(f"expected CURRENT at TEMPERATURE VOLTAGE such as '50uA at 125C 20V', "
                            f"got {str(text)[:60]!r}", where)
    amps = parse_quantity(words[0], "A", where)
    volts = parse_quantity(words[3], "V", where)
    return ReverseLimit(amps, _temperature(words[2], where), volts)


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
    for part, amount, (low, high) in (("r", net.r, R_RANGE), ("c", net.c, C_RANGE)):
        if not low <= amount <= high:
            problems.append((part, f"{float(amount):g} outside {low:g}..{high:g}, the range the "
                                   "model holds over"))
            return problems
    for part, spread, top in (("rout", net.rout, 1e6), ("cin", net.cin, 1e-3),
                              ("cstray", net.cstray, 1e-3), ("driver_delay", net.driver_delay, 1.0),
                              ("schmitt_delay", net.schmitt_delay, 1.0),
                              ("inverter_delay", net.inverter_delay, 1.0), ("vdd", net.vdd, 1e3)):
        if spread.max > top:
            problems.append((part, f"{float(spread.max):g} above {top:g}, the range the model "
                                   "holds over"))
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
    if net.vf is not None and not 0 < net.vf.volts < net.vdd.max:
        problems.append(("vf", "the knee voltage must lie between 0 and the largest VDD"))
    if net.ir_max is not None and net.diode.bv is not None and net.ir_max.volts >= net.diode.bv:
        problems.append(("ir_max", "the reverse voltage must lie below the diode's BV"))
    return problems


def _junction_potential(diode: DiodeModel, temp_c: float) -> float:
    """VJ at a temperature (the SPICE scaling; it falls with temperature). No numpy here:
    reading a design must not import it."""
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


