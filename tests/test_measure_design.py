"""`gapforge measure --design`: the named output, the table entry at --current, the prediction
judged with the resolution (issue 20). Captures written by pyvcd, a general-purpose VCD writer
(not gapforge); the expected numbers come from the build plan of the example designs, and each
comparison is recomputed here with exact fractions."""

from __future__ import annotations

import json
from fractions import Fraction
from pathlib import Path

from click.testing import CliRunner
from vcd import VCDWriter

from gapforge.base.errors import GapforgeError
from gapforge.cli import cli
from gapforge.pipeline.build import plan_design
from gapforge.pipeline.design import load_design

ROOT = Path(__file__).parents[1]
MOTOR = ROOT / "examples" / "motor-inverter.toml"  # two outputs: MOTOR_DT, MOTOR_DT_ALT
ADAPTIVE = ROOT / "examples" / "adaptive-gan.toml"  # one output with a load-indexed table


def _vcd(path: Path, to_high: int, to_low: int) -> Path:
    """Invented gate pair, 1 ns unit, 20 periods of 10 us."""
    with path.open("w") as handle, VCDWriter(handle, timescale="1 ns", date="invented") as w:
        h = w.register_var("top", "gate_h", "wire", size=1, init=0)
        lo = w.register_var("top", "gate_l", "wire", size=1, init=1)
        for k in range(20):
            t = 10000 * k + 101
            w.change(lo, t, 0)
            w.change(h, t + to_high, 1)
            w.change(h, t + 4000, 0)
            w.change(lo, t + 4000 + to_low, 1)
    return path


def _measure(args: list[str]) -> tuple[int, dict[str, object], str]:
    """Exit code, JSON document, and the output (or the one-line error: exit 2)."""
    result = CliRunner().invoke(cli, ["measure", *args, "--json"])
    if isinstance(result.exception, GapforgeError):  # main() prints it as one line, exit 2
        return 2, {}, result.exception.line()
    if result.exit_code == 2:
        return 2, {}, result.output
    return result.exit_code, json.loads(result.output), result.output


def test_several_outputs_need_a_name(tmp_path: Path) -> None:
    path = _vcd(tmp_path / "c.vcd", 900, 940)
    args = [str(path), "--high", "gate_h", "--low", "gate_l", "--design", str(MOTOR)]
    code, _, out = _measure(args)
    assert code == 2 and "2 outputs" in out and "MOTOR_DT_ALT" in out and "--output" in out
    code, _, out = _measure([*args, "--output", "NOPE"])
    assert code == 2 and "no output 'NOPE'" in out


def test_the_named_output_is_the_prediction(tmp_path: Path) -> None:
    # before issue 20 the first output's fit was used whatever the capture ran
    plan = plan_design(load_design(MOTOR))
    alt = next(op for op in plan.outputs if op.output.prefix == "MOTOR_DT_ALT")
    first = plan.outputs[0]
    assert alt.fit.edges["to_high"].achieved_max_s != first.fit.edges["to_high"].achieved_max_s
    path = _vcd(tmp_path / "c.vcd", 870, 950)
    code, doc, _ = _measure([str(path), "--high", "gate_h", "--low", "gate_l", "--design",
                             str(MOTOR), "--output", "MOTOR_DT_ALT"])
    assert code == 0, doc  # 870 ns and 950 ns, inside the design's window by more than 1 ns
    edges = doc["edges"]
    assert isinstance(edges, dict)
    for edge in ("to_high", "to_low"):
        fit = alt.fit.edges[edge]
        assert edges[edge]["predicted_min_s"] == float(fit.achieved_min_s)
        assert edges[edge]["predicted_max_s"] == float(fit.achieved_max_s)
    assert "MOTOR_DT_ALT" in str(doc["limits_source"])


def _entry(current: Fraction, sign: str, edge: str) -> tuple[Fraction, Fraction]:
    op = plan_design(load_design(ADAPTIVE)).outputs[0]
    for b in op.adaptive.table.bins:
        if b.current_min_a <= abs(current) and (b.current_max_a is None
                                                or abs(current) < b.current_max_a):
            e = b.entries[sign][edge]
            return e.achieved_min_s, e.achieved_max_s
    raise AssertionError("no bin")


def test_table_entry_at_the_current(tmp_path: Path) -> None:
    path = _vcd(tmp_path / "c.vcd", 29, 37)
    base = [str(path), "--high", "gate_h", "--low", "gate_l", "--design", str(ADAPTIVE)]
    code, _, out = _measure(base)
    assert code == 2 and "--current" in out  # a table: which entry must be said
    for current, sign in ((Fraction(5), "positive"), (Fraction(-5), "negative")):
        code, doc, _ = _measure([*base, "--current", f"{current}A"])
        edges = doc["edges"]
        assert isinstance(edges, dict)
        for edge in ("to_high", "to_low"):
            lo, hi = _entry(current, sign, edge)
            assert edges[edge]["predicted_min_s"] == float(lo)
            assert edges[edge]["predicted_max_s"] == float(hi)
        assert f"{sign} current" in str(doc["limits_source"]) and "bin 3" in str(doc["limits_source"])
    # the soft edge of a positive current is to_low: at 5 A its entry is longer than the fixed fit
    fixed = plan_design(load_design(ADAPTIVE)).outputs[0].fit.edges["to_low"].achieved_max_s
    assert _entry(Fraction(5), "positive", "to_low")[0] > fixed


def test_above_the_prediction_accounts_for_the_resolution(tmp_path: Path) -> None:
    # to_low entry at +5 A: about 36.25 ns; a 37 ns gap at 1 ns resolution may be 36 ns:
    # not proven above (before issue 20 a note said it was); 38 ns - 1 ns = 37 ns is above
    _, hi = _entry(Fraction(5), "positive", "to_low")
    assert Fraction(36, 10**9) < hi < Fraction(37, 10**9)
    notes = []
    for gap in (37, 38):
        path = _vcd(tmp_path / f"c{gap}.vcd", 29, gap)
        _, doc, _ = _measure([str(path), "--high", "gate_h", "--low", "gate_l", "--design",
                              str(ADAPTIVE), "--current", "5A"])
        notes.append(any("to_low: longest measured gap is above the predicted maximum" in n
                         for n in doc["notes"]))  # type: ignore[attr-defined]
    assert notes == [False, True]


def test_current_without_design_is_refused(tmp_path: Path) -> None:
    path = _vcd(tmp_path / "c.vcd", 29, 37)
    code, _, out = _measure([str(path), "--high", "gate_h", "--low", "gate_l", "--current", "5A"])
    assert code == 2 and "--design" in out
