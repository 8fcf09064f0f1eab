"""Regression tests for findings of the design reviews, named by issue.

Each scenario is invented for the test.
"""

from __future__ import annotations

import json
from pathlib import Path

from conftest import SMALL_STAGE, run_cli

# the terms of the window's minimum a scenario does not care about, stated as 0 ("checked, none";
# issue 19: no term is assumed)
STAGE_TERMS = ('t_fall = "0ns"\nprop_delay = "0ns"\nmismatch = "0ns"\nisolator_skew = "0ns"\n'
               'timer_skew = "0ns"\nqrr = "0nC"\n')
STAGE_OPTIONS = ["--t-fall", "0ns", "--prop-delay", "0ns", "--mismatch", "0ns",
                 "--isolator-skew", "0ns", "--timer-skew", "0ns"]

DESIGN = """# invented test design: 100 ns requested, no [stage] window
format = 1
[timer]
clock = "160MHz"
tolerance = "50ppm"
[dead_time]
value = "100ns"
source = "explicit"
[[output]]
target = "split-10bit-div1-8"
prefix = "DT"
file = "dt.h"
"""


def _capture(path: Path, gap_ns: int, periods: int = 5) -> None:
    """Edge-event CSV: low off, gap, high on 400 ns, high off, gap, low on 400 ns."""
    rows = ["time_ns,signal,level", "0,gate_h,0", "0,gate_l,1"]
    t = 100
    for _ in range(periods):
        rows += [f"{t},gate_l,0", f"{t + gap_ns},gate_h,1"]
        t += gap_ns + 400
        rows += [f"{t},gate_h,0", f"{t + gap_ns},gate_l,1"]
        t += gap_ns + 400
    path.write_text("\n".join(rows) + "\n")


def test_issue5_measure_design_without_window_fails_gaps_below_the_request(tmp_path: Path) -> None:
    # a design that asks for 100 ns and has no [stage]: 28 ns gaps must fail (exit 1), not pass
    # as "measured"; 28 ns + 1 ns resolution (the edge CSV's time unit) < 100 ns
    (tmp_path / "d.toml").write_text(DESIGN)
    _capture(tmp_path / "short.csv", 28)
    code, out, err = run_cli(["measure", str(tmp_path / "short.csv"), "--high", "gate_h",
                              "--low", "gate_l", "--design", str(tmp_path / "d.toml"), "--json"])
    assert code == 1, err
    doc = json.loads(out)
    assert doc["verdict"] == "fail"
    assert doc["edges"]["to_high"]["min_s"] == 28e-9


def test_issue5_measure_design_without_window_passes_long_enough_gaps(tmp_path: Path) -> None:
    # the control: 101 ns - 1 ns resolution = 100 ns >= the 100 ns request, so the gaps meet
    # the design (the fit's worst case is 100.0 ns .. 100.01 ns; there is no maximum); without
    # [stage] nothing proves 100 ns enough, so that is inconclusive (issue 19 item 2), and with a
    # stage (minimum 14.4 ns) it is ok
    (tmp_path / "d.toml").write_text(DESIGN)
    _capture(tmp_path / "ok.csv", 101)
    args = ["measure", str(tmp_path / "ok.csv"), "--high", "gate_h", "--low", "gate_l",
            "--design", str(tmp_path / "d.toml"), "--json"]
    code, out, err = run_cli(args)
    assert code == 1, err + out
    doc = json.loads(out)
    assert doc["verdict"] == "inconclusive"
    assert doc["reasons"] == [next(r for r in doc["reasons"]
                                   if r.startswith("not judged against a power stage"))]
    (tmp_path / "d.toml").write_text(DESIGN + SMALL_STAGE)
    code, out, err = run_cli(args)
    assert code == 0, err + out
    assert json.loads(out)["verdict"] == "ok"


