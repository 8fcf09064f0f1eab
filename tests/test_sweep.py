"""`gapforge sweep` (gapforge.timer.sweep): layouts x clocks x dividers against a dead-time window.

The key property is checked independently of gapforge's layout model and fit engine: the layout
files are read here with tomllib, register codes are decoded with a decoder written in this file,
and worst-case dead times are recomputed with the clock-tolerance rule of common practice
(N counts / (f_clk x (1 + tol)) is the shortest gap, / (1 - tol) the longest;
reference-facts.md, "Clock tolerance"). With a PWM, every row is also checked against the PWM by
trying every compare value of one period (common practice for a counting timer; see the comment
above pwm_counts). Scenarios are invented.
"""

from __future__ import annotations

import csv
import io
import json
import math
import tomllib
from fractions import Fraction
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from gapforge.base.errors import GapforgeError
from gapforge.cli import cli
from gapforge.timer.layouts import builtin_names, load_layout
from gapforge.timer.limits import PwmSpec
from gapforge.timer.sweep import Limits, parse_clocks, sweep

NS = Fraction(1, 10**9)
MHZ = Fraction(10**6)
TARGETS = Path(__file__).resolve().parents[1] / "targets"


# ---------------------------------------------------------------------------------------------
# an independent decoder of our layout files


class RawLayout:
    """A layout file read straight from TOML, decoded without gapforge.timer.layouts."""

    def __init__(self, path: Path) -> None:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
        self.name: str = data.get("name", path.stem)
        clock = data.get("clock", {})
        self.sub_steps: int = clock.get("sub_steps", 1)
        self.dividers: list[int] = clock.get("dividers", [1])
        self.divider_field: str | None = clock.get("divider_field")
        self.fields: list[dict[str, Any]] = data["field"]

    def edge_field(self, edge: str) -> dict[str, Any]:
        return next(f for f in self.fields if f["role"] in ("both", edge))

    @staticmethod
    def reserved(f: dict[str, Any]) -> set[int]:
        out: set[int] = set()
        for item in f.get("reserved", []):
            if isinstance(item, int):
                out.add(item)
            else:
                a, b = item.split("..")
                out.update(range(int(a, 0), int(b, 0) + 1))
        return out

    @staticmethod
    def steps(f: dict[str, Any], code: int) -> int:
        if f.get("encoding", "linear") == "linear":
            return int(code + f.get("add", 0))
        low_bits = f["width"] - f["select_bits"]
        select, low = code >> low_bits, code & ((1 << low_bits) - 1)
        segment = next(s for s in f["segment"] if s["select"] == select)
        return int(segment["base"] + low * segment["multiplier"])

    def allowed_codes(self, f: dict[str, Any]) -> list[int]:
        top = f.get("max_code", (1 << f["width"]) - 1)
        bad = self.reserved(f)
        return [c for c in range(f.get("min_code", 0), top + 1) if c not in bad]

    def unpack(self, word: int, f: dict[str, Any]) -> int:
        return int((word >> f["offset"]) & ((1 << f["width"]) - 1))


RAW = {raw.name: raw for raw in (RawLayout(p) for p in sorted(TARGETS.glob("*.toml")))}
STEP_SETS: dict[tuple[str, str], list[int]] = {}


def worst_case(raw: RawLayout, steps: int, divider: int, clock: Fraction, tol: Fraction
               ) -> tuple[Fraction, Fraction]:
    nominal = Fraction(steps * divider) / (raw.sub_steps * clock)
    return nominal / (1 + tol), nominal / (1 - tol)


def check_row_fits(row: Any, tol: Fraction, limits: dict[str, tuple[Fraction, Fraction | None]]
                   ) -> None:
    raw = RAW[row.layout]
    assert raw.dividers[row.divider_code] == row.divider
    if raw.divider_field is not None:
        assert row.fields[raw.divider_field] == row.divider_code
    for edge in ("to_high", "to_low"):
        f = raw.edge_field(edge)
        code = row.fields[f["name"]]
        assert code in raw.allowed_codes(f)
        assert row.register is not None and raw.unpack(row.register, f) == code
        lo, hi = worst_case(raw, raw.steps(f, code), row.divider, row.clock_hz, tol)
        assert lo >= limits[edge][0], (row, edge)
        top = limits[edge][1]
        assert top is None or hi <= top, (row, edge)


def all_steps(raw: RawLayout, f: dict[str, Any]) -> list[int]:
    """Steps of every allowed code of a field, decoded here (cached per layout and field)."""
    key = (raw.name, f["name"])
    if key not in STEP_SETS:
        STEP_SETS[key] = [raw.steps(f, c) for c in raw.allowed_codes(f)]
    return STEP_SETS[key]


