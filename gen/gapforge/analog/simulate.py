"""Transient simulation of one edge of the reference network, with a SPICE-style diode.

The closed forms in `analog` cannot see what the diode does on the *slow* edge: its junction
capacitance couples the input step onto the node and adds to C, and its reverse leakage shunts R
(a Schottky at 125 C can shunt R entirely, and the dead time vanishes on a hot board). This module
integrates the circuit

    source --Rout-- A --R-- N --C(+Cin+Cstray)-- ground,   diode between A and N (one way or the
                                                          other), series resistance RS inside

with TR-BDF2 (a trapezoidal stage then a BDF2 stage, L-stable; Bank et al., IEEE Trans. Electron
Devices 32(10), 1985) in charge form with Newton iterations, adaptive steps from the method's
local-error estimate, and a secant refinement of the threshold crossing. The diode is the usual
SPICE level-1 model (IS N RS CJO VJ M EG XTI TNOM BV FC, GMIN in parallel) with the usual
temperature scaling of IS, CJO and VJ, written from the published model equations.

Plain Python floats in the inner loop (a 2x2 or 3x3 system is faster without numpy).
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

from gapforge.analog.network import (
    DiodeModel,
    ReferenceNetwork,
    SlowEdgePoint,
)
from gapforge.base.records import record

if TYPE_CHECKING:
    import numpy as np
    import numpy.typing as npt

    FloatArray = npt.NDArray[np.float64]

from gapforge.analog.junction import junction

_GAMMA = 2.0 - math.sqrt(2.0)
_K_ERR = (-3.0 * _GAMMA**2 + 4.0 * _GAMMA - 2.0) / (12.0 * (2.0 - _GAMMA))
_A1 = _GAMMA / 2.0  # trapezoidal stage to t + gamma h
_A2 = (1.0 - _GAMMA) / (2.0 - _GAMMA)  # BDF2 stage
_B_G = 1.0 / (_GAMMA * (2.0 - _GAMMA))
_B_N = (1.0 - _GAMMA) ** 2 / (_GAMMA * (2.0 - _GAMMA))


class SimulationError(RuntimeError):
    """The integration failed (a programming or model problem, not a user mistake)."""



@record
class EdgeCircuit:
    """One edge of one channel: an ideal step from v_start to v_final at t = 0."""

    v_start: float
    v_final: float
    rout: float
    r: float
    c_node: float  # C + Cin + Cstray
    diode: DiodeModel | None
    anode_at_node: bool  # True: anode at the capacitor node (the diode bypasses falling edges)
    temp_c: float
    threshold: float  # the node voltage whose crossing ends the delay

    @property
    def tau(self) -> float:
        return (self.r + self.rout) * self.c_node


@record
class EdgeResult:
    delay_s: float  # ideal input step to the node crossing the threshold
    steps: int
    rejected: int
    newton: int


def _solve(matrix: list[list[float]], rhs: list[float]) -> list[float]:
    """Gaussian elimination with partial pivoting (n <= 3)."""
    n = len(rhs)
    a = [[*row[:], rhs[i]] for i, row in enumerate(matrix)]
    for col in range(n):
        pivot = max(range(col, n), key=lambda r: abs(a[r][col]))
        if a[pivot][col] == 0.0:
            raise SimulationError("singular Newton matrix")
        a[col], a[pivot] = a[pivot], a[col]
        for r in range(col + 1, n):
            f = a[r][col] / a[col][col]
            if f:
                for k in range(col, n + 1):
                    a[r][k] -= f * a[col][k]
    x = [0.0] * n
    for r in range(n - 1, -1, -1):
        s = a[r][n] - sum(a[r][k] * x[k] for k in range(r + 1, n))
        x[r] = s / a[r][r]
    return x


class _Model:
    """Nodal equations dq(x)/dt + i(x) = 0; x = [vA, vN] (+ [vP], the diode's inner anode)."""

    def __init__(self, circuit: EdgeCircuit, source: float) -> None:
        self.c = circuit
        self.source = source
        self.j = junction(circuit.diode, circuit.temp_c) if circuit.diode is not None else None
        self.inner = self.j is not None and self.j.rs > 0.0
        self.n = 3 if self.inner else 2
        # node indices: 0 = A (driver output), 1 = N (capacitor); 2 = P (inner anode)
        if self.j is not None:
            outer_anode, cathode = (1, 0) if circuit.anode_at_node else (0, 1)
            self.outer_anode = outer_anode
            self.cathode = cathode
            self.anode = 2 if self.inner else outer_anode

    def evaluate(
        self, x: list[float]
    ) -> tuple[list[float], list[list[float]], list[float], list[list[float]]]:
        """Currents leaving each node, their Jacobian, the node charges and their Jacobian."""
        n = self.n
        i = [0.0] * n
        g = [[0.0] * n for _ in range(n)]
        q = [0.0] * n
        cm = [[0.0] * n for _ in range(n)]
        c = self.c
        ga = 1.0 / c.rout
        i[0] += (x[0] - self.source) * ga
        g[0][0] += ga
        gr = 1.0 / c.r
        self._conductance(i, g, x, 0, 1, gr)
        q[1] += c.c_node * x[1]
        cm[1][1] += c.c_node
        j = self.j
        if j is not None:
            if self.inner:
                self._conductance(i, g, x, self.outer_anode, 2, 1.0 / j.rs)
            a, k = self.anode, self.cathode
            vd = x[a] - x[k]
            cur, gd = j.current(vd)
            i[a] += cur
            i[k] -= cur
            g[a][a] += gd
            g[a][k] -= gd
            g[k][a] -= gd
            g[k][k] += gd
            qd, cd = j.charge(vd)
            q[a] += qd
            q[k] -= qd
            cm[a][a] += cd
            cm[a][k] -= cd
            cm[k][a] -= cd
            cm[k][k] += cd
        return i, g, q, cm

    @staticmethod
    def _conductance(
        i: list[float], g: list[list[float]], x: list[float], a: int, b: int, gval: float
    ) -> None:
        cur = (x[a] - x[b]) * gval
        i[a] += cur
        i[b] -= cur
        g[a][a] += gval
        g[a][b] -= gval
        g[b][a] -= gval
        g[b][b] += gval

    def junction_voltage(self, x: list[float]) -> float:
        return x[self.anode] - x[self.cathode] if self.j is not None else 0.0

    def newton(
        self, x0: list[float], alpha: float, rhs: list[float], scale: float
    ) -> tuple[list[float], int]:
        """Solve q(x) + alpha * i(x) = rhs; returns the solution and the iteration count."""
        x = x0[:]
        for it in range(1, 60):
            i, g, q, cm = self.evaluate(x)
            res = [q[k] + alpha * i[k] - rhs[k] for k in range(self.n)]
            jac = [[cm[r][k] + alpha * g[r][k] for k in range(self.n)] for r in range(self.n)]
            dx = _solve(jac, [-v for v in res])
            step = 1.0
            if self.j is not None:
                vd_old = self.junction_voltage(x)
                vd_new = vd_old + (dx[self.anode] - dx[self.cathode])
                vd_lim = _limit_junction(vd_new, vd_old, self.j.vte, self.j.vcrit)
                if vd_lim != vd_new and vd_new != vd_old:
                    step = (vd_lim - vd_old) / (vd_new - vd_old)
            x = [x[k] + step * dx[k] for k in range(self.n)]
            if step == 1.0 and max(abs(d) for d in dx) <= 1e-12 * scale + 1e-15:
                return x, it
        raise SimulationError("Newton iteration did not converge")


def _limit_junction(vnew: float, vold: float, vt: float, vcrit: float) -> float:
    """Limit a forward junction voltage step to a few thermal voltages (keeps exp() tame)."""
    if vnew > vcrit and abs(vnew - vold) > 2.0 * vt:
        if vold > 0.0:
            arg = 1.0 + (vnew - vold) / vt
            return vold + vt * math.log(arg) if arg > 0.0 else vcrit
        return vt * math.log(vnew / vt)
    return vnew


def simulate_edge(circuit: EdgeCircuit, tolerance: float = 2e-7) -> EdgeResult:
    """Node delay from an ideal input step to the threshold crossing, by TR-BDF2.

    `tolerance` bounds each step's estimated local error on the node voltage, relative to the
    step height; the default keeps the delay within 0.01 % of the exact value on an RC edge.
    """
    counts = _Counts()
    for step in _march(circuit, tolerance, counts):
        if step.crosses:
            t_cross = step.crossing()
            return EdgeResult(step.t + t_cross, counts.steps, counts.rejected, counts.newton)
    raise SimulationError("the node never crossed the threshold")


@dataclass(frozen=True, eq=False)
class NodeWaveform:
    """The capacitor node after an ideal input step at t = 0, as the integrator computed it.

    The samples are the integrator's accepted time points plus the refined threshold crossing
    itself, so drawing them as a polyline shows the simulated waveform, not an interpolation of
    separate runs.
    """

    times_s: FloatArray  # from 0, increasing
    volts: FloatArray  # the node voltage at each time
    delay_s: float  # the threshold crossing (one of the samples); equals simulate_edge's delay
    threshold: float


def node_waveform(
    circuit: EdgeCircuit, tolerance: float = 2e-7, *, beyond: float = 0.25
) -> NodeWaveform:
    """The node voltage from the input step through the threshold crossing and a little beyond.

    The same integration as `simulate_edge` (the same steps up to the crossing, so the same
    delay); it then carries on to (1 + beyond) x the delay, the last step cut to end there.
    """
    import numpy as np

    if beyond < 0.0:
        raise ValueError("beyond must not be negative")
    counts = _Counts()
    times = [0.0]
    volts = [circuit.v_start]
    delay: float | None = None
    stop = math.inf
    marcher = _march(circuit, tolerance, counts)
    for step in marcher:
        if delay is None and step.crosses:
            t_cross = step.crossing()
            delay = step.t + t_cross
            stop = delay * (1.0 + beyond)
            if 0.0 < t_cross < step.h:  # else it is the step's start or end, a sample anyway
                times.append(delay)
                volts.append(step.node_at(t_cross))
        if delay is not None and step.t + step.h >= stop:
            if stop > times[-1]:
                times.append(stop)
                volts.append(step.node_at(stop - step.t))
            break
        times.append(step.t + step.h)
        volts.append(step.x_new[1])
    if delay is None:
        raise SimulationError("the node never crossed the threshold")
    return NodeWaveform(np.asarray(times), np.asarray(volts), delay, circuit.threshold)


@dataclass
class _Counts:
    """Work done by one integration (mutable, local to one call)."""

    steps: int = 0
    rejected: int = 0
    newton: int = 0


@record
class _Step:
    """One accepted TR-BDF2 step from (t, x) to (t + h, x_new), offered before it is taken."""

    model: _Model
    t: float
    h: float
    x: list[float]
    q_n: list[float]
    i_n: list[float]
    x_new: list[float]
    span: float
    crosses: bool  # the node reaches the threshold within this step

    def crossing(self) -> float:
        """The time within the step at which the node crosses the threshold."""
        return _refine(self.model, self.x, self.q_n, self.i_n, self.h,
                       self.model.c.threshold, self.span)

    def node_at(self, dt: float) -> float:
        """The node voltage a shorter step of `dt` from the step's start reaches."""
        if dt >= self.h:
            return self.x_new[1]
        step = _trbdf2(self.model, self.x, self.q_n, self.i_n, dt, self.span)
        if step is None:
            raise SimulationError("partial step failed")
        return step[0][1]


def _march(circuit: EdgeCircuit, tolerance: float, counts: _Counts) -> Iterator[_Step]:
    """Accepted steps from the input step on; the consumer stops when it has what it needs.

    Step-size control from TR-BDF2's local-error estimate on the node voltage (up to 60 time
    constants; past that the node is taken never to cross).
    """
    span = abs(circuit.v_final - circuit.v_start)
    if span == 0.0:
        raise SimulationError("no edge: start and final voltage are equal")
    rising = circuit.v_final > circuit.v_start
    model = _Model(circuit, circuit.v_final)
    x = [circuit.v_start] * model.n
    x = _consistent(model, x, span)
    atol = tolerance * span
    tau = circuit.tau
    h = 1e-7 * tau
    h_max = tau / 20.0
    t = 0.0
    t_end = 60.0 * tau
    g = _GAMMA
    i_n, _, q_n, _ = model.evaluate(x)
    sign = 1.0 if rising else -1.0
    c_node = circuit.c_node
    while t < t_end:
        step = _trbdf2(model, x, q_n, i_n, h, span)
        if step is None:
            h *= 0.25
            counts.rejected += 1
            if h < 1e-18 * tau:
                raise SimulationError("step size underflow")
            continue
        x_new, q_new, i_new, i_g, its = step
        counts.newton += its
        est = 2.0 * _K_ERR * h * (-i_n[1] / g + i_g[1] / (g * (1.0 - g)) - i_new[1] / (1.0 - g))
        err = abs(est) / c_node
        if err > atol:
            h *= max(0.2, 0.9 * (atol / err) ** (1.0 / 3.0))
            counts.rejected += 1
            continue
        counts.steps += 1
        crosses = sign * (x_new[1] - circuit.threshold) >= 0.0
        yield _Step(model, t, h, x, q_n, i_n, x_new, span, crosses)
        t += h
        x, q_n, i_n = x_new, q_new, i_new
        factor = 4.0 if err == 0.0 else min(4.0, 0.9 * (atol / err) ** (1.0 / 3.0))
        h = min(h * max(factor, 0.2), h_max)


def _consistent(model: _Model, x: list[float], span: float) -> list[float]:
    """Solve the nodes without capacitance for the stepped source, holding the others."""
    _, _, _, cm = model.evaluate(x)
    free = [k for k in range(model.n) if cm[k][k] == 0.0]
    if not free:
        return x
    y = x[:]
    for _ in range(100):
        i, g, _, _ = model.evaluate(y)
        dx = _solve([[g[r][k] for k in free] for r in free], [-i[r] for r in free])
        step = 1.0
        if model.j is not None:
            delta = [0.0] * model.n
            for idx, k in enumerate(free):
                delta[k] = dx[idx]
            vd_old = model.junction_voltage(y)
            vd_new = vd_old + delta[model.anode] - delta[model.cathode]
            vd_lim = _limit_junction(vd_new, vd_old, model.j.vte, model.j.vcrit)
            if vd_lim != vd_new and vd_new != vd_old:
                step = (vd_lim - vd_old) / (vd_new - vd_old)
        for idx, k in enumerate(free):
            y[k] += step * dx[idx]
        if step == 1.0 and max(abs(d) for d in dx) <= 1e-13 * span:
            return y
    raise SimulationError("no consistent initial state")


def _trbdf2(
    model: _Model,
    x: list[float],
    q_n: list[float],
    i_n: list[float],
    h: float,
    span: float,
) -> tuple[list[float], list[float], list[float], list[float], int] | None:
    n = model.n
    a1, a2, b_g, b_n = _A1, _A2, _B_G, _B_N
    try:
        rhs1 = [q_n[k] - a1 * h * i_n[k] for k in range(n)]
        x_g, it1 = model.newton(x, a1 * h, rhs1, span)
        i_g, _, q_g, _ = model.evaluate(x_g)
        rhs2 = [b_g * q_g[k] - b_n * q_n[k] for k in range(n)]
        x_new, it2 = model.newton(x_g, a2 * h, rhs2, span)
    except (SimulationError, OverflowError, ZeroDivisionError):
        return None
    i_new, _, q_new, _ = model.evaluate(x_new)
    return x_new, q_new, i_new, i_g, it1 + it2


def _refine(
    model: _Model,
    x: list[float],
    q_n: list[float],
    i_n: list[float],
    h: float,
    threshold: float,
    span: float,
) -> float:
    """The time within a step at which the node crosses the threshold (Illinois regula falsi)."""
    lo, f_lo = 0.0, x[1] - threshold
    hi = h
    step = _trbdf2(model, x, q_n, i_n, h, span)
    if step is None:
        raise SimulationError("refinement step failed")
    f_hi = step[0][1] - threshold
    side = 0
    for _ in range(40):
        if f_hi == f_lo:
            break
        mid = hi - f_hi * (hi - lo) / (f_hi - f_lo)
        step = _trbdf2(model, x, q_n, i_n, mid, span)
        if step is None:
            raise SimulationError("refinement step failed")
        f_mid = step[0][1] - threshold
        if abs(f_mid) <= 1e-12 * span or (hi - lo) <= 1e-9 * h:
            return mid
        if (f_mid > 0) == (f_hi > 0):
            hi, f_hi = mid, f_mid
            if side == 1:
                f_lo /= 2.0
            side = 1
        else:
            lo, f_lo = mid, f_mid
            if side == -1:
                f_hi /= 2.0
            side = -1
    return lo - f_lo * (hi - lo) / (f_hi - f_lo) if f_hi != f_lo else hi


# --------------------------------------------------------------------------------------------
# The network's edges


def edge_circuit(
    net: ReferenceNetwork,
    edge: str,
    temp_c: float | None = None,
    *,
    leakage: bool = True,
) -> EdgeCircuit:
    """One channel's node for an input edge, all parts typical, R and C at their typical tempco.

    `leakage=False` scales the diode's saturation current to nothing (its junction capacitance
    stays), to show how much of a slow-edge change is leakage.
    """
    vdd = float(net.vdd.typ)
    temp = float(net.temp.typ) if temp_c is None else temp_c
    diode = None
    if net.bypass != "none":
        slow = edge != net.bypass
        diode = net.leaking_diode() if slow else net.diode  # the worse leakage (ir_max)
        if not leakage:
            diode = replace(diode, is_=diode.is_ * 1e-30)
    if edge == "rising":
        v0, v1 = 0.0, vdd
        threshold = net.vt_plus.typ.volts(vdd)
    else:
        v0, v1 = vdd, 0.0
        threshold = net.vt_minus.typ.volts(vdd)
    return EdgeCircuit(
        v_start=v0,
        v_final=v1,
        rout=float(net.rout.typ),
        r=float(net.r),
        c_node=float(net.c + net.cin.typ + net.cstray.typ),
        diode=diode,
        anode_at_node=net.bypass == "falling",
        temp_c=temp,
        threshold=threshold,
    )


def simulated_node_delays(net: ReferenceNetwork, temp_c: float | None = None) -> dict[str, float]:
    """Both edges' node delays (ideal step to threshold) at typical parts."""
    return {e: simulate_edge(edge_circuit(net, e, temp_c)).delay_s for e in ("rising", "falling")}


def slow_edge_over_temperature(net: ReferenceNetwork) -> list[SlowEdgePoint]:
    """The slow (resistor) edges' node delays at the temperature band's min, typ and max.

    The transient counterpart of `analog.slow_edge_leakage` (same points, same parts).
    """
    points: list[SlowEdgePoint] = []
    for edge in net.slow_edges():
        for temp in sorted({float(t) for t in (net.temp.min, net.temp.typ, net.temp.max)}):
            with_leak = simulate_edge(edge_circuit(net, edge, temp)).delay_s
            if net.bypass == "none":
                without = with_leak
            else:
                without = simulate_edge(edge_circuit(net, edge, temp, leakage=False)).delay_s
            points.append(SlowEdgePoint(temp, edge, with_leak, without))
    return points


def spice_netlist(circuit: EdgeCircuit, rise_s: float, step_s: float, stop_s: float) -> str:
    """An ngspice netlist of the same edge, measuring the threshold crossing as 'tcross'.

    The step is a ramp of `rise_s` from t = 0 (an ideal step shifted by about rise_s / 2).
    """
    direction = "RISE" if circuit.v_final > circuit.v_start else "FALL"
    lines = [
        "* gapforge reference network edge (generated)",
        ".options reltol=1e-6 abstol=1e-15 vntol=1e-9 chgtol=1e-20 method=gear",
        f".options temp={circuit.temp_c:g} tnom=27",
        f"V1 s 0 PWL(0 {circuit.v_start:.9g} {rise_s:.6g} {circuit.v_final:.9g})",
        f"Rout s a {circuit.rout:.9g}",
        f"R1 a n {circuit.r:.9g}",
        f"C1 n 0 {circuit.c_node:.9g}",
    ]
    if circuit.diode is not None:
        nodes = "n a" if circuit.anode_at_node else "a n"
        lines.append(f"D1 {nodes} dmod")
        lines.append(f".model dmod D({circuit.diode.card()})")
    lines += [
        f".tran {step_s:.6g} {stop_s:.6g} 0 {step_s:.6g}",
        f".meas tran tcross WHEN v(n)={circuit.threshold:.9g} {direction}=1",
        ".end",
        "",
    ]
    return "\n".join(lines)
