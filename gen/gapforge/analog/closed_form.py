"""Closed forms of the reference network: the diode knee and the single-time-constant node delay."""

from __future__ import annotations

from typing import TYPE_CHECKING

from gapforge.analog.network import K_OVER_Q, ZERO_CELSIUS, DiodeModel

if TYPE_CHECKING:
    import numpy as np
    import numpy.typing as npt


    FloatArray = npt.NDArray[np.float64]

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

    with np.errstate(all="ignore"):
        t = temp_c + ZERO_CELSIUS
        tn = diode.tnom + ZERO_CELSIUS
        vte = diode.n * K_OVER_Q * t
        sat = diode.is_ * np.exp(
            (t / tn - 1.0) * diode.eg / vte + diode.xti / diode.n * np.log(t / tn))
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