def test_issue4_stage_switching_frequency_must_be_the_pwm_frequency(tmp_path: Path) -> None:
    # a half bridge switches once per PWM period; a stage fsw of 20 kHz beside 100 kHz PWM made
    # the loss-budget maximum five times too long
    design = DESIGN.replace("[dead_time]", '[pwm]\nfrequency = "100kHz"\n[dead_time]').replace(
        'value = "100ns"\nsource = "explicit"',
        'source = "window"\n[stage]\ntd_off = "40ns"\ntd_on = "10ns"\nvsd = "3V"\n'
        'current = "10A"\nfsw = "20kHz"\nloss_budget = "2W"\n' + STAGE_TERMS,
    )
    (tmp_path / "d.toml").write_text(design)
    code, _, err = run_cli(["build", str(tmp_path / "d.toml")])
    assert code == 2
    assert err.strip().splitlines() == [
        f"gapforge: error: {tmp_path / 'd.toml'}: stage.fsw: 20000 Hz differs from pwm.frequency "
        "100000 Hz (a half bridge switches once per PWM period; drop stage.fsw or make them equal)"
    ]
    assert not (tmp_path / "dt.h").exists()


def test_issue4_stage_switching_frequency_defaults_to_the_pwm_frequency(tmp_path: Path) -> None:
    # without stage.fsw the maximum uses the PWM frequency: 2 W / (3 V x (10 + 10) A x 100 kHz)
    # = 333.333 ns, rounded down to 333.333 ns (1 ps)
    design = DESIGN.replace("[dead_time]", '[pwm]\nfrequency = "100kHz"\n[dead_time]').replace(
        'value = "100ns"\nsource = "explicit"',
        'source = "window"\n[stage]\ntd_off = "40ns"\ntd_on = "10ns"\nvsd = "3V"\n'
        'current = "10A"\nloss_budget = "2W"\n' + STAGE_TERMS,
    )
    (tmp_path / "d.toml").write_text(design)
    code, out, err = run_cli(["build", str(tmp_path / "d.toml"), "--json"])
    assert code == 0, err
    window = json.loads(out)["window"]
    assert window["to_high"]["max_s"] == 333.333e-9


def test_issue2_fit_json_carries_the_nearest_and_zero_tolerance_warnings(tmp_path: Path) -> None:
    # 20 ns at 64 MHz +/- 5 % with nearest rounding: 20e-9 x 64e6 = 1.28 counts, nearest 1 count
    # = 15.625 ns, at the fast clock 15.625 / 1.05 = 14.881 ns < 20 ns
    code, out, err = run_cli(["fit", "--clock", "64MHz", "--clock-tol", "0ppm", "--clock-tol", "5%", "--dead-time",
                              "20ns", "--target", "shared-8bit-linear", "--rounding", "nearest",
                              "--json"])
    # issue 19: a requested dead time is a minimum, so a worst case below it fails (exit 1)
    assert code == 1, err
    doc = json.loads(out)
    assert doc["verdict"] == "fail" and "below the 20 ns requested" in doc["reason"]
    assert any("14.88 ns at the fast clock, below the 20 ns requested" in w for w in doc["warnings"])
    code, out, _ = run_cli(["fit", "--clock", "64MHz", "--clock-tol", "0ppm", "--dead-time", "20ns", "--target",
                            "shared-8bit-linear", "--json"])
    assert code == 0
    assert any("clock tolerance is 0" in w for w in json.loads(out)["warnings"])


def test_issue2_fit_refuses_a_zero_dead_time() -> None:
    code, _, err = run_cli(["fit", "--clock", "64MHz", "--clock-tol", "0ppm", "--dead-time", "0", "--target",
                            "shared-8bit-linear"])
    assert code == 2
    assert "--dead-time" in err and "greater than zero" in err


def test_issue3_reference_minimum_that_is_not_positive_is_bad_input(tmp_path: Path) -> None:
    # the invented GaN example's old network has a worst-case pair dead time below zero (its
    # diode-bypassed edge can outlast the slow one); reproducing that "minimum" must be refused
    # with the key named, not fail later as an anonymous negative dead time
    import re

    from conftest import EXAMPLES

    text = (EXAMPLES / "gan-buck.toml").read_text()
    text = re.sub(r"\n\[stage\].*?(?=\n# The invented analog)", "", text, flags=re.S)
    text = re.sub(r'source = "window"[^\n]*', 'source = "reference-minimum"', text)
    (tmp_path / "d.toml").write_text(text)
    code, _, err = run_cli(["build", str(tmp_path / "d.toml"), "--out", str(tmp_path)])
    assert code == 2
    line = err.strip()
    assert "\n" not in line
    assert line.startswith(f"gapforge: error: {tmp_path / 'd.toml'}: dead_time.source: ")
    assert "not positive" in line
    assert not (tmp_path / "out").exists()


