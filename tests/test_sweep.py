"""`gapforge sweep` (gapforge.sweep): layouts x clocks x dividers against a dead-time window.

The key property is checked independently of gapforge's layout model and fit engine: the layout
files are read here with tomllib, register codes are decoded with a decoder written in this file,
and worst-case dead times are recomputed with the clock-tolerance rule of common practice
(N counts / (f_clk x (1 + tol)) is the shortest gap, / (1 - tol) the longest;
reference-facts.md, "Clock tolerance"). Scenarios are invented.
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

from gapforge.cli import cli
from gapforge.errors import GapforgeError
from gapforge.layouts import builtin_names, load_layout
from gapforge.sweep import parse_clocks, sweep

NS = Fraction(1, 10**9)
MHZ = Fraction(10**6)
TARGETS = Path(__file__).resolve().parents[1] / "targets"


# ---------------------------------------------------------------------------------------------
# an independent decoder of our layout files


class RawLayout:
    """A layout file read straight from TOML, decoded without gapforge.layouts."""

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
    result = sweep(layouts("split-10bit-div4"), [100 * MHZ], Fraction(0), limits, rank="error")
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
    by_margin = sweep(layouts("split-10bit-div4"), [100 * MHZ], Fraction(0), limits, "margin")
    assert by_margin.feasible[0].divider == 8


def test_worked_example_with_clock_tolerance() -> None:
    limits = {e: (90 * NS, 300 * NS) for e in ("to_high", "to_low")}
    result = sweep(layouts("split-10bit-div4"), [100 * MHZ], Fraction(2, 100), limits, "error")
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
    result = sweep(layouts("split-10bit-div4"), [100 * MHZ], Fraction(0), limits)
    reasons = {r.divider: r.reason for r in result.infeasible}
    assert reasons[8].startswith("too-long: to_high shortest safe value 160 ns")
    # 10 ns steps (divider 1) give 100 ns, 20 ns steps 100 ns, 40 ns steps 120 ns: all too long
    assert reasons[1].startswith("too-long: to_high shortest safe value 100 ns")
    assert reasons[4].startswith("too-long: to_high shortest safe value 120 ns")
    assert not result.feasible


def test_every_divider_and_clock_is_a_point() -> None:
    limits = {e: (90 * NS, None) for e in ("to_high", "to_low")}
    names = builtin_names()
    result = sweep(layouts(*names), [100 * MHZ, 150 * MHZ], Fraction(0), limits)
    expected = sum(len(load_layout(n).dividers) for n in names) * 2
    assert result.points == expected
    assert result.rank == "error"  # no maximum: ranked by quantization error
    errors = [r.worst_error_s for r in result.feasible]
    assert errors == sorted(errors)


def test_empty_window_makes_every_point_infeasible() -> None:
    limits = {"to_high": (90 * NS, 50 * NS), "to_low": (90 * NS, 300 * NS)}
    result = sweep(layouts("split-10bit-div4"), [100 * MHZ], Fraction(0), limits)
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


def run(args: list[str]) -> Any:
    result = CliRunner().invoke(cli, ["sweep", *args])
    if result.exception is not None and not isinstance(result.exception, SystemExit):
        raise result.exception
    return result


STAGE = ["--td-off", "35ns", "--t-fall", "20ns", "--td-on", "10ns", "--prop-delay", "20ns:45ns",
         "--mismatch", "5ns", "--current", "10A", "--fsw", "20kHz", "--loss-budget", "0.5W"]


def test_cli_text_from_stage_options() -> None:
    result = run(["--clocks", "100MHz:200MHz:50MHz", "--clock-tol", "1%", "--top", "3", *STAGE])
    assert result.exit_code == 0
    out = result.stdout
    # window 90 ns .. 1.041666 us from the stage (see tests/test_stage.py)
    assert "to_high 90 ns .. 1.04167 us" in out
    assert "common practice" in out and "reduced voltage" in out
    assert out.count("\n   1  ") == 1 and "\n   4  " not in out


def test_cli_json_and_csv_hold_every_point() -> None:
    args = ["--clocks", "100MHz,160MHz", "--window", "90ns:300ns", "--target",
            "split-10bit-div4", "--target", "shared-8bit-linear", "--clock-tol", "50ppm"]
    data = json.loads(run([*args, "--json"]).stdout)
    assert data["points"] == (4 + 1) * 2
    assert data["points"] == len(data["feasible"]) + len(data["infeasible"])
    assert [r["rank"] for r in data["feasible"]] == list(range(1, len(data["feasible"]) + 1))
    margins = [r["worst_margin_s"] for r in data["feasible"]]
    assert margins == sorted(margins, reverse=True)
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
    result = run(["--clocks", "100MHz", *args, "--target", "split-10bit-div4"])
    assert result.exit_code == 1 and "empty window" in result.stdout


@pytest.mark.parametrize(
    ("args", "where"),
    [
        (["--clocks", "100MHz:50MHz:1MHz", "--window", "90ns"], "--clocks"),
        (["--clocks", "100MHz", "--window", "90ns:50ns"], "--window"),
        (["--clocks", "100MHz", "--window", "-9ns:50ns"], "--window"),
        (["--clocks", "100MHz", "--window", "90ns", "--td-off", "3ns"], "--td-off"),
        (["--clocks", "100MHz", "--td-off", "3ns", "--td-on", "9ns"], "--td-on"),
        (["--clocks", "100MHz", "--window", "90ns", "--target", "no-such-layout"], "--target"),
        (["--clocks", "100MHz", "--window", "90ns", "--json", "--csv"], "--csv"),
    ],
)
def test_cli_bad_input(args: list[str], where: str) -> None:
    result = CliRunner().invoke(cli, ["sweep", *args])
    assert isinstance(result.exception, GapforgeError), result.output
    line = result.exception.line()
    assert line.startswith(where) and "\n" not in line


def test_each_layout_is_read_once(monkeypatch: pytest.MonkeyPatch) -> None:
    import gapforge.layouts as layouts_mod

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
