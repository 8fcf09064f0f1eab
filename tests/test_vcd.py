"""VCD reader checks.

External reference: the files are written by pyvcd (a general-purpose VCD writer from the package
registry, `import vcd`), not by gapforge, with known change times; syntax that pyvcd cannot
produce is in hand-written snippets, marked as such beside each one, following IEEE 1364-2005
clause 18 (18.2 VCD file format) as summarised in shared/reference-facts.md.
"""

from __future__ import annotations

import io
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from vcd import VCDWriter

from gapforge.base.errors import GapforgeError
from gapforge.bench.vcd import UnorderedTimes, X, Z, open_events, read_header, read_vcd

CHUNKS = (7, 64, 1000, 1 << 21)


def _write(path: Path, timescale: str, build) -> None:  # type: ignore[no-untyped-def]
    with path.open("w") as handle, VCDWriter(handle, timescale=timescale, date="invented") as w:
        build(w)


def _half_bridge(w, periods: int, period: int, to_high: int, to_low: int, on: int) -> None:  # type: ignore[no-untyped-def]
    h = w.register_var("bench.driver", "gate_h", "wire", size=1, init=0)
    low = w.register_var("bench.driver", "gate_l", "wire", size=1, init=1)
    for k in range(periods):
        t = k * period
        w.change(low, t + 100, 0)
        w.change(h, t + 100 + to_high, 1)
        w.change(h, t + 100 + to_high + on, 0)
        w.change(low, t + 100 + to_high + on + to_low, 1)


@pytest.mark.parametrize("chunk", CHUNKS)
def test_pyvcd_half_bridge_times_exact(tmp_path: Path, chunk: int) -> None:
    path = tmp_path / "hb.vcd"
    _write(path, "1 ps", lambda w: _half_bridge(w, 50, 10_000, 37, 41, 4000))
    data = read_vcd(path, ["bench.driver.gate_h", "bench.driver.gate_l"], chunk_bytes=chunk)
    assert data.timescale_s == Fraction(1, 10**12)
    h = data.signals["bench.driver.gate_h"]
    lo = data.signals["bench.driver.gate_l"]
    ks = np.arange(50) * 10_000
    expect_h = np.stack([ks + 137, ks + 4137], axis=1).ravel()
    expect_l = np.stack([ks + 100, ks + 4178], axis=1).ravel()
    assert h.times.tolist() == [0, *expect_h.tolist()]
    assert h.values.tolist() == [0] + [1, 0] * 50
    assert lo.times.tolist() == [0, *expect_l.tolist()]
    assert lo.values.tolist() == [1] + [0, 1] * 50
    assert data.end_time == int(expect_l[-1])


@pytest.mark.parametrize("timescale,seconds", [
    ("1 s", Fraction(1)), ("10 ms", Fraction(1, 100)), ("100 us", Fraction(1, 10**4)),
    ("1 ns", Fraction(1, 10**9)), ("10 ps", Fraction(1, 10**11)), ("100 fs", Fraction(1, 10**13)),
])
def test_timescales_from_pyvcd(tmp_path: Path, timescale: str, seconds: Fraction) -> None:
    path = tmp_path / "ts.vcd"
    _write(path, timescale, lambda w: _half_bridge(w, 2, 1000, 3, 4, 200))
    assert read_header(path).timescale_s == seconds


