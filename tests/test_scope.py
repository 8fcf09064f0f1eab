"""Analog (oscilloscope) capture reading: layout, numbers, instants, options (issue 21).

Outside references named beside each check: Python's float() (a correctly rounded decimal to
binary conversion) for the numbers; IEEE 181's reference-level instant (linear interpolation
between the two samples around the crossing) worked by hand for the instants.
"""

from __future__ import annotations

import json
import random
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest

from conftest import REPO, run_cli
from gapforge.base.errors import GapforgeError
from gapforge.bench import scope_csv
from gapforge.bench.scope import Reference, ScopeSettings, read_scope

SETTINGS = ScopeSettings(Reference(Fraction(3)), Reference(Fraction(3)))


def _write(path: Path, text: str) -> Path:
    path.write_text(text)
    return path


def _values(path: Path, chunk: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    sf = scope_csv.read_layout(path)
    got = list(scope_csv.blocks(sf, list(range(len(sf.columns))), chunk))
    return (np.concatenate([b.times for b in got]),
            np.concatenate([b.values for b in got]))


FORMATS = ["%.6e", "%.9e", "%.3f", "%+.4e", "%.2E", "%.15e", "%.5f", "%.1e"]


@pytest.mark.parametrize("fmt", FORMATS)
def test_numbers_equal_python_float(fmt: str, tmp_path: Path) -> None:
    # outside reference: Python's float(), correctly rounded; our fast path must agree exactly
    # (a mantissa of up to 15 digits scaled by one exact power of ten is rounded once)
    rng = np.random.default_rng(5)
    rows = []
    for k in range(3000):
        t = (k - 1500) * 1.25e-9
        a, b = rng.normal(0, 10), rng.normal(0, 1e-3) * 10.0 ** int(rng.integers(-3, 4))
        rows.append(",".join(fmt % x for x in (t, a, b)))
    path = _write(tmp_path / "n.csv", "Time,a,b\n" + "\n".join(rows) + "\n")
    t, v = _values(path, chunk=4096)
    expect = np.array([[float(c) for c in r.split(",")] for r in rows])
    fmt_digits = int(fmt[fmt.index(".") + 1:-1]) + (1 if fmt[-1] in "eE" else 0)
    if fmt_digits <= 15:
        assert np.array_equal(t, expect[:, 0]) and np.array_equal(v, expect[:, 1:])
    else:  # 16 significant digits: within one unit in the last place
        assert np.allclose(v, expect[:, 1:], rtol=2.3e-16, atol=0)


def test_chunk_boundaries_change_nothing(tmp_path: Path) -> None:
    text = "Time,a\n" + "".join(f"{k * 1e-9:.6e},{np.sin(k / 7) * 10:.4f}\n" for k in range(2000))
    path = _write(tmp_path / "c.csv", text)
    whole = _values(path)
    for chunk in (17, 64, 1000):
        parts = _values(path, chunk)
        assert np.array_equal(parts[0], whole[0]) and np.array_equal(parts[1], whole[1])


def test_layout_units_comments_crlf_negative_times(tmp_path: Path) -> None:
    text = ("# invented\r\nTime (us),CH1 [mV],CH2\r\n\r\n# a comment\r\n"
            "-0.002,1500,-2.5\r\n# mid-file comment\r\n-0.001,2500,1E1\r\n\r\n0,-500,3.0\r\n")
    path = _write(tmp_path / "u.csv", text)
    sf = scope_csv.read_layout(path)
    assert [c.name for c in sf.columns] == ["CH1", "CH2"] and sf.time_scale == 1e-6
    t, v = _values(path)
    assert t.tolist() == pytest.approx([-2e-9, -1e-9, 0.0])
    assert v[:, 0].tolist() == pytest.approx([1.5, 2.5, -0.5])  # mV -> V
    assert v[:, 1].tolist() == [-2.5, 10.0, 3.0]


def test_spice_style_names_and_stem_addressing(tmp_path: Path) -> None:
    # 'V(gh)' is a name, not a unit; 'time_ns' and '[mV]' are units
    path = _write(tmp_path / "sp.csv", "time_ns,V(gh),gl [mV],gate_v\n0,0,9000,1\n1,5,0,1\n")
    sf = scope_csv.read_layout(path)
    assert [c.name for c in sf.columns] == ["V(gh)", "gl", "gate"]
    assert sf.columns[2].raw == "gate_v" and sf.time_scale == 1e-9
    from gapforge.bench.scope import locate

    assert locate([path], "gate_v", "--high").index == 2  # the header cell as written
    assert locate([path], "sp:gl", "--low").index == 1


def test_units_row(tmp_path: Path) -> None:
    path = _write(tmp_path / "r.csv", "TIME,gh,node\nsecond,Volt,kV\n0,1,0.4\n1e-9,2,0.2\n")
    sf = scope_csv.read_layout(path)
    assert sf.columns[1].to_volts == 1e3 and sf.time_unit == "second"
    assert _values(path)[1][:, 1].tolist() == [400.0, 200.0]


def _gates(path: Path, times: list[float], high: list[float], low: list[float]) -> Path:
    rows = "".join(f"{t:.6e},{h},{lo}\n" for t, h, lo in zip(times, high, low, strict=True))
    return _write(path, "Time,gh,gl\ns,V,V\n" + rows)


def test_instant_is_the_interpolated_crossing(tmp_path: Path) -> None:
    # IEEE 181 reference-level instant, by hand: low falls 10 -> 0 between 2 ns and 3 ns, so it
    # crosses 3 V at 2 + 0.7 = 2.7 ns; high rises 0 -> 4 between 6 and 7 ns: 3 V at 6.75 ns
    times = [k * 1e-9 for k in range(10)]
    path = _gates(tmp_path / "g.csv", times, [0, 0, 0, 0, 0, 0, 0, 4, 4, 4],
                  [10, 10, 10, 0, 0, 0, 0, 0, 0, 0])
    cap = read_scope([path], "gh", "gl", SETTINGS)
    assert cap.low.times.tolist() == pytest.approx([0.0, 2.7e-9])
    assert cap.high.times.tolist() == pytest.approx([0.0, 6.75e-9])
    assert cap.resolution_s == Fraction(1, 10**9)
    code, out, _ = run_cli(["measure", str(path), "--high", "gh", "--low", "gl", "--threshold",
                            "3V", "--json"])
    doc = json.loads(out)
    assert code == 0 and doc["edges"]["to_high"]["min_s"] == pytest.approx(4.05e-9, abs=1e-15)


def test_hysteresis_keeps_the_last_crossing_before_the_state_change(tmp_path: Path) -> None:
    # high rises to 3.5 V (over 3 V, inside 3 +/- 1 V), dips to 2.5 V, then rises to 6 V: one
    # edge, at the last 3 V crossing before 4 V is passed: between 2.5 V (5 ns) and 6 V (6 ns),
    # 5 + 0.5/3.5 ns; ringing after turn-off back to 3.8 V (below 4 V) makes no edge
    times = [k * 1e-9 for k in range(14)]
    high = [0, 0, 0, 3.5, 3.5, 2.5, 6, 6, 6, 6, 6, 6, 6, 6]
    low = [10, 10, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0]
    low[9], low[10] = 3.8, 0
    path = _gates(tmp_path / "h.csv", times, high, low)
    settings = ScopeSettings(Reference(Fraction(3)), Reference(Fraction(3)), Fraction(2))
    cap = read_scope([path], "gh", "gl", settings)
    assert cap.high.times.tolist() == pytest.approx([0.0, 5e-9 + 0.5e-9 / 3.5])
    assert cap.low.times.tolist() == pytest.approx([0.0, 1e-9 + 7e-9 / 10])
    plain = read_scope([path], "gh", "gl", SETTINGS)  # without hysteresis: extra edges
    assert plain.high.times.size == 4 and plain.low.times.size == 4


def test_deskew_and_stated_resolution(tmp_path: Path) -> None:
    times = [k * 1e-9 for k in range(10)]
    path = _gates(tmp_path / "d.csv", times, [0, 0, 0, 0, 0, 0, 0, 4, 4, 4],
                  [10, 10, 10, 0, 0, 0, 0, 0, 0, 0])
    _, out, _ = run_cli(["measure", str(path), "--high", "gh", "--low", "gl", "--threshold",
                            "3V", "--deskew-high", "1.5ns", "--deskew-low", "-0.25ns",
                            "--resolution", "100ps", "--json"])
    doc = json.loads(out)
    # 6.75 - 1.5 - (2.7 + 0.25) = 2.3 ns
    assert doc["edges"]["to_high"]["min_s"] == pytest.approx(2.3e-9, abs=1e-15)
    assert doc["resolution_s"] == pytest.approx(1e-10) and doc["analog"]["resolution_basis"] == "stated"
    assert doc["resolution_origin"] == "--resolution"
    # without --resolution: the sample interval (1 ns here), and the text says where it came from
    _, out, _ = run_cli(["measure", str(path), "--high", "gh", "--low", "gl", "--threshold",
                         "3V", "--json"])
    doc = json.loads(out)
    assert doc["resolution_s"] == pytest.approx(1e-9)
    assert doc["resolution_origin"] == "the sample interval around the crossings"


def test_uneven_spacing_is_reported(tmp_path: Path) -> None:
    times = [0, 1e-9, 2e-9, 3e-9, 5e-9, 6e-9, 7e-9, 8e-9]
    path = _gates(tmp_path / "e.csv", times, [0, 0, 0, 0, 0, 4, 4, 4], [9, 9, 0, 0, 0, 0, 0, 0])
    cap = read_scope([path], "gh", "gl", SETTINGS)
    assert any("unevenly spaced" in w for w in cap.warnings)
    # the edges' crossings lie in 1 ns intervals (low at 1..2 ns, high at 5..6 ns): the 2 ns
    # interval without a crossing does not widen the resolution
    assert cap.resolution_s == Fraction(1, 10**9)
    wide = _gates(tmp_path / "w.csv", times, [0, 0, 0, 0, 4, 4, 4, 4], [9, 9, 0, 0, 0, 0, 0, 0])
    assert read_scope([wide], "gh", "gl", SETTINGS).resolution_s == Fraction(2, 10**9)
    # the text says the spacing as it is (never "every 2 ns" for mostly 1 ns samples)
    _, out, _ = run_cli(["measure", str(path), "--high", "gh", "--low", "gl", "--threshold", "3V"])
    assert "8 samples at intervals of 1000 .. 2000 ps" in out and "samples every" not in out


def test_one_file_per_channel_by_stem(tmp_path: Path) -> None:
    _write(tmp_path / "gate_h.csv", "Time,V\n0,0\n1e-9,0\n2e-9,0\n3e-9,5\n4e-9,5\n")
    _write(tmp_path / "gate_l.csv", "Time,V\n0,9\n1e-9,0\n2e-9,0\n3e-9,0\n4e-9,0\n")
    code, out, err = run_cli(["measure", str(tmp_path / "gate_h.csv"), str(tmp_path / "gate_l.csv"),
                              "--high", "gate_h", "--low", "gate_l", "--threshold", "2.5V",
                              "--json"])
    assert code == 0, err
    # low crosses 2.5 V at 1 - ... : 9 -> 0 over 1 ns, 6.5/9 ns; high at 2 + 0.5 ns
    assert json.loads(out)["edges"]["to_high"]["min_s"] == pytest.approx(2.5e-9 - 6.5e-9 / 9)


@pytest.mark.parametrize(("text", "args", "message"), [
    ("Time,gh,gl\n0,0,5\n1e-9,5,0\n", [], "--threshold, --threshold-high/--threshold-low or --level"),
    ("Time,gh,gl\n0,0,5\n1e-9,5,zz\n", ["--threshold", "3V"], "c.csv:3: column 3: 'zz' is not a number"),
    ("Time,gh,gl\n0,0,5\n1e-9,5\n", ["--threshold", "3V"], "c.csv:3: 2 columns, the header has 3"),
    ("Time,gh,gl\n0,0,5\n1e-9,5,0\n0.5e-9,0,0\n", ["--threshold", "3V"], "c.csv:4: sample times must increase"),
    ("Time,gh,gl\n0,0,5\n1e-9,5,nan\n", ["--threshold", "3V"], "c.csv:3"),
    ("Time,gh,gl\ns,A,V\n0,0,5\n1e-9,5,0\n", ["--threshold", "3V"], "not volts"),
    ("Time,gx,gl\n0,0,5\n1e-9,5,0\n", ["--threshold", "3V"], "no channel 'gh'"),
    ("0,0,5\n1e-9,5,0\n", ["--threshold", "3V"], "no header row"),
    ("Time,gh,gl\n0,0,5\n1e-9,5,0\n", ["--threshold", "3V", "--node", "gl"], "--node and --bus go together"),
    ("Time,gh,gl\n0,0,5\n1e-9,5,0\n", ["--threshold", "3V", "--level", "150%"], "--level"),
    # issue 21 (thresholds): a --level no gate uses was silently dropped (review rev2)
    ("Time,gh,gl\n0,0,5\n1e-9,5,0\n", ["--threshold", "3V", "--level", "50%"],
     "--level: --level applies only to a gate without a threshold"),
    # review rev2: float() takes other scripts' digits and '_' where loadtxt does not: the
    # error must still name the cell, not "these lines"
    ("Time,gh,gl\n0,0,5\n1e-9,\u0665,0\n", ["--threshold", "3V"], "c.csv:3: column 2:"),
    ("Time,gh,gl\n0,0,5\n1e-9,5,1_0\n", ["--threshold", "3V"], "c.csv:3: column 3: '1_0'"),
    ("Time,gh,gl\n0,0,5\n1e-9,5,0\n", ["--threshold-high", "3V", "--threshold-low", "2V",
                                        "--level", "50%"], "not both"),
    # a VCD saved under a .csv name, read as a logic capture or with thresholds: said as such
    ("$date today $end\n$timescale 1ns $end\n$var wire 1 ! gh $end\n", [],
     "c.csv: a VCD file (it begins with $date) named .csv: rename it .vcd"),
    ("\ufeff$timescale 1ns $end\n$var wire 1 ! gh $end\n", ["--threshold", "3V"],
     "c.csv: a VCD file (it begins with $timescale) named .csv"),
    # a decimal-comma locale's export (';' between columns) and a tab-separated one: named
    ("Time;gh;gl\n0;0;5\n1e-9;5;0\n", ["--threshold", "3V"],
     "c.csv:1: columns separated by ';', not commas"),
    ("Time\tgh\tgl\n0\t0\t5\n1e-9\t5\t0\n", ["--threshold", "3V"],
     "c.csv:1: columns separated by tabs, not commas"),
])
def test_bad_input_is_one_line_exit_2(text: str, args: list[str], message: str,
                                       tmp_path: Path) -> None:
    path = _write(tmp_path / "c.csv", text)
    before = sorted(tmp_path.iterdir())
    code, out, err = run_cli(["measure", str(path), "--high", "gh", "--low", "gl", *args])
    assert code == 2 and out == "" and message in err, err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert sorted(tmp_path.iterdir()) == before


def test_soft_check_against_the_adaptive_table(tmp_path: Path) -> None:
    # examples/adaptive-gan.toml (invented): at +3.2 A the table calls to_low soft
    # (stage.adaptive: positive current commutates the edge before the low side turns on)
    from gapforge.pipeline.scope_check import soft_edges

    design = REPO / "examples" / "adaptive-gan.toml"
    assert soft_edges(design, Fraction(16, 5)) == {"to_high": False, "to_low": True}
    times = [k * 1e-9 for k in range(200)]
    high = [5.0 if 40 <= k < 100 else 0.0 for k in range(200)]
    low = [5.0 if k < 10 or k >= 130 else 0.0 for k in range(200)]
    for node_low, hard in ((0.0, 0), (24.0, 1)):  # the node at the low side's turn-on
        node = [48.0 if 20 <= k < 115 else (node_low if k >= 115 else 0.0) for k in range(200)]
        rows = "".join(f"{t:.6e},{h},{lo},{n}\n" for t, h, lo, n in zip(times, high, low, node,
                                                                          strict=True))
        path = _write(tmp_path / "n.csv", "Time,gh,gl,sw\n" + rows)
        code, out, _ = run_cli(["measure", str(path), "--high", "gh", "--low", "gl",
                                  "--threshold", "2.5V", "--node", "sw", "--bus", "48V",
                                  "--design", str(design), "--current", "3.2A", "--json"])
        doc = json.loads(out)
        assert doc["node"]["to_low"]["hard"] == hard
        said = [r for r in doc["reasons"] if "calls this edge soft" in r]
        assert bool(said) == bool(hard) and (code == 1 if hard else True)
        assert doc["node"]["bus_source"] == "--bus"
        # the design states the bus (bus_voltage = 48 V): --node alone takes it, and says so
        code2, out2, _ = run_cli(["measure", str(path), "--high", "gh", "--low", "gl",
                                  "--threshold", "2.5V", "--node", "sw", "--design", str(design),
                                  "--current", "3.2A", "--json"])
        doc2 = json.loads(out2)
        assert code2 == code and doc2["node"]["to_low"] == doc["node"]["to_low"]
        assert doc2["node"]["bus_v"] == 48.0
        assert doc2["node"]["bus_source"] == "[stage] bus_voltage of adaptive-gan.toml"
    # no --bus and no design that states one: one line, exit 2
    code, out, err = run_cli(["measure", str(path), "--high", "gh", "--low", "gl",
                              "--threshold", "2.5V", "--node", "sw"])
    assert code == 2 and "give --bus, or a --design whose [stage] states bus_voltage" in err


def test_logic_csv_still_reads_as_logic(tmp_path: Path) -> None:
    path = _write(tmp_path / "l.csv", "time_ns,gh,gl\n0,0,1\n10,0,0\n20,1,0\n")
    code, out, err = run_cli(["measure", str(path), "--high", "gh", "--low", "gl", "--json"])
    assert code == 0, err and "analog" not in json.loads(out)


def test_level_needs_two_states(tmp_path: Path) -> None:
    path = _write(tmp_path / "f.csv", "Time,gh,gl\n0,1,5\n1e-9,1,0\n2e-9,1,5\n")
    with pytest.raises(GapforgeError, match="never changes"):
        read_scope([path], "gh", "gl", ScopeSettings(Reference(None, Fraction(50)),
                                                     Reference(None, Fraction(50))))


def test_random_layouts_match_a_per_line_reading(tmp_path: Path) -> None:
    # a plain per-line reader (split, float) as the reference, on seeded random exports with
    # comments, blank lines, spaces and mixed formats in between
    rng = random.Random(11)
    for case in range(20):
        lines, expect = ["Time,a"], []
        t = -5e-9
        for _ in range(rng.randint(5, 300)):
            t += rng.choice([1e-9, 1e-9, 1e-9])
            v = rng.uniform(-20, 20)
            fmt = rng.choice(["%.6e", "%.3f", "%g", " %.4e ", "%.2E"])
            lines.append(f"{t:.9e},{fmt % v}")
            expect.append((float(f"{t:.9e}"), float((fmt % v).strip())))
            if rng.random() < 0.05:
                lines.append(rng.choice(["# note", "", "   "]))
        path = _write(tmp_path / f"r{case}.csv", "\n".join(lines) + "\n")
        got = _values(path, chunk=rng.choice([32, 256, 4096]))
        assert got[0].tolist() == [e[0] for e in expect]
        assert got[1][:, 0].tolist() == [e[1] for e in expect]


def test_report_draws_the_traces_around_the_worst_gap_and_the_overlap(tmp_path: Path) -> None:
    # an invented capture with one overlap (the high gate on 2 ns before the low gate is off):
    # the report holds the analog section with both figures, instants at the measured times,
    # and no two labels overlapping or leaving their figure (tests/svg_layout.py)
    from svg_layout import layout_problems, svgs

    times = [k * 1e-9 for k in range(300)]
    high = [6.0 if (40 <= k < 100) or (198 <= k < 260) else 0.0 for k in range(300)]
    low = [15.0 if k < 10 or 130 <= k < 200 else 0.0 for k in range(300)]
    path = _gates(tmp_path / "o.csv", times, high, low)
    out = tmp_path / "r.html"
    code, _, err = run_cli(["report", str(REPO / "examples" / "gan-buck.toml"), "-o", str(out),
                            "--capture", str(path), "--high", "gh", "--low", "gl",
                            "--threshold", "3V"])
    assert code == 1, err  # the overlap fails the capture
    html = out.read_text()
    figures = svgs(html)
    assert {"scope-worst", "scope-overlap"} <= set(figures)
    for ident in ("scope-worst", "scope-overlap"):
        assert layout_problems(figures[ident]) == []
    assert "Thresholds: high side 3 V, low side 3 V" in html
    root = figures["scope-overlap"]
    xs = sorted(float(e.get("x1") or 0) for e in root.iter("{http://www.w3.org/2000/svg}line")
                if e.get("class") == "instant")
    assert len(xs) == 2 and xs[1] > xs[0]
    # the overlap by hand (IEEE 181 instants): high rises 0 -> 6 V between 197 and 198 ns, 3 V
    # at 197.5 ns; low falls 15 -> 0 V between 199 and 200 ns, 3 V at 199 + 12/15 ns: 2.3 ns
    _, text, _ = run_cli(["measure", str(path), "--high", "gh", "--low", "gl", "--threshold",
                          "3V", "--json"])
    event = json.loads(text)["overlap_events"][0]
    assert event["at_s"] == pytest.approx(197.5e-9) and event["duration_s"] == pytest.approx(2.3e-9)