def no_code_fits(row: Any, tol: Fraction, limits: dict[str, tuple[Fraction, Fraction | None]]
                 ) -> bool:
    """Brute force over every allowed code of the point's divider: nothing fits both edges.

    steps x divider / (sub_steps x clock x (1 + tol)) >= min  <=>  steps >= need, and
    steps x divider / (sub_steps x clock x (1 - tol)) <= max  <=>  steps <= room.
    """
    raw = RAW[row.layout]
    per_step = Fraction(row.divider) / (raw.sub_steps * row.clock_hz)
    bounds: dict[str, tuple[int, int | None]] = {}
    for edge in ("to_high", "to_low"):
        lo, hi = limits[edge]
        need = math.ceil(lo * (1 + tol) / per_step)
        room = None if hi is None else math.floor(hi * (1 - tol) / per_step)
        bounds[edge] = (need, room)
    fields = {edge: raw.edge_field(edge) for edge in ("to_high", "to_low")}

    def fits(edge: str, steps: int) -> bool:
        need, room = bounds[edge]
        return steps >= need and (room is None or steps <= room)

    if fields["to_high"] is fields["to_low"]:
        return not any(
            fits("to_high", s) and fits("to_low", s) for s in all_steps(raw, fields["to_high"])
        )
    return not all(any(fits(e, s) for s in all_steps(raw, fields[e])) for e in fields)


# ---------------------------------------------------------------------------------------------
# worked examples


def layouts(*names: str) -> list[Any]:
    return [load_layout(n) for n in names]


def test_worked_example_exact_fit_without_tolerance() -> None:
    limits = {e: (90 * NS, 300 * NS) for e in ("to_high", "to_low")}
    result = sweep(layouts("split-10bit-div1-8"), [100 * MHZ], Fraction(0), limits, rank="error")
    best = result.feasible[0]
    # 100 MHz, divider 1: 10 ns steps, 9 counts = 90 ns exactly: error 0, margins 0 and 210 ns
    assert (best.divider, best.edges["to_high"].code) == (1, 9)
    assert best.worst_error_s == 0
    assert best.edges["to_high"].margin_low_s == 0
    assert best.edges["to_high"].margin_high_s == 210 * NS
    assert best.worst_margin_s == 0
    # divider 8: 80 ns steps, 2 counts = 160 ns: error 70 ns, margins 70 and 140 ns
    by_div = {r.divider: r for r in result.feasible}
    assert by_div[8].edges["to_low"].code == 2
    assert by_div[8].worst_error_s == 70 * NS and by_div[8].worst_margin_s == 70 * NS
    # ranked by margin instead, divider 8 (70 ns from the nearer edge) comes first
    by_margin = sweep(layouts("split-10bit-div1-8"), [100 * MHZ], Fraction(0), limits, "margin")
    assert by_margin.feasible[0].divider == 8


def test_worked_example_with_clock_tolerance() -> None:
    limits = {e: (90 * NS, 300 * NS) for e in ("to_high", "to_low")}
    result = sweep(layouts("split-10bit-div1-8"), [100 * MHZ], Fraction(2, 100), limits, "error")
    best = result.feasible[0]
    # 90 ns x 1.02 / 10 ns = 9.18 counts -> 10 counts = 100 ns nominal,
    # worst case 100 / 1.02 = 98.039 ns .. 100 / 0.98 = 102.04 ns
    e = best.edges["to_high"]
    assert (best.divider, e.code) == (1, 10)
    assert e.achieved_min_s == 100 * NS / Fraction(102, 100)
    assert e.achieved_max_s == 100 * NS / Fraction(98, 100)


def test_reasons_for_infeasible_points() -> None:
    # shared 8-bit count at 100 MHz reaches 255 x 10 ns = 2.55 us: a 3 us minimum is unreachable
    limits = {e: (3000 * NS, 5000 * NS) for e in ("to_high", "to_low")}
    result = sweep(layouts("shared-8bit-linear"), [100 * MHZ], Fraction(0), limits)
    assert not result.feasible
    assert result.infeasible[0].reason.startswith("unreachable: to_high needs 3 us")
    # divider 8 at 100 MHz: 80 ns steps; a 95..99 ns window gets 160 ns: too long
    limits = {e: (95 * NS, 99 * NS) for e in ("to_high", "to_low")}
    result = sweep(layouts("split-10bit-div1-8"), [100 * MHZ], Fraction(0), limits)
    reasons = {r.divider: r.reason for r in result.infeasible}
    assert reasons[8].startswith("too-long: both edges: the shortest safe value 160 ns")
    # 10 ns steps (divider 1) give 100 ns, 20 ns steps 100 ns, 40 ns steps 120 ns: all too long
    assert reasons[1].startswith("too-long: both edges: the shortest safe value 100 ns")
    assert reasons[4].startswith("too-long: both edges: the shortest safe value 120 ns")
    assert not result.feasible


