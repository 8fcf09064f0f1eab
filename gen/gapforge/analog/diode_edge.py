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
RESIDUAL = 1e-6  # the end points' largest residual, relative to the target (Newton: ~1e-15)
_BLOCK = 16_384  # samples per block of the charge integral
_PANEL_ROWS = 1_024  # samples per piece of a quadrature panel (8 nodes each: 64 KiB arrays)
QUADRATURE_NODES = 8  # Gauss-Legendre nodes per panel; tests hold it to 1e-4 of a fine sum
# The 8-point Gauss-Legendre rule on [-1, 1] as numpy.polynomial.legendre.leggauss(8) returns it,
# bit for bit (a test compares them, and with Abramowitz & Stegun table 25.4): every build needs
# it, and importing numpy.polynomial for it cost more than the rule's use.
_GAUSS_8 = (
    tuple(float.fromhex(h) for h in (
        "-0x1.ebab1cb0acc66p-1", "-0x1.97e4ab249f41ep-1", "-0x1.0d129583284b4p-1",
        "-0x1.77ac94f3c7344p-3", "0x1.77ac94f3c7344p-3", "0x1.0d129583284b4p-1",
        "0x1.97e4ab249f41ep-1", "0x1.ebab1cb0acc66p-1")),
    tuple(float.fromhex(h) for h in (
        "0x1.9ea1d04ca03aep-4", "0x1.c76fb531d2b94p-3", "0x1.413c50a25560ep-2",
        "0x1.736360b19933dp-2", "0x1.736360b19933dp-2", "0x1.413c50a25560ep-2",
        "0x1.c76fb531d2b94p-3", "0x1.9ea1d04ca03aep-4")),
)


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
    c2 = cj / j.f2
    # each law computed only where some sample needs it (the same arithmetic per sample as
    # `np.where` over both): a reverse-biased junction is always below FC * VJ, and a panel of
    # the forward edge mostly lies wholly on one side
    if not below.any():
        return (cj * f1 + c2 * (j.f3 * (vd - fc_v) + m / (2.0 * vj) * (vd * vd - fc_v * fc_v)),
                c2 * (j.f3 + m * vd / vj))
    arg = np.maximum(1.0 - vd / vj, 1.0 - fc_v / vj)  # > 0: the network check keeps VJ(T) > 0
    s = np.exp(-m * np.log(arg))
    if below.all():
        return vj * cj * (1.0 - arg * s) / (1.0 - m), cj * s
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

    The bounds (both on the safe side of a dead time, slow edge minus bypassed edge):

    - the resistor edge is a lower bound. It starts after the junction capacitance shared its
      charge with C, C (span - D(x_1)) = Q(x_1). The quasi-static D leaves out the junction's
      displacement current through Rout; on the circuit's slow manifold the current through
      Rout is C i / (C + Q'), so the end points x_th and x_1 are solved with Rout scaled by
      C / (C + CJ(T)) (CJ(T), the zero-bias junction capacitance at the temperature, is the
      largest Q' on a reverse-biased path: the scaling errs short), the integrand keeps the
      full Rout. With the full Rout everywhere the edge came out up to 0.64 % long when CJ is
      comparable to C (issue 15). When the coupled step alone passes the threshold the edge
      is 0 (the transient shows the sub-nanosecond coupling through Rout).
    - the bypassed edge is an upper bound: the sharing takes time there (the driver node
      charges through Rout), so the integral starts from the full step, D(x_1) = span, and
      counts the junction capacitance as more node capacitance without its coupling (exact
      without junction capacitance, up to tens of % slow when CJ is comparable to C).

    Both hold against ngspice on the recorded matrix and on a seeded random family of networks
    (tests/test_analog_random.py). `sat` overrides the saturation current per sample (a knee
    voltage given by the user). Breakdown is not modelled (the network check keeps BV above
    every VDD). Steps: `_setup` (per-sample parameters), `_solve` (the end points x_th, x_1),
    `_integrate` (the quadrature), assembled here.
    """
    import numpy as np

    arrays = tuple(np.asarray(a, dtype=float) for a in (span, distance, r, rout, c_node, temp_c))
    shape = np.broadcast_shapes(*(np.shape(a) for a in arrays))
    flat = [np.ravel(a) for a in np.broadcast_arrays(*arrays)]
    n = flat[0].size
    sat_flat = None if sat is None else np.ravel(np.broadcast_to(sat, shape))
    if n > _BLOCK:  # in blocks: the nodes' temporaries stay in cache
        parts = [
            _edge_block(diode, forward, [a[k:k + _BLOCK] for a in flat],
                        None if sat_flat is None else sat_flat[k:k + _BLOCK])
            for k in range(0, n, _BLOCK)
        ]
        blocked: FloatArray = np.concatenate(parts).reshape(shape)
        return blocked
    out: FloatArray = _edge_block(diode, forward, flat, sat_flat).reshape(shape)
    return out


def _edge_block(
    diode: DiodeModel, forward: bool, flat: list[FloatArray], sat: FloatArray | None
) -> FloatArray:
    """One block of samples: setup, end points, quadrature."""
    import numpy as np

    s = _setup(diode, forward, flat, sat)
    x_th = _solve(s, False, s.distance)
    # the bypassed edge starts from the full step (see diode_edge_delay); the resistor edge
    # after the junction capacitance shared its charge with C
    x_1 = _solve(s, False, s.span) if forward else _solve(s, True, s.c * s.span)
    result = np.zeros(s.n)
    live = np.flatnonzero(x_1 > x_th)
    if live.size:
        result[live] = _integrate(s, live, x_th[live], x_1[live])
    result[np.isnan(x_th) | np.isnan(x_1)] = np.nan  # an end point that could not be resolved
    return result


@dataclass(frozen=True, eq=False)
class _Edge:
    """The per-sample parameters of one block of edges (flattened, one value per sample)."""

    forward: bool
    n: int
    span: FloatArray
    distance: FloatArray
    c: FloatArray
    rs: float
    with_charge: bool
    j: JunctionArrays
    # the parameters `_state` needs, in its order: sat, vte, r, rout, c, cj, vj, fc_v, f1
    table: tuple[FloatArray, ...]
    ends: tuple[FloatArray, ...]  # the same with the end points' Rout (see diode_edge_delay)

    def gather(self, rows: npt.NDArray[np.intp], column: bool) -> tuple[FloatArray, ...]:
        """The table's rows for the samples in work, as columns to broadcast over nodes."""
        return tuple(a[rows][:, None] if column else a[rows] for a in self.table)

    def gather_ends(self, rows: npt.NDArray[np.intp]) -> tuple[FloatArray, ...]:
        return tuple(a[rows] for a in self.ends)


def _setup(
    diode: DiodeModel, forward: bool, flat: list[FloatArray], sat: FloatArray | None
) -> _Edge:
    """Per-sample junction parameters and the effective Rout (see diode_edge_delay)."""
    import numpy as np

    span, distance, r, rout, c, temp = flat
    n = span.size
    j = junction_arrays(diode, temp)
    cj = np.broadcast_to(j.cj, (n,))
    sat_a = np.broadcast_to(j.sat, (n,)) if sat is None else sat
    table = (sat_a, np.broadcast_to(j.vte, (n,)), r, rout, c, cj,
             *(np.broadcast_to(a, (n,)) for a in (j.vj, j.fc_v, j.f1)))
    ends = table
    if not forward and diode.cjo > 0.0:  # the resistor edge's end points: Rout C / (C + CJ)
        ends = (*table[:3], rout * (c / (c + cj)), *table[4:])
    return _Edge(forward, n, span, distance, c, diode.rs, diode.cjo > 0.0, j, table, ends)


def _state(
    s: _Edge, x: FloatArray, p: tuple[FloatArray, ...], charge: bool = True
) -> tuple[FloatArray, ...]:
    """i, D, D', Q, Q' at x (p: gathered parameters; Q, Q' zero unless `charge`)."""
    import numpy as np

    s_, v_, r_, ro = p[:4]
    if s.forward:
        e = np.exp(np.minimum(x / v_, 700.0))
        idd = s_ * (e - 1.0) + GMIN * x
        gd = s_ * e / v_ + GMIN
        vp = x + s.rs * idd
        vpp = 1.0 + s.rs * gd
    else:  # the SPICE reverse law: exponential to -3 N VT, then a cubic approach to -IS
        idd, gd = _reverse(x, s_, v_)
        i = x / r_ + idd
        return _finish(s, x, p, charge, i, x + ro * i, 1.0 + ro * (1.0 / r_ + gd))
    i = vp / r_ + idd
    d = vp + ro * i
    dp = vpp + ro * (vpp / r_ + gd)
    return _finish(s, x, p, charge, i, d, dp)


def _reverse(x: FloatArray, s_: FloatArray, v_: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Reverse current and conductance at x; each law computed only where some sample needs it
    (the same arithmetic per sample as `np.where` over both laws)."""
    import numpy as np

    small = x <= 3.0 * v_
    if small.all():
        e = np.exp(-np.minimum(x, 3.0 * v_) / v_)
        return s_ * (1.0 - e) + GMIN * x, s_ * e / v_ + GMIN
    xc = np.maximum(x, 1e-300)
    a = (3.0 * v_ / (math.e * xc)) ** 3
    if not small.any():
        return s_ * (1.0 - a) + GMIN * x, 3.0 * s_ * a / xc + GMIN
    e = np.exp(-np.minimum(x, 3.0 * v_) / v_)
    idd = s_ * np.where(small, 1.0 - e, 1.0 - a) + GMIN * x
    gd = np.where(small, s_ * e / v_, 3.0 * s_ * a / xc) + GMIN
    return idd, gd


def _finish(
    s: _Edge, x: FloatArray, p: tuple[FloatArray, ...], charge: bool, i: FloatArray,
    d: FloatArray, dp: FloatArray,
) -> tuple[FloatArray, ...]:
    """`_state`'s result: the junction's charge added when the edge has one and it is asked."""
    _s, _v, _r, _ro, _c, cj, vj, fc_v, f1 = p
    if not (s.with_charge and charge):
        return i, d, dp, 0.0 * x, 0.0 * x
    q, qp = _depletion(x if s.forward else -x, cj, vj, fc_v, f1, s.j)
    return i, d, dp, (q if s.forward else -q), qp


def _solve(s: _Edge, jump: bool, target: FloatArray) -> FloatArray:
    """The x where D (or C D + Q for the jump) reaches target (both increase with x).

    Newton from a bound on the side where it converges monotonically (D is convex in the
    forward junction voltage, concave in the reverse one), kept inside a bracket with a
    bisection fallback; converged samples leave the active set.
    """
    import numpy as np

    sat_a, vte, r_a, rout_a, c_a, cj = s.ends[:6]
    lo = np.zeros(s.n)
    hi = np.array(s.span, dtype=float)
    if s.forward:  # D >= (Rout + RS) Id(x): an upper bound of the root
        with np.errstate(divide="ignore", over="ignore"):
            x = vte * np.log1p(target / ((rout_a + s.rs) * sat_a))
    else:  # D <= x (1 + Rout/R + Rout g(0)), C D + Q <= x (C (...) + Cj): a lower bound
        slope = 1.0 + rout_a / r_a + rout_a * (sat_a / vte + GMIN)
        x = target / (slope * c_a + cj) if jump else target / slope
    x = np.where(np.isfinite(x), np.minimum(x, hi), hi)
    active = np.arange(s.n)
    for _ in range(100):
        # while every sample is in work, the arrays themselves (no gathering, no scattering)
        every = active.size == s.n
        xa = x if every else x[active]
        p = s.ends if every else s.gather_ends(active)
        goal = target if every else target[active]
        _i, d, dp, q, qp = _state(s, xa, p, jump)
        if jump:
            f, fp = p[4] * d + q - goal, p[4] * dp + qp
        else:
            f, fp = d - goal, dp
        lo_a = np.where(f <= 0.0, xa, lo if every else lo[active])
        hi_a = np.where(f >= 0.0, xa, hi if every else hi[active])
        newton = xa - f / fp
        x_new = np.where((newton >= lo_a) & (newton <= hi_a), newton, 0.5 * (lo_a + hi_a))
        if every:
            lo, hi, x = lo_a, hi_a, x_new
            moved = np.abs(x_new - xa) > 1e-12 * s.span
        else:
            lo[active], hi[active], x[active] = lo_a, hi_a, x_new
            moved = np.abs(x_new - xa) > 1e-12 * s.span[active]
        active = active[moved]
        if active.size == 0:
            break
    # the root must hold, not only the step have stopped: where the function rises by more than
    # the target between two adjacent floats (a reverse conductance of astronomical size: an
    # unphysical model card, a huge IS at a high temperature), no float is the root and the
    # edge cannot be resolved; it is then not a number, which the ranges refuse in one line
    _i, d, _dp, q, _qp = _state(s, x, s.ends, jump)
    residual = s.ends[4] * d + q - target if jump else d - target
    unresolved = ~(np.abs(residual) <= RESIDUAL * np.abs(target))
    if unresolved.any():
        x = np.where(unresolved, np.nan, x)
    return x


def gauss_legendre(count: int) -> tuple[FloatArray, FloatArray]:
    """Nodes and weights of the `count`-point Gauss-Legendre rule on [-1, 1] (numpy's)."""
    import numpy as np

    if count == 8:
        return np.asarray(_GAUSS_8[0]), np.asarray(_GAUSS_8[1])
    nodes, weights = np.polynomial.legendre.leggauss(count)
    return nodes, weights


def _integrate(
    s: _Edge, live: npt.NDArray[np.intp], lo_x: FloatArray, hi_x: FloatArray
) -> FloatArray:
    """The charge integral from x_th to x_1 for the samples in `live`.

    Below the diode's knee R carries the current and the integrand goes as 1/x: integrate in
    ln x. Above it the diode does and the integrand is smooth in x itself: integrate in x.
    """
    import numpy as np

    sat_a, vte, r_a = s.table[:3]
    if s.forward:
        with np.errstate(divide="ignore", over="ignore"):
            knee = np.clip(_knee(r_a[live] * sat_a[live], vte[live]), lo_x, hi_x)
    else:
        knee = hi_x
    nodes, weights = gauss_legendre(QUADRATURE_NODES)

    def panel(rows: npt.NDArray[np.intp], a: FloatArray, b: FloatArray, log: bool) -> FloatArray:
        # node-major (nodes x samples): each parameter is one contiguous row that broadcasts
        # down the nodes, which numpy's loops run fastest; in pieces of _PANEL_ROWS samples so
        # the temporaries stay small (in cache, no fresh pages); the same arithmetic per element
        # as one samples x nodes block, and the integrand transposed back (contiguous, whole)
        # for the same weighted sum
        half = 0.5 * (b - a)
        start = a + half
        p_all = s.gather(rows, False)
        integrand = np.empty((nodes.size, rows.size))
        for k in range(0, rows.size, _PANEL_ROWS):
            piece = slice(k, k + _PANEL_ROWS)
            u = start[None, piece] + half[None, piece] * nodes[:, None]
            x = np.exp(u) if log else u
            p = tuple(column[piece] for column in p_all)
            i, _d, dp, _q, qp = _state(s, x, p)
            part = (p[4] * dp + qp) / i
            if log:
                part *= x
            integrand[:, piece] = part
        total: FloatArray = half * (np.ascontiguousarray(integrand.T) @ weights)
        return total

    result = panel(live, np.log(lo_x), np.log(knee), True)
    upper = np.flatnonzero(hi_x > knee)
    if upper.size:
        result[upper] += panel(live[upper], knee[upper], hi_x[upper], False)
    return result