def test_pyvcd_aliases_vectors_dumpoff_and_many_codes(tmp_path: Path) -> None:
    path = tmp_path / "mixed.vcd"

    def build(w) -> None:  # type: ignore[no-untyped-def]
        # 150 filler variables push the later codes to two characters
        fillers = [w.register_var("bench.fill", f"f{i}", "wire", size=1, init=0) for i in range(150)]
        bus = w.register_var("bench", "gates", "wire", size=8, init=0)
        gh = w.register_var("bench.deep.er", "gh", "reg", size=1, init=0)
        w.register_alias("bench.alias", "gh_copy", gh)
        w.register_var("bench", "level", "real", init=1.5)
        w.change(fillers[3], 5, 1)
        w.change(bus, 10, 0b0000_0100)  # bit 2 on
        w.change(gh, 10, "x")
        w.change(bus, 20, 0b1000_0000)  # bit 2 off, bit 7 on
        w.change(gh, 20, 1)
        w.dump_off(30)
        w.dump_on(40)
        w.change(gh, 50, "z")
        w.change(bus, 50, "x")

    _write(path, "1 ns", build)
    header = read_header(path)
    codes = {v.path: v.code for v in header.variables}
    assert len(codes["bench.deep.er.gh"]) >= 2  # a multi-character identifier code
    data = read_vcd(path, ["bench.gates[2]", "bench.gates[7]", "bench.deep.er.gh",
                           "bench.alias.gh_copy"], chunk_bytes=97)
    b2 = data.signals["bench.gates[2]"]
    b7 = data.signals["bench.gates[7]"]
    gh = data.signals["bench.deep.er.gh"]
    alias = data.signals["bench.alias.gh_copy"]
    assert b2.times.tolist()[1:3] == [10, 20] and b2.values.tolist()[1:3] == [1, 0]
    assert b7.values.tolist()[2] == 1
    # $dumpoff at 30: every selected signal becomes x; $dumpon at 40 restores the values
    assert (30, X) in zip(gh.times.tolist(), gh.values.tolist(), strict=True)
    assert (40, 1) in zip(gh.times.tolist(), gh.values.tolist(), strict=True)
    assert (40, 1) in zip(b7.times.tolist(), b7.values.tolist(), strict=True)
    assert gh.times.tolist()[-1] == 50 and gh.values.tolist()[-1] == Z
    assert b2.values.tolist()[-1] == X  # 'bx' left-extends with x
    assert gh.times.tolist() == alias.times.tolist()
    assert gh.values.tolist() == alias.values.tolist()


# Hand-written (pyvcd cannot produce these): glued "1ns" timescale, glued "data[7:0]"
# reference, codes starting with a digit, '$' and '#', several changes on one line, a tool's
# "logic" var type, a 1-digit vector left-extended, $comment in the body, x in $dumpvars, a
# timestamp that goes backwards, a bare $dumpoff. IEEE 1364-2005 18.2.
SNIPPET = """$date invented $end
$version hand-written $end
$timescale 10ns $end
$scope module top $end
$scope interface drv $end
$var logic 1 1a gate_h $end
$var bit 1 $q gate_l $end
$var logic 4 #x data[3:0] $end
$var int 1 9 other $end
$upscope $end
$upscope $end
$enddefinitions $end
#0
$dumpvars x1a x$q b0 #x 09 $end
#5 01a 1$q b1 #x
$comment 11a 0$q #999 these tokens are comment text $end
#7 0$q
#9 11a b10 #x #12 01a
#11 1$q
$dumpoff $end
#20
$dumpon 01a 1$q b0 #x $end
"""


@pytest.mark.parametrize("chunk", (5, 16, 33, 4096))
def test_hand_written_syntax(tmp_path: Path, chunk: int) -> None:
    path = tmp_path / "snip.vcd"
    path.write_text(SNIPPET)
    data = read_vcd(path, ["top.drv.gate_h", "gate_l", "top.drv.data[1]", "top.drv.data[3]"],
                    chunk_bytes=chunk)
    assert data.timescale_s == Fraction(1, 10**8)
    h = data.signals["top.drv.gate_h"]
    lo = data.signals["gate_l"]
    assert list(zip(h.times.tolist(), h.values.tolist(), strict=True)) == [
        (0, X), (5, 0), (9, 1), (11, X), (12, 0), (20, 0)]
    assert list(zip(lo.times.tolist(), lo.values.tolist(), strict=True)) == [
        (0, X), (5, 1), (7, 0), (11, 1), (11, X), (20, 1)]
    d1 = data.signals["top.drv.data[1]"]
    assert list(zip(d1.times.tolist(), d1.values.tolist(), strict=True)) == [
        (0, 0), (5, 0), (9, 1), (11, X), (20, 0)]
    d3 = data.signals["top.drv.data[3]"]
    assert d3.values.tolist() == [0, 0, 0, X, 0]  # "b1" and "b10" left-extend with 0
    assert len(data.warnings) == 1 and "backwards" in data.warnings[0]


