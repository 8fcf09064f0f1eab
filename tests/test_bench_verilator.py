"""Captures written by verilator's own VCD tracer, measured (issue 20 follow-up: the bench reads
what real tools write).

Outside source: verilator (a general-purpose Verilog simulator, the distribution's package; 5.006
when this was written) builds and runs a module of our own (invented: a complementary PWM pair
with a dead-time counter, two legs with different counts) and writes the VCD with `--trace`.
Its file differs from Icarus Verilog's (tests/test_bench_tools.py): a `TOP` scope around the
testbench, `$timescale 10ps` written without a space, each signal's code shared by every scope
that sees it, multi-bit values, 32-bit parameters, and each element of an unpacked array declared
as its own variable with the bit range apart (`leg[1] [1:0]`). Format: IEEE 1364-2005 clause 18
(the VCD file format); `timescale: clause 19.8 (the VCD's unit is the simulation's precision).

Reference: the counts in the Verilog source. A dead time is its count times the clock period
(12.5 ns, exact: the VCD holds integer times of 10 ps), one to_high and one to_low gap per PWM
period. The hand-written snippets below (marked) copy the layout verilator writes, so the
reader's regressions run where verilator is absent.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from fractions import Fraction
from pathlib import Path

import pytest
from click.testing import CliRunner

from gapforge.base.errors import GapforgeError
from gapforge.bench.vcd import read_header, read_vcd
from gapforge.cli import cli

VERILATOR = shutil.which("verilator")

NS = Fraction(1, 10**9)
CLOCK = Fraction(25, 2) * NS  # 80 MHz: the testbench toggles clk every 6.25 ns
HALF = CLOCK / 2
PERIOD = 40  # clocks per PWM period
PERIODS = 30  # PWM periods simulated
# invented counts: leg -> (duty clocks, to_high dead-time count, to_low dead-time count)
LEGS = {0: (15, 3, 5), 1: (22, 4, 2)}

MODULE = r"""
// Invented for gapforge's tests: a complementary PWM pair with a dead-time counter, counted in
// clocks. When the commanded state changes both gates turn off; the incoming gate turns on
// after DEAD_RISE clocks (to the high side) or DEAD_FALL clocks (to the low side).
`timescale 1ns/10ps
module pwm_dead #(parameter PERIOD = 40, DUTY = 15, DEAD_RISE = 3, DEAD_FALL = 5) (
  input  wire       clk,
  output reg        gate_h,
  output reg        gate_l,
  output wire [1:0] gates
);
  reg [7:0] count = 0;
  reg [7:0] dead = 0;
  reg pwm_q = 0;
  wire pwm = count < DUTY;
  initial begin gate_h = 0; gate_l = 1; end
  assign gates = {gate_h, gate_l};
  always @(posedge clk) begin
    count <= (count == PERIOD - 1) ? 8'd0 : count + 8'd1;
    pwm_q <= pwm;
    if (pwm != pwm_q) begin
      gate_h <= 0; gate_l <= 0;
      dead <= (pwm ? DEAD_RISE : DEAD_FALL) - 1;
    end else if (dead != 0) begin
      dead <= dead - 1;
    end else begin
      gate_h <= pwm; gate_l <= !pwm;
    end
  end
endmodule

module tb;
  @PARAMS@
  reg clk = 0;
  wire gate_h, gate_l;     // leg 0 as scalars
  wire [1:0] gates;        // leg 0 as a bus {high, low}
  wire [1:0] leg [0:1];    // both legs as an unpacked array of buses
  wire high [0:1];         // and as unpacked arrays of single bits
  wire low [0:1];
  pwm_dead #(PERIOD, D0, R0, F0) leg0 (.clk(clk), .gate_h(gate_h), .gate_l(gate_l), .gates(gates));
  pwm_dead #(PERIOD, D1, R1, F1) leg1 (.clk(clk), .gate_h(high[1]), .gate_l(low[1]),
                                       .gates(leg[1]));
  assign leg[0] = gates;
  assign high[0] = gate_h;
  assign low[0] = gate_l;
  always #6.25 clk = !clk;
  initial begin
    $dumpfile("pwm.vcd");
    $dumpvars(0, tb);
    #(12.5 * PERIOD * PERIODS) $finish;
  end
endmodule
"""


def _source() -> str:
    """The Verilog with the counts above as the testbench's localparams."""
    values = {"PERIODS": PERIODS, "PERIOD": PERIOD}
    for leg, (duty, rise, fall) in LEGS.items():
        values |= {f"D{leg}": duty, f"R{leg}": rise, f"F{leg}": fall}
    params = ", ".join(f"{name} = {value}" for name, value in values.items())
    return MODULE.replace("@PARAMS@", f"localparam {params};")


def _measure(args: list[str]) -> tuple[int, dict[str, object] | str]:
    result = CliRunner().invoke(cli, ["measure", *args, "--json"])
    if isinstance(result.exception, GapforgeError):
        return 2, result.exception.line()
    if result.exit_code == 2:
        return 2, result.output
    return result.exit_code, json.loads(result.output)


@pytest.fixture(scope="module")
def traced(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Build the testbench once with verilator (C++ at -O0: seconds, not a minute) and run it."""
    if VERILATOR is None:
        pytest.skip("verilator not installed")
    where = tmp_path_factory.mktemp("verilator")
    (where / "tb.v").write_text(_source())
    subprocess.run([VERILATOR, "--binary", "--trace", "--top-module", "tb", "-Mdir", "obj",
                    "-MAKEFLAGS", "OPT_FAST=-O0 OPT_SLOW=-O0 OPT_GLOBAL=-O0", "tb.v"],
                   cwd=where, check=True, timeout=300, capture_output=True)
    subprocess.run([str(where / "obj" / "Vtb")], cwd=where, check=True, timeout=60,
                   capture_output=True)
    path = where / "pwm.vcd"
    text = path.read_text()
    # the file has what this test is about: verilator's own layout
    assert text.startswith("$version Generated by VerilatedVcd")
    assert "$scope module TOP $end" in text and "$timescale 10ps $end" in text
    assert re.search(r"\$var wire +2 \S+ leg\[1\] \[1:0\] \$end", text)
    assert re.search(r"\$var wire +1 \S+ high\[0\] \$end", text)
    assert re.search(r"^b\d+ \S+$", text, re.MULTILINE)  # multi-bit values
    return path


def _edges(doc: dict[str, object]) -> dict[str, dict[str, object]]:
    edges = doc["edges"]
    assert isinstance(edges, dict)
    return edges


def _expected(leg: int) -> dict[str, tuple[Fraction, list[Fraction]]]:
    """Each edge's dead time and where every gap starts, from the module's counts: the first
    rising clock edge is at 6.25 ns, the commanded state turns on at count 0 and off at DUTY."""
    duty, rise, fall = LEGS[leg]
    start = [HALF + k * PERIOD * CLOCK for k in range(PERIODS)]
    return {"to_high": (rise * CLOCK, start),
            "to_low": (fall * CLOCK, [t + duty * CLOCK for t in start])}


@pytest.mark.parametrize(("leg", "high", "low"), [
    (0, "TOP.tb.gate_h", "TOP.tb.gate_l"),  # scalars, full name
    (0, "tb.leg0.gate_h", "tb.leg0.gate_l"),  # the same codes seen from the instance's scope
    (0, "tb.gates[1]", "tb.gates[0]"),  # bits of a bus
    (0, "tb.leg[0][1]", "tb.leg[0][0]"),  # bits of an element of an unpacked array
    (1, "tb.leg[1][1]", "tb.leg[1][0]"),
    (1, "tb.high[1]", "tb.low[1]"),  # elements of unpacked arrays of single bits
    (1, "tb.leg1.gate_h", "tb.leg1.gate_l"),
])
def test_dead_times_from_the_counts(traced: Path, leg: int, high: str, low: str) -> None:
    # verilator VCD: exactly count x 12.5 ns per edge, one gap per edge per PWM period
    code, doc = _measure([str(traced), "--high", high, "--low", low, "--window", "15ns:80ns"])
    assert code == 0 and isinstance(doc, dict), doc
    expected = _expected(leg)
    for edge, (gap, starts) in expected.items():
        got = _edges(doc)[edge]
        assert got["count"] == PERIODS, edge
        # exact: the JSON float of the exact gap (integer ticks of 10 ps)
        assert got["min_s"] == got["max_s"] == float(gap), edge
        assert got["p50_s"] == got["percentiles_s"]["p50"] == float(gap)  # type: ignore[index]
        assert got["std_s"] == 0.0
        assert got["below_window"] == got["above_window"] == 0
        shown = [item["at_s"] for item in got["shortest"]]  # type: ignore[union-attr]
        assert shown and set(shown) <= {float(t) for t in starts}, (edge, shown)
    assert doc["missing_edges"] == 0 and doc["overlaps"] == 0 and doc["possible_overlaps"] == 0
    assert doc["glitches"] == 0 and doc["verdict"] == "ok"
    # the unit the file states ($timescale 10ps) ...
    assert doc["tick_s"] == float(Fraction(1, 10**11))
    # ... and the resolution it implies: every change of the gates lies on a rising clock edge,
    # 6.25 ns + k x 12.5 ns, after the initial values at 0: a common step of 6.25 ns
    assert doc["resolution_s"] == float(HALF)
    assert "common step" in str(doc["resolution_origin"]) and "625 ticks of 10 ps" in str(
        doc["resolution_origin"])
    assert doc["duration_s"] == float(PERIOD * PERIODS * CLOCK)


def test_every_view_of_a_leg_agrees(traced: Path) -> None:
    # the scalars, the bus bits and the array elements are one measurement (verilator writes
    # one code per signal, however many scopes see it)
    docs = [_measure([str(traced), "--high", h, "--low", lo, "--window", "15ns:80ns"])[1]
            for h, lo in (("tb.gate_h", "tb.gate_l"), ("tb.gates[1]", "tb.gates[0]"),
                          ("tb.high[0]", "tb.low[0]"), ("tb.leg[0][1]", "tb.leg[0][0]"))]
    for doc in docs[1:]:
        assert isinstance(doc, dict) and isinstance(docs[0], dict)
        for key in ("edges", "overlaps", "missing_edges", "verdict", "resolution_s"):
            assert doc[key] == docs[0][key], key


def test_window_fails_the_short_edge(traced: Path) -> None:
    # leg 1's to_low dead time is 2 clocks = 25 ns: a 30 ns minimum fails every one (exit 1)
    code, doc = _measure([str(traced), "--high", "tb.leg[1][1]", "--low", "tb.leg[1][0]",
                          "--window", "30ns:80ns"])
    assert code == 1 and isinstance(doc, dict), doc
    assert doc["verdict"] == "fail"
    assert _edges(doc)["to_low"]["below_window"] == PERIODS
    assert _edges(doc)["to_high"]["below_window"] == 0


def test_names_the_file_does_not_settle(traced: Path) -> None:
    # two instances have a gate_h: ambiguous, both listed, no guess
    code, message = _measure([str(traced), "--high", "gate_h", "--low", "tb.gate_l"])
    assert code == 2 and "ambiguous" in str(message)
    assert "TOP.tb.leg0.gate_h" in str(message) and "TOP.tb.leg1.gate_h" in str(message)
    # an element of an array of buses without a bit: say how to select one
    code, message = _measure([str(traced), "--high", "tb.leg[1]", "--low", "tb.leg[1][0]"])
    assert code == 2 and "2 bits wide" in str(message) and "TOP.tb.leg[1][0]" in str(message)
    code, message = _measure([str(traced), "--high", "tb.leg[1][2]", "--low", "tb.leg[1][0]"])
    assert code == 2 and "bit 2 is outside TOP.tb.leg[1][1:0]" in str(message)
    # the array of single bits named whole: one of two elements, ambiguous
    code, message = _measure([str(traced), "--high", "tb.high", "--low", "tb.low[1]"])
    assert code == 2 and "ambiguous" in str(message) and "TOP.tb.high[0]" in str(message)


@pytest.fixture(scope="module")
def traced_fst(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """verilator's other trace format, FST (binary), from a small module of our own."""
    if VERILATOR is None:
        pytest.skip("verilator not installed")
    where = tmp_path_factory.mktemp("verilator_fst")
    (where / "tb.v").write_text(
        "`timescale 1ns/1ns\nmodule tb;\n  reg gate_h = 0, gate_l = 1;\n"
        "  initial begin\n    $dumpfile(\"gates.fst\");\n    $dumpvars(0, tb);\n"
        "    #10 gate_l = 0;\n    #20 gate_h = 1;\n    #10 $finish;\n  end\nendmodule\n")
    subprocess.run([VERILATOR, "--binary", "--trace-fst", "--top-module", "tb", "-Mdir", "obj",
                    "-MAKEFLAGS", "OPT_FAST=-O0 OPT_SLOW=-O0 OPT_GLOBAL=-O0", "tb.v"],
                   cwd=where, check=True, timeout=300, capture_output=True)
    subprocess.run([str(where / "obj" / "Vtb")], cwd=where, check=True, timeout=60,
                   capture_output=True)
    return where / "gates.fst"


