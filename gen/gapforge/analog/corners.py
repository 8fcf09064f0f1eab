"""Evaluation of the complementary pair for arrays of parameter positions (0 = min, 0.5 = typ,
1 = max): parameter bands, channel edge delays, the pair's dead times."""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING

from gapforge.analog.closed_form import knee_voltage_array, node_delay
from gapforge.analog.diode_edge import diode_edge_delay
from gapforge.analog.network import EDGES, REFERENCE_TEMP_C, ReferenceNetwork

if TYPE_CHECKING:
    import numpy as np
    import numpy.typing as npt


    FloatArray = npt.NDArray[np.float64]


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
    """`_channel_edge_delays` with numpy's floating-point warnings kept from the terminal: a
    result that is not finite is refused where the ranges are built (`edge_range`), in one
    line, and no library warning reaches the user uninvited (issue 14)."""
    import numpy as np

    with np.errstate(all="ignore"):
        return _channel_edge_delays(net, v, edges, textbook=textbook)


def _channel_edge_delays(
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
            knee = knee_voltage_array(net.diode, r, v["temp"])
            node = node_delay(True, vdd, distance, tau_slow, tau_fast, knee)
        else:  # the resistor edge leaks as the worse of the model card and a datasheet's ir_max
            forward = net.bypass == edge
            diode = net.diode if forward else net.leaking_diode()
            node = diode_edge_delay(diode, forward, vdd, distance, r, v["rout"], c_total,
                                    v["temp"])
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