def test_spaced_timescale_and_reference(tmp_path: Path) -> None:
    # Hand-written: "1 us" with a space and "data [7:0]" with a space (IEEE 1364-2005 18.2.3).
    path = tmp_path / "spaced.vcd"
    path.write_text("$timescale 1 us $end $scope module t $end $var wire 8 ! data [7:0] $end "
                    "$upscope $end $enddefinitions $end #3 b10000000 ! #4 bz !\n")
    data = read_vcd(path, ["t.data[7]"])
    assert data.timescale_s == Fraction(1, 10**6)
    assert data.signals["t.data[7]"].values.tolist() == [1, Z]


@settings(max_examples=40, deadline=None)
@given(
    steps=st.lists(st.tuples(st.integers(1, 10**9), st.sampled_from([0, 1, "x", "z"]),
                             st.booleans()), min_size=1, max_size=60),
    chunk=st.integers(3, 300),
)
def test_roundtrip_random_changes(steps: list[tuple[int, object, bool]], chunk: int) -> None:
    buffer = io.StringIO()
    expect: dict[str, list[tuple[int, int]]] = {"a": [], "b": []}
    code = {0: 0, 1: 1, "x": X, "z": Z}
    with VCDWriter(buffer, timescale="1 ps", date="invented") as w:
        va = w.register_var("s", "a", "wire", size=1)
        vb = w.register_var("s", "b", "wire", size=1)
        t = 0
        last: dict[str, object] = {"a": "x", "b": "x"}  # pyvcd's initial value is x
        for dt, value, which in steps:
            t += dt
            name, var = ("a", va) if which else ("b", vb)
            w.change(var, t, value)
            if last[name] != value:  # pyvcd drops changes that repeat the value
                expect[name].append((t, code[value]))  # type: ignore[index]
                last[name] = value
    path = Path(pytest.importorskip("tempfile").mkdtemp()) / "r.vcd"
    path.write_text(buffer.getvalue())
    data = read_vcd(path, ["s.a", "s.b"], chunk_bytes=chunk)
    for name in ("a", "b"):
        sig = data.signals[f"s.{name}"]
        got = list(zip(sig.times.tolist(), sig.values.tolist(), strict=True))
        assert got[:1] == [(0, X)]  # pyvcd's initial x in $dumpvars
        got = got[1:]
        assert got == expect[name]


@pytest.mark.parametrize("text,message", [
    ("$timescale 1ns $end $var wire 1 ! a $end\n#0 1!", "enddefinitions"),  # truncated header
    ("$timescale 3ns $end $var wire 1 ! a $end $enddefinitions $end", "timescale"),
    ("$timescale 1ns $end $var wire 1 ! a $end $enddefinitions $end\n#1 1!\n#2 b1", "truncated"),
    ("$timescale 1ns $end $var wire 1 ! a $end $enddefinitions $end\n#1 1!\n#1x2 0!", "timestamp"),
    ("$timescale 1ns $end $var wire 1 ! a $end $enddefinitions $end\n#1 1!\n\x81\x99garbage",
     "unexpected"),
    ("$timescale 1ns $end $var wire 1 ! a $end $enddefinitions $end\n#1 1! $var", "keyword"),
])
def test_malformed(tmp_path: Path, text: str, message: str) -> None:
    # Hand-written malformed files.
    path = tmp_path / "bad.vcd"
    path.write_bytes(text.encode("latin-1"))
    with pytest.raises(GapforgeError) as info:
        read_vcd(path, ["a"])
    assert message in info.value.line()
    assert str(path) in info.value.line()


def test_binary_junk_header(tmp_path: Path) -> None:
    path = tmp_path / "junk.vcd"
    path.write_bytes(bytes(range(256)) * 40)
    with pytest.raises(GapforgeError):
        read_vcd(path, ["a"])


def test_error_line_number(tmp_path: Path) -> None:
    path = tmp_path / "line.vcd"
    path.write_text("$var wire 1 ! a $end\n$enddefinitions $end\n#1\n1!\n#2\n?!\n")
    with pytest.raises(GapforgeError) as info:
        read_vcd(path, ["a"], chunk_bytes=8)
    assert info.value.where == f"{path}:6"