def test_every_divider_and_clock_is_a_point() -> None:
    limits = {e: (90 * NS, None) for e in ("to_high", "to_low")}
    names = builtin_names()
    result = sweep(layouts(*names), [100 * MHZ, 150 * MHZ], Fraction(0), limits, "error")
    expected = sum(len(load_layout(n).dividers) for n in names) * 2
    assert result.points == expected
    assert result.rank == "error"
    errors = [r.worst_error_s for r in result.feasible]
    assert errors == sorted(errors)


def test_empty_window_makes_every_point_infeasible() -> None:
    limits = {"to_high": (90 * NS, 50 * NS), "to_low": (90 * NS, 300 * NS)}
    result = sweep(layouts("split-10bit-div1-8"), [100 * MHZ], Fraction(0), limits)
    assert not result.feasible and len(result.infeasible) == 4
    assert all(r.reason.startswith("empty window on to_high") for r in result.infeasible)


# ---------------------------------------------------------------------------------------------
# clocks


def test_parse_clocks_lists_and_ranges() -> None:
    # 100, 125, 150, 175, 200 MHz: STOP is included when it lies on the grid
    assert parse_clocks(["100MHz:200MHz:25MHz"]) == tuple(Fraction(f * 10**6) for f in
                                                           (100, 125, 150, 175, 200))
    assert parse_clocks(["100MHz:190MHz:25MHz"])[-1] == 175 * MHZ
    assert parse_clocks(["170MHz,160MHz", "160e6"]) == (160 * MHZ, 170 * MHZ)


@pytest.mark.parametrize(
    ("text", "words"),
    [
        ("200MHz:100MHz:1MHz", "below START"),
        ("100MHz:200MHz", "START:STOP:STEP"),
        ("1Hz:1GHz:1Hz", "more than"),
        ("100MHz:200MHz:0Hz", "greater than zero"),
        ("-5MHz", "negative"),
        ("fast", "not a number"),
        (",", "no clocks"),
    ],
)
def test_parse_clocks_errors(text: str, words: str) -> None:
    with pytest.raises(GapforgeError, match=words):
        parse_clocks([text])


# ---------------------------------------------------------------------------------------------
# the property, checked independently


@st.composite
def windows(draw: st.DrawFn) -> dict[str, tuple[Fraction, Fraction | None]]:
    out: dict[str, tuple[Fraction, Fraction | None]] = {}
    for edge in ("to_high", "to_low"):
        lo = Fraction(draw(st.integers(1, 5000)), 10**9)  # 1 ns .. 5 us
        width = draw(st.one_of(st.none(), st.integers(0, 4000)))
        out[edge] = (lo, None if width is None else lo + Fraction(width, 10**9))
    return out


@settings(deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    windows(),
    st.lists(st.integers(1, 500), min_size=1, max_size=3, unique=True),
    st.integers(0, 500),
)
def test_every_feasible_row_fits_under_worst_case_tolerance(
    limits: dict[str, tuple[Fraction, Fraction | None]], mhz: list[int], tol_bp: int
) -> None:
    tol = Fraction(tol_bp, 10_000)  # 0 .. 5 %
    clocks = [Fraction(m * 10**6) for m in mhz]
    result = sweep(layouts(*builtin_names()), clocks, tol, limits)
    for row in result.feasible:
        check_row_fits(row, tol, limits)
    # and nothing was wrongly left out: for every infeasible point no code fits (brute force)
    for row in result.infeasible:
        assert no_code_fits(row, tol, limits), row


# ---------------------------------------------------------------------------------------------
# the command


def stated_tol(args: list[str]) -> list[str]:
    """The clock tolerance stated as 0 where a test gives none (issue 19: it is required)."""
    if "--design" in args or "--clock-tol" in args:
        return args
    return [*args, "--clock-tol", "0ppm"]


def run(args: list[str]) -> Any:
    result = CliRunner().invoke(cli, ["sweep", *stated_tol(args)])
    if result.exception is not None and not isinstance(result.exception, SystemExit):
        raise result.exception
    return result


STAGE = ["--td-off", "35ns", "--t-fall", "20ns", "--td-on", "10ns", "--prop-delay", "20ns:45ns",
         "--mismatch", "5ns", "--isolator-skew", "0ns", "--timer-skew", "0ns", "--kind", "silicon",
         "--qrr", "0nC", "--current", "10A", "--fsw", "20kHz", "--loss-budget", "0.5W"]


def test_cli_text_from_stage_options() -> None:
    result = run(["--clocks", "100MHz:200MHz:50MHz", "--clock-tol", "1%", "--top", "3", *STAGE])
    assert result.exit_code == 0
    out = result.stdout
    # window 90 ns .. 1.041666 us from the stage (see tests/test_stage.py), one prefix per line,
    # cut inward (the maximum down: 1041 ns, never 1042 ns; issue 19 item 13)
    assert "Window*: both edges: 90 .. 1041 ns" in out
    assert "common practice" in out and "reduced voltage" in out
    assert out.count("\n   1 ") == 1 and "\n   4 " not in out
    # the answer first, the short caution once at the end
    assert out.startswith("sweep: best ")
    assert out.count("reduced voltage") == 1 and out.rstrip().endswith("see README).")


