"""The analog reference model: closed forms, knee, pair dead times, design-file reading."""

from __future__ import annotations

import math
from dataclasses import replace
from fractions import Fraction

import numpy as np
import pytest

from gapforge.analog.closed_form import diode_knee_voltage, node_delay
from gapforge.analog.corners import channel_edge_delays, values_at
from gapforge.analog.describe import bypass_notes
from gapforge.analog.network import EdgeRange, ReferenceNetwork, parse_diode
from gapforge.analog.parameters import network_from_options, read_reference
from gapforge.analog.tolerance import reference_dead_times
from gapforge.base.errors import GapforgeError
from gapforge.base.schema import Reader

A = np.asarray


def _exact(**over: str) -> ReferenceNetwork:
    """A network with every spread removed (so typ == min == max)."""
    base = {
        "r": "10k", "c": "1n", "vdd": "3.3", "rout": "1m", "cin": "0", "cstray": "0",
        "r_tol": "0", "c_tol": "0", "r_tempco": "0", "c_tempco": "0", "temp": "25",
        "vt_plus": "2.0V", "vt_minus": "0.35vdd", "bypass": "none", "diode": "IS=4n N=1.9",
    }
    base.update(over)
    return network_from_options(base)


def _node(net: ReferenceNetwork, edge: str, *, textbook: bool = False) -> float:
    values = values_at(net, {"vdd": A([0.5])})
    return float(channel_edge_delays(net, values, textbook=textbook)["node_" + edge][0])


# -- textbook RC values (Sedra & Smith, Microelectronic Circuits, appendix on single-time-constant
#    circuits; computed constants from reference-facts.md)


def test_one_time_constant_reaches_63_2_percent() -> None:
    tau = 1e-6
    t = node_delay(False, A([1.0]), A([1.0 - 0.632121]), A([tau]), A([0.0]), A([0.0]))
    assert float(t[0]) == pytest.approx(tau, rel=1e-5)  # 1 - e^-1 = 63.2121 %


def test_half_way_takes_ln2_and_ten_to_ninety_takes_ln9() -> None:
    tau = 1e-6
    half = node_delay(False, A([1.0]), A([0.5]), A([tau]), A([0.0]), A([0.0]))
    assert float(half[0]) == pytest.approx(0.693147 * tau, rel=1e-6)  # ln 2
    t10 = node_delay(False, A([1.0]), A([0.9]), A([tau]), A([0.0]), A([0.0]))
    t90 = node_delay(False, A([1.0]), A([0.1]), A([tau]), A([0.0]), A([0.0]))
    assert float(t90[0] - t10[0]) == pytest.approx(2.197225 * tau, rel=1e-6)  # ln 9, "2.2 RC"


def test_computed_vectors_from_reference_facts() -> None:
    # reference-facts.md "Computed vector": 10 kohm, 1 nF, 3.3 V, threshold 2.0 V -> 9.3156 us;
    # discharging from 3.3 V to 0.35 VDD -> 10.498 us (Rout 1 mohm is negligible here)
    net = _exact()
    assert _node(net, "rising") == pytest.approx(9.3156e-6, rel=2e-5)
    assert _node(net, "falling") == pytest.approx(10.498e-6, rel=5e-5)


def test_time_constant_includes_rout_cin_and_stray() -> None:
    # common practice: tau = (R + Rout)(C + Cin + Cstray)
    net = _exact(rout="100", cin="5p", cstray="2p")
    expected = (10e3 + 100) * (1e-9 + 7e-12) * math.log(3.3 / 1.3)
    assert _node(net, "rising") == pytest.approx(expected, rel=1e-12)


# -- the bypassed edge and its knee


