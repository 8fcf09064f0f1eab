"""Issue 9 section 2 and issue 14 item 5: the analog inputs mean what they say, and no default
makes a worst case look better than a datasheet could. Each reproducer fails on the old code."""

from __future__ import annotations

import json
import math
from fractions import Fraction
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from conftest import run_cli
from gapforge.analog.closed_form import diode_knee_voltage
from gapforge.analog.junction import junction
from gapforge.analog.network import parse_diode, spice_number
from gapforge.analog.parameters import LEVEL_PRESETS, network_from_options, parameter
from gapforge.analog.tolerance import reference_dead_times
from gapforge.base.errors import GapforgeError

LOW_KNEE = "IS=1e-7 N=1.05 RS=1 CJO=0 EG=0.69 XTI=2 BV=40"
THRESHOLDS = {"vt_plus": "50%:60%:70%", "vt_minus": "30%:40%:50%"}


# -- vf: the knee at one stated temperature


def test_issue9_vf_reproducer_no_longer_freezes_the_diode() -> None:
    # Issue 9: the diode's own 25 C knee, 0.138 V, froze it over temperature and hid a 30 %
    # leakage warning; the command exited 0 against --min-dead 600ns. Without --vf it exits 1.
    args = ["analog", "--r", "10k", "--c", "100p", "--diode", LOW_KNEE, "--min-dead", "600ns"]
    code_vf, out_vf, _ = run_cli([*args, "--vf", "0.138", "--json"])
    code, out, _ = run_cli([*args, "--json"])
    assert code == 1 and code_vf == 1
    with_vf, without = json.loads(out_vf), json.loads(out)
    assert with_vf["leakage"]["warning"] is True
    assert with_vf["to_high"]["min_s"] == pytest.approx(without["to_high"]["min_s"], rel=2e-3)


def test_the_diodes_own_knee_gives_back_the_diode() -> None:
    # a knee computed from the model card at -20 C (the voltage where IS(T) (e^(v/NVT) - 1) equals
    # v / R: Shockley, Sedra & Smith ch. 3) solves back to the same IS and the same worst case
    diode = parse_diode(LOW_KNEE, "x")
    knee = diode_knee_voltage(diode, 10e3, -20.0)
    plain = network_from_options({"r": "10k", "c": "100p", "diode": LOW_KNEE, **THRESHOLDS})
    given = network_from_options({"r": "10k", "c": "100p", "diode": LOW_KNEE, **THRESHOLDS,
                                  "vf": f"{knee:.12f}V at -20C"})
    assert given.diode.is_ == pytest.approx(diode.is_, rel=1e-9)
    assert knee > 0.1 and given.vf is not None and given.vf.temp_c == -20
    a, b = reference_dead_times(plain), reference_dead_times(given)
    assert abs(a["to_high"].min_s - b["to_high"].min_s) <= Fraction(2, 10**12)


def test_a_knee_without_temperature_is_stated_at_25_c() -> None:
    net = network_from_options({"r": "10k", "c": "100p", "vf": "0.3"})
    assert net.vf is not None and net.vf.temp_c == 25
    vte = net.diode.n * 1.380649e-23 * 298.15 / 1.602176634e-19
    sat = net.diode.saturation_current(25.0)
    assert sat * math.expm1(0.3 / vte) == pytest.approx(0.3 / 10e3, rel=1e-9)


# -- JEDEC presets: only what the standard states


@pytest.mark.parametrize(
    ("preset", "citation", "vt_plus_max", "vt_minus_min"),
    [
        # reference-facts "Logic levels": JESD8C.01 table, 3.3 V LVCMOS: VIH min 2.0 V, VIL max
        # 0.8 V; JESD8-5 table, 2.5 V: 1.7 V / 0.7 V; JESD8-7 table, 1.8 V: 0.65 / 0.35 VDD
        ("jedec-3v3", "JESD8C.01", "2 V", "800 mV"),
        ("jedec-2v5", "JESD8-5", "1.7 V", "700 mV"),
        ("jedec-1v8", "JESD8-7", "65 % VDD", "35 % VDD"),
    ],
)
def test_a_jedec_preset_fills_only_the_standards_end(
    preset: str, citation: str, vt_plus_max: str, vt_minus_min: str
) -> None:
    assert LEVEL_PRESETS[preset].citation == citation
    net = network_from_options({"r": "4.7k", "c": "100p", "levels": preset,
                                "vt_plus": "40%:50%", "vt_minus": "45%:55%"})
    assert net.vt_plus.max.text() == vt_plus_max and net.vt_minus.min.text() == vt_minus_min
    assert net.vt_plus.min.text() == "40 % VDD"  # the part's own end, as given
    assert net.vt_minus.max.text() == "55 % VDD"


