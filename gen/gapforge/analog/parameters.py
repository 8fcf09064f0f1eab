"""The table of network parameters shared by the design file's `[reference]` section and the
`gapforge analog` options, their parsing and validation (so the two cannot drift apart)."""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from fractions import Fraction
from typing import TYPE_CHECKING, Any

from gapforge.analog.junction import junction
from gapforge.analog.network import (
    BYPASS_CHOICES,
    DEFAULT_DIODE_TEXT,
    DIODE_EG_RANGE,
    DIODE_IS_RANGE,
    DIODE_N_RANGE,
    TEMP_RANGE_C,
    Band,
    DiodeModel,
    Level,
    LevelBand,
    ReferenceNetwork,
    parse_diode,
)
from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import (
    parse_quantity,
    parse_tolerance,
)

if TYPE_CHECKING:
    import numpy as np
    import numpy.typing as npt

    from gapforge.base.schema import Table

    FloatArray = npt.NDArray[np.float64]

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