def test_cli_json_and_csv_hold_every_point() -> None:
    args = ["--clocks", "100MHz,160MHz", "--window", "90ns:300ns", "--target",
            "split-10bit-div1-8", "--target", "shared-8bit-linear", "--clock-tol", "50ppm"]
    data = json.loads(run([*args, "--json"]).stdout)
    assert data["points"] == (4 + 1) * 2
    assert data["points"] == len(data["feasible"]) + len(data["infeasible"])
    assert [r["rank"] for r in data["feasible"]] == list(range(1, len(data["feasible"]) + 1))
    above = [r["worst_above_min_s"] for r in data["feasible"]]
    assert above == sorted(above)  # default ranking: the least dead time that is safe
    margins = json.loads(run([*args, "--json", "--rank", "margin"]).stdout)["feasible"]
    assert [r["worst_margin_s"] for r in margins] == sorted(
        (r["worst_margin_s"] for r in margins), reverse=True
    )
    assert set(data["feasible"][0]["edges"]) == {"to_high", "to_low"}
    rows = list(csv.DictReader(io.StringIO(run([*args, "--csv"]).stdout)))
    assert len(rows) == data["points"]
    top = run([*args, "--json", "--top", "2"])
    assert len(json.loads(top.stdout)["feasible"]) == 2


def test_cli_user_layout_file_and_infeasible_exit_1(tmp_path: Path) -> None:
    user = tmp_path / "mine.toml"
    user.write_text(
        "# invented\nformat = 1\nname = \"mine\"\nsummary = \"invented 4-bit count\"\n"
        "register_bits = 8\n[[field]]\nname = \"gap\"\nrole = \"both\"\noffset = 0\nwidth = 4\n"
    )
    # 4-bit count at 100 MHz reaches 150 ns: a 300 ns minimum is unreachable on every point
    result = run(["--clocks", "100MHz", "--window", "300ns:1us", "--target", str(user)])
    assert result.exit_code == 1
    assert "unreachable" in result.stdout and "(no feasible choice)" in result.stdout


def test_cli_empty_window_from_the_stage_exits_1() -> None:
    args = [a if a != "0.5W" else "0.01W" for a in STAGE]
    result = run(["--clocks", "100MHz", *args, "--target", "split-10bit-div1-8"])
    assert result.exit_code == 1 and "empty window" in result.stdout


@pytest.mark.parametrize(
    ("args", "where"),
    [
        (["--clocks", "100MHz:50MHz:1MHz", "--window", "90ns"], "--clocks"),
        (["--clocks", "100MHz", "--window", "90ns:50ns"], "--window"),
        (["--clocks", "100MHz", "--window", "-9ns:50ns"], "--window"),
        (["--clocks", "100MHz", "--window", "90ns", "--td-off", "3ns"], "--td-off"),
        (["--clocks", "100MHz", "--td-off", "3ns", "--td-on", "9ns", "--t-fall", "0ns",
          "--prop-delay", "0ns", "--mismatch", "0ns", "--isolator-skew", "0ns",
          "--timer-skew", "0ns"], "--td-on"),
        (["--clocks", "100MHz", "--window", "90ns", "--target", "no-such-layout"], "--target"),
        (["--clocks", "100MHz", "--window", "90ns", "--json", "--csv"], "--csv"),
    ],
)
def test_cli_bad_input(args: list[str], where: str) -> None:
    result = CliRunner().invoke(cli, ["sweep", *stated_tol(args)])
    assert isinstance(result.exception, GapforgeError), result.output
    line = result.exception.line()
    assert line.startswith(where) and "\n" not in line


def test_each_layout_is_read_once(monkeypatch: pytest.MonkeyPatch) -> None:
    import gapforge.timer.layouts as layouts_mod

    reads: list[str] = []
    original = layouts_mod.load_toml

    def counting(path: Path) -> Any:
        reads.append(str(path))
        return original(path)

    monkeypatch.setattr(layouts_mod, "load_toml", counting)
    result = run(["--clocks", "50MHz:150MHz:10MHz", "--window", "90ns:1us"])
    assert result.exit_code == 0
    assert sorted(reads) == sorted(set(reads)) and len(reads) == len(builtin_names())