def test_textbook_bypassed_edge_is_fast_when_the_threshold_lies_inside_the_diode_range() -> None:
    # the textbook two-slope form (shown for reference, not used for ranges)
    net = _exact(bypass="falling", vf="0.3V", rout="20")
    tau_fast = 20 * 1e-9
    assert _node(net, "falling", textbook=True) == pytest.approx(
        tau_fast * math.log(3.3 / 1.155), rel=1e-9)
    assert bypass_notes(net) == {}
    # the model: the diode calibrated to a 0.3 V knee still needs its forward voltage, so the
    # node is slower than the ideal switch through Rout, and faster than R alone
    model = _node(net, "falling")
    assert tau_fast * math.log(3.3 / 1.155) < model < (10e3 + 20) * 1e-9 * math.log(3.3 / 1.155)


def test_bypassed_edge_goes_through_r_beyond_the_knee() -> None:
    # 1.8 V, VT- at 0.35 VDD = 0.63 V from the final value; a 0.9 V knee leaves 0.27 V for R
    net = _exact(bypass="falling", vf="0.9V", rout="20", vdd="1.8", vt_plus="1.2V",
                 vt_minus="0.35vdd")
    tau_fast = 20 * 1e-9
    tau_slow = (10e3 + 20) * 1e-9
    expected = tau_fast * math.log(1.8 / 0.9) + tau_slow * math.log(0.9 / 0.63)
    assert _node(net, "falling", textbook=True) == pytest.approx(expected, rel=1e-9)
    assert _node(net, "falling", textbook=True) > 100 * tau_fast
    assert _node(net, "falling") > 100 * tau_fast  # the model sees the knee too
    note = bypass_notes(net)["falling"]
    assert "NOT fast" in note and "through R" in note


def test_knee_voltage_balances_diode_and_resistor_currents() -> None:
    diode = parse_diode("IS=4n N=1.9", "x")
    v = diode_knee_voltage(diode, 4.7e3, 27.0)  # at TNOM, IS is as given
    vt = 1.9 * 1.380649e-23 * 300.15 / 1.602176634e-19
    assert 4e-9 * math.expm1(v / vt) == pytest.approx(v / 4.7e3, rel=1e-9)
    # a leaky diode whose zero-bias conductance beats 1/R has no knee above zero
    leaky = parse_diode("IS=1e-6 N=1.05 EG=0.69 XTI=2", "x")
    assert diode_knee_voltage(leaky, 10e3, 125.0) == 0.0
    # forward voltage falls with temperature (Sedra & Smith ch. 3: about -2 mV/K)
    assert diode_knee_voltage(diode, 4.7e3, 125.0) < diode_knee_voltage(diode, 4.7e3, -40.0)


# -- the pair


def test_dead_times_are_the_slow_turn_on_minus_the_fast_turn_off() -> None:
    net = _exact(bypass="falling", vf="0.3V", rout="20", driver_delay="3n", schmitt_delay="5n")
    slow = _node(net, "rising")
    fast = _node(net, "falling")
    assert slow == pytest.approx((10e3 + 20) * 1e-9 * math.log(3.3 / 1.3), rel=1e-3)  # RC
    result = reference_dead_times(net)
    assert set(result) == {"to_high", "to_low"}
    for rng in result.values():
        assert isinstance(rng, EdgeRange)
        assert float(rng.typ_s) == pytest.approx(slow - fast, abs=1e-12)


def test_channel_mismatch_widens_the_pair_range() -> None:
    # only R varies: the high channel's slow edge at R min against the low channel's fast edge
    # at R max (independent parts), and vice versa
    net = _exact(bypass="falling", vf="0.3V", rout="20", r_tol="5%")
    rng = reference_dead_times(net)["to_high"]

    def node(r: str, edge: str) -> float:
        # the same diode (its IS solved for the nominal 10k's knee), another resistor
        return _node(replace(net, r=Fraction(r.replace("k", "")) * 1000, r_tol=Fraction(0)), edge)

    # both edges grow with R: the shortest dead time pairs the high channel's smallest R with
    # the low channel's largest
    assert float(rng.min_s) == pytest.approx(
        node("9.5k", "rising") - node("10.5k", "falling"), abs=2e-12)
    assert float(rng.max_s) == pytest.approx(
        node("10.5k", "rising") - node("9.5k", "falling"), abs=2e-12)


