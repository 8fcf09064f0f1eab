"""Load-dependent dead time (issue 12): worked examples, properties, the header's arrays under gcc.

Outside references, named beside each check:
- swing time (Qoss,high + Qoss,low) / |I| and the soft edge by current sign: common practice
  (../shared/reference-facts.md, "Soft-switching transitions"); Erickson & Maksimovic,
  Fundamentals of Power Electronics, 2nd ed., ch. 20 (zero-voltage switching) as background;
- stage minimum = margin x (chain sum): common practice (reference-facts, "Dead-time
  requirement"); reverse conduction Vsd x |I| x t x fsw: common practice;
- inverter error Vd x t x fsw, square wave in step with the current: Mohan, Undeland & Robbins,
  Power Electronics, 3rd ed., ch. 8; Jeong & Park, IEEE Trans. Ind. Electron. 38(2), 1991;
- mean |sin| = 2 / pi and a square wave's fundamental 4 A / pi: computed (Fourier series);
- a timer count N lasts N / (f_clk (1 + tol)) at the fast clock: common practice.
The example designs are invented and marked so in their files.
"""

from __future__ import annotations

import json
import math
import shutil
import subprocess
from fractions import Fraction as F
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from conftest import EXAMPLES, run_cli
from gapforge.pipeline.adaptive_plan import plan_adaptive
from gapforge.pipeline.build import plan_design
from gapforge.pipeline.design import load_design
from gapforge.stage import adaptive as phys
from gapforge.stage.adaptive import COMMUTATED, SIGNS, AdaptiveSpec
from gapforge.stage.window import StageSpec, SwitchTiming, stage_window
from gapforge.timer.fit import FitRequest, fit
from gapforge.timer.layouts import EDGES, load_layout

NS = F(1, 10**9)


def _plan(name: str):  # type: ignore[no-untyped-def]
    plan = plan_design(load_design(EXAMPLES / name))
    assert plan.verdict == "ok"
    return plan.outputs[0].adaptive


# ---------------------------------------------------------------------------------------------
# worked examples: the invented GaN design (examples/adaptive-gan.toml)


def test_gan_example_by_hand() -> None:
    a = _plan("adaptive-gan.toml")
    # stage minimum: 1.2 x (8 + 6 - 5 + (22 - 12) + 1.5 + 2 + 0.5) ns = 1.2 x 23 ns = 27.6 ns
    assert a.window["to_low"][0] == F(276, 10) * NS
    # window maximum: 2.4 W / ((2 V + |-2 V|) x (10 A + 10 A) x 400 kHz) = 75 ns
    assert a.window["to_low"][1] == 75 * NS
    # chain before the swing: 8 - 5 + 10 + 1.5 + 2 + 0.5 ns = 17 ns (the 6 ns fall time left out)
    assert a.pre_swing_s == {"to_high": 17 * NS, "to_low": 17 * NS}
    # swing fits the window above 32 nC / (75 - 27.6) ns = 0.67511 A true current, so a
    # measured 0.67511 A + the 0.1 A sense error (issue 19)
    assert a.threshold_a["positive"] == F(32, 10**9) / (F(474, 10) * NS) + F(1, 10)
    bins = a.table.bins
    assert [float(b.current_min_a) for b in bins] == [0, 1, 2, 4, 8, 16]
    b1 = bins[1]
    soft = b1.entries["positive"]["to_low"]  # I > 0 commutates to_low (common practice)
    # worst swing in [1 A, 2 A) with 0.1 A sense error: 32 nC / 0.9 A = 35.5556 ns, up to 1 ps
    assert soft.swing_s == 35556 * F(1, 10**12)
    # request 27.6 + 35.556 ns; step 1/(160 MHz x 10) = 625 ps;
    # code = ceil(63.156 ns x 1.00005 / 625 ps) = ceil(101.05) = 102
    assert soft.requested_s == F(276, 10) * NS + soft.swing_s
    assert soft.code == 102 and soft.soft
    # worst case 102 x 625 ps / 1.00005 = 63.747 ns (fast clock, common practice)
    assert soft.achieved_min_s == 102 * F(625, 10**12) / (1 + F(50, 10**6))
    # the hard edge stays at the stage minimum: ceil(27.6 ns x 1.00005 / 625 ps) = 45
    assert b1.entries["positive"]["to_high"].code == 45
    assert not b1.entries["positive"]["to_high"].soft
    # mirrored: I < 0 commutates to_high with the same code
    assert b1.entries["negative"]["to_high"].code == 102
    # bin 0 (0..1 A) has no current to swing the node: policy 'max' keeps the longest code
    # inside 75 ns at the slow clock: floor(75 ns x 0.99995 / 625 ps) = floor(119.99) = 119
    b0 = bins[0].entries["positive"]["to_low"]
    assert b0.below_swing and not b0.soft and b0.code == 119 and b0.swing_s == 0
    # ADC: 1 A / 12.5 mA = 80 codes from 2048
    assert b1.adc_codes == (2128, 1968)
    # reverse conduction in [1, 2) where it is worst: the largest true current that selects
    # the bin, 2 A + the 0.1 A error (issue 19): 4 V x 2.1 A x 400 kHz x (28.1264 ns hard +
    # (63.7532 - 32 nC / 2.1 A = 15.238 ns) after the swing) = 257.5 mW
    costs = b1.costs["positive"]
    assert costs.current_a == F(21, 10) and costs.hard_current_a == F(9, 10)
    to_high = 45 * F(625, 10**12) / (1 - F(50, 10**6))
    to_low = 102 * F(625, 10**12) / (1 - F(50, 10**6))
    swing = F(32, 10**9) / F(21, 10)
    assert costs.adaptive_w == 4 * F(21, 10) * F(400_000) * (to_high + to_low - swing)
    assert math.isclose(float(costs.adaptive_w), 0.25749, rel_tol=1e-4)