@pytest.mark.parametrize("preset", sorted(LEVEL_PRESETS))
def test_a_preset_without_the_parts_ends_is_refused(preset: str, tmp_path: Path) -> None:
    # Issue 9: the presets invented the ends the standards leave open (0.5 VDD); a compliant
    # input with VT+ at 40 % of VDD cut the worst-case minimum by 29 %.
    code, out, err = run_cli(["analog", "--r", "4.7k", "--c", "100p", "--levels", preset])
    assert code == 2 and out == ""
    assert err.startswith("gapforge: error: --vt-plus:") and "VT+ min:typ" in err
    assert err.count("\n") == 1
    code, _, err = run_cli(["analog", "--r", "4.7k", "--c", "100p", "--levels", preset,
                            "--vt-plus", "40%:50%"])
    assert code == 2 and "--vt-minus:" in err and "VT- typ:max" in err
    design = tmp_path / "d.toml"
    design.write_text(f'[reference]\nr = "4.7k"\nc = "100p"\nlevels = "{preset}"\n'
                      'vt_minus = "45%:55%"\n')
    code, _, err = run_cli(["analog", "--design", str(design)])
    assert code == 2 and "reference.vt_plus" in err


def test_default_thresholds_contain_every_generic_schmitt_input() -> None:
    # reference-facts (from memory): generic CMOS Schmitt families have VT+ minima as low as
    # about 0.35 VDD and VT- maxima as high as about 0.55 VDD; the old defaults (50..70 % /
    # 30..50 %) were narrower. The defaults must contain those extremes and say they are wide.
    net = network_from_options({"r": "4.7k", "c": "100p"})
    assert net.vt_plus.min.relative and net.vt_plus.min.value <= Fraction(35, 100)
    assert net.vt_minus.max.relative and net.vt_minus.max.value >= Fraction(55, 100)
    assert "wide band" in parameter("vt_plus").source
    assert "wide band" in parameter("vt_minus").source
    _, out, _ = run_cli(["analog", "--help"])
    assert "generic CMOS Schmitt" in " ".join(out.split())


def test_temperature_default_is_not_called_industrial() -> None:
    # "industrial" usually means -40..85 C; the default is the wider -40..125 C
    p = parameter("temp")
    assert p.default == "-40:25:125"
    assert "industrial" not in p.source and "-40..125 C" in p.source


def test_default_diode_is_labelled_from_memory_and_said_where_used() -> None:
    p = parameter("diode")
    assert "invented" not in p.source and "from memory" in p.source
    _, out, _ = run_cli(["analog", "--r", "4.7k", "--c", "100p", "--json"])
    report = json.loads(out)
    assert any("generic default diode" in w for w in report["warnings"])
    _, out, _ = run_cli(["analog", "--r", "4.7k", "--c", "100p", "--diode", LOW_KNEE, "--json"])
    assert not any("generic default diode" in w for w in json.loads(out)["warnings"])


# -- ir_max: the datasheet's leakage when it is worse


def test_ir_max_raises_the_leakage_to_the_datasheets_and_never_lowers_it() -> None:
    base = {"r": "47k", "c": "100p", "diode": "IS=1e-9 N=1.05 EG=0.69 XTI=2", **THRESHOLDS}
    plain = network_from_options(base)
    worse = network_from_options({**base, "ir_max": "20uA at 125C 10V"})
    better = network_from_options({**base, "ir_max": "1nA at 125C 10V"})
    # the scaled diode leaks exactly the datasheet's maximum at its stated point (SPICE reverse
    # law, the model's own junction)
    leak = -junction(worse.leaking_diode(), 125.0).current(-10.0)[0]
    assert leak == pytest.approx(20e-6, rel=1e-9)
    assert better.leakage_scale == 1.0 and worse.leakage_scale > 1.0
    assert worse.diode == plain.diode  # the bypassed edge keeps the model card (not faster)
    a, b = reference_dead_times(plain), reference_dead_times(worse)
    assert b["to_high"].min_s < a["to_high"].min_s
    assert reference_dead_times(better) == a