def test_sweep_design_uses_the_design_tolerance_and_window() -> None:
    # regression: `sweep --design` once ignored [timer] tolerance (2 % in this invented example)
    # and listed a divider whose fast-clock gap fell 16 ns below the window minimum.
    # Independent check: steps x divider / (sub_steps x f x (1 + 2 %)) >= window minimum, in
    # exact fractions from the layout files read here with tomllib.
    from conftest import REPO, run_cli

    code, out, err = run_cli(
        ["sweep", "--design", str(REPO / "examples" / "motor-inverter.toml"), "--clocks", "320MHz",
         "--json"]
    )
    assert code == 0, err
    doc = json.loads(out)
    assert doc["clock_tol"] == pytest.approx(0.02)
    tol = Fraction(2, 100)
    window_min = {"to_high": Fraction(852, 10**9), "to_low": Fraction(936, 10**9)}
    assert doc["feasible"], "the invented example has feasible points"
    for row in doc["feasible"]:
        layout = tomllib.loads((REPO / "targets" / f"{row['layout']}.toml").read_text())
        sub = layout.get("clock", {}).get("sub_steps", 1)
        for edge, e in row["edges"].items():
            worst = Fraction(e["steps"] * row["divider"]) / (sub * Fraction(320_000_000) * (1 + tol))
            assert worst >= window_min[edge], (row["layout"], row["divider"], edge)


# ---------------------------------------------------------------------------------------------
# the PWM (issue 4 review: a row could be "feasible" yet fail `build`)
#
# Independent arithmetic, common practice for a counting timer: edge-aligned up-counting repeats
# every N timer counts and a compare value c (0..N) commands the high side on for c counts, the
# low side for N - c; centre-aligned up/down counting repeats every 2N counts with 2c and 2(N - c).
# N is the PWM period in counts rounded to the nearest whole count. A dead time of d counts
# (steps x divider / sub_steps) delays its output's turn-on, so an output pulses only when its
# on-command lasts longer than d. A row fits the PWM when every dead time is under half a period
# and some c in 0..N gives a pulse on both outputs (found here by trying every c).


def pwm_counts(clock: Fraction, frequency: Fraction, counting: str) -> int:
    per = 2 if counting == "center" else 1
    return math.floor(clock / (frequency * per) + Fraction(1, 2))


def dead_counts(raw: RawLayout, steps: int, divider: int) -> Fraction:
    return Fraction(steps * divider, raw.sub_steps)


def fits_pwm(row: Any, frequency: Fraction, counting: str) -> bool:
    raw = RAW[row.layout]
    per = 2 if counting == "center" else 1
    n = pwm_counts(row.clock_hz, frequency, counting)
    if n < 2:
        return False
    d_high = dead_counts(raw, row.edges["to_high"].steps, row.divider)
    d_low = dead_counts(raw, row.edges["to_low"].steps, row.divider)
    if max(d_high, d_low) * 2 >= n * per:  # at least half a period
        return False
    # centre-aligned without a stated turning convention: the high side's command is the worse
    # of 2c (two clocks at each turn) and 2c - 1 (turning at the top once); issue 19
    short = 1 if counting == "center" else 0
    return any(per * c - short > d_high and per * (n - c) > d_low for c in range(n + 1))


def shortest_safe_steps(row: Any, tol: Fraction, limits: Limits, edge: str) -> int:
    """The fewest steps of the row's field whose fast-clock gap meets the window minimum(s)."""
    raw = RAW[row.layout]
    per_step = Fraction(row.divider) / (raw.sub_steps * row.clock_hz)
    f = raw.edge_field(edge)
    edges = [e for e in ("to_high", "to_low") if raw.edge_field(e) is f]  # a shared field
    need = max(math.ceil(limits[e][0] * (1 + tol) / per_step) for e in edges)
    return min(s for s in all_steps(raw, f) if s >= need)


def test_worked_example_rows_that_fit_the_window_but_not_the_pwm() -> None:
    limits = {e: (90 * NS, 300 * NS) for e in ("to_high", "to_low")}
    pwm = PwmSpec(Fraction(4_750_000), "edge")
    # 100 MHz / 4.75 MHz = 21.05 counts -> N = 21 (half a period: 10.5 counts).
    # safe codes for 90 ns: /1 9 x 10 ns = 90 ns (9 counts); /2 5 x 20 ns = 100 ns (10 counts);
    # /4 3 x 40 ns = 120 ns (12 counts); /8 2 x 80 ns = 160 ns (16 counts): all inside 90..300 ns
    plain = sweep(layouts("split-10bit-div1-8"), [100 * MHZ], Fraction(0), limits)
    assert sorted(r.divider for r in plain.feasible) == [1, 2, 4, 8]
    result = sweep(layouts("split-10bit-div1-8"), [100 * MHZ], Fraction(0), limits, pwm=pwm)
    # /1: 9 counts; a pulse on both outputs needs c > 9 and 21 - c > 9: c = 10 or 11
    assert [r.divider for r in result.feasible] == [1]
    ok = result.feasible[0]
    assert ok.pwm is not None
    assert (ok.pwm.compare_counts, ok.pwm.duty_min_counts, ok.pwm.duty_max_counts) == (21, 10, 11)
    reasons = {r.divider: r.reason for r in result.infeasible}
    # /2: 10 counts is under half of 21, but c > 10 and 21 - c > 10 leave no whole c
    assert reasons[2].startswith("pwm: no commanded duty gives a pulse on both outputs")
    # /4: 12 counts and /8: 16 counts are at least half of 21 (57.1 % and 76.2 %)
    assert reasons[4].startswith("pwm: to_high 12 clocks is 57.14 % of the PWM period")
    assert reasons[8].startswith("pwm: to_high 16 clocks is 76.19 % of the PWM period")
    for divider in (2, 4, 8):
        assert "4.75 MHz edge-aligned PWM, 21 counts per period" in reasons[divider]
    for row in result.infeasible:  # the window alone is met: only the PWM fails
        assert all(e.verdict == "ok" for e in row.edges.values())
        assert not fits_pwm(row, pwm.frequency_hz, "edge")
    assert fits_pwm(ok, pwm.frequency_hz, "edge")