def test_gan_example_the_other_policy_turns_on_hard_at_light_load() -> None:
    a = _plan("adaptive-gan.toml")
    assert a.other is not None and a.other.policy == "hard"
    b0 = a.other.bins[0].entries["positive"]["to_low"]
    assert b0.below_swing and b0.code == 45  # the stage minimum, as the hard edge
    # a hard turn-on costs at most (16 + 16) nC x 48 V x 400 kHz = 614.4 mW (Eoss <= Qoss V)
    assert a.other.bins[0].costs["positive"].adaptive_hard_w == F(32, 10**9) * 48 * 400_000


# ---------------------------------------------------------------------------------------------
# worked examples: the invented silicon inverter leg (examples/adaptive-silicon.toml)


def test_silicon_example_by_hand() -> None:
    a = _plan("adaptive-silicon.toml")
    # stage minimum 1.2 x (180 + 60 - 30 + 50 + 10 + 15 + 5) ns = 348 ns; chain before the
    # swing 180 - 30 + 50 + 30 = 230 ns; Qoss 120 + 140 nC = 260 nC
    assert a.window["to_high"][0] == 348 * NS
    assert a.pre_swing_s["to_high"] == 230 * NS
    assert a.spec.qoss_total == F(260, 10**9)
    b = a.table.bins
    # [2 A, 5 A) judged at its edge minus current_error 0.4 A = 1.6 A: swing 260 nC / 1.6 A =
    # 162.5 ns (charge balance Q = C V = I t); request 348 + 162.5 = 510.5 ns; step 6.25 ns;
    # 1 % clock: code = ceil(510.5 x 1.01 / 6.25) = ceil(82.4968) = 83
    assert b[1].entries["positive"]["to_low"].code == 83
    # below 2 A the policy is 'hard': the stage minimum, ceil(348 x 1.01 / 6.25) = 57
    assert (
        b[0].entries["positive"]["to_low"].code == 57
        and b[0].entries["positive"]["to_low"].below_swing
    )
    inv = a.inverter
    # mean |i| = 2 x 30 A / pi = 19.0986 A (computed)
    assert math.isclose(inv.mean_abs_current_a, 60 / math.pi)
    # error Vd x t x fsw = 48 V x 57 x 6.25 ns x 20 kHz = 0.342 V (Mohan et al. ch. 8)
    assert inv.error_positive_v == F(342, 1000)
    # fundamental 4 / pi x 0.342 V = 0.43545 V (computed, Fourier series)
    assert math.isclose(inv.fundamental_v, 4 / math.pi * 0.342)
    # compensation: 57 clocks of dead time = 28.5 compare counts centre-aligned -> 29 (ties up)
    assert b[-1].compensation == {"positive": 29, "negative": 29}


