"""IEC 60063 preferred values and R/C suggestions (never an unsafe pair)."""

from __future__ import annotations

import re
import shutil
import subprocess
from dataclasses import replace
from fractions import Fraction
from pathlib import Path

import pytest

from gapforge.analog.network import DEFAULT_DIODE_TEXT, parse_diode
from gapforge.analog.parameters import network_from_options
from gapforge.analog.preferred import E12, E24, E96, SERIES, nearest, series_values, suggest
from gapforge.analog.simulate import EdgeCircuit, spice_netlist
from gapforge.analog.tolerance import reference_dead_times, typical
from gapforge.base.errors import GapforgeError


def test_e24_differs_from_the_rounding_formula_in_eight_places() -> None:
    # IEC 60063:2015 (reference-facts): 2.7 3.0 3.3 3.6 3.9 4.3 4.7 8.2 against computed
    # 2.6 2.9 3.2 3.5 3.8 4.2 4.6 8.3
    formula = [round(10 * 10 ** (i / 24)) for i in range(24)]
    diffs = [(a, b) for a, b in zip(E24, formula, strict=True) if a != b]
    assert diffs == [(27, 26), (30, 29), (33, 32), (36, 35), (39, 38), (43, 42), (47, 46),
                     (82, 83)]


def test_e96_equals_its_formula_and_e12_is_every_other_e24() -> None:
    # reference-facts: E96 = round(100 * 10^(i/96)), i = 0..95, with no exceptions
    assert list(E96) == [round(100 * 10 ** (i / 96)) for i in range(96)]
    assert E24[::2] == E12
    assert len(E12) == 12 and len(E24) == 24 and len(E96) == 96


def test_series_values_and_nearest() -> None:
    values = series_values("E12", Fraction(1000), Fraction(10000))
    assert values[0] == 1000 and values[-1] == 10000 and Fraction(4700) in values
    assert nearest("E24", Fraction(5000)) == (Fraction(4700), Fraction(5100))
    assert nearest("E96", Fraction(4750)) == (Fraction(4750), Fraction(4750))
    with pytest.raises(GapforgeError):
        series_values("E7", Fraction(1), Fraction(10))


def test_suggestions_hit_the_target_and_are_ranked_by_error() -> None:
    net = network_from_options({"r": "4.7k", "c": "100p"})
    target = Fraction(150, 10**9)
    found = suggest(net, target, rank="typical")
    pairs = found.pairs
    assert pairs and found.rank == "typical"
    errors = [abs(p.error) for p in pairs]
    assert errors == sorted(errors)
    assert errors[0] < 0.01
    for p in pairs:
        # the reported typical value is the model's, for that pair
        assert typical(replace(net, r=p.r, c=p.c))["to_high"] == pytest.approx(p.typ_s)
        assert p.ranges["to_high"].min_s <= Fraction(p.typ_s) <= p.ranges["to_high"].max_s
        assert p.r in series_values("E96", p.r, p.r) and p.c in series_values("E12", p.c, p.c)


# The README example: 4.7k / 100p network, falling edge bypassed, VT+ 2.0 V, VT- 1.0 V, asking
# for 300 ns. Ranked by typical error alone, 121 ohm / 3.9 nF came sixth although its worst-case
# dead time is -39.9 ns (an overlap).
# the README's network, with the capacitor tolerance given (else E12's usual 10 % applies)
README = {"vdd": "3.3", "r": "4.7k", "c": "100p", "bypass": "falling", "vt_plus": "2.0",
          "vt_minus": "1.0", "c_tol": "5%"}
TARGET = Fraction(300, 10**9)
UNSAFE_PAIR = (Fraction(121), Fraction(39, 10**10))


def test_readme_example_never_proposes_a_pair_that_can_overlap() -> None:
    net = network_from_options(README)
    for rank in ("worst-case", "typical"):
        found = suggest(net, TARGET, rank=rank)
        assert len(found.pairs) == 6
        for p in found.pairs:
            assert p.safe and not p.unsafe
            for key in ("to_high", "to_low"):
                assert p.ranges[key].min_s > 0
                # the pair's range is the one the reference check (corners + Monte Carlo) gives
                assert p.ranges[key] == reference_dead_times(replace(net, r=p.r, c=p.c))[key]
        assert UNSAFE_PAIR not in [(p.r, p.c) for p in found.pairs]
        rejected = {(p.r, p.c): p for p in found.rejected}
        bad = rejected[UNSAFE_PAIR]
        assert not bad.safe
        assert bad.ranges["to_high"].min_s == Fraction(-39915, 10**12)
        assert any("to_high worst-case minimum -39.92 ns is not positive" in u for u in bad.unsafe)
        # the unsafe pair's typical value is closer to the target than most proposed ones: it
        # was dropped for its worst case, not for missing the target
        assert abs(bad.error) < 0.005


