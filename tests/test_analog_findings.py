"""analog.reference_findings: the warnings every build repeats about its analog reference."""

from __future__ import annotations

import math
from dataclasses import replace
from fractions import Fraction

import pytest

from gapforge.analog.findings import reference_findings, slow_edge_leakage, without_leakage
from gapforge.analog.network import DEFAULT_DIODE_TEXT, DEFAULT_LEAKAGE_SHARE
from gapforge.analog.parameters import network_from_options
from gapforge.analog.simulate import slow_edge_over_temperature
from gapforge.analog.tolerance import reference_dead_times
from gapforge.base.quantities import format_quantity

SCHOTTKY = "IS=1e-6 N=1.05 RS=1 CJO=20p VJ=0.4 M=0.5 EG=0.69 XTI=2"  # the example
# the default network (falling edge bypassed, silicon diode) with a Schmitt part's own thresholds
GOOD = {"r": "4.7k", "c": "100p", "vt_plus": "50%:60%:70%", "vt_minus": "30%:40%:50%",
        "diode": DEFAULT_DIODE_TEXT}  # given: the default diode's own note is tested elsewhere


def test_a_sound_network_has_no_findings() -> None:
    net = network_from_options(GOOD)
    assert all(r.min_s > 0 for r in reference_dead_times(net).values())
    assert reference_findings(net) == []


def test_wrong_orientation_names_each_dead_time_its_edge_and_the_corner_value() -> None:
    # bypassing the edge that should be delayed: the turn-on is fast and the turn-off slow
    net = network_from_options({**GOOD, "bypass": "rising"})
    ranges = reference_dead_times(net)
    findings = reference_findings(net)
    overlap = [f for f in findings if "not positive" in f]
    assert len(overlap) == 2
    for key, edge, side in (("to_high", "rising", "high"), ("to_low", "falling", "low")):
        line = next(f for f in overlap if f.startswith(key + " "))
        assert f"on the PWM {edge} edge, before the {side} side turns on" in line
        assert ranges[key].min_s < 0
        assert f"worst-case minimum dead time is {format_quantity(ranges[key].min_s, 's')}" in line
        assert "shoot through" in line
        assert "\n" not in line


def test_output_inverter_swaps_the_pwm_edges() -> None:
    net = network_from_options({**GOOD, "bypass": "rising", "output_inverter": "true"})
    # with the output inverter the high output turns on on the channel's falling input edge,
    # which is now the slow one: the pair is sound
    assert reference_findings(net) == []
    wrong = network_from_options({**GOOD, "bypass": "falling", "output_inverter": "true"})
    lines = reference_findings(wrong)
    assert any(f.startswith("to_high (on the PWM falling edge") for f in lines)


def test_zero_is_an_overlap_too() -> None:
    # <= 0, not < 0: a dead time of exactly zero leaves no margin at all. Same parts on both
    # edges with no diode and no spread: the two channels' delays cancel exactly.
    net = network_from_options({"r": "4.7k", "c": "100p", "bypass": "none", "vdd": "3.3",
                                "vt_plus": "50%", "vt_minus": "50%", "rout": "25", "cin": "5p",
                                "cstray": "2p", "r_tol": "0", "c_tol": "0", "temp": "25"})
    ranges = reference_dead_times(net)
    assert ranges["to_high"].min_s == 0
    assert sum("not positive" in f for f in reference_findings(net)) == 2


def test_hot_schottky_leakage_is_found_at_the_hottest_temperature() -> None:
    net = network_from_options({"r": "47k", "c": "100p", "diode": SCHOTTKY})
    findings = reference_findings(net)
    leak = [f for f in findings if "DIODE LEAKAGE" in f]
    assert len(leak) == 1
    assert "AT 125 C" in leak[0] and "SLOW RISING EDGE" in leak[0] and "HOT BOARD" in leak[0]
    # the share is a setting: above the erosion (95 %) the warning goes
    quiet = reference_findings(net, leakage_share=Fraction(99, 100))
    assert not any("DIODE LEAKAGE" in f for f in quiet)
    # the default share is the one the warning states
    assert f"more than {float(DEFAULT_LEAKAGE_SHARE) * 100:g} %" in leak[0]


def test_model_leakage_agrees_with_the_transient_simulation() -> None:
    # the charge integral (milliseconds) against the TR-BDF2 transient (tens of ms), which
    # tests/test_simulate_spice.py holds to ngspice within 1 % on the slow edge
    for r in ("4.7k", "47k"):
        for bypass in ("rising", "falling"):
            net = network_from_options({"r": r, "c": "100p", "diode": SCHOTTKY, "bypass": bypass})
            model = slow_edge_leakage(net)
            sim = slow_edge_over_temperature(net)
            assert [(p.edge, p.temp_c) for p in model] == [(p.edge, p.temp_c) for p in sim]
            for m, s in zip(model, sim, strict=True):
                assert m.delay_s == pytest.approx(s.delay_s, rel=0.01)
                assert m.delay_no_leakage_s == pytest.approx(s.delay_no_leakage_s, rel=0.01)
                assert m.erosion == pytest.approx(s.erosion, abs=0.01)


def test_without_leakage_the_slow_edge_is_the_textbook_rc() -> None:
    # Sedra & Smith, single-time-constant circuits: t = (R + Rout) C ln(VDD / (VDD - VT+)).
    # With no junction capacitance and the leakage removed the diode is invisible.
    diode = "IS=1e-6 N=1.05 RS=1 CJO=0 VJ=0.4 M=0.5 EG=0.69 XTI=2"
    net = network_from_options({"r": "47k", "c": "100p", "diode": diode, "vdd": "3.3",
                                "vt_plus": "2.0", "rout": "25", "cin": "0", "cstray": "0"})
    hot = next(p for p in slow_edge_leakage(net) if p.temp_c == 125.0)
    textbook = (47e3 + 25.0) * 100e-12 * math.log(3.3 / (3.3 - 2.0))
    assert hot.delay_no_leakage_s == pytest.approx(textbook, rel=1e-4)
    assert hot.erosion > 0.9  # and the leakage takes nearly all of it
    assert without_leakage(net).diode.cjo == net.diode.cjo


def test_no_diode_means_no_leakage() -> None:
    net = network_from_options({**GOOD, "bypass": "none"})
    points = slow_edge_leakage(net)
    assert {p.edge for p in points} == {"rising", "falling"}
    assert all(p.erosion == 0.0 for p in points)


def test_bypassed_edge_knee_note_is_repeated() -> None:
    # 1.8 V with a 1.2 V-knee diode: the threshold lies inside the knee (see test_analog)
    net = network_from_options({**GOOD, "levels": "jedec-1v8", "vf": "0.7"})
    findings = reference_findings(net)
    assert any("bypassed falling edge" in f for f in findings)


def test_given_dead_times_are_used_as_they_are() -> None:
    net = network_from_options({**GOOD, "bypass": "rising"})
    computed = reference_dead_times(net)
    assert reference_findings(net, computed) == reference_findings(net)
    # a caller's ranges are not recomputed: a made-up positive range clears the overlap lines
    positive = {k: replace(v, min_s=Fraction(1, 10**9)) for k, v in computed.items()}
    assert not any("not positive" in f for f in reference_findings(net, positive))