# ---------------------------------------------------------------------------------------------
# properties


def _timing(off: int, fall: int, on: int, pmin: int, pmax: int) -> SwitchTiming:
    return SwitchTiming(off * NS, fall * NS, on * NS, F(0), pmin * NS, pmax * NS)


@st.composite
def cases(draw):  # type: ignore[no-untyped-def]
    t = [draw(st.integers(1, 60)) for _ in range(3)]
    p = sorted(draw(st.integers(0, 30)) for _ in range(2))
    on = draw(st.integers(0, t[0] + t[1] + p[1] - p[0] - 1)) if t[0] + t[1] + p[1] - p[0] > 1 else 0
    high = _timing(t[0], t[1], on, p[0], p[1])
    low = _timing(t[0] + draw(st.integers(0, 20)), t[1], on, p[0], p[1])
    stage = StageSpec(
        high=high,
        low=low,
        mismatch=draw(st.integers(0, 5)) * NS,
        isolator_skew=F(0),
        timer_skew=F(0),
        margin=F(draw(st.integers(10, 15)), 10),
        kind="gan",
        vsd=F(2),
        current_to_high=F(10),
        current_to_low=F(10),
        fsw=F(200_000),
        loss_budget=F(draw(st.integers(1, 40)), 10),
        bus_voltage=F(48),
    )
    edges = sorted(set(draw(st.lists(st.integers(1, 400), min_size=1, max_size=8))))
    spec = AdaptiveSpec(
        currents=tuple(F(e, 10) for e in edges),
        below_swing=draw(st.sampled_from(("max", "hard"))),
        qoss_high=draw(st.integers(1, 200)) * NS / 10,
        qoss_low=draw(st.integers(1, 200)) * NS / 10,
        current_error=F(draw(st.integers(0, 5)), 10),
    )
    target = draw(
        st.sampled_from(("split-10bit-tenths", "split-10bit-div1-8", "shared-8bit-linear"))
    )
    tol = F(draw(st.sampled_from((0, 50, 10_000))), 10**6)
    return stage, spec, target, tol


@settings(max_examples=60, deadline=None)
@given(cases())
def test_every_entry_is_safe_and_soft_entries_never_grow_with_current(case) -> None:  # type: ignore[no-untyped-def]
    stage, spec, target, tol = case
    win = stage_window(stage)
    window = {e: (win.edges[e].min_s, win.edges[e].max_s) for e in EDGES}
    layout = load_layout(target)
    request = FitRequest(F(160_000_000), tol, window["to_high"][0], window["to_low"][0])
    fixed = fit(layout, request)
    if not fixed.ok or win.empty:
        return
    plan = plan_adaptive(spec, stage, fixed, window, None, "case")
    for table in (plan.table, plan.other):
        if table is None:
            continue
        for sign in SIGNS:
            soft_codes = []
            for b in table.bins:
                for e in EDGES:
                    x = b.entries[sign][e]
                    lo, hi = window[e]
                    # never below the stage minimum at the fastest clock
                    assert x.achieved_min_s >= lo
                    # never below the covered swing plus the chain before it
                    assert x.achieved_min_s >= x.swing_s + plan.pre_swing_s[e]
                    if x.soft:
                        assert x.achieved_min_s >= lo + x.swing_s  # the soft request itself
                        assert x.swing_s == x.swing_needed_s
                        assert hi is None or x.achieved_max_s <= hi  # inside the window
                        soft_codes.append(x.steps)
                    else:
                        assert x.swing_s == 0
                    if x.below_swing and table.policy == "max":
                        assert hi is not None and x.achieved_max_s <= max(
                            hi, fixed.edges[e].achieved_max_s
                        )
                # the soft edge belongs to the sign (common practice)
                assert b.entries[sign][COMMUTATED[sign]].commutated
            # soft-edge entries never grow with |I|
            assert soft_codes == sorted(soft_codes, reverse=True)
            # the hard edge is constant (one field per edge; a shared field follows the soft one)
            if not layout.shared:
                hard = "to_high" if COMMUTATED[sign] == "to_low" else "to_low"
                assert len({b.entries[sign][hard].code for b in table.bins}) == 1
        # adjacent bins never share all codes (they merge)
        codes = [b.codes() for b in table.bins]
        assert all(codes[i] != codes[i + 1] for i in range(len(codes) - 1))
        # the bins cover 0 A upwards without a gap
        assert table.bins[0].current_min_a == 0 and table.bins[-1].current_max_a is None
        for a, b in zip(table.bins, table.bins[1:], strict=False):
            assert a.current_max_a == b.current_min_a


