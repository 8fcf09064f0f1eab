"""The window of a design and its dead-time policy (issue 9, section 1).

The scenario is the invented 3-phase SiC inverter of examples/sic-inverter.toml: stage window
(320 ns x 1.25 =) 400 ns .. ((5.12 W - 40 nC x 800 V x 10 kHz recovery) / (4 V x 100 A x 10 kHz)
=) 1.2 us, worked by hand in the example's comments from the common-practice formulas of gapforge.stage.window. The old analog
network there was too short: its worst-case range lies below 400 ns.
"""

from __future__ import annotations

import json
import re
from fractions import Fraction
from pathlib import Path

import pytest

from conftest import EXAMPLES, run_cli

SIC = EXAMPLES / "sic-inverter.toml"
NS = Fraction(1, 10**9)


def _old_network(path: Path) -> dict[str, object]:
    """The old network's worst-case ranges per edge, from the analog model (gapforge.analog):
    the policy under test takes them as given; their own checks are in the analog tests."""
    from gapforge.pipeline.design import load_design
    from gapforge.pipeline.policy import window_of

    reference = window_of(load_design(path)).reference
    assert reference is not None
    return dict(reference)


def _short(path: Path) -> dict[str, str]:
    from gapforge.base.display import format_si

    return {
        e: format_si(400 * NS - r.min_s, "s")  # type: ignore[attr-defined]
        for e, r in _old_network(path).items()
    }


def _variant(tmp_path: Path, source: str, r: str = "2.2k") -> Path:
    text = SIC.read_text(encoding="utf-8")
    text = text.replace('source = "window"', f'source = "{source}"')
    text = text.replace('r = "2.2k"', f'r = "{r}"')
    path = tmp_path / "sic.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_build_requests_exactly_the_stage_minimum_and_warns_how_short_the_old_board_was(
    tmp_path: Path,
) -> None:
    # failed before the policy change: the old network's range narrowed the window to nothing
    # (empty-window, exit 1, nothing written) although 400 ns .. 1.2 us is easy to meet
    code, out, err = run_cli(["build", str(SIC), "--out", str(tmp_path), "--json", "--parents"])
    assert code == 0, err
    doc = json.loads(out)
    assert doc["verdict"] == "ok"
    # 400 ns is exactly 4e-7 s; JSON carries floats, the header the exact picoseconds
    assert doc["requested_s"]["to_high"] == doc["requested_s"]["to_low"] == 4e-7
    header = (tmp_path / "out" / "sic_dead_time.h").read_text()
    assert re.search(r"SIC_DT_TO_HIGH_REQUESTED_PS\s+400000ul", header)
    assert re.search(r"SIC_DT_WINDOW_TO_HIGH_MAX_PS\s+1200000ul", header)
    short = [w for w in doc["warnings"] if "short of the stage minimum 400 ns" in w]
    # how far short: 400 ns minus the old network's worst-case minimum (about 314 ns, to_high)
    far = _short(SIC)
    assert far["to_high"].startswith("314.")
    assert len(short) == 2
    assert f"{far['to_high']} short" in short[0] and f"{far['to_low']} short" in short[1]
    finding = f"{far['to_high']} short of the stage minimum 400 ns"
    # ... and the finding stays visible in the text, the header comment and the report
    code, text, _ = run_cli(["build", str(SIC), "--out", str(tmp_path), "--no-diagram", "--parents"])
    assert code == 0 and finding in text
    comment = " ".join(header.replace("\n *", " ").split())  # the comment's wrapped lines
    assert finding in comment
    report = tmp_path / "r.html"
    code, _, err = run_cli(["report", str(SIC), "-o", str(report)])
    assert code == 0, err
    assert finding in report.read_text()


def test_the_opt_in_says_which_side_of_an_empty_intersection_is_empty(tmp_path: Path) -> None:
    design = _variant(tmp_path, "window-within-reference")
    code, out, err = run_cli(["build", str(design), "--json", "--parents"])
    assert code == 1, err
    doc = json.loads(out)
    assert doc["verdict"] == "fail" and doc["reason"] == "empty-window"
    why = doc["reasons"][1]
    # the old worst-case maximum (about 387 ns, narrowed down to 1 ps) is below 400 ns
    from gapforge.base.display import format_si

    top = _old_network(design)["to_high"].limit_max_s  # type: ignore[attr-defined]
    assert 380 * NS < top < 400 * NS
    assert why.startswith("to_high: nothing fits at or above the stage minimum 400 ns")
    assert "lies wholly below it" in why
    assert f"{format_si(400 * NS - top, 's')} more" in why
    assert not list(tmp_path.glob("out/*.h"))


def test_reproducing_the_old_network_is_judged_against_the_window(tmp_path: Path) -> None:
    # the old worst-case minimum (85.849 ns) is far below the stage minimum: the new design
    # fails (exit 1), and the reason names the window, not the old board
    code, out, _ = run_cli(["build", str(_variant(tmp_path, "reference-minimum")), "--json", "--parents"])
    assert code == 1
    doc = json.loads(out)
    assert doc["verdict"] == "fail" and doc["reason"] == "too-short"
    assert "below the window's minimum 400 ns" in doc["reasons"][0]


