"""gapforge capture CSV (our own documented format) and the common two-gate representation."""

from __future__ import annotations

from fractions import Fraction
from pathlib import Path

import pytest

from gapforge.base.errors import GapforgeError
from gapforge.bench.capture import load_capture
from gapforge.bench.measure import measure_capture


def test_edge_events_exact_decimal_times(tmp_path: Path) -> None:
    path = tmp_path / "edges.csv"
    path.write_text(
        "# invented bench capture\ntime_ns,signal,level\n"
        "0,gh,0\n0,gl,1\n100,gl,0\n131.25,gh,1\n600,gh,0\n640.5,gl,1\n"
    )
    cap = load_capture(path, "gh", "gl")
    assert cap.tick_s == Fraction(1, 4 * 10**9)  # 0.25 ns: the finest decimal step in the file
    m = measure_capture(cap)
    assert m.to_high.min_s == Fraction(3125, 10**11)  # 31.25 ns
    assert m.to_low.min_s == Fraction(405, 10**10)  # 40.5 ns


def test_sampled_with_period_and_active_low(tmp_path: Path) -> None:
    path = tmp_path / "samples.csv"
    # the low-side column is active low (0 = gate on)
    rows = ["0,0"] * 3 + ["0,1"] * 4 + ["1,1"] * 10 + ["0,1"] * 2 + ["0,0"] * 5
    path.write_text("# sample_period: 2ns\ngh,gl_n\n" + "\n".join(rows) + "\n")
    cap = load_capture(path, "gh", "gl_n", active_low_low=True)
    assert cap.tick_s == Fraction(2, 10**9)
    m = measure_capture(cap)
    assert m.to_high.gaps_ticks.tolist() == [4]
    assert m.to_low.gaps_ticks.tolist() == [2]
    assert m.to_high.min_s == Fraction(8, 10**9)


def test_sampled_with_time_column(tmp_path: Path) -> None:
    path = tmp_path / "timed.csv"
    path.write_text("time_us,gh,gl\n0,0,1\n0.01,0,0\n0.03,1,0\n0.5,0,0\n0.52,0,1\n")
    m = measure_capture(load_capture(path, "gh", "gl"))
    assert m.to_high.min_s == Fraction(2, 10**8)
    assert m.to_low.min_s == Fraction(2, 10**8)


@pytest.mark.parametrize("text,message", [
    ("", "no header"),
    ("time_ns,signal,level\n", "no data rows"),
    ("time_ns,signal,level\n0,gh,0\n1,gl\n", "columns"),
    ("time_ns,signal,level\n0,gh,0\n1e,gl,1\n", "decimal"),
    ("time_ns,signal,level\n0,gh,0\n0x10,gl,1\n", "decimal"),
    ("time_ns,signal,level\n0,gh,2\n0,gl,1\n", "level"),
    ("time_ns,signal,level\n5,gh,0\n1,gl,1\n", "backwards"),
    ("time_qs,gh,gl\n0,0,1\n", "unit"),
    ("gh,gl\n0,1\n", "sample_period"),
    ("time_ns,signal,level\n0,gx,0\n0,gl,1\n", "no signal 'gh'"),
])
def test_bad_csv(tmp_path: Path, text: str, message: str) -> None:
    path = tmp_path / "bad.csv"
    path.write_text(text)
    with pytest.raises(GapforgeError) as info:
        load_capture(path, "gh", "gl")
    assert message in info.value.line()
    assert "\n" not in info.value.line()


def test_binary_csv(tmp_path: Path) -> None:
    path = tmp_path / "junk.csv"
    path.write_bytes(b"\x00\xff\xfe" * 100)
    with pytest.raises(GapforgeError, match="binary"):
        load_capture(path, "gh", "gl")


def test_open_capture_streams_with_polarity(tmp_path: Path) -> None:
    # written by pyvcd, a general-purpose VCD writer; the low side is active low
    from vcd import VCDWriter

    from gapforge.bench.capture import open_capture

    path = tmp_path / "pol.vcd"
    with path.open("w") as handle, VCDWriter(handle, timescale="1 ns", date="invented") as w:
        h = w.register_var("top", "gh", "wire", size=1, init=0)
        ln = w.register_var("top", "gl_n", "wire", size=1, init=0)  # 0 = low side on
        for k in range(30):
            t = 500 * k + 50
            w.change(ln, t, 1)
            w.change(h, t + 12, 1)
            w.change(h, t + 200, 0)
            w.change(ln, t + 217, 0)
    stream = open_capture(path, "gh", "gl_n", active_low_low=True, chunk_bytes=40)
    m = measure_capture(stream)
    assert m.to_high.gaps_ticks.tolist() == [12] * 30
    assert m.to_low.gaps_ticks.tolist() == [17] * 30
    assert m.duration_s == Fraction(500 * 29 + 50 + 217, 10**9)
    whole = measure_capture(load_capture(path, "gh", "gl_n", active_low_low=True))
    assert whole.to_low.gaps_ticks.tolist() == m.to_low.gaps_ticks.tolist()