def test_swing_time_rounds_up_and_is_infinite_without_current() -> None:
    # 32 nC / 3 A = 10.6667 ns -> 10667 ps (rounded up: the safe side)
    assert phys.swing_s(F(32, 10**9), F(3)) == 10667 * F(1, 10**12)
    assert phys.swing_s(F(32, 10**9), F(-3)) == phys.swing_s(F(32, 10**9), F(3))
    assert phys.swing_s(F(32, 10**9), F(0)) is None
    # a square wave +A / -A: fundamental 4 A / pi (computed)
    assert math.isclose(phys.error_fundamental(1.0, 1.0), 4 / math.pi)


# ---------------------------------------------------------------------------------------------
# the command line: JSON interface, header arrays under gcc, no change without [adaptive]


def test_json_interface(tmp_path: Path) -> None:
    code, out, err = run_cli(
        ["build", str(EXAMPLES / "adaptive-gan.toml"), "--json", "--out", str(tmp_path), "--parents"]
    )
    assert code == 0, err
    entry = json.loads(out)["outputs"][0]
    bins = entry["adaptive"]
    assert bins[0]["current_min_a"] == 0 and bins[-1]["current_max_a"] is None
    for b in bins:
        for sign in ("positive", "negative"):
            for edge in ("to_high", "to_low"):
                x = b[sign][edge]
                assert set(x) >= {"code", "achieved_min_s", "swing_s", "soft"}
                assert isinstance(x["soft"], bool)
                if edge != COMMUTATED[sign]:
                    assert x["swing_s"] == 0 and x["soft"] is False


def test_without_adaptive_the_json_has_no_table(tmp_path: Path) -> None:
    code, out, err = run_cli(
        ["build", str(EXAMPLES / "gan-buck.toml"), "--json", "--out", str(tmp_path), "--parents"]
    )
    assert code == 0, err
    assert "adaptive" not in json.loads(out)["outputs"][0]


GCC = shutil.which("gcc")