def test_worked_example_center_aligned_and_too_slow_a_clock() -> None:
    limits = {e: (90 * NS, 300 * NS) for e in ("to_high", "to_low")}
    pwm = PwmSpec(Fraction(4_000_000), "center")
    # 100 MHz / (2 x 4 MHz) = 12.5 -> N = 13 (ties up), period 26 counts.
    # /2 (10 counts): 2c > 10 and 2(13 - c) > 10: c = 6, 7; /4 (12 counts): c > 6 and c < 7: none
    # 10 MHz / 8 MHz = 1.25 counts: fewer than the 2 a period needs, on every divider
    result = sweep(layouts("split-10bit-div1-8"), [10 * MHZ, 100 * MHZ], Fraction(0), limits,
                   pwm=pwm)
    by = {(r.clock_hz, r.divider): r for r in (*result.feasible, *result.infeasible)}
    row = by[(100 * MHZ, 2)]
    assert row.feasible and row.pwm is not None
    assert (row.pwm.period_counts, row.pwm.duty_min_counts, row.pwm.duty_max_counts) == (26, 6, 7)
    assert by[(100 * MHZ, 4)].reason.startswith("pwm: no commanded duty")
    for divider in (1, 2, 4, 8):
        assert by[(10 * MHZ, divider)].reason.startswith("pwm: the PWM frequency")
        assert "at least 2 are needed" in by[(10 * MHZ, divider)].reason


@settings(deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    windows(),
    st.integers(5, 500),
    st.lists(st.integers(0, 100), min_size=1, max_size=2, unique=True),
    st.integers(0, 500),
    st.integers(2, 300),
    st.integers(-49, 49),
    st.sampled_from(["edge", "center"]),
)
def test_every_feasible_row_fits_the_pwm(
    limits: dict[str, tuple[Fraction, Fraction | None]],
    base_mhz: int,
    extra_pct: list[int],
    tol_bp: int,
    n: int,
    offset_pct: int,
    counting: str,
) -> None:
    tol = Fraction(tol_bp, 10_000)  # 0 .. 5 %
    base = Fraction(base_mhz * 10**6)
    clocks = [base * (100 + x) / 100 for x in extra_pct]  # within a factor of 2 of each other
    per = 2 if counting == "center" else 1
    # a PWM frequency giving about n counts (+/- 0.49) at the base clock
    frequency = base / (per * (n + Fraction(offset_pct, 100)))
    result = sweep(layouts(*builtin_names()), clocks, tol, limits, pwm=PwmSpec(frequency, counting))
    for row in result.feasible:
        check_row_fits(row, tol, limits)
        assert fits_pwm(row, frequency, counting), row
        assert row.pwm is not None
        assert row.pwm.compare_counts == pwm_counts(row.clock_hz, frequency, counting)
    for row in result.infeasible:
        if row.reason.startswith(("unreachable", "too-long", "empty window")):
            assert no_code_fits(row, tol, limits), row
        if "pwm: " in row.reason:
            assert not row.edges or not fits_pwm(row, frequency, counting), row
            # the fit is the shortest safe code: any shorter one misses the window minimum, and
            # a longer one only lengthens the dead time, so no code of this point fits the PWM
            for edge, e in row.edges.items():
                assert e.steps == shortest_safe_steps(row, tol, limits, edge), (row, edge)
        assert row.reason.startswith(("unreachable", "too-long", "empty window", "pwm: ")), row