def test_open_capture_csv(tmp_path: Path) -> None:
    from gapforge.bench.capture import open_capture

    path = tmp_path / "edges.csv"
    path.write_text("time_ns,signal,level\n0,gh,0\n0,gl,1\n100,gl,0\n131.25,gh,1\n600,gh,0\n"
                    "640.5,gl,1\n")
    m = measure_capture(open_capture(path, "gh", "gl"))
    assert m.to_high.min_s == Fraction(3125, 10**11)
    with pytest.raises(GapforgeError, match="no signal 'gx'"):
        open_capture(path, "gx", "gl")


# --- resolution (review S3): every capture says how far a measured gap may be off ------------

NS = Fraction(1, 10**9)


def _sampled(tmp_path: Path, gap_samples: int) -> Path:
    """Invented: 10 ns samples; the low side turns off, `gap_samples` samples later the high
    side turns on (so the gap reads gap_samples x 10 ns)."""
    rows = ["0,1"] * 5 + ["0,0"] * gap_samples + ["1,0"] * 20 + ["0,0"] * 4 + ["0,1"] * 5
    path = tmp_path / "sampled.csv"
    path.write_text("# invented capture\n# sample_period: 10ns\ngh,gl\n" + "\n".join(rows) + "\n")
    return path


def test_sampled_gap_is_judged_one_sample_short(tmp_path: Path) -> None:
    from gapforge.bench.measure import Limits

    cap = load_capture(_sampled(tmp_path, 3), "gh", "gl")
    assert cap.resolution_ticks == 1 and cap.tick_s == 10 * NS  # one sample period
    # the gap reads 3 x 10 ns = 30 ns, but the edges lie somewhere within the sample before
    # each, so the true gap is above 30 - 10 = 20 ns only: a 30 ns minimum is not proven
    m = measure_capture(cap, limits={"to_high": Limits(30 * NS, None)})
    assert m.to_high.min_s == 30 * NS and m.resolution_s == 10 * NS
    assert m.verdict == "fail" and m.to_high.below_window == 1
    # 20 ns is proven: 30 - 10 >= 20
    assert measure_capture(cap, limits={"to_high": Limits(20 * NS, None)}).verdict == "ok"
    # the maximum likewise: 30 + 10 = 40 <= 40 ns passes, 39 ns fails
    assert measure_capture(cap, limits={"to_high": Limits(None, 40 * NS)}).verdict == "ok"
    assert measure_capture(cap, limits={"to_high": Limits(None, 39 * NS)}).verdict == "fail"


def test_sampled_time_column_resolution_is_the_spacing_before_an_edge(tmp_path: Path) -> None:
    # samples every 5 ns, except 40 ns of silence before the high side's turn-off: that edge
    # is known only to within 40 ns (the longest spacing before a change of a chosen signal);
    # the 100 ns before the last row changes nothing chosen (gx is not measured)
    path = tmp_path / "timed.csv"
    path.write_text("time_ns,gh,gl,gx\n0,0,1,0\n5,0,0,0\n10,0,0,0\n15,1,0,0\n20,1,0,0\n"
                    "60,0,0,0\n65,0,1,0\n165,0,1,1\n")
    cap = load_capture(path, "gh", "gl")
    assert cap.tick_s == NS and cap.resolution_ticks == 40


def test_edge_csv_and_vcd_resolution_is_one_tick(tmp_path: Path) -> None:
    path = tmp_path / "edges.csv"
    path.write_text("time_ns,signal,level\n0,gh,0\n0,gl,1\n100,gl,0\n131.25,gh,1\n600,gh,0\n"
                    "640.5,gl,1\n")
    cap = load_capture(path, "gh", "gl")
    assert cap.resolution_ticks == 1 and cap.tick_s == NS / 4  # the finest decimal step
    assert measure_capture(cap).resolution_s == NS / 4
    from vcd import VCDWriter  # pyvcd, a general-purpose VCD writer

    from gapforge.bench.capture import open_capture

    vcd_path = tmp_path / "ten.vcd"
    with vcd_path.open("w") as handle, VCDWriter(handle, timescale="10 ns", date="invented") as w:
        h = w.register_var("top", "gh", "wire", size=1, init=0)
        lo = w.register_var("top", "gl", "wire", size=1, init=1)
        w.change(lo, 10, 0)
        w.change(h, 13, 1)
        w.change(h, 50, 0)
        w.change(lo, 54, 1)
    m = measure_capture(open_capture(vcd_path, "gh", "gl"))
    assert m.resolution_s == 10 * NS and m.to_high.min_s == 30 * NS  # one 10 ns timescale tick


