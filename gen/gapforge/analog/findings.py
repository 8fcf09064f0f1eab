"""The network's own dangers as one-line findings: overlap, hot-board leakage, a junction
capacitance that couples the step past the threshold, the bypass knee."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace
from fractions import Fraction
from typing import TYPE_CHECKING

from gapforge.analog.corners import channel_edge_delays, pair_roles, values_at
from gapforge.analog.describe import bypass_notes
from gapforge.analog.network import (
    DEFAULT_LEAKAGE_SHARE,
    EDGES,
    PAIR_KEYS,
    EdgeRange,
    ReferenceNetwork,
    SlowEdgePoint,
)
from gapforge.analog.tolerance import reference_dead_times
from gapforge.base.display import format_si
from gapforge.base.quantities import (
    format_quantity,
    format_tolerance,
)
from gapforge.base.records import record

if TYPE_CHECKING:
    import numpy as np
    import numpy.typing as npt


    FloatArray = npt.NDArray[np.float64]

def without_leakage(net: ReferenceNetwork) -> ReferenceNetwork:
    """The same network with the diode's saturation current scaled to nothing (a given knee
    voltage dropped with it, since it sets the saturation current); junction capacitance kept."""
    return replace(net, vf=None, leakage_scale=1.0,
                   diode=replace(net.diode, is_=net.diode.is_ * 1e-30))


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


def without_junction_capacitance(net: ReferenceNetwork) -> ReferenceNetwork:
    """The same network with the diode's junction capacitance removed (leakage kept)."""
    return replace(net, diode=replace(net.diode, cjo=0.0))


@record
class CouplingPoint:
    """A slow edge's node delay with and without the diode's junction capacitance."""

    temp_c: float
    edge: str
    delay_s: float
    delay_no_cj_s: float

    @property
    def share(self) -> float:
        """The share of the slow edge the coupled step takes away (0 = none, 1 = all)."""
        if not self.delay_no_cj_s > 0.0:
            return 0.0
        return max(0.0, 1.0 - self.delay_s / self.delay_no_cj_s)


def slow_edge_coupling(net: ReferenceNetwork) -> list[CouplingPoint]:
    """The slow edges at the temperature band's min, typ and max, typical parts, by the model,
    with the diode's junction capacitance and without it. Empty without a diode or a CJO."""
    import numpy as np

    if net.bypass == "none" or net.diode.cjo <= 0.0:
        return []
    temps = [float(t) for t in (net.temp.min, net.temp.typ, net.temp.max)]
    edges = net.slow_edges()
    v = values_at(net, {"temp": np.asarray([0.0, 0.5, 1.0])})
    with_cj = channel_edge_delays(net, v, edges)
    without = channel_edge_delays(without_junction_capacitance(net), v, edges)
    return [
        CouplingPoint(temps[k], edge, float(np.broadcast_to(with_cj["node_" + edge], (3,))[k]),
                      float(np.broadcast_to(without["node_" + edge], (3,))[k]))
        for edge in edges for k in range(3)
    ]


def coupling_finding(
    net: ReferenceNetwork, points: list[CouplingPoint], share: Fraction
) -> str | None:
    """The warning when the diode's junction capacitance couples the input step onto the node
    and takes more than `share` of a slow edge (the edge most affected over temperature)."""
    if not points:
        return None
    worst = max(points, key=lambda p: (p.share, -p.delay_s))
    if not worst.share > float(share):
        return None
    ratio = net.diode.cjo / float(net.c)
    return (
        f"the diode's junction capacitance ({format_si(net.diode.cjo, 'F')} at 0 V) is "
        f"{ratio * 100:.0f} % of C: the step couples through it and the slow {worst.edge} edge "
        f"is only {format_si(worst.delay_s, 's')} (without it "
        f"{format_si(worst.delay_no_cj_s, 's')}, at {worst.temp_c:g} C, typical parts;"
        f" more than {format_tolerance(share)} lost): choose a diode with less capacitance or a "
        "larger C"
    )


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


def default_diode_note(net: ReferenceNetwork) -> str | None:
    """Say so when the worst case rests on the generic default diode (values from memory)."""
    if net.bypass == "none" or "diode" not in net.defaults:
        return None
    return ("note: the bypass diode is the generic default diode (a small-signal silicon diode, "
            "from memory, not a measured part): the worst case rests on it; give your diode's "
            "model card (diode = \"IS=... N=... RS=... CJO=...\")")


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
    - the diode's junction capacitance coupling the step onto the node and taking more than
      `leakage_share` of a slow edge (`slow_edge_coupling`);
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
    coupling = coupling_finding(net, slow_edge_coupling(net), leakage_share)
    if coupling is not None:
        findings.append(coupling)
    notes = bypass_notes(net)
    findings += [notes[e] for e in EDGES if e in notes]
    diode_note = default_diode_note(net)
    if diode_note is not None:
        findings.append(diode_note)
    return findings


