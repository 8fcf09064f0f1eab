"""The transient simulation against closed forms and the diode effects the closed form misses."""

from __future__ import annotations

import math

import numpy as np
import pytest

from gapforge.analog.network import DiodeModel, parse_diode
from gapforge.analog.parameters import network_from_options
from gapforge.analog.simulate import (
    EdgeCircuit,
    junction,
    node_waveform,
    simulate_edge,
    slow_edge_over_temperature,
)

SCHOTTKY = "IS=1e-6 N=1.05 RS=1 CJO=20p VJ=0.4 M=0.5 EG=0.69 XTI=2"  # the example


@pytest.mark.parametrize(
    ("vdd", "th", "rising", "r", "c"),
    [
        (3.3, 2.0, True, 10e3, 1e-9),
        (3.3, 1.155, False, 10e3, 1e-9),
        (1.8, 1.17, True, 470.0, 22e-12),
        (1.8, 0.63, False, 100e3, 10e-9),
        (3.3, 3.3 * (1 - math.exp(-1)), True, 1e3, 1e-9),  # one tau: 63.2 %
    ],
)
def test_resistor_edge_agrees_with_the_closed_form_within_0_1_percent(
    vdd: float, th: float, rising: bool, r: float, c: float
) -> None:
    # t = (R + Rout) C ln(|Vfinal - Vstart| / |Vfinal - Vth|): Sedra & Smith, STC circuits
    v0, v1 = (0.0, vdd) if rising else (vdd, 0.0)
    circuit = EdgeCircuit(v0, v1, 25.0, r, c, None, False, 27.0, th)
    exact = (r + 25.0) * c * math.log(vdd / abs(v1 - th))
    assert simulate_edge(circuit).delay_s == pytest.approx(exact, rel=1e-3)
    assert simulate_edge(circuit).delay_s == pytest.approx(exact, rel=1e-4)  # with margin


def test_ideal_diode_on_the_resistor_edge_agrees_with_the_closed_form() -> None:
    # a diode with negligible leakage and no capacitance is invisible on the slow edge
    ideal = parse_diode("IS=1e-16 N=1 CJO=0", "x")
    for anode_at_node, (v0, v1, th) in ((True, (0.0, 3.3, 2.0)), (False, (3.3, 0.0, 1.3))):
        circuit = EdgeCircuit(v0, v1, 25.0, 10e3, 100e-12, ideal, anode_at_node, 27.0, th)
        exact = (10e3 + 25.0) * 100e-12 * math.log(3.3 / abs(v1 - th))
        assert simulate_edge(circuit).delay_s == pytest.approx(exact, rel=1e-3)


def test_junction_capacitance_moves_the_slow_edge_by_several_percent() -> None:
    with_cj = parse_diode("IS=1e-12 N=1.05 CJO=20p VJ=0.4 M=0.5", "x")
    no_cj = parse_diode("IS=1e-12 N=1.05 CJO=0", "x")
    base = dict(v_start=0.0, v_final=3.3, rout=25.0, r=10e3, c_node=100e-12,
                anode_at_node=True, temp_c=27.0, threshold=2.0)
    t_cj = simulate_edge(EdgeCircuit(diode=with_cj, **base)).delay_s  # type: ignore[arg-type]
    t_no = simulate_edge(EdgeCircuit(diode=no_cj, **base)).delay_s  # type: ignore[arg-type]
    assert abs(t_cj / t_no - 1.0) > 0.02


def test_hot_schottky_leakage_collapses_the_slow_edge() -> None:
    d = parse_diode(SCHOTTKY, "x")
    base = dict(v_start=0.0, v_final=3.3, rout=25.0, r=47e3, c_node=100e-12,
                anode_at_node=True, threshold=2.0, diode=d)
    cool = simulate_edge(EdgeCircuit(temp_c=27.0, **base)).delay_s  # type: ignore[arg-type]
    hot = simulate_edge(EdgeCircuit(temp_c=125.0, **base)).delay_s  # type: ignore[arg-type]
    # IS(125 C) ~ 0.9 mA of reverse current against 70 uA through R: the slow edge keeps ~5 %
    assert hot < 0.06 * cool


def test_junction_parameters_at_tnom_are_the_given_ones() -> None:
    d = parse_diode("IS=2n N=1.5 CJO=10p VJ=0.6 M=0.4 TNOM=27", "x")
    j = junction(d, 27.0)
    assert j.sat == pytest.approx(2e-9, rel=1e-12)
    assert j.cj == pytest.approx(10e-12, rel=1e-9)
    assert j.vj == pytest.approx(0.6, rel=1e-9)
    hot = junction(d, 125.0)
    assert hot.vj < 0.6 and hot.cj > 10e-12 and hot.sat > 1e3 * 2e-9


def test_shockley_current_and_thermal_voltage() -> None:
    # VT = kT/q = 25.852 mV at 300 K (reference-facts, exact SI constants)
    d = DiodeModel(is_=1e-12, n=1.0, tnom=300.0 - 273.15)
    j = junction(d, 300.0 - 273.15)
    assert j.vte == pytest.approx(0.025852, abs=1e-6)
    current, _ = j.current(0.6)
    assert current == pytest.approx(1e-12 * math.expm1(0.6 / j.vte) + 1e-12 * 0.6, rel=1e-12)


def test_slow_edge_over_temperature_reports_leakage_erosion() -> None:
    net = network_from_options(
        {"r": "47k", "c": "100p", "diode": SCHOTTKY, "temp": "27:27:125", "bypass": "falling"}
    )
    points = slow_edge_over_temperature(net)
    assert [p.edge for p in points] == ["rising", "rising"]
    cool, hot = points
    assert cool.erosion < 0.05
    assert hot.erosion > 0.9