# --- issue 14: times that do not fit 64-bit ticks ----------------------------------------------

def test_huge_times_count_from_the_first_row(tmp_path: Path) -> None:
    # 1e30 ns absolute: the old reader overflowed int64 (a traceback); the gaps are exact
    base = 10**30
    path = tmp_path / "huge.csv"
    path.write_text("time_ns,signal,level\n"
                    f"{base},gh,0\n{base},gl,1\n{base + 100},gl,0\n{base + 131},gh,1\n"
                    f"{base + 600},gh,0\n{base + 640},gl,1\n")
    cap = load_capture(path, "gh", "gl")
    assert cap.tick_s == Fraction(1, 10**9) and cap.resolution_ticks == 1
    assert any("counted from the first time" in w for w in cap.warnings)
    m = measure_capture(cap)
    assert m.to_high.min_s == Fraction(31, 10**9) and m.to_low.min_s == Fraction(40, 10**9)


def test_many_decimals_over_a_long_span_coarsen_safely(tmp_path: Path) -> None:
    # a 40-decimal step over a 1e6 ns span needs ~1e46 ticks: rounded down to a coarser tick,
    # the resolution becomes two such ticks, and the exact gaps stay within it
    fine = "0." + "0" * 39 + "1"  # 1e-40 ns
    path = tmp_path / "decimals.csv"
    path.write_text("time_ns,signal,level\n"
                    f"0,gh,0\n0,gl,1\n100{fine[1:]},gl,0\n131.5,gh,1\n600,gh,0\n"
                    f"640.25,gl,1\n1000000,gl,0\n")
    cap = load_capture(path, "gh", "gl")
    assert cap.resolution_ticks == 2 and any("rounded down" in w for w in cap.warnings)
    assert cap.tick_s >= Fraction(1, 10**9) / 10**40
    m = measure_capture(cap)
    exact = {"to_high": Fraction(315, 10) - Fraction(1, 10**40), "to_low": Fraction(4025, 100)}
    for edge, want in exact.items():
        got = m.edge(edge).min_s
        assert got is not None
        assert abs(got - want * Fraction(1, 10**9)) < m.resolution_s


def test_overlong_time_cell_is_one_clean_error(tmp_path: Path) -> None:
    path = tmp_path / "long.csv"
    path.write_text("time_ns,signal,level\n0,gh,0\n0,gl,1\n" + "9" * 5000 + ",gl,0\n")
    with pytest.raises(GapforgeError, match="longer than") as info:
        load_capture(path, "gh", "gl")
    assert info.value.where == f"{path}:4" and len(info.value.line()) < 200


def test_exponent_and_negative_times_are_read_exactly(tmp_path: Path) -> None:
    # issue 20 item 4 (review rev2): the forms scopes and numpy write ('0E+0', '-998.000E-06')
    # read as exact decimals; the expected gaps are the decimal differences, by hand
    path = tmp_path / "exp.csv"
    path.write_text("time_s,gh,gl\n-998.000E-06,0,1\n-9.979375E-04,0,0\n-997.875e-6,1,0\n"
                    "0E+0,0,0\n+2.5E-08,0,1\n")
    m = measure_capture(load_capture(path, "gh", "gl"))
    assert m.to_high.min_s == Fraction(625, 10**10)  # -997.875 us - (-997.9375 us)
    assert m.to_low.min_s == Fraction(25, 10**9)  # 25 ns - 0


@pytest.mark.parametrize("cell,message", [
    ("\u0661", "is not a decimal number"),  # an Arabic-Indic digit: not a decimal of this format
    ("1_0", "is not a decimal number"),
    ("0E+999999999", "exponent has more than 2 digits"),
])
def test_time_cells_outside_ascii_decimals_are_refused(tmp_path: Path, cell: str,
                                                        message: str) -> None:
    # issue 20 item 4 (review rev2): only ASCII decimals are times; Python's \d and float()
    # accept other scripts' digits, which no capture writer emits
    path = tmp_path / "t.csv"
    path.write_text(f"time_s,gh,gl\n{cell},0,1\n2E-6,0,0\n3e-06,1,0\n", encoding="utf-8")
    with pytest.raises(GapforgeError) as info:
        load_capture(path, "gh", "gl")
    assert message in info.value.line() and "t.csv:2" in info.value.line()