def test_cli_pwm_options_and_json() -> None:
    args = ["--clocks", "100MHz", "--window", "90ns:300ns", "--target", "split-10bit-div1-8"]
    data = json.loads(run([*args, "--pwm", "4.75MHz", "--json"]).stdout)
    assert data["pwm"] == {"frequency_hz": 4_750_000.0, "counting": "edge"}
    assert [r["divider"] for r in data["feasible"]] == [1]
    assert data["feasible"][0]["pwm"]["duty_min_counts"] == 10
    assert all(r["reason"].startswith("pwm: ") for r in data["infeasible"])
    rows = list(csv.DictReader(io.StringIO(run([*args, "--pwm", "4.75MHz", "--csv"]).stdout)))
    first = rows[0]  # the one feasible row comes first
    assert (first["divider"], first["duty_min_counts"], first["duty_max_counts"]) == ("1", "10", "11")
    # without --pwm nothing about the PWM is checked, and the text says so
    plain = run(args)
    assert plain.exit_code == 0 and "PWM: not checked" in plain.stdout
    # nothing fits a 20 MHz edge-aligned PWM (5 counts): exit 1
    result = run([*args, "--pwm", "20MHz"])
    assert result.exit_code == 1 and "at least half a period" in result.stdout


def test_cli_design_pwm_is_the_default_and_options_override_it() -> None:
    from conftest import REPO, run_cli

    design = str(REPO / "examples" / "gan-buck.toml")  # invented: 500 kHz centre-aligned
    code, out, err = run_cli(["sweep", "--design", design, "--clocks", "160MHz", "--json"])
    assert code == 0, err
    doc = json.loads(out)
    assert doc["pwm"] == {"frequency_hz": 500_000.0, "counting": "center"}
    # 160 MHz / (2 x 500 kHz) = 160 compare counts
    assert {r["pwm"]["compare_counts"] for r in doc["feasible"]} == {160}
    code, out, err = run_cli(["sweep", "--design", design, "--clocks", "160MHz", "--counting",
                              "edge", "--json"])
    assert code == 0, err
    doc = json.loads(out)
    assert doc["pwm"]["counting"] == "edge"
    assert {r["pwm"]["compare_counts"] for r in doc["feasible"]} == {320}  # 160 MHz / 500 kHz
    # a --pwm other than the design's would not match the window derived for the design's own
    # switching frequency: refused
    code, _, err = run_cli(["sweep", "--design", design, "--clocks", "160MHz", "--pwm",
                            "20MHz", "--counting", "edge"])
    assert code == 2 and err.startswith("gapforge: error: --pwm: ")
    # the same window given directly: 20 MHz edge-aligned is 8 counts; the window minimum
    # 27.6 ns is 4.4 counts, over half a period
    code, out, err = run_cli(["sweep", "--window", "27.6ns:29.687ns", "--clocks", "160MHz",
                              "--clock-tol", "0ppm", "--pwm", "20MHz", "--counting", "edge"])
    assert code == 1 and "% of the PWM period" in out


def test_cli_counting_without_a_pwm_is_an_error() -> None:
    result = CliRunner().invoke(cli, ["sweep", "--clocks", "100MHz", "--window", "90ns",
                                      "--clock-tol", "0ppm", "--counting", "center"])
    assert isinstance(result.exception, GapforgeError), result.output
    line = result.exception.line()
    assert line.startswith("--counting") and "--pwm" in line and "\n" not in line


# ---------------------------------------------------------------------------------------------
# ranking and text (issue 10)


def test_default_ranking_is_the_least_safe_dead_time() -> None:
    # Issue 10's example: a 400 ns .. 1.2 us window at 100 MHz +- 2 %. Divider 1 (10 ns steps):
    # 400 x 1.02 = 408 ns -> 41 counts = 410 ns, worst case 410 / 1.02 .. 410 / 0.98 = 401.96 ..
    # 418.37 ns. Divider 8 (80 ns steps): 6 counts = 480 ns, worst case 470.6 .. 489.8 ns; its
    # margin to the nearer edge (70.6 ns) is the largest, so the margin ranking puts it first,
    # with more reverse conduction (loss ~ dead time: common practice).
    limits = {e: (400 * NS, 1200 * NS) for e in ("to_high", "to_low")}
    tol = Fraction(2, 100)
    result = sweep(layouts("split-10bit-div1-8"), [100 * MHZ], tol, limits)
    assert result.rank == "loss"
    best = result.feasible[0]
    assert (best.divider, best.edges["to_high"].code) == (1, 41)
    assert best.worst_above_min_s == 410 * NS / Fraction(98, 100) - 400 * NS
    by_margin = sweep(layouts("split-10bit-div1-8"), [100 * MHZ], tol, limits, "margin")
    assert (by_margin.feasible[0].divider, by_margin.feasible[0].edges["to_high"].achieved_s) == (
        8, 480 * NS)