# --- the node waveform ----------------------------------------------------------------------------


def _crossing_from_samples(times: np.ndarray, volts: np.ndarray, threshold: float,
                           rising: bool) -> float:
    """The first threshold crossing read off the samples alone (linear between samples)."""
    past = (volts >= threshold) if rising else (volts <= threshold)
    k = int(np.argmax(past))
    assert past[k] and k > 0
    t0, t1, v0, v1 = times[k - 1], times[k], volts[k - 1], volts[k]
    return float(t0 + (threshold - v0) * (t1 - t0) / (v1 - v0))


WAVEFORM_CASES = [
    # (description, circuit): slow edges, a bypassed edge, the low-voltage knee, a hot Schottky
    ("rc rising", EdgeCircuit(0.0, 3.3, 25.0, 10e3, 1e-9, None, False, 27.0, 2.0)),
    ("rc falling", EdgeCircuit(3.3, 0.0, 25.0, 1e3, 100e-12, None, False, 27.0, 1.3)),
    ("bypassed falling, Schottky", EdgeCircuit(3.3, 0.0, 25.0, 10e3, 100e-12,
                                               parse_diode(SCHOTTKY, "x"), True, 27.0, 1.3)),
    ("knee at 1.8 V", EdgeCircuit(1.8, 0.0, 25.0, 10e3, 100e-12,
                                  parse_diode("IS=1e-14 N=1.8 RS=5", "x"), True, 27.0, 0.5)),
    ("hot Schottky slow edge", EdgeCircuit(0.0, 3.3, 25.0, 47e3, 100e-12,
                                           parse_diode(SCHOTTKY, "x"), True, 125.0, 2.0)),
]


@pytest.mark.parametrize(("name", "circuit"), WAVEFORM_CASES, ids=[c[0] for c in WAVEFORM_CASES])
def test_waveform_crosses_the_threshold_at_simulate_edges_delay(
    name: str, circuit: EdgeCircuit
) -> None:
    wave = node_waveform(circuit)
    delay = simulate_edge(circuit).delay_s
    rising = circuit.v_final > circuit.v_start
    # the reported crossing is the same integration's, and the samples themselves cross there
    assert wave.delay_s == pytest.approx(delay, rel=1e-12)
    read = _crossing_from_samples(wave.times_s, wave.volts, circuit.threshold, rising)
    # to the integrator's tolerance: a local error of 2e-7 x the step height on the node,
    # turned into time through the node's slope at the crossing
    slope = float(np.max(np.abs(np.diff(wave.volts) / np.diff(wave.times_s))))
    span = abs(circuit.v_final - circuit.v_start)
    assert abs(read - delay) <= max(2e-7 * span / slope, 1e-9 * delay)
    # starts at the step, times strictly increasing, ends a quarter of the delay beyond it
    assert wave.times_s[0] == 0.0 and wave.volts[0] == circuit.v_start
    assert bool(np.all(np.diff(wave.times_s) > 0.0))
    assert wave.times_s[-1] == pytest.approx(1.25 * delay, rel=1e-12)
    assert len(wave.times_s) == len(wave.volts)
    # the node never leaves the supply rails by more than a diode drop
    assert float(np.min(wave.volts)) > -0.8 and float(np.max(wave.volts)) < span + 0.8


@pytest.mark.parametrize("rising", [True, False])
def test_waveform_of_the_resistor_edge_is_the_textbook_exponential(rising: bool) -> None:
    # Single-time-constant step response (Sedra & Smith, Microelectronic Circuits, STC
    # circuits): V(t) = Vfinal + (Vstart - Vfinal) exp(-t / RC), RC = (R + Rout) C. With an ideal
    # diode (no leakage, no junction capacitance) on the resistor edge, every simulated sample
    # from the step to 2.5 delays must follow it within 0.1 % of the step height.
    ideal = parse_diode("IS=1e-16 N=1 CJO=0", "x")
    v0, v1, th = (0.0, 3.3, 2.0) if rising else (3.3, 0.0, 1.3)
    circuit = EdgeCircuit(v0, v1, 25.0, 10e3, 100e-12, ideal, rising, 27.0, th)
    wave = node_waveform(circuit, beyond=1.5)
    rc = (10e3 + 25.0) * 100e-12
    exact = v1 + (v0 - v1) * np.exp(-wave.times_s / rc)
    assert float(np.max(np.abs(wave.volts - exact))) <= 1e-3 * 3.3
    # and the distance still to go, (Vfinal - V), is the exponential itself within 0.1 %
    assert float(np.max(np.abs((v1 - wave.volts) / (v1 - exact) - 1.0))) <= 1e-3
    # the waveform reaches past one time constant: 63.2 % of the step there (1 - 1/e)
    assert wave.times_s[-1] > rc
    at_rc = float(np.interp(rc, wave.times_s, wave.volts))
    assert abs(at_rc - v0) / 3.3 == pytest.approx(1 - math.exp(-1), abs=1e-3)
    # the delay: RC ln(|Vfinal - Vstart| / |Vfinal - Vth|) (the same textbook response)
    assert wave.delay_s == pytest.approx(rc * math.log(3.3 / abs(v1 - th)), rel=1e-3)


def test_waveform_rejects_a_negative_beyond() -> None:
    circuit = EdgeCircuit(0.0, 3.3, 25.0, 1e3, 1e-9, None, False, 27.0, 2.0)
    with pytest.raises(ValueError, match="beyond"):
        node_waveform(circuit, beyond=-0.1)
