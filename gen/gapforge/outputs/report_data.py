"""The data the report's figures are drawn from: the pair's timing, the reference's node ramps,
the quantization staircases and the Monte Carlo samples (exact where a fit is concerned).

Deterministic: a fixed Monte Carlo seed; numpy and the analog simulation are imported only
inside the functions that need them.
"""

from __future__ import annotations

from fractions import Fraction
from typing import TYPE_CHECKING, Any

from gapforge.outputs.figures import PairTiming, Ramp, Staircase
from gapforge.pipeline.build import BuildPlan, OutputPlan
from gapforge.timer.layouts import EDGES, Field

if TYPE_CHECKING:
    from gapforge.analog.network import ReferenceNetwork

MC_SAMPLES = 20_000  # Monte Carlo samples drawn for the histogram (uniform over every band)
MC_SEED = 1
STAIR_STEPS = 6  # representable values shown each side of the chosen one
CURVE_POINTS = 80  # closed-form node ramp points per edge
SIM_BEYOND = 1.5  # the simulated node waveform runs on to (1 + this) x its delay

EDGE_TEXT = {
    "to_high": "to_high (low side off, then high side on)",
    "to_low": "to_low (high side off, then low side on)",
}


def window_of(plan: BuildPlan, edge: str) -> tuple[Fraction | None, Fraction | None]:
    if plan.window is None:
        return None, None
    return plan.window[edge]


def achieved(op: OutputPlan, edge: str) -> tuple[Fraction, Fraction, Fraction]:
    e = op.fit.edges[edge]
    assert e.achieved_s is not None and e.achieved_min_s is not None
    assert e.achieved_max_s is not None
    return e.achieved_s, e.achieved_min_s, e.achieved_max_s


def pair_timing(op: OutputPlan) -> PairTiming:
    """One period, edge-aligned (command on at 0) or centre-aligned (on-time centred)."""
    th, tl = achieved(op, "to_high"), achieved(op, "to_low")
    if op.limits is not None:
        period = 1 / op.limits.real_frequency_hz
        centre = op.limits.spec.counting == "center"
        assumed = False
    else:
        period = 20 * max(th[2], tl[2])
        centre, assumed = True, True
    on = period / 4 if centre else Fraction(0)
    return PairTiming(period, assumed, on, on + period / 2, th, tl)


# ---------------------------------------------------------------------------------------------
# 2. the analog reference's node ramps


def node_ramps(net: ReferenceNetwork, simulate: bool = True) -> dict[str, Ramp]:
    """Both input edges' node ramps: the model's closed form and, if asked, the simulation.

    The closed-form curve is the model's own delay function evaluated at many threshold levels
    (the time the node needs to reach each level), so it is the very formula the ranges come
    from. The simulated curve is the transient simulation's own node waveform (its accepted
    time points), from the input step through the threshold crossing and beyond.
    """
    import numpy as np

    from gapforge.analog.corners import channel_edge_delays, values_at

    vdd = float(net.vdd.typ)
    n = CURVE_POINTS
    levels = vdd * (np.arange(1, n) / n)
    v = dict(values_at(net, {"vdd": np.full(n - 1, 0.5)}))
    v["vt_plus"] = levels
    v["vt_minus"] = levels
    curve = channel_edge_delays(net, v)
    typ = dict(values_at(net, {"vdd": np.full(1, 0.5)}))
    typ_delays = channel_edge_delays(net, typ)
    ramps: dict[str, Ramp] = {}
    for edge in ("rising", "falling"):
        band = net.vt_plus if edge == "rising" else net.vt_minus
        thr = tuple(lv.volts(vdd) for lv in band.levels())
        times = curve["node_" + edge]
        start = 0.0 if edge == "rising" else vdd
        pts = [(0.0, start)] + [(float(t), float(lv)) for t, lv in zip(times, levels, strict=True)]
        if edge == "falling":
            pts = [pts[0], *sorted(pts[1:], key=lambda p: p[0])]
        sim_pts: tuple[tuple[float, float], ...] = ()
        sim_delay = None
        if simulate:
            sim_pts, sim_delay = _simulated_ramp(net, edge)
        ramps[edge] = Ramp(
            edge,
            vdd,
            (thr[0], thr[1], thr[2]),
            tuple(pts),
            float(typ_delays["node_" + edge][0]),
            sim_pts,
            sim_delay,
        )
    return ramps


def _simulated_ramp(
    net: ReferenceNetwork, edge: str
) -> tuple[tuple[tuple[float, float], ...], float | None]:
    """The simulated node waveform at typical parts and its delay; nothing if it fails."""
    from gapforge.analog import simulate

    try:
        wave = simulate.node_waveform(simulate.edge_circuit(net, edge), beyond=SIM_BEYOND)
    except simulate.SimulationError:
        return (), None
    points = zip(wave.times_s.tolist(), wave.volts.tolist(), strict=True)
    return tuple((float(t), float(v)) for t, v in points), wave.delay_s


# ---------------------------------------------------------------------------------------------
# 3. quantization staircases


def staircase(op: OutputPlan, field: Field, rounding: str) -> Staircase:
    """The rounding rule over the representable values near the chosen code, exactly.

    safe: a request r gets the smallest value v with v / (1 + tol) >= r, so value v_i serves
    requests in (v_(i-1) / (1 + tol), v_i / (1 + tol)]. nearest: v_i serves requests between
    the midpoints to its neighbours (a tie exactly on a midpoint sits on a riser, whichever
    value the fit gives it).
    """
    fit = op.fit
    assert fit.step_s is not None
    step, tol = fit.step_s, fit.request.clock_tol
    edges = [e for e in EDGES if fit.layout.edge_field(e) is field]
    requested = max(fit.request.requested(e) for e in edges)
    chosen_steps = fit.edges[edges[0]].steps
    assert chosen_steps is not None
    table = field.table[0]
    index = table.index(chosen_steps)
    lo, hi = max(0, index - STAIR_STEPS), min(len(table) - 1, index + STAIR_STEPS)

    def value(i: int) -> Fraction:
        return table[i] * step

    def upper(i: int) -> Fraction:
        """The largest request that value i serves."""
        if rounding == "safe":
            return value(i) / (1 + tol)
        return (value(i) + value(i + 1)) / 2 if i + 1 < len(table) else value(i)

    lower = Fraction(0) if lo == 0 else upper(lo - 1)
    breaks = (lower, *(upper(i) for i in range(lo, hi + 1)))
    return Staircase(tuple(value(i) for i in range(lo, hi + 1)), breaks, value(index), requested)


# ---------------------------------------------------------------------------------------------
# 4. Monte Carlo of the reference


def reference_samples(
    net: ReferenceNetwork, samples: int = MC_SAMPLES, seed: int = MC_SEED
) -> dict[str, Any]:
    """Seeded samples of the pair's dead times: every varying part uniform over its band.

    `tolerance.monte_carlo_samples`, the very draws `tolerance.monte_carlo` (and so
    `gapforge analog --monte-carlo N --seed S`) summarises for the same count and seed.
    """
    from gapforge.analog.tolerance import monte_carlo_samples

    return dict(monte_carlo_samples(net, samples, seed=seed))