def test_rank_worst_case_orders_by_the_farthest_end_of_the_range() -> None:
    net = network_from_options(README)
    found = suggest(net, TARGET)  # worst-case is the default
    assert found.rank == "worst-case"
    worst = [p.worst_error for p in found.pairs]
    assert worst == sorted(worst)
    for p in found.pairs:
        r = p.ranges["to_high"]
        expected = max(TARGET - r.min_s, r.max_s - TARGET) / TARGET
        assert p.worst_error == pytest.approx(float(expected), abs=1e-5)  # the range is in ps
    # ranked by worst case, the best pair's whole range stays nearer the target than the
    # typical ranking's first pair's
    by_typical = suggest(net, TARGET, rank="typical").pairs[0]
    assert found.pairs[0].worst_error <= by_typical.worst_error


def test_min_dead_drops_pairs_whose_worst_case_falls_below_it() -> None:
    net = network_from_options(README)
    floor = Fraction(255, 10**9)
    found = suggest(net, TARGET, min_dead_s=floor, rank="typical")
    assert found.pairs
    for p in found.pairs:
        assert p.ranges["to_high"].min_s >= floor and p.ranges["to_low"].min_s >= floor
    below = [p for p in found.rejected if p.ranges["to_high"].min_s > 0]
    assert below, "some positive but too short pairs are rejected"
    assert all("below the minimum dead time 255 ns" in " ".join(p.unsafe) for p in below)
    # without the floor those pairs were offered: the floor really filtered
    unfiltered = {(p.r, p.c) for p in suggest(net, TARGET, rank="typical").pairs}
    assert unfiltered & {(p.r, p.c) for p in below}


def test_no_safe_pair_leaves_an_empty_list_and_every_candidate_rejected() -> None:
    net = network_from_options(README)
    found = suggest(net, TARGET, min_dead_s=TARGET * 2)
    assert found.pairs == ()
    assert len(found.rejected) == found.candidates > 0


# ngspice (the general-purpose circuit simulator, `ngspice -b`) confirms the README example's
# overlap: at -40 C the high channel's resistor edge with its fastest parts (R 121 ohm -1 % and
# -100 ppm/K, C 3.9 nF -5 % and -30 ppm/K plus the smallest Cin and stray, Rout 15 ohm) against
# the low channel's bypassed edge with its slowest (+1 %, +5 %, +100 / +30 ppm/K, largest Cin
# and stray, Rout 50 ohm), the default diode. Recorded with ngspice-39 from these netlists
# (a 1 ps ramp, 0.5 ns steps: 0.1 % of the delay).
_SPICE_MODEL = (".model dmod D(IS=4e-09 N=1.9 RS=0.6 CJO=1.5e-12 VJ=0.7 M=0.4 EG=1.11 XTI=3 "
                "TNOM=27 FC=0.5 BV=75)")
CORNER_NETLISTS = {
    "slow": ("* gapforge reference network edge (generated)\n"
             ".options reltol=1e-6 abstol=1e-15 vntol=1e-9 chgtol=1e-20 method=gear\n"
             ".options temp=-40 tnom=27\nV1 s 0 PWL(0 0 1e-12 3.3)\nRout s a 15\n"
             "R1 a n 119.011365\nC1 n 0 3.70177525e-09\nD1 n a dmod\n" + _SPICE_MODEL + "\n"
             ".tran 5e-10 1.5e-06 0 5e-10\n.meas tran tcross WHEN v(n)=2 RISE=1\n.end\n"),
    "fast": ("* gapforge reference network edge (generated)\n"
             ".options reltol=1e-6 abstol=1e-15 vntol=1e-9 chgtol=1e-20 method=gear\n"
             ".options temp=-40 tnom=27\nV1 s 0 PWL(0 3.3 1e-12 0)\nRout s a 50\n"
             "R1 a n 123.004365\nC1 n 0 4.11398525e-09\nD1 n a dmod\n" + _SPICE_MODEL + "\n"
             ".tran 5e-10 1.5e-06 0 5e-10\n.meas tran tcross WHEN v(n)=1 FALL=1\n.end\n"),
}
NGSPICE_TCROSS_S = {"slow": 4.62111e-07, "fast": 5.01988e-07}
RAMP_S = 1e-12