@pytest.mark.parametrize("name", ["gates.fst", "gates.vcd", "gates.csv"])
def test_fst_is_refused_in_one_line(traced_fst: Path, name: str, tmp_path: Path) -> None:
    # before: an FST file was taken for an oscilloscope export in volts ("needs a threshold")
    path = tmp_path / name
    path.write_bytes(traced_fst.read_bytes())
    code, message = _measure([str(path), "--high", "tb.gate_h", "--low", "tb.gate_l"])
    assert code == 2 and "FST waveform" in str(message) and "--trace" in str(message)
    assert "\n" not in str(message).strip() and "Traceback" not in str(message)


# --- hand-written snippets in the layout verilator 5.006 writes (run without verilator) -------

_LAYOUT = """$version Generated by VerilatedVcd $end
$timescale 10ps $end

 $scope module TOP $end
  $scope module tb $end
{filler}   $var wire  1 ' high[0] $end
   $var wire  1 ( high[1] $end
   $var wire  2 # leg[0] [1:0] $end
   $var wire  2 $ leg[1] [1:0] $end
   $var wire  1 ) gate.h $end
  $upscope $end
 $upscope $end
$enddefinitions $end


#0
0'
0(
b01 #
b01 $
0)
#100
b00 $
0(
#400
b10 $
1(
1)
#900
"""