@pytest.mark.parametrize(("source", "r"), [("window", "2.2k"),
                                           ("window-within-reference", "3.3k")])
def test_every_command_shows_the_same_window_for_the_same_file(
    tmp_path: Path, source: str, r: str
) -> None:
    # with the opt-in and a 3.3k old network the window is 400 ns .. about 568 ns (to_high, the
    # old network's maximum narrowed down to 1 ps), a window that differs from the stage's:
    # every view must agree on it to the picosecond
    design = _variant(tmp_path, source, r)
    code, out, err = run_cli(["window", "--design", str(design), "--json"])
    assert code == 0, err
    shown = {e: (w["min_ps"], w["max_ps"]) for e, w in json.loads(out)["design"]["window"].items()}
    if source == "window-within-reference":
        top = _old_network(design)["to_high"].limit_max_s  # type: ignore[attr-defined]
        assert 500 * NS < top < 600 * NS and top * 10**12 == int(top * 10**12)
        assert shown["to_high"] == (400_000, int(top * 10**12))
    else:
        assert shown["to_high"] == (400_000, 1_200_000)

    def ps(value: float) -> int:
        return round(value * 1e12)

    code, out, err = run_cli(["build", str(design), "--json", "--out", str(tmp_path), "--parents"])
    assert code == 0, err
    built = json.loads(out)["window"]
    assert {e: (ps(w["min_s"]), ps(w["max_s"])) for e, w in built.items()} == shown

    code, out, err = run_cli(["sweep", "--design", str(design), "--json"])
    assert code == 0, err
    swept = json.loads(out)["window"]
    assert {e: (ps(w["min_s"]), ps(w["max_s"])) for e, w in swept.items()} == shown

    header = (tmp_path / "out" / "sic_dead_time.h").read_text()
    for e, (lo, hi) in shown.items():
        edge = e.upper()
        assert re.search(rf"SIC_DT_WINDOW_{edge}_MIN_PS\s+{lo}ul", header)
        assert re.search(rf"SIC_DT_WINDOW_{edge}_MAX_PS\s+{hi}ul", header)

    from gapforge.base.display import choose_exponent, format_si

    report = tmp_path / "r.html"
    code, _, err = run_cli(["report", str(design), "-o", str(report)])
    assert code == 0, err
    html = report.read_text()
    for lo, hi in shown.values():
        # the report's display style: four digits, one prefix per pair, cut toward the inside
        low, high = Fraction(lo, 10**12), Fraction(hi, 10**12)
        exp3 = choose_exponent([low, high])
        pair = (format_si(low, "s", toward="up", exponent=exp3),
                format_si(high, "s", toward="down", exponent=exp3))
        assert all(text in html for text in pair), pair


def test_window_design_reads_a_stage_only_file_and_a_full_design_alike(tmp_path: Path) -> None:
    # the stage's fsw defaults to the design's [pwm] frequency in both readings; before, `window
    # --design` read [stage] alone and lost it (no loss-budget maximum at all)
    code, out, err = run_cli(["window", "--design", str(SIC), "--json"])
    assert code == 0, err
    assert json.loads(out)["edges"]["to_high"]["max_ps"] == 1_200_000


def test_sweep_design_honours_the_user_layouts_its_outputs_name(tmp_path: Path) -> None:
    layout = (
        "# invented test layout (a generic linear 8-bit count of our own)\nformat = 1\n"
        'name = "bench-linear-8"\nsummary = "invented 8-bit linear count"\nregister_bits = 8\n'
        '[[field]]\nname = "gap"\nrole = "both"\noffset = 0\nwidth = 8\n'
    )
    (tmp_path / "bench-linear-8.toml").write_text(layout)
    text = SIC.read_text(encoding="utf-8").replace('"split-10bit-div1-8"', '"bench-linear-8.toml"')
    design = tmp_path / "d.toml"
    design.write_text(text, encoding="utf-8")
    code, out, err = run_cli(["sweep", "--design", str(design), "--json"])
    assert code == 0, err
    doc = json.loads(out)
    assert "bench-linear-8" in doc["layouts"]
    rows = [r for r in doc["feasible"] if r["layout"] == "bench-linear-8"]
    # 100 MHz, 10 ns steps: safe code = ceil(400 ns x 1.02 / 10 ns) = ceil(40.8) = 41
    assert rows and rows[0]["edges"]["to_high"]["code"] == 41


def test_the_policies_are_named_and_explained_in_the_readme() -> None:
    from conftest import REPO
    from gapforge.pipeline.policy import POLICIES

    readme = (REPO / "README.md").read_text(encoding="utf-8")
    for name in POLICIES:
        assert f"`{name}`" in readme