def _corner_circuits() -> dict[str, EdgeCircuit]:
    diode = parse_diode(DEFAULT_DIODE_TEXT, "diode")
    dt = 65.0  # -40 C against the 25 C at which R and C are specified
    r_lo, r_hi = 121 * 0.99 * (1 - 100e-6 * dt), 121 * 1.01 * (1 + 100e-6 * dt)
    c_lo = 3.9e-9 * 0.95 * (1 - 30e-6 * dt) + 3e-12 + 1e-12
    c_hi = 3.9e-9 * 1.05 * (1 + 30e-6 * dt) + 8e-12 + 3e-12
    return {
        "slow": EdgeCircuit(0.0, 3.3, 15.0, r_lo, c_lo, diode, True, -40.0, 2.0),
        "fast": EdgeCircuit(3.3, 0.0, 50.0, r_hi, c_hi, diode, True, -40.0, 1.0),
    }


def _ngspice_dead_time(tcross: dict[str, float]) -> float:
    # to_high = the high side's delayed turn-on minus the low side's turn-off (no propagation
    # delays in this network); each crossing less half the ramp (an ideal step's equivalent)
    return (tcross["slow"] - RAMP_S / 2) - (tcross["fast"] - RAMP_S / 2)


def test_readme_unsafe_pair_overlaps_in_ngspice_recorded() -> None:
    for name, circuit in _corner_circuits().items():
        assert spice_netlist(circuit, RAMP_S, 5e-10, 1.5e-6) == CORNER_NETLISTS[name]
    reference = _ngspice_dead_time(NGSPICE_TCROSS_S)
    assert reference < -35e-9  # ngspice: -39.88 ns, the outputs overlap
    net = network_from_options(README)
    model_min = reference_dead_times(replace(net, r=UNSAFE_PAIR[0], c=UNSAFE_PAIR[1]))
    # the worst case is the minimum over all corners, so at most this corner's value, and the
    # model agrees with ngspice at the corner within 1 ns
    assert float(model_min["to_high"].min_s) <= reference + 1e-9
    assert float(model_min["to_high"].min_s) == pytest.approx(reference, abs=1e-9)


@pytest.mark.skipif(shutil.which("ngspice") is None, reason="ngspice not installed")
def test_readme_unsafe_pair_overlaps_in_ngspice_live(tmp_path: Path) -> None:
    live: dict[str, float] = {}
    for name, text in CORNER_NETLISTS.items():
        path = tmp_path / f"{name}.cir"
        path.write_text(text)
        proc = subprocess.run(["ngspice", "-b", str(path)], capture_output=True, text=True,
                              timeout=120, check=False)
        match = re.search(r"^tcross\s*=\s*([-+0-9.eE]+)", proc.stdout, re.M)
        assert match, proc.stdout + proc.stderr
        live[name] = float(match.group(1))
        assert live[name] == pytest.approx(NGSPICE_TCROSS_S[name], rel=1e-4)
    assert _ngspice_dead_time(live) < -35e-9


def test_series_values_match_a_plain_walk_over_every_decade() -> None:
    # the walk starts near the low end; the result must equal a walk from 1e-15 upwards
    for series, (mantissas, unit) in SERIES.items():
        for low, high in ((Fraction(10, 10**12), Fraction(100, 10**9)), (Fraction(99), Fraction(1001)),
                          (Fraction(1, 10**15), Fraction(1, 10**13)), (Fraction(4700), Fraction(4700))):
            plain = sorted(
                Fraction(m, unit) * Fraction(10) ** e
                for e in range(-15, 8)
                for m in mantissas
                if low <= Fraction(m, unit) * Fraction(10) ** e <= high
            )
            assert series_values(series, low, high) == plain