@pytest.mark.skipif(GCC is None, reason="gcc not installed")
@pytest.mark.parametrize("design", ["adaptive-gan.toml", "adaptive-silicon.toml"])
def test_emitted_arrays_compile_and_match_the_json(design: str, tmp_path: Path) -> None:
    code, out, err = run_cli(["build", str(EXAMPLES / design), "--json", "--out", str(tmp_path), "--parents"])
    assert code == 0, err
    entry = json.loads(out)["outputs"][0]
    header = tmp_path / entry["file"]
    p = entry["prefix"].lower()
    names = ["edge_ma", "pos_register", "neg_register"]
    names += [f"{s}_{e}_{k}" for s in ("pos", "neg") for e in EDGES for k in ("code", "min_ps")]
    model = entry["adaptive_model"]
    if model["inverter"] is not None:
        names += ["compensation_pos_counts", "compensation_neg_counts"]
    if model["adc"] is not None:
        names += ["pos_edge_adc", "neg_edge_adc"]
    body = "\n".join(
        f'for (i = 0; i < {entry["prefix"]}_ADAPT_BINS; ++i) printf("{n} %u %llu\\n", i, '
        f"(unsigned long long){p}_adapt_{n}[i]);"
        for n in names
    )
    src = tmp_path / "main.c"
    src.write_text(
        f'#include <stdio.h>\n#include "{header.name}"\nint main(void) {{ unsigned i;\n{body}\n'
        "return 0; }\n",
        encoding="utf-8",
    )
    exe = tmp_path / "main"
    subprocess.run(
        [
            GCC,
            "-std=c99",
            "-Wall",
            "-Wextra",
            "-Wpedantic",
            "-Werror",
            "-I",
            str(header.parent),
            str(src),
            "-o",
            str(exe),
        ],
        check=True,
    )
    got: dict[str, list[int]] = {}
    for line in subprocess.run(
        [str(exe)], check=True, capture_output=True, text=True
    ).stdout.splitlines():
        name, _, value = line.split()
        got.setdefault(name, []).append(int(value))
    bins = entry["adaptive"]
    # edges in mA, rounded up; bin 0 starts at 0 A
    assert got["edge_ma"] == [math.ceil(round(b["current_min_a"] * 1000, 6)) for b in bins]
    for s, short in (("positive", "pos"), ("negative", "neg")):
        assert got[f"{short}_register"] == [b["registers"][s] for b in bins]
        for e in EDGES:
            assert got[f"{short}_{e}_code"] == [b[s][e]["code"] for b in bins]
            for ps, b in zip(got[f"{short}_{e}_min_ps"], bins, strict=True):
                # rounded down to a picosecond: within 1 ps below the JSON value
                assert 0 <= b[s][e]["achieved_min_s"] * 1e12 - ps < 1.001
    if model["inverter"] is not None:
        for s, short in (("positive", "pos"), ("negative", "neg")):
            assert got[f"compensation_{short}_counts"] == [b["compensation_counts"][s] for b in bins]
    if model["adc"] is not None:
        zero = model["adc"]["zero"]
        for s, short in (("positive", "pos"), ("negative", "neg")):
            expect = [zero if b["adc_codes"] is None else b["adc_codes"][s] for b in bins]
            assert got[f"{short}_edge_adc"] == expect
    # each register word holds its bin's codes in the layout's edge fields
    layout = load_layout(entry["target"])
    for b in bins:
        for s in ("positive", "negative"):
            fields = layout.unpack(b["registers"][s])
            for e in EDGES:
                assert fields[layout.edge_field(e).name] == b[s][e]["code"]
            assert fields[layout.divider_field] == entry["divider_code"]


# ---------------------------------------------------------------------------------------------
# bad input: one line, exit 2, nothing written

GAN = (EXAMPLES / "adaptive-gan.toml").read_text(encoding="utf-8")


@pytest.mark.parametrize(
    ("change", "where"),
    [
        (('below_swing = "max"', 'below_swing = "maybe"'), "adaptive.below_swing"),
        (
            ('currents = ["1A", "2A", "4A", "8A", "16A"]', 'currents = ["2A", "1A"]'),
            "adaptive.currents[1]",
        ),
        (('currents = ["1A", "2A", "4A", "8A", "16A"]', "currents = []"), "adaptive.currents"),
        (
            ('currents = ["1A", "2A", "4A", "8A", "16A"]', 'currents = ["-1A"]'),
            "adaptive.currents[0]",
        ),
        (('qoss = "16nC"', 'qoss = "16ns"'), "stage.qoss"),
        (('qoss = "16nC"', 'note = "no qoss"'), "stage.qoss"),
        (("adc_bits = 12", "adc_bits = 8"), "adaptive.adc_zero"),
        (('below_swing = "max"', 'below_swing = "max"\nswing = 1'), "adaptive.swing"),
        (('loss_budget = "2.4W"', 'note = "no budget"'), "adaptive.below_swing"),
    ],
)
def test_bad_adaptive_input_is_one_line(
    change: tuple[str, str], where: str, tmp_path: Path
) -> None:
    assert change[0] in GAN
    path = tmp_path / "d.toml"
    path.write_text(GAN.replace(change[0], change[1]), encoding="utf-8")
    code, out, err = run_cli(["build", str(path), "--out", str(tmp_path / "o"), "--parents"])
    assert code == 2, (out, err)
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert where in err
    assert not (tmp_path / "o").exists()