def test_ir_max_bad_text_is_one_line_naming_the_option() -> None:
    code, _, err = run_cli(["analog", "--r", "4.7k", "--c", "100p", "--ir-max", "20uA"])
    assert code == 2 and err.startswith("gapforge: error: --ir-max:") and err.count("\n") == 1


# -- issue 14 item 5: SPICE's own number rules in model-card text


@pytest.mark.parametrize(
    ("text", "value"),
    [
        # SPICE3 / ngspice manuals, "numbers and scale factors" (reference-facts)
        ("600M", 0.6), ("600m", 0.6), ("1MEG", 1e6), ("1meg", 1e6), ("2.5n", 2.5e-9),
        ("10pF", 10e-12), ("3K", 3e3), ("1T", 1e12), ("4G", 4e9), ("7u", 7e-6), ("5f", 5e-15),
        ("1e-3", 1e-3), ("27C", 27.0), ("1mil", 25.4e-6), (".5", 0.5),
    ],
)
def test_spice_numbers(text: str, value: float) -> None:
    assert spice_number(text, "x") == pytest.approx(value, rel=1e-12)


def test_model_card_rs_600m_is_milliohms() -> None:
    # Issue 14: RS=600M was read as 600 Mohm where SPICE reads 600 mohm
    assert parse_diode("IS=1n RS=600M CJO=2P", "x").rs == pytest.approx(0.6)
    assert parse_diode("is=1n rs=1MEG", "x").rs == pytest.approx(1e6)
    _, out, _ = run_cli(["analog", "--help"])
    assert "M = milli, MEG = mega" in " ".join(out.split())


@pytest.mark.parametrize("bad", ["IS=abc", "IS=1e999", "RS=-1", "IS=1n N=0", "CJO=1", "IS=" + "9" * 60])
def test_bad_model_card_numbers_are_refused(bad: str) -> None:
    with pytest.raises(GapforgeError):
        parse_diode(bad, "--diode")


# -- fuzz: the model-card parser keeps its promise (issue 14: every parser, seeded, bounded)


@settings(max_examples=300, deadline=None, derandomize=True)
@given(st.text(alphabet="ISNRCJOVMEGXTBFPKUmegunpfk0123456789.+-=e ,\t", max_size=60))
def test_fuzz_model_card_text_gives_a_diode_or_one_clean_error(text: str) -> None:
    try:
        model = parse_diode(text, "--diode")
    except GapforgeError as exc:
        assert "\n" not in exc.message and len(exc.message) < 300
        return
    for value in (model.is_, model.n, model.rs, model.cjo, model.vj, model.m, model.eg):
        assert math.isfinite(value)


def test_fuzz_model_card_on_the_command_line_exits_2_in_one_line() -> None:
    import random

    rng = random.Random(20261203)
    pieces = ["IS=", "N=", "RS=", "CJO=", "VJ=", "M=", "BV=", "1e", "999", "MEG", "m", "p", "-",
              "=", " ", "x", "1", ".", "e-300", "TNOM=", "FC=0.99", "M=1"]
    for _ in range(25):
        text = "".join(rng.choice(pieces) for _ in range(rng.randint(1, 8)))
        code, out, err = run_cli(["analog", "--r", "4.7k", "--c", "100p", "--diode", text,
                                  "--json"])
        assert code in (0, 1, 2), text
        if code == 2:
            assert out == "" and err.count("\n") == 1 and err.startswith("gapforge: error:")


def test_a_tiny_resistor_is_one_error_line_and_no_library_warning(tmp_path: Path) -> None:
    # Issue 14: r = 1e-300 exited 2 after 14 numpy warning lines
    design = tmp_path / "d.toml"
    design.write_text('[reference]\nr = 1e-300\nc = "100p"\n')
    code, out, err = run_cli(["analog", "--design", str(design)])
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "reference.r" in err and "Warning" not in err