def test_unreachable_target_is_a_user_error() -> None:
    net = network_from_options({"r": "4.7k", "c": "100p"})
    with pytest.raises(GapforgeError):
        suggest(net, Fraction(1, 10**15))


def test_the_series_tolerance_applies_unless_the_user_gives_one() -> None:
    # Issue 9: `--series E12` still assumed 1 % resistors. IEC 60063 usage (reference-facts):
    # E6 20 %, E12 10 %, E24 5 %, E48 2 %, E96 1 %, E192 0.5 %.
    from gapforge.analog.preferred import SERIES_TOLERANCE, series_tolerances

    assert {"E6": Fraction(1, 5), "E12": Fraction(1, 10),
                                "E24": Fraction(1, 20), "E48": Fraction(1, 50),
                                "E96": Fraction(1, 100), "E192": Fraction(1, 200)} == SERIES_TOLERANCE
    defaulted = network_from_options({"r": "4.7k", "c": "100p"})
    widened = series_tolerances(defaulted, "E12", "E6")
    assert (widened.r_tol, widened.c_tol) == (Fraction(1, 10), Fraction(1, 5))
    given = network_from_options({"r": "4.7k", "c": "100p", "r_tol": "0.1%", "c_tol": "1%"})
    kept = series_tolerances(given, "E12", "E6")
    assert (kept.r_tol, kept.c_tol) == (Fraction(1, 1000), Fraction(1, 100))
    # and the search uses it: an E12 resistor at 10 % widens every pair's worst case
    loose = suggest(network_from_options({**README, "c_tol": "1%"}), TARGET, r_series="E12")
    tight = suggest(network_from_options({**README, "c_tol": "1%", "r_tol": "1%"}), TARGET,
                    r_series="E12")
    pair = tight.pairs[0]
    same = [p for p in (*loose.pairs, *loose.rejected) if (p.r, p.c) == (pair.r, pair.c)]
    assert same and same[0].ranges["to_high"].min_s < pair.ranges["to_high"].min_s


def test_e6_e48_e192_are_the_iec_60063_series() -> None:
    # IEC 60063:2015 (reference-facts "Preferred values"): E6 written out; E48 is every second
    # E96 value; E192 = round(100 * 10^(i/192)) with one exception, 920 where the formula gives
    # 919; the series nest (E192's even entries are E96).
    from gapforge.analog.preferred import E6, E48, E96, E192, series_values

    assert E6 == (10, 15, 22, 33, 47, 68)
    assert len(E48) == 48 and E48[:6] == (100, 105, 110, 115, 121, 127) and E48[-1] == 953
    assert len(E192) == 192 and E192[::2] == E96
    assert 920 in E192 and 919 not in E192
    formula = [round(100 * 10 ** (i / 192)) for i in range(192)]
    assert [i for i in range(192) if formula[i] != E192[i]] == [185]
    assert E192[:16] == (100, 101, 102, 104, 105, 106, 107, 109, 110, 111, 113, 114, 115, 117,
                         118, 120)  # the standard's first row, from memory
    assert series_values("E6", Fraction(1000), Fraction(10000)) == [
        Fraction(v) for v in (1000, 1500, 2200, 3300, 4700, 6800, 10000)]


def test_nearest_by_bisection_equals_its_definition() -> None:
    # `nearest` bisects cached decades; it must give what its definition says: among the series
    # values within value/20 .. value*20 (IEC 60063 tables), the largest <= value and the
    # smallest >= value; seeded values over 21 decades and every series value itself.
    import random

    def defined(series: str, value: Fraction) -> tuple[Fraction, Fraction]:
        values = series_values(series, value / 20, value * 20)
        return (max((v for v in values if v <= value), default=values[0]),
                min((v for v in values if v >= value), default=values[-1]))

    rng = random.Random(60063)
    for series, (mantissas, unit) in SERIES.items():
        for _ in range(400):
            value = Fraction(rng.randint(1, 10**6), 10**rng.randint(0, 12)) * 10**rng.randint(0, 9)
            assert nearest(series, value) == defined(series, value), (series, value)
        for exponent in range(-12, 7):
            for m in mantissas:
                value = Fraction(m, unit) * Fraction(10) ** exponent
                assert nearest(series, value) == (value, value)
