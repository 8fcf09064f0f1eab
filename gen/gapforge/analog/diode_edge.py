"""The diode edges by the quasi-static charge integral (see `gapforge.analog` for the model)."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

from gapforge.analog.closed_form import _knee
from gapforge.analog.network import K_OVER_Q, ZERO_CELSIUS, DiodeModel

if TYPE_CHECKING:
    import numpy as np
    import numpy.typing as npt


    FloatArray = npt.NDArray[np.float64]

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