def test_adaptive_needs_a_stage(tmp_path: Path) -> None:
    text = (EXAMPLES / "gan-buck.toml").read_text(encoding="utf-8")
    start, end = text.index("[stage]"), text.index("# The invented analog network")
    text = text[:start] + '[adaptive]\ncurrents = ["1A"]\nbelow_swing = "hard"\n\n' + text[end:]
    text = text.replace('source = "window"', 'source = "reference-minimum"')
    path = tmp_path / "d.toml"
    path.write_text(text, encoding="utf-8")
    code, _, err = run_cli(["build", str(path), "--out", str(tmp_path / "o"), "--parents"])
    assert code == 2 and "[adaptive] needs a [stage]" in err


def test_fuzzed_adaptive_sections_keep_the_promise(tmp_path: Path) -> None:
    """Seeded, bounded: random values in [adaptive], [gate_driver] and qoss give exit 0/1/2, one error line,
    no traceback, nothing written on an error."""
    import random
    import time

    rng = random.Random(12)
    values = [
        '"1A"',
        '"0A"',
        '"-2A"',
        '"1e99A"',
        '"abc"',
        "3",
        "-1",
        "0",
        "true",
        '["1A"]',
        '["1A", "1A"]',
        '["5mA", "2A"]',
        "[]",
        '"max"',
        '"hard"',
        '"12.5mA"',
        "4096",
        "1.5",
        '"16nC"',
        '"1pC"',
        '"1kC"',
        "{}",
        '["1A", 3]',
    ]
    keys = [
        "currents",
        "below_swing",
        "current_error",
        "adc_zero",
        "adc_amps_per_code",
        "adc_bits",
        "peak_current",
        "sign_band",
    ]
    driver_keys = ["min_pulse", "bootstrap_on", "bootstrap_every"]
    values += ['"50ns"', '"3us"', '"0ns"', "10", "1"]
    deadline = time.monotonic() + 8.0  # a bound on the test's length, not a check of speed
    runs = 0
    while time.monotonic() < deadline and runs < 40:
        runs += 1
        text = GAN
        for _ in range(rng.randint(1, 3)):
            key = rng.choice([*keys, "qoss", *driver_keys])
            value = rng.choice(values)
            lines = [ln for ln in text.splitlines() if not ln.startswith(f"{key} =")]
            section = "[stage]" if key == "qoss" else "[adaptive]"
            section = "[gate_driver]" if key in driver_keys else section
            at = lines.index(section) + 1
            lines.insert(at, f"{key} = {value}")
            text = "\n".join(lines) + "\n"
        path = tmp_path / "f.toml"
        path.write_text(text, encoding="utf-8")
        out_dir = tmp_path / f"o{runs}"
        code, _, err = run_cli(["build", str(path), "--out", str(out_dir), "--parents"])
        assert code in (0, 1, 2), err
        assert "Traceback" not in err
        if code == 2:
            assert len(err.strip().splitlines()) == 1, err
        if code != 0:
            assert not out_dir.exists()


def test_report_has_the_section_with_plot_and_table(tmp_path: Path) -> None:
    out = tmp_path / "r.html"
    code, _, err = run_cli(["report", str(EXAMPLES / "adaptive-gan.toml"), "-o", str(out)])
    assert code == 0, err
    html = out.read_text(encoding="utf-8")
    start = html.index('<section id="adaptive">')
    section = html[start : html.index("</section>", start)]
    # issue 23: the plot carries a decision, so it sits among the decision plots; the table is
    # in the (folded) section
    start = html.index('<section id="decision">')
    decision = html[start : html.index("</section>", start)]
    assert section.count("<svg") == 0 and decision.count('<svg xmlns="http://www.w3.org/2000/'
                                                         'svg" id="adaptive') == 1
    # both policies are drawn, and the table lists the bin codes worked out by hand above
    assert "below_swing 'max'" in decision + section and "below_swing 'hard'" in decision + section
    assert "<td>to_low 102</td>" in section and "<td>to_low 119</td>" in section
    assert "every temperature and both current signs" in section
    # no section without [adaptive]
    plain = tmp_path / "p.html"
    code, _, err = run_cli(["report", str(EXAMPLES / "gan-buck.toml"), "-o", str(plain)])
    assert code == 0, err
    assert 'id="adaptive"' not in plain.read_text(encoding="utf-8")


