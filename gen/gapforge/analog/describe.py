"""The network's parameters as display text (every default shown, with its source)."""

from __future__ import annotations

from fractions import Fraction
from typing import TYPE_CHECKING, Any

from gapforge.analog.closed_form import knee_voltage_array
from gapforge.analog.network import Band, DiodeModel, Knee, Level, LevelBand, ReferenceNetwork
from gapforge.analog.parameters import PARAMETERS, Parameter
from gapforge.base.quantities import (
    format_quantity,
    format_tolerance,
)

if TYPE_CHECKING:
    import numpy as np
    import numpy.typing as npt


    FloatArray = npt.NDArray[np.float64]

def describe_parameters(net: ReferenceNetwork) -> list[tuple[str, str, bool, str]]:
    """(name, value text, is_default, source) for display: every default is shown."""
    rows: list[tuple[str, str, bool, str]] = []
    for p in PARAMETERS:
        value = getattr(net, p.name)
        rows.append((p.name, _value_text(p, value, net), p.name in net.defaults, p.source))
    return rows


def _value_text(p: Parameter, value: Any, net: ReferenceNetwork) -> str:
    if p.name == "ir_max":
        if value is None:
            return "none (the model card's leakage)"
        return (f"{format_quantity(value.amps, 'A')} at {float(value.temp_c):g} C, "
                f"{format_quantity(value.volts, 'V')}: leakage x{net.leakage_scale:.3g} on the "
                "slow edge" if net.leakage_scale > 1.0 else
                f"{format_quantity(value.amps, 'A')} at {float(value.temp_c):g} C, "
                f"{format_quantity(value.volts, 'V')}: the model card leaks as much")
    if isinstance(value, Knee):
        return (f"{format_quantity(value.volts, 'V')} at {float(value.temp_c):g} C (IS solved "
                f"there: {net.diode.is_:.4g} A at TNOM)")
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
