"""Outside review of issues 19 and 22: regressions for what the review found.

Scenarios are invented (no real board or part). Outside sources named beside the checks:
- the window minimum is the common-practice sum (reference-facts.md, "Dead-time requirement";
  no single published source): without a power stage nothing proves a dead time long enough;
- a counted dead time N / f_clk and "a dead time of half the PWM period or more leaves no
  pulse" (common practice), worked by hand beside the numbers.
"""

from __future__ import annotations

import json
from pathlib import Path

from conftest import SMALL_STAGE, run_cli

NO_STAGE = """# invented design without a power stage
format = 1
[timer]
clock = "100MHz"
tolerance = "50ppm"
[dead_time]
value = "60ns"
source = "explicit"
[[output]]
target = "split-10bit-div1-8"
prefix = "NS"
file = "ns.h"
"""

# invented capture: every gap 70 ns, above the 60 ns the design above asks for
GAPS_70NS = ("time_ns,signal,level\n0,gh,0\n0,gl,1\n100,gl,0\n170,gh,1\n1000,gh,0\n1070,gl,1\n"
             "2000,gl,0\n2070,gh,1\n3000,gh,0\n3070,gl,1\n")


def test_issue19_item2_measure_against_a_design_without_stage_is_inconclusive(
        tmp_path: Path) -> None:
    """Issue 19 item 2 (the class): `measure --design` on a design without [stage] compared the
    gaps with the design's own request and said ok, exit 0, though no power stage proves that
    request long enough. Now inconclusive, exit 1, the reason first."""
    design = tmp_path / "ns.toml"
    design.write_text(NO_STAGE)
    capture = tmp_path / "c.csv"
    capture.write_text(GAPS_70NS)
    base = ["measure", str(capture), "--high", "gh", "--low", "gl", "--design", str(design)]
    code, out, err = run_cli([*base, "--no-diagram"])
    assert code == 1, err
    assert out.startswith("inconclusive: ")
    assert "not judged against a power stage" in out.splitlines()[1]
    code, out, _ = run_cli([*base, "--json"])
    doc = json.loads(out)
    assert code == 1 and doc["verdict"] == "inconclusive"
    assert doc["reasons"][0].startswith("not judged against a power stage")
    # a window the user states is judged: 70 ns - 1 ns resolution >= 60 ns, ok
    code, out, err = run_cli([*base, "--window", "60ns:1us", "--no-diagram"])
    assert code == 0 and out.startswith("ok: "), err
    # the same design with a stage (minimum 14.4 ns, 60 ns meets it): judged, ok
    design.write_text(NO_STAGE + SMALL_STAGE)
    code, out, err = run_cli([*base, "--no-diagram"])
    assert code == 0 and out.startswith("ok: "), err
    # and a gap below the request still fails without a stage (a fail needs no proof of ok)
    design.write_text(NO_STAGE.replace('value = "60ns"', 'value = "80ns"'))
    code, out, _ = run_cli([*base, "--no-diagram"])
    assert code == 1 and out.startswith("fail: ")


SI150_DRIVER = """# invented 150 kHz edge-aligned silicon leg with a gate driver that cannot be met
format = 1
[timer]
clock = "120MHz"
tolerance = "1%"
[pwm]
frequency = "150kHz"
counting = "edge"
[dead_time]
source = "window"
[stage]
kind = "silicon"
td_off = "100ns"
t_fall = "40ns"
td_on = "20ns"
prop_delay = "50ns:80ns"
mismatch = "10ns"
isolator_skew = "10ns"
timer_skew = "5ns"
vsd = "1V"
current = "20A"
fsw = "150kHz"
loss_budget = "30W"
qrr = "10nC"
bus_voltage = "48V"
qoss = "150nC"
[adaptive]
currents = ["0.1A", "0.5A", "2A", "8A"]
below_swing = "max"
current_error = "0.05A"
[gate_driver]
min_pulse = "1.5us"
bootstrap_on = "1us"
bootstrap_every = 1
[[output]]
target = "split-10bit-div1-8"
prefix = "S1"
file = "s1.h"
"""


def test_issue19_item4_build_speaks_the_one_verdict_vocabulary(tmp_path: Path) -> None:
    """Issue 19 item 4 (the class): every command ends with ok / fail / inconclusive. A build
    whose table leaves no duty under the driver's limits ended "verdict: too-long" (its first
    line and JSON said fail). The longest entry, about 391 clocks of the 800-clock period, plus
    2 x 1.5 us of minimum pulse (2 x 182 clocks) leaves no compare value (common practice)."""
    design = tmp_path / "s.toml"
    design.write_text(SI150_DRIVER)
    code, out, err = run_cli(["build", str(design), "--no-diagram"])
    assert code == 1, err
    assert out.startswith("fail: S1 ")
    last = [line for line in out.splitlines() if line.startswith("verdict: ")]
    assert last == ["verdict: fail (too-long)"]
    row = next(line for line in out.splitlines() if line.startswith("S1 "))
    assert row.split()[-1] == "fail"
    assert not (tmp_path / "s1.h").exists()
    code, out, _ = run_cli(["build", str(design), "--json"])
    assert json.loads(out)["verdict"] == "fail"