def test_ties_break_by_lowest_clock_then_fewest_bits() -> None:
    # 400 ns is exact at 100 MHz and at 200 MHz on every divider of split-10bit-div1-8 (10 ns x 40,
    # 5 ns x 80, ...): every row ties on loss, so the order is by clock, then divider code.
    limits = {e: (400 * NS, 1200 * NS) for e in ("to_high", "to_low")}
    result = sweep(layouts("split-10bit-div1-8", "shared-8bit-linear"), [200 * MHZ, 100 * MHZ],
                   Fraction(0), limits)
    tied = [r for r in result.feasible if r.worst_above_min_s == 0]
    clocks = [r.clock_hz for r in tied]
    assert clocks == sorted(clocks) and len(set(clocks)) == 2
    at_100 = [r for r in tied if r.clock_hz == 100 * MHZ]
    bits = [r.bits for r in at_100]
    assert bits == sorted(bits) and bits[0] < bits[-1]  # the 8-bit layout before the 20-bit one


def test_columns_keep_their_width_whatever_the_code_width() -> None:
    # 16-bit codes (shared-16bit-plus-one at 5 GHz: 2000 counts) and 1-digit codes line up alike
    from gapforge.cli.sweep_cmd import sweep_text

    limits = {e: (400 * NS, 1200 * NS) for e in ("to_high", "to_low")}
    wide = sweep_text(sweep(layouts("shared-16bit-plus-one"), [5000 * MHZ], Fraction(0), limits),
                      None)
    narrow = sweep_text(sweep(layouts("shared-8bit-linear"), [10 * MHZ], Fraction(0), limits),
                        None)

    def columns(text: str) -> tuple[int, int, int]:
        lines = text.splitlines()
        header = next(line for line in lines if line.lstrip().startswith("# target layout"))
        row = next(line for line in lines if line.startswith("   1 "))
        return header.index("register"), row.index("0x"), row.index(" ns ", 70)

    assert columns(wide) == columns(narrow)
    assert columns(wide)[0] == columns(wide)[1]


def test_design_clock_is_the_default_for_clocks() -> None:
    from conftest import REPO, run_cli

    code, out, err = run_cli(
        ["sweep", "--design", str(REPO / "examples" / "motor-inverter.toml"), "--json"]
    )
    assert code == 0, err
    doc = json.loads(out)
    design = tomllib.loads((REPO / "examples" / "motor-inverter.toml").read_text())
    assert len(doc["clocks_hz"]) == 1
    expected = float(Fraction(design["timer"]["clock"].replace("MHz", "")) * 10**6)
    assert doc["clocks_hz"][0] == expected


def test_formula_footnote_only_for_a_derived_window() -> None:
    direct = run(["--clocks", "100MHz", "--window", "90ns:300ns"]).stdout
    assert "common practice" not in direct and "Window:" in direct
    derived = run(["--clocks", "100MHz", *STAGE]).stdout
    assert "* window minimum" in derived and "Window*:" in derived


def test_one_word_for_target_layouts_across_help_and_commands() -> None:
    # issue 10: the command is `targets`, the thing a "target layout", in every help text
    runner = CliRunner()
    for args in (["--help"], ["targets", "--help"], ["fit", "--help"], ["sweep", "--help"]):
        text = runner.invoke(cli, args).output
        assert "target layout" in text, args
        assert "timer layout" not in text, args


def test_progress_bar_only_on_a_terminal(monkeypatch: pytest.MonkeyPatch) -> None:
    # a long sweep shows click's progress bar on stderr when stderr is a terminal; never in JSON
    # or piped output (CliRunner's streams are not terminals)
    import gapforge.cli.sweep_cmd as sweep_cmd

    monkeypatch.setattr(sweep_cmd, "PROGRESS_POINTS", 1)
    args = ["--clocks", "100MHz,150MHz", "--window", "90ns:300ns", "--target", "split-10bit-div1-8"]
    piped = CliRunner().invoke(cli, ["sweep", *stated_tol(args)])
    assert "sweeping" not in piped.stderr
    calls: list[int] = []
    real = sweep_cmd.sweep

    def counting(*a: Any, progress: Any = None, **k: Any) -> Any:
        assert progress is not None
        calls.append(1)
        return real(*a, progress=progress, **k)

    monkeypatch.setattr(sweep_cmd, "sweep", counting)
    monkeypatch.setattr(sweep_cmd.sys.stderr, "isatty", lambda: True, raising=False)
    layouts_ = [load_layout("split-10bit-div1-8")]
    limits = {e: (90 * NS, 300 * NS) for e in ("to_high", "to_low")}
    sweep_cmd._run(layouts_, (100 * MHZ, 150 * MHZ), Fraction(0), limits, "loss", None, True)
    assert calls == [1]
    ticks: list[int] = []
    sweep(layouts_, [100 * MHZ, 150 * MHZ], Fraction(0), limits, progress=ticks.append)
    assert ticks == [1, 1]  # one tick per layout x clock