def test_unknown_and_ambiguous_and_wide_signals(tmp_path: Path) -> None:
    path = tmp_path / "names.vcd"

    def build(w) -> None:  # type: ignore[no-untyped-def]
        w.register_var("a", "gate", "wire", size=1, init=0)
        w.register_var("b", "gate", "wire", size=1, init=0)
        w.register_var("a", "bus", "wire", size=4, init=0)

    _write(path, "1 ns", build)
    # issue 20: the names the file has, never a guess (a close name may be the other gate)
    with pytest.raises(GapforgeError, match=r"no signal 'a\.gat'.*the file has .*'a\.gate'") as info:
        read_vcd(path, ["a.gat"])
    assert "did you mean" not in info.value.line()
    with pytest.raises(GapforgeError, match="ambiguous"):
        read_vcd(path, ["gate"])
    with pytest.raises(GapforgeError, match="4 bits wide"):
        read_vcd(path, ["a.bus"])
    with pytest.raises(GapforgeError, match="outside"):
        read_vcd(path, ["a.bus[4]"])


# --- timestamps: decoded 8 digits per load; lanes end after 8 and 16 digits -----------------------

@pytest.mark.parametrize("chunk", (64, 1 << 20))
def test_timestamps_of_every_length_from_pyvcd(tmp_path: Path, chunk: int) -> None:
    # pyvcd writes each timestamp with Python's own int formatting: the reference value
    times = sorted({10**k + d for k in range(18) for d in (0, 1, 7)} | {10**18 - 1, 987654321987})
    path = tmp_path / "long.vcd"

    def build(w) -> None:  # type: ignore[no-untyped-def]
        a = w.register_var("t", "a", "wire", size=1, init=0)
        for k, at in enumerate(times):
            w.change(a, at, k % 2 == 0)

    _write(path, "1 fs", build)
    sig = read_vcd(path, ["t.a"], chunk_bytes=chunk).signals["t.a"]
    assert sig.times.tolist() == [0, *times]
    assert sig.values.tolist() == [0] + [1 - k % 2 for k in range(len(times))]


@pytest.mark.parametrize("stamp", ["#12a4", "#1234567x", "#12345678:", "#1234567890123456-",
                                   "#1/34567890123456789", "#12345678901234567890"])
def test_bad_timestamp_in_every_lane(tmp_path: Path, stamp: str) -> None:
    # hand-written: a non-digit in the last 8 digits, in the 8 before, and in the rest; too long
    path = tmp_path / "bad.vcd"
    path.write_text(f"$var wire 1 ! a $end $enddefinitions $end\n#1 1!\n{stamp}\n0!\n")
    with pytest.raises(GapforgeError, match="timestamp") as info:
        read_vcd(path, ["a"], chunk_bytes=16)
    assert info.value.where == f"{path}:3"


# --- the merged event stream (what `gapforge measure` reads) --------------------------------------

@settings(max_examples=30, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 10**6), st.sampled_from([0, 1, "x", "z"]), st.booleans()),
                min_size=1, max_size=50), st.integers(3, 200))
def test_event_stream_merges_in_time_order(steps: list[tuple[int, object, bool]], chunk: int) -> None:
    buffer = io.StringIO()
    with VCDWriter(buffer, timescale="1 ps", date="invented") as w:
        va = w.register_var("s", "a", "wire", size=1)
        vb = w.register_var("s", "b", "wire", size=1)
        t = 0
        for dt, value, which in steps:
            t += dt
            w.change(va if which else vb, t, value)
    path = Path(pytest.importorskip("tempfile").mkdtemp()) / "m.vcd"
    path.write_text(buffer.getvalue())
    whole = read_vcd(path, ["s.a", "s.b"])
    stream = open_events(path, "s.a", "s.b", chunk_bytes=chunk)
    parts = list(stream.chunks())
    times = np.concatenate([p[0] for p in parts])
    sides = np.concatenate([p[1] for p in parts])
    values = np.concatenate([p[2] for p in parts])
    assert np.all(np.diff(times) >= 0)
    for side, name in ((0, "s.a"), (1, "s.b")):
        assert times[sides == side].tolist() == whole.signals[name].times.tolist()
        assert values[sides == side].tolist() == whole.signals[name].values.tolist()
    assert stream.end_time == whole.end_time  # pyvcd leaves out changes that repeat a value