# ---------------------------------------------------------------------------------------------
# gate-driver limits (common practice: a driver's minimum input pulse width; a bootstrap supply
# recharges only while the low side is on)


def test_gate_driver_limits_by_hand() -> None:
    plan = plan_design(load_design(EXAMPLES / "adaptive-gan.toml"))
    d = plan.outputs[0].driver
    # 160 MHz, 400 kHz centre-aligned: N = 200 compare counts, 2 clocks per count
    # longest dead times in the table: to_high and to_low 119 tenths = 11.9 clocks
    # min pulse 50 ns at the fast clock: ceil(50 ns x 160 MHz x 1.00005) = ceil(8.0004) = 9
    assert d.min_pulse_clocks == 9
    # high-side pulse 2c - 11.9 >= 9  ->  c >= 10.45  ->  11 (the dead time alone gives 6)
    assert d.duty_min_counts == 11 and d.binds_min == "minimum pulse"
    # bootstrap 100 ns: ceil(16.0008) = 17 clocks; 2 (200 - c) - 11.9 >= 17 -> c <= 185.55
    assert d.bootstrap_clocks == 17 and d.bootstrap_compare_max == 185
    # refresh in every period binds the maximum (the minimum pulse alone allows 189)
    assert d.duty_max_counts == 185 and d.binds_max == "bootstrap refresh"
    s = plan_design(load_design(EXAMPLES / "adaptive-silicon.toml")).outputs[0].driver
    # 300 ns -> ceil(48.48) = 49 clocks; longest dead time 83 clocks; N = 4000; counting
    # convention not stated, so the worse one (a high-side pulse of 2c - 1 clocks):
    # min 2c - 1 - 83 >= 49 -> c >= 66.5 -> 67; max 2 (4000 - c) - 83 >= 49 -> c <= 3934;
    # bootstrap 2 us -> ceil(323.2) = 324 clocks: 2 (4000 - c) - 83 >= 324 -> c <= 3796
    # (once every 10 periods)
    assert (s.duty_min_counts, s.duty_max_counts, s.bootstrap_compare_max) == (67, 3934, 3796)
    assert s.binds_max == "minimum pulse"


def test_gate_driver_that_leaves_no_duty_fails_the_verdict(tmp_path: Path) -> None:
    path = tmp_path / "d.toml"
    path.write_text(GAN.replace('min_pulse = "50ns"', 'min_pulse = "1.2us"'), encoding="utf-8")
    code, out, err = run_cli(["build", str(path), "--out", str(tmp_path / "o")])
    assert code == 1, (out, err)
    assert "no compare value gives a pulse on both outputs" in out
    assert not (tmp_path / "o").exists()


@pytest.mark.parametrize(
    ("change", "where"),
    [
        (('min_pulse = "50ns"', 'min_pulse = "50nV"'), "gate_driver.min_pulse"),
        (('bootstrap_every = 1', 'bootstrap_every = 0'), "gate_driver.bootstrap_every"),
        (('bootstrap_on = "100ns"', 'refresh = "100ns"'), "gate_driver.refresh"),
    ],
)
def test_bad_gate_driver_input_is_one_line(
    change: tuple[str, str], where: str, tmp_path: Path
) -> None:
    path = tmp_path / "d.toml"
    path.write_text(GAN.replace(*change), encoding="utf-8")
    code, _, err = run_cli(["build", str(path), "--out", str(tmp_path / "o")])
    assert code == 2 and len(err.strip().splitlines()) == 1 and where in err