@pytest.mark.parametrize("filler", [0, 2100])
def test_array_elements_and_dotted_names(tmp_path: Path, filler: int) -> None:
    # hand-written in verilator's layout; 2100 declarations in front put the wanted ones past
    # the first 2000 the reader keeps whatever their name (it filters the rest by name)
    path = tmp_path / "layout.vcd"
    lines = "".join(f"   $var wire  1 f{k} spare{k} $end\n" for k in range(filler))
    path.write_text(_LAYOUT.format(filler=lines))
    names = ["tb.leg[1][1]", "tb.leg[1][0]", "tb.high[1]", "tb.high[0]", "tb.gate.h"]
    data = read_vcd(path, names)

    def levels(name: str) -> list[tuple[int, int]]:
        signal = data.signals[name]
        return list(zip(map(int, signal.times), map(int, signal.values), strict=True))

    # IEEE 1364-2005 clause 18: a vector change writes the whole vector (b00 restates bit 1)
    assert levels("tb.leg[1][1]") == [(0, 0), (100, 0), (400, 1)]
    assert levels("tb.leg[1][0]") == [(0, 1), (100, 0), (400, 0)]
    assert levels("tb.high[1]") == [(0, 0), (100, 0), (400, 1)]
    assert levels("tb.high[0]") == [(0, 0)]
    assert levels("tb.gate.h") == [(0, 0), (400, 1)]
    header = read_header(path)
    leg = next(v for v in header.variables if v.code == "$")
    assert (leg.path, leg.msb, leg.lsb, leg.display()) == (
        "TOP.tb.leg[1]", 1, 0, "TOP.tb.leg[1][1:0]")


def test_a_reference_that_is_no_index_is_still_refused(tmp_path: Path) -> None:
    # hand-written: only whole-number element indices join the name
    path = tmp_path / "bad.vcd"
    path.write_text("$timescale 1ns $end\n$var wire 2 ! leg[a] [1:0] $end\n"
                    "$enddefinitions $end\n#0\nb00 !\n")
    with pytest.raises(GapforgeError, match="cannot read the reference"):
        read_vcd(path, ["leg[a][0]"])