def test_event_stream_stops_at_backwards_time(tmp_path: Path) -> None:
    path = tmp_path / "snip.vcd"
    path.write_text(SNIPPET)  # '#11' comes after '#12' in it
    stream = open_events(path, "top.drv.gate_h", "gate_l", chunk_bytes=16)
    with pytest.raises(UnorderedTimes):
        list(stream.chunks())
    (times, sides, _values), = list(stream.sorted_chunks())
    assert np.all(np.diff(times) >= 0)
    assert times[sides == 0].tolist() == [0, 5, 9, 11, 12, 20]
    assert len(stream.warnings) == 1 and "backwards" in stream.warnings[0]


@pytest.mark.parametrize("chunk", CHUNKS)
def test_value_without_a_code(tmp_path: Path, chunk: int) -> None:
    # Hand-written: IEEE 1364-2005 18.2 writes a scalar change as the value immediately followed
    # by the identifier code, so a bare '1' has lost its code. At the very end of the file it is
    # a file cut mid-token (truncated); inside the file it is malformed. Both: file:line error.
    head = "$timescale 1ns $end $var wire 1 ! a $end $enddefinitions $end\n"
    end = tmp_path / "end.vcd"
    end.write_text(head + "#1 1!\n#2 0!\n#3\n1")
    with pytest.raises(GapforgeError) as info:
        read_vcd(end, ["a"], chunk_bytes=chunk)
    assert info.value.where == f"{end}:5"
    assert "without an identifier code: the file ends here (truncated?)" in info.value.message
    inside = tmp_path / "inside.vcd"
    inside.write_text(head + "#1 1!\n#2\nz\n#3 0!\n")
    with pytest.raises(GapforgeError) as info:
        read_vcd(inside, ["a"], chunk_bytes=chunk)
    assert info.value.where == f"{inside}:4" and "truncated" not in info.value.message
    # inside a $comment a lone digit is just text
    comment = tmp_path / "comment.vcd"
    comment.write_text(head + "#1 1!\n$comment 1 of 2 $end\n#2 0!\n")
    assert read_vcd(comment, ["a"], chunk_bytes=chunk).signals["a"].times.tolist() == [1, 2]


def test_file_without_a_final_line_break_is_warned(tmp_path: Path) -> None:
    # Hand-written: the last token may be cut short ('#2' could have been '#25'); both the
    # whole-file reader and the event stream say so
    path = tmp_path / "cut.vcd"
    path.write_text("$timescale 1ns $end $var wire 1 ! a $end $var wire 1 \" b $end "
                    "$enddefinitions $end\n#1 1! 0\"\n#2 0!")
    data = read_vcd(path, ["a", "b"])
    assert data.signals["a"].times.tolist() == [1, 2]
    assert any("does not end with a line break" in w for w in data.warnings)
    events = open_events(path, "a", "b", chunk_bytes=7)
    list(events.chunks())
    assert any("truncated?" in w for w in events.warnings)
    path.write_text(path.read_text() + "\n")
    assert read_vcd(path, ["a", "b"]).warnings == ()


# --- issue 14: hostile VCD input -------------------------------------------------------------

_NO_TIMESCALE = ("$scope module top $end $var wire 1 ! gate_h $end $var wire 1 \" gate_l $end "
                 "$upscope $end $enddefinitions $end\n"
                 "#0 0! 1\"\n#100 0\"\n#130 1!\n#500 0!\n#540 1\"\n#1100 0\"\n#1130 1!\n")


def test_no_timescale_is_warned_and_judged_inconclusive(tmp_path: Path) -> None:
    # hand-written: IEEE 1364-2005 18.2 leaves the unit to the writer when $timescale is absent;
    # the old reader took 1 ns silently and passed a window
    import json

    from click.testing import CliRunner

    from gapforge.cli import cli

    path = tmp_path / "nounit.vcd"
    path.write_text(_NO_TIMESCALE)
    data = read_vcd(path, ["gate_h", "gate_l"])
    assert data.timescale_assumed and any("no $timescale" in w for w in data.warnings)
    base = ["measure", str(path), "--high", "gate_h", "--low", "gate_l", "--json"]
    result = CliRunner().invoke(cli, [*base, "--window", "20ns:50ns"])
    doc = json.loads(result.output)
    assert result.exit_code == 1 and doc["verdict"] == "inconclusive"
    assert any("--timescale" in r for r in doc["reasons"])
    # stated by the user: judged (30 ns and 40 ns inside 20..50 ns)
    result = CliRunner().invoke(cli, [*base, "--window", "20ns:50ns", "--timescale", "1ns"])
    assert result.exit_code == 0, result.output
    # 10 ps units: 300 ps and 400 ps gaps, below the 20 ns minimum
    result = CliRunner().invoke(cli, [*base, "--window", "20ns:50ns", "--timescale", "10ps"])
    assert result.exit_code == 1 and json.loads(result.output)["verdict"] == "fail"
    # a file that states its unit must agree with --timescale
    stated = tmp_path / "unit.vcd"
    stated.write_text("$timescale 1 ns $end " + _NO_TIMESCALE)
    with pytest.raises(GapforgeError, match="disagrees"):
        read_vcd(stated, ["gate_h", "gate_l"], timescale=Fraction(1, 10**12))
    assert not read_vcd(stated, ["gate_h", "gate_l"], timescale=Fraction(1, 10**9)).warnings


