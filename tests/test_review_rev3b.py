"""Outside review rev3b (issues 20, 21, 22 follow-ups): regressions for what the review broke.

Captures are hand-written and invented (no real board). Outside sources beside the checks:
- IEEE 1364-2005 clause 18 (the VCD format): `$var type size code reference $end`, the size is
  the number of bits, a reference is `identifier`, `identifier [index]` or `identifier
  [msb:lsb]`; a vector change writes every bit, the rightmost digit the lsb;
- the Unicode standard: U+FEFF (byte order mark) is EF BB BF in UTF-8, and carries no text;
- RFC 4180 (CSV): a field in double quotes may hold the separator.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from conftest import EXAMPLES, run_cli
from gapforge.base.errors import GapforgeError
from gapforge.bench.vcd import read_header, read_vcd

# invented: a 2-bit vector {high, low}; gaps to_high 30 ps (100 -> 130) and 40 ps (200 -> 240)
BODY = "#0\nb01 !\n#100\nb00 !\n#130\nb10 !\n#200\nb00 !\n#240\nb01 !\n#300\nb00 !\n#330\nb10 !\n"


def _vcd(path: Path, var: str, filler: str = "") -> Path:
    path.write_text(f"$timescale 1ps $end\n$scope module tb $end\n{filler}{var}\n$upscope $end\n"
                    f"$enddefinitions $end\n{BODY}")
    return path


def _gaps(path: Path, high: str, low: str) -> tuple[int, dict[str, list[float]]]:
    code, out, err = run_cli(["measure", str(path), "--high", high, "--low", low, "--json"])
    assert err == "" or code != 2, err
    doc = json.loads(out)
    return code, {e: [g["gap_s"] for g in doc["edges"][e]["shortest"]] for e in ("to_high", "to_low")}


def _refused(args: list[str], message: str, tmp_path: Path) -> None:
    before = sorted(tmp_path.iterdir())
    code, out, err = run_cli(args)
    assert code == 2 and out == "" and message in err, err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert sorted(tmp_path.iterdir()) == before


def test_range_written_apart_past_the_hint_list_is_found(tmp_path: Path) -> None:
    # 2100 distractors, then five names that share the wanted leaf's letters ("legacy"): the
    # reader parses these (they may be wanted) and so counted past its hint list, where its
    # name test took "leg [1:0]" (range written apart, as iverilog writes it) for "leg " and
    # dropped the variable: "no signal 'tb.leg[1]'"
    filler = "".join(f"$var wire 1 d{k} x{k} $end\n" for k in range(2100))
    filler += "".join(f"$var wire 1 e{k} legacy{k} $end\n" for k in range(5))
    path = _vcd(tmp_path / "wide.vcd", "$var wire 2 ! leg [1:0] $end", filler)
    data = read_vcd(path, ["tb.leg[1]", "tb.leg[0]"])
    # clause 18: b10 sets bit 1 (leftmost digit), b01 bit 0
    assert data.signals["tb.leg[1]"].values.tolist()[:3] == [0, 0, 1]
    assert data.signals["tb.leg[0]"].values.tolist()[:3] == [1, 0, 0]


def test_one_index_on_a_vector_is_an_element_not_a_bit(tmp_path: Path) -> None:
    # "leg[3]" of size 2: element 3 of an array, bits 1..0; it was read as bit 3 and
    # `--high tb.leg[3]` silently measured the vector's rightmost digit
    path = _vcd(tmp_path / "el.vcd", "$var wire 2 ! leg[3] $end")
    header = read_header(path)
    assert [(v.path, v.width, v.msb, v.lsb) for v in header.variables] == [
        ("tb.leg[3]", 2, None, None)]
    _refused(["measure", str(path), "--high", "tb.leg[3]", "--low", "tb.leg[3][0]"],
             "is 2 bits wide", tmp_path)
    _, gaps = _gaps(path, "tb.leg[3][1]", "tb.leg[3][0]")
    assert gaps == {"to_high": [3e-11, 3e-11], "to_low": [4e-11]}, gaps


def test_a_range_that_disagrees_with_the_size_is_refused(tmp_path: Path) -> None:
    # clause 18: the size is the number of bits; "4" with "[1:0]" leaves the digits' bits open
    path = _vcd(tmp_path / "bad.vcd", "$var wire 4 ! leg [1:0] $end")
    _refused(["measure", str(path), "--high", "tb.leg[1]", "--low", "tb.leg[0]"],
             "size 4 but the range holds 2 bits", tmp_path)


@pytest.mark.parametrize("reference", ["leg [ 1 : 0 ]", "leg[1 :0]", "leg [1: 0]"])
def test_range_with_spaces_inside(tmp_path: Path, reference: str) -> None:
    path = _vcd(tmp_path / "sp.vcd", f"$var wire 2 ! {reference} $end")
    (variable,) = read_header(path).variables
    assert (variable.path, variable.msb, variable.lsb) == ("tb.leg", 1, 0)
    assert _gaps(path, "tb.leg[1]", "tb.leg[0]")[1] == {"to_high": [3e-11, 3e-11],
                                                        "to_low": [4e-11]}


@pytest.mark.parametrize("name", ["bom.vcd", "bom.txt", "bom"])
def test_byte_order_mark_in_front_of_a_vcd(tmp_path: Path, name: str) -> None:
    # an editor's UTF-8 save: it was "binary data in the VCD header" (.vcd), or read as an
    # oscilloscope export and then called "named .csv" (.txt)
    plain = _vcd(tmp_path / "plain.vcd", "$var wire 2 ! leg [1:0] $end")
    marked = tmp_path / name
    marked.write_bytes(b"\xef\xbb\xbf" + plain.read_bytes())
    assert _gaps(marked, "tb.leg[1]", "tb.leg[0]") == _gaps(plain, "tb.leg[1]", "tb.leg[0]")


def test_vcd_under_other_names_is_said_to_be_one(tmp_path: Path) -> None:
    plain = _vcd(tmp_path / "plain.vcd", "$var wire 2 ! leg [1:0] $end")
    # another tool's line in front, named .txt: it was taken for volts ("needs a threshold")
    meta = tmp_path / "meta.txt"
    meta.write_text("META written by a logic analyser\n" + plain.read_text())
    _refused(["measure", str(meta), "--high", "tb.leg[1]", "--low", "tb.leg[0]"],
             "comes before the VCD declarations", tmp_path)
    named = tmp_path / "bom.csv"
    named.write_bytes(b"\xef\xbb\xbf" + plain.read_bytes())
    _refused(["measure", str(named), "--high", "tb.leg[1]", "--low", "tb.leg[0]"],
             "named .csv: rename it .vcd", tmp_path)


# invented switch-node capture: node at the bus during the high side's pulse
def _node_csv(path: Path) -> Path:
    rows = []
    for k in range(200):
        high = 5.0 if 40 <= k < 100 else 0.0
        low = 5.0 if k < 10 or k >= 130 else 0.0
        node = 48.0 if 20 <= k < 115 else 0.0
        rows.append(f"{k * 1e-9:.6e},{high},{low},{node}\n")
    path.write_text("Time,gh,gl,sw\n" + "".join(rows))
    return path


NO_STAGE = ('# invented design without a power stage\nformat = 1\n[timer]\nclock = "100MHz"\n'
            'tolerance = "50ppm"\n[dead_time]\nvalue = "60ns"\nsource = "explicit"\n'
            '[[output]]\ntarget = "split-10bit-div1-8"\nprefix = "NS"\nfile = "ns.h"\n')


def test_node_without_a_bus_says_what_the_design_lacks(tmp_path: Path) -> None:
    capture = _node_csv(tmp_path / "n.csv")
    no_stage = tmp_path / "nostage.toml"
    no_stage.write_text(NO_STAGE)
    no_bus = tmp_path / "nobus.toml"
    no_bus.write_text("".join(line for line in (EXAMPLES / "gan-buck.toml").read_text()
                              .splitlines(keepends=True) if not line.startswith("bus_voltage")))
    args = ["measure", str(capture), "--high", "gh", "--low", "gl", "--threshold", "2.5V",
            "--node", "sw", "--design"]
    _refused([*args, str(no_stage)], "(nostage.toml has no [stage])", tmp_path)
    _refused([*args, str(no_bus)], "(nobus.toml's [stage] states no bus_voltage)", tmp_path)
    _refused([*args, str(tmp_path / "missing.toml")], "file not found", tmp_path)


def test_bus_given_twice_names_the_one_not_used(tmp_path: Path) -> None:
    # examples/gan-buck.toml (invented) states bus_voltage = "48V"; --bus wins and says so
    capture = _node_csv(tmp_path / "n.csv")
    args = ["measure", str(capture), "--high", "gh", "--low", "gl", "--threshold", "2.5V",
            "--node", "sw", "--design", str(EXAMPLES / "gan-buck.toml"), "--json", "--bus"]
    _, out, _ = run_cli([*args, "400V"])
    doc = json.loads(out)["node"]
    assert doc["bus_v"] == 400.0
    assert doc["bus_source"] == "--bus, not the 48 V [stage] bus_voltage of gan-buck.toml"
    _, out, _ = run_cli([*args, "48V"])
    assert json.loads(out)["node"]["bus_source"] == "--bus"  # the same value: nothing to say


def test_node_that_is_a_gate_channel_is_refused(tmp_path: Path) -> None:
    capture = _node_csv(tmp_path / "n.csv")
    _refused(["measure", str(capture), "--high", "gh", "--low", "gl", "--threshold", "2.5V",
              "--node", "gh", "--bus", "48V"], "is a gate channel", tmp_path)


def test_reader_errors_are_gapforge_errors(tmp_path: Path) -> None:
    path = _vcd(tmp_path / "bad.vcd", "$var wire 2 ! leg[1] [3:0] $end")
    with pytest.raises(GapforgeError, match="size 2 but the range holds 4 bits"):
        read_header(path)