def test_ranges_round_to_the_safe_side_in_whole_picoseconds() -> None:
    net = network_from_options({"r": "4.7k", "c": "100p"})
    from gapforge.analog.tolerance import worst_case

    wc = worst_case(net)
    for key, rng in reference_dead_times(net).items():
        lo, _, hi = wc.floats[key]
        assert (rng.min_s * 10**12).denominator == 1 and (rng.max_s * 10**12).denominator == 1
        assert rng.min_s <= Fraction(lo) < rng.min_s + Fraction(1, 10**12)
        assert rng.max_s - Fraction(1, 10**12) < Fraction(hi) <= rng.max_s
        assert rng.min_s <= rng.typ_s <= rng.max_s


def test_wrong_orientation_gives_negative_dead_time() -> None:
    # the diode bypasses the rising edge and no inverter follows: the network delays turn-off
    bad = network_from_options({"r": "4.7k", "c": "100p", "bypass": "rising"})
    assert reference_dead_times(bad)["to_high"].max_s < 0
    # the same with an output inverter delays turn-on again
    good = network_from_options(
        {"r": "4.7k", "c": "100p", "bypass": "rising", "output_inverter": True}
    )
    assert reference_dead_times(good)["to_high"].min_s > 0


# -- reading


def test_read_reference_accepts_trade_terms_and_engineering_notation() -> None:
    reader = Reader("design.toml")
    table = reader.table(
        {"r": "4.7k", "c": "100p", "vdd": "3.0V:3.3V:3.6V", "r_tol": "1%", "c_tol": "5%",
         "vt_plus": ["1.6V", "1.9V", "2.0V"], "vt_minus": "0.35vdd:0.4vdd:0.45vdd",
         "bypass": "falling", "diode": "IS=1n N=1.8 CJO=2p", "temp": "-40C:25C:105C",
         "levels": "jedec-3v3"},
        "reference",
    )
    net = read_reference(table)
    reader.finish()
    assert net.r == 4700 and net.c == Fraction(1, 10**10)
    assert net.vdd.min == 3 and net.temp.max == 105
    assert net.vt_plus.max.value == 2 and not net.vt_plus.max.relative
    assert net.diode.cjo == pytest.approx(2e-12) and net.diode.m == 0.5  # SPICE default
    assert "cin" in net.defaults and "r" not in net.defaults


@pytest.mark.parametrize(
    ("data", "key", "text"),
    [
        ({"r": "-4.7k", "c": "100p"}, "reference.r", "negative"),
        ({"r": "4.7k", "c": "0"}, "reference.c", "greater than zero"),
        ({"r": "4.7k", "c": "100p", "vt_plus": "4V"}, "reference.vt_plus", "outside 0..VDD"),
        ({"r": "4.7k", "c": "100p", "vt_minus": "2.5V", "vt_plus": "2.0V"},
         "reference.vt_minus", "VT- above VT+"),
        ({"r": "4.7k", "c": "100p", "r_tol": "150%"}, "reference.r_tol", "below 100 %"),
        ({"r": "4.7k", "c": "100p", "rtol": "1%"}, "reference.rtol", "did you mean 'r_tol'"),
        ({"c": "100p"}, "reference.r", "missing"),
        ({"r": "4.7k", "c": "100p", "diode": "IS=1n XX=3"}, "reference.diode", "XX"),
    ],
)
def test_read_reference_records_problems_on_the_reader(
    data: dict[str, object], key: str, text: str
) -> None:
    reader = Reader("design.toml")
    net = read_reference(reader.table(data, "reference"))
    assert isinstance(net, ReferenceNetwork)
    assert reader.problems, "a problem must be recorded"
    paths = [p for p, _ in reader.problems]
    assert key in paths
    message = dict(reader.problems)[key]
    assert text in message
    with pytest.raises(GapforgeError):
        reader.finish()