def test_issue3_build_repeats_the_reference_networks_own_dangers() -> None:
    # the invented GaN example's old analog network reaches a negative worst-case dead time;
    # `analog` exits 1 for it, and `build` must say so too (as a warning: the digital fit is ok)
    from conftest import EXAMPLES

    code, out, err = run_cli(["build", str(EXAMPLES / "gan-buck.toml"), "--check", "--json"])
    assert code == 0, err
    warnings = json.loads(out)["warnings"]
    assert any("analog reference itself can shoot through" in w for w in warnings)


def test_issue4_sweep_pwm_is_the_switching_frequency() -> None:
    # with stage options, --pwm supplies the switching frequency: the maximum is
    # 1 W / (1 V x (10 + 10) A x 100 kHz) = 500 ns (it would be 2.5 us at a wrong 20 kHz)
    base = ["sweep", "--td-off", "40ns", "--td-on", "10ns", "--vsd", "1V", "--current", "10A",
            "--loss-budget", "1W", "--clocks", "100MHz", "--clock-tol", "0ppm", "--json",
            *STAGE_OPTIONS, "--qrr", "0nC"]
    code, out, err = run_cli([*base, "--pwm", "100kHz"])
    assert code == 0, err
    assert json.loads(out)["window"]["to_high"]["max_s"] == 500e-9
    code, _, err = run_cli([*base, "--pwm", "100kHz", "--fsw", "20kHz"])
    assert code == 2 and err.startswith("gapforge: error: --fsw: ")


def test_issue4_sweep_refuses_a_pwm_other_than_the_designs() -> None:
    from conftest import EXAMPLES

    code, _, err = run_cli(["sweep", "--design", str(EXAMPLES / "gan-buck.toml"), "--pwm",
                            "400kHz", "--clocks", "160MHz"])
    assert code == 2 and err.startswith("gapforge: error: --pwm: ")


def test_issue9_a_byte_order_mark_at_the_start_of_a_design_is_read(tmp_path: Path) -> None:
    # editors on some systems save UTF-8 with a BOM (U+FEFF, the Unicode standard, section 23.8)
    design = tmp_path / "d.toml"
    design.write_bytes(b"\xef\xbb\xbf" + (DESIGN + SMALL_STAGE).encode())
    code, out, err = run_cli(["build", str(design), "--json"])
    assert code == 0, err
    assert json.loads(out)["verdict"] == "ok"


def test_issue9_tolerances_accept_the_plus_minus_forms(tmp_path: Path) -> None:
    for form in ("\u00b150ppm", "+/-50ppm"):
        design = tmp_path / "d.toml"
        design.write_text(DESIGN.replace('"50ppm"', f'"{form}"') + SMALL_STAGE, encoding="utf-8")
        code, out, err = run_cli(["build", str(design), "--json"])
        assert code == 0, err
        assert json.loads(out)["clock_tol"] == 50e-6


def test_issue9_every_caution_names_transitions_temperature_and_load_current() -> None:
    from gapforge.base import caution

    words = "on every transition, over temperature and load current"
    assert words in caution.TEXT
    # `targets show` prints dead-time ranges: it carries the caution too (text and JSON)
    code, out, _ = run_cli(["targets", "show", "split-10bit-div1-8", "--clock", "100MHz"])
    assert code == 0 and words in out
    code, out, _ = run_cli(["targets", "show", "split-10bit-div1-8", "--json"])
    assert code == 0 and words in json.loads(out)["caution"]


def test_issue9_a_gan_vsd_measured_at_the_gate_off_bias_gets_it_added_once() -> None:
    # reverse voltage = vsd + |gate_off| for a vsd read at 0 V gate (common practice for GaN
    # third-quadrant conduction); a vsd measured at -3 V gate already holds the 3 V
    base = ["window", "--td-off", "10ns", "--td-on", "2ns", "--kind", "gan", "--vsd", "5V",
            "--gate-off", "-3V", "--current", "10A", "--fsw", "100kHz", "--json", *STAGE_OPTIONS]
    code, out, err = run_cli(base)
    assert code == 0, err
    assert json.loads(out)["costs"]["reverse_voltage_v"] == 8.0
    code, out, err = run_cli([*base, "--vsd-at-gate-off"])
    assert code == 0, err
    assert json.loads(out)["costs"]["reverse_voltage_v"] == 5.0