def test_many_declarations_keep_only_the_asked_signals(tmp_path: Path) -> None:
    # the old reader built a Variable for every one of a million declarations; here 30,000
    # distractors and two gates at the end: only the first HINT_VARS and the gates are kept
    from gapforge.bench.vcd_header import HINT_VARS

    n = 30_000
    decl = "".join(f"$var wire 1 s{k} sig{k} $end\n" for k in range(n))
    path = tmp_path / "wide.vcd"
    path.write_text("$timescale 1ns $end $scope module top $end\n" + decl
                    + "$scope module drv $end $var wire 1 ! gate_h $end $var wire 1 \" gate_l $end "
                    "$upscope $end $upscope $end $enddefinitions $end\n"
                    "#0 0! 1\"\n#100 0\"\n#130 1!\n")
    header = read_header(path, ["gate_h", "top.drv.gate_l"])
    assert header.declared == n + 2 and len(header.variables) <= HINT_VARS + 2
    assert {v.path for v in header.variables[-2:]} == {"top.drv.gate_h", "top.drv.gate_l"}
    data = read_vcd(path, ["gate_h", "top.drv.gate_l"])
    assert data.signals["gate_h"].times.tolist() == [0, 130]
    with pytest.raises(GapforgeError, match=r"no signal 'gate_x'.*the file has .* more \(of 30002 declared\)"):
        read_vcd(path, ["gate_x", "gate_l"])
    # a name among the distractors far past the hint list is still found
    assert read_header(path, ["sig29999"]).variables[-1].path == "top.sig29999"


def test_equal_gaps_of_2_53_ticks_and_more(tmp_path: Path) -> None:
    # 10 s dead times at 1 fs: 10**16 ticks > 2**53 (9.007e15); the histogram raised before
    from gapforge.bench.capture import open_capture
    from gapforge.bench.measure import measure_capture

    gap = 10**16
    lines = ["$timescale 1fs $end $var wire 1 ! h $end $var wire 1 \" l $end $enddefinitions $end",
             "#0 0! 1\""]
    t = 0
    for _ in range(3):
        lines += [f"#{t + 1} 0\"", f"#{t + 1 + gap} 1!", f"#{t + 2 + gap} 0!",
                  f"#{t + 2 + 2 * gap} 1\""]
        t += 2 + 2 * gap
    path = tmp_path / "long.vcd"
    path.write_text("\n".join(lines) + "\n")
    assert gap > 2**53 and t < 10**18  # 18 digits: the reader's timestamp limit
    m = measure_capture(open_capture(path, "h", "l"))
    assert m.to_high.gaps_ticks.tolist() == [gap] * 3 and m.to_low.gaps_ticks.tolist() == [gap] * 3
    assert sum(m.to_high.histogram_counts) == 3
    assert m.to_high.histogram_edges_s[0] == pytest.approx(10.0)
    assert m.to_high.mean_s == pytest.approx(10.0)


def test_mean_of_gaps_whose_sum_exceeds_int64() -> None:
    # four gaps of 4e18 ticks sum to 1.6e19 > 2**63 - 1: the old int64 sum wrapped negative
    from gapforge.bench.measure import EdgeStats

    gaps = np.array([4 * 10**18] * 4, dtype=np.int64)
    stats = EdgeStats("to_high", Fraction(1, 10**15), gaps, (), (), (), (), ())
    assert stats.mean_s == pytest.approx(4000.0)