def test_issue_15_junction_coupling_finding_reaches_build_json_and_report(tmp_path: Path) -> None:
    # issue 15: a diode whose junction capacitance (30 pF) is 250 % of C (12 pF) couples the step
    # straight onto the node; the old network's finding is named in build (text and JSON) and in
    # the report's verdict box, while the new design (window policy) still fits: exit 0.
    example = Path(__file__).resolve().parents[1] / "examples" / "sic-inverter.toml"
    text = example.read_text(encoding="utf-8")
    text = text.replace('c = "100p"', 'c = "12p"').replace('r = "2.2k"', 'r = "10k"')
    text = text.replace("CJO=1.5p", "CJO=30p")
    design = tmp_path / "coupled.toml"
    design.write_text(text, encoding="utf-8")
    finding = "junction capacitance (30 pF at 0 V) is 250 % of C"
    code, out, _ = run_cli(["build", str(design), "--out", str(tmp_path / "o"), "--parents"])
    assert code == 0 and finding in out
    code, out, _ = run_cli(["build", str(design), "--check", "--json", "--details"])
    assert finding in out
    report = tmp_path / "r.html"
    code, _, _ = run_cli(["report", str(design), "-o", str(report)])
    assert code == 0
    html = report.read_text(encoding="utf-8")
    box = html[: html.index("CAUTION")]  # the verdict box stands above the caution
    assert finding in box


# invented: a stage whose recovery loss (Qrr x Vbus x fsw = 100 nC x 400 V x 100 kHz = 4 W)
# is above its 0.1 W loss budget, so no budget is left for reverse conduction
NO_BUDGET = """\
# invented test design
format = 1
name = "no-budget"
[timer]
clock = "160MHz"
tolerance = "50ppm"
[dead_time]
source = "window"
[stage]
td_off = "35ns"
t_fall = "20ns"
td_on = "10ns"
prop_delay = "20ns:45ns"
mismatch = "5ns"
isolator_skew = "0ns"
timer_skew = "0ns"
kind = "silicon"
current = "10A"
fsw = "100kHz"
loss_budget = "0.1W"
bus_voltage = "400V"
qrr = "100nC"
[[output]]
target = "shared-8bit-linear"
prefix = "A"
file = "a.h"
"""


def test_issue23_build_says_no_loss_budget_left_as_window_does(tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    design.write_text(NO_BUDGET)
    code, out, _ = run_cli(["build", str(design)], cwd=tmp_path)
    assert code == 1
    assert "no loss budget left after the recovery loss" in out
    assert "loss budget's maximum 0 s" not in out
    code, out, _ = run_cli(["window", "--design", str(design)], cwd=tmp_path)
    assert "no loss budget left after the recovery loss" in out.splitlines()[0]


def test_issue23_two_misspelt_keys_are_both_shown_with_their_hints(tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    design.write_text(NO_BUDGET.replace("td_off", "td_of").replace("t_fall", "t_fal"))
    code, out, err = run_cli(["build", str(design)], cwd=tmp_path)
    assert code == 2 and out == "" and len(err.strip().splitlines()) == 1
    assert "stage.td_of: unknown key; did you mean 'td_off'?" in err
    assert "stage.t_fal: unknown key; did you mean 't_fall'?" in err
    assert "more problem" not in err
    assert not (tmp_path / "a.h").exists()


def test_fields_are_listed_most_significant_first_everywhere(tmp_path: Path) -> None:
    """Issue 23 item 7: `targets show` lists fields most significant first, as headers do; the
    fit text and the report's chosen words list them the same way (the layout file's order, by
    bit offset: div at 28..29, to_low_count at 16..25, to_high_count at 0..9)."""
    code, out, _ = run_cli(["fit", "--clock", "170MHz", "--clock-tol", "50ppm", "--dead-time",
                            "100ns", "--target", "split-10bit-div1-8"])
    assert code == 0
    assert "fields: div=0, to_low_count=18, to_high_count=18;" in out
    code, out, _ = run_cli(["targets", "show", "split-10bit-div1-8"])
    rows = [x.split()[0] for x in out.splitlines() if x.split()[:1] and x.split()[0] in
            ("div", "to_low_count", "to_high_count")]
    assert rows == ["div", "to_low_count", "to_high_count"]
