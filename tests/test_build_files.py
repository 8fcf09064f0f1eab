"""How `build` lives with files over months (issue 11) and with hostile output sets (issue 14).

Outside checks: the file system's own inode numbers and modification times; the C preprocessor
(`gcc -dM -E`) for the set of macros a header really defines; the C compiler running the
generated self-test.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from conftest import BUILTINS, EXAMPLES, SMALL_STAGE, run_cli

ONE = (
    "# invented test design\nformat = 1\n"
    '[timer]\nclock = "100MHz"\ntolerance = "100ppm"\n'
    '[pwm]\nfrequency = "50kHz"\ncounting = "edge"\n'
    '[dead_time]\nvalue = "60ns"\n'
    + SMALL_STAGE  # judged against an invented stage (issue 19: else inconclusive)
)


def _output(target: str, prefix: str, file: str) -> str:
    return f'[[output]]\ntarget = "{target}"\nprefix = "{prefix}"\nfile = "{file}"\n'


def _snapshot(root: Path) -> dict[str, tuple[str, bytes]]:
    return {str(p.relative_to(root)): ("dir", b"") if p.is_dir() else ("file", p.read_bytes())
            for p in sorted(root.rglob("*"))}


def _one_line(err: str) -> str:
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert "Traceback" not in err
    return lines[0]


def test_a_second_build_leaves_identical_files_untouched(tmp_path: Path) -> None:
    shutil.copy(EXAMPLES / "motor-inverter.toml", tmp_path / "m.toml")
    code, out, err = run_cli(["build", str(tmp_path / "m.toml"), "--parents", "--self-test"])
    assert code == 0, err
    files = sorted((tmp_path / "out").iterdir())
    assert len(files) == 4
    for f in files:  # back-date them, so a rewrite would show even on a coarse clock
        os.utime(f, ns=(1_000_000_000, 1_000_000_000))
    before = {f: (f.stat().st_ino, f.stat().st_mtime_ns) for f in files}
    code, out, err = run_cli(["build", str(tmp_path / "m.toml"), "--self-test"])
    assert code == 0, err
    assert {f: (f.stat().st_ino, f.stat().st_mtime_ns) for f in files} == before
    assert sorted(line for line in out.splitlines() if line.startswith("unchanged ")) == [
        f"unchanged {f}" for f in files
    ]
    assert "wrote " not in out


def test_check_text_json_and_exit_code_agree(tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    design.write_text(ONE + _output("shared-8bit-linear", "A", "a.h")
                      + _output("split-10bit-div1-8", "B", "b.h")
                      + _output("split-10bit-tenths", "C", "c.h"))
    assert run_cli(["build", str(design)])[0] == 0
    (tmp_path / "a.h").unlink()
    (tmp_path / "b.h").write_text("/* edited */\n")
    code, out, _ = run_cli(["build", str(design), "--check"])
    jcode, jout, _ = run_cli(["build", str(design), "--check", "--json"])
    assert code == jcode == 1
    doc = json.loads(jout)
    assert doc["verdict"] == "fail"
    assert doc["check"] == {"missing": [str(tmp_path / "a.h")], "stale": [str(tmp_path / "b.h")],
                            "unchanged": [str(tmp_path / "c.h")]}
    # text: the answer line, then only the list (no build report unless --details)
    assert out.splitlines()[:4] == [
        "check fail: 1 missing, 1 stale, 1 unchanged",
        f"missing: {tmp_path / 'a.h'}", f"stale: {tmp_path / 'b.h'}",
        f"unchanged: {tmp_path / 'c.h'}",
    ]
    assert "design d.toml" not in out
    code, out, _ = run_cli(["build", str(design), "--check", "--details"])
    assert code == 1 and "design d.toml" in out
    assert run_cli(["build", str(design)])[0] == 0
    code, jout, _ = run_cli(["build", str(design), "--check", "--json"])
    assert code == 0 and json.loads(jout)["verdict"] == "ok"


def test_missing_folder_needs_parents_and_a_failed_build_creates_nothing(tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    design.write_text(ONE + _output("shared-8bit-linear", "A", "new/sub/a.h"))
    before = _snapshot(tmp_path)
    code, out, err = run_cli(["build", str(design)])
    assert code == 2
    assert "give --parents" in _one_line(err) and out == ""
    assert _snapshot(tmp_path) == before
    # an unreachable dead time with --parents: exit 1 and still no folder
    design.write_text(ONE.replace('"60ns"', '"60us"') + _output("shared-8bit-linear", "A",
                                                                "new/sub/a.h"))
    before = _snapshot(tmp_path)
    code, _, _ = run_cli(["build", str(design), "--parents"])
    assert code == 1
    assert _snapshot(tmp_path) == before
    design.write_text(ONE + _output("shared-8bit-linear", "A", "new/sub/a.h"))
    assert run_cli(["build", str(design), "--parents"])[0] == 0
    assert (tmp_path / "new" / "sub" / "a.h").is_file()


SAME_FILE = {
    "dot-slash": ("dt.h", "./dt.h"),
    "case": ("dt.h", "DT.h"),
    "inner-dot": ("x/dt.h", "x/./dt.h"),
}


@pytest.mark.parametrize("case", sorted(SAME_FILE))
def test_outputs_that_are_one_file_once_normalised_are_refused(case: str, tmp_path: Path) -> None:
    a, b = SAME_FILE[case]
    design = tmp_path / "d.toml"
    design.write_text(ONE + _output("shared-8bit-linear", "A", a)
                      + _output("split-10bit-div1-8", "B", b))
    (tmp_path / "x").mkdir()
    before = _snapshot(tmp_path)
    for extra in ([], ["--check"]):
        code, _, err = run_cli(["build", str(design), *extra])
        assert code == 2
        assert "same file" in _one_line(err)
    assert _snapshot(tmp_path) == before


def test_an_output_inside_another_output_writes_nothing(tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    design.write_text(ONE + _output("shared-8bit-linear", "A", "b.h")
                      + _output("split-10bit-div1-8", "B", "c.h")
                      + _output("split-10bit-tenths", "C", "c.h/d.h"))
    before = _snapshot(tmp_path)
    code, _, err = run_cli(["build", str(design), "--parents"])
    assert code == 2 and "folder of another output" in _one_line(err)
    assert _snapshot(tmp_path) == before  # neither b.h nor a folder c.h


def test_every_failing_output_and_edge_is_listed_first(tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    # 3 us is beyond both 8-bit layouts at 100 MHz (2.55 us and 952 clocks x 10 ns = 9.52 us
    # reaches it, so the segmented one passes); the third output fails too
    design.write_text(ONE.replace('"60ns"', '"3us"').replace('"50kHz"', '"10kHz"')
                      + _output("shared-8bit-linear", "A", "a.h")
                      + _output("shared-8bit-segmented", "B", "b.h")
                      + _output("split-6bit-div2-reserved", "C", "c.h"))
    code, out, _ = run_cli(["build", str(design)])
    assert code == 1
    first = out.splitlines()[:3]
    assert first[0].startswith("fail: A: ") and "to_high" in first[0] and "to_low" in first[0]
    assert re.match(r"ok: B register 0x[0-9a-f]{4}, worst case both edges ", first[1])
    assert first[2].startswith("fail: C: ")
    doc = json.loads(run_cli(["build", str(design), "--json"])[1])
    assert [r.split(":")[0] for r in doc["reasons"]] == ["A", "A", "C", "C"]


def test_first_line_of_fit_and_build_is_the_answer() -> None:
    code, out, _ = run_cli(["build", str(EXAMPLES / "gan-buck.toml"), "--check", "--details"])
    assert code == 0
    # 45 tenth-clock steps at 160 MHz: 28.125 ns / (1 + 50 ppm) = 28.1236 -> 28.12 (down),
    # 28.125 / (1 - 50 ppm) = 28.1264 -> 28.13 (up)
    line = "ok: BUCK_DT register 0x0000b42d, worst case both edges 28.12 ns .. 28.13 ns"
    assert line in out.splitlines()
    code, out, _ = run_cli(["fit", "--clock", "100MHz", "--clock-tol", "0ppm", "--dead-time", "60ns", "--target",
                            "split-10bit-div1-8", "--to-low", "75ns"])
    assert code == 0
    # 6 and 8 clocks of 10 ns, no tolerance; to_low at bit 16, to_high at bit 0
    assert out.splitlines()[0] == ("ok: register 0x00080006, worst case to_high 60.00 ns .. "
                                   "60.00 ns, to_low 80.00 ns .. 80.00 ns")


def test_counter_width_warns_and_strict_refuses(tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    # 10 Hz centre-aligned at 100 MHz: N = 100e6 / 20 = 5,000,000 counts, beyond 16 bits
    design.write_text(ONE.replace('frequency = "50kHz"\ncounting = "edge"',
                                  'frequency = "10Hz"\ncounting = "center"\ncounter_bits = 16')
                      + _output("shared-8bit-linear", "A", "a.h"))
    code, out, err = run_cli(["build", str(design)])
    assert code == 0, err
    assert "compare value of 5000000 counts" in out and "16-bit counter holds (65535)" in out
    (tmp_path / "a.h").unlink()
    code, out, _ = run_cli(["build", str(design), "--strict"])
    assert code == 1 and "fail (strict): A: " in out
    assert not (tmp_path / "a.h").exists()
    design.write_text(design.read_text().replace("counter_bits = 16", "counter_bits = 23"))
    code, out, _ = run_cli(["build", str(design), "--strict"])  # 5e6 < 2^23 - 1 = 8388607
    assert code == 0 and "counter holds" not in out


def test_shared_divider_compromise_is_explained(tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    # split-10bit-div1-8 at 100 MHz, no tolerance: to_low 15 us needs divider 2 (750 counts of
    # 20 ns), since 1023 x 10 ns < 15 us; to_high 70 ns alone takes divider 1, 7 counts of 10 ns,
    # but on divider 2 it needs ceil(70 / 20) = 4 counts = 80 ns: 10 ns longer
    design.write_text(ONE.replace('value = "60ns"', 'to_high = "70ns"\nto_low = "15us"')
                      .replace('tolerance = "100ppm"', 'tolerance = "0"')
                      .replace('"50kHz"', '"10kHz"')
                      + _output("split-10bit-div1-8", "A", "a.h"))
    code, out, err = run_cli(["build", str(design), "--record"])
    assert code == 0, err
    header = (tmp_path / "a.h").read_text()
    note = ("to_high is 10 ns longer than its own best code: the divider is shared, and to_low is "
            "served better by the chosen divider (alone, to_high would take divider 1, code 7, "
            "70 ns)")
    assert note in " ".join(line.lstrip(" *") for line in header.splitlines())
    record = json.loads((tmp_path / "a.json").read_text())
    assert record["shared"] == [note]
    assert out.splitlines()[1] == f"  A shared: {note}"  # in the answer block too


# ---------------------------------------------------------------------------------------------
# C injection (issue 14, item 7)

HOSTILE = [
    "evil */ #define INJECTED 1 /*",
    'q" \n#define INJECTED 2\n',
    "trig ??/\n#define INJECTED 3",
    "\x07bell\x1b[31m \\\n#define INJECTED 4",
    "µs Ω ∕* *∕",
]


def _defined_macros(header: Path) -> set[str]:
    cc = shutil.which("gcc")
    if cc is None:
        pytest.skip("gcc is not installed")

    def names(src: Path) -> set[str]:
        proc = subprocess.run([cc, "-std=c89", "-dM", "-E", str(src)], capture_output=True,
                              text=True, check=True)
        return {line.split()[1].split("(")[0] for line in proc.stdout.splitlines()}

    empty = header.parent / "empty.c"
    empty.write_text("#include <stdint.h>\n")
    user = header.parent / "user.c"
    user.write_text(f'#include <stdint.h>\n#include "{header.name}"\n')
    return names(user) - names(empty)


@pytest.mark.parametrize("text", HOSTILE, ids=range(len(HOSTILE)))
def test_hostile_layout_name_and_summary_and_file_name_cannot_inject_c(
    text: str, tmp_path: Path
) -> None:
    layout = (TARGETS_DIR / "shared-8bit-linear.toml").read_text()
    name, summary = json.dumps(text), json.dumps(text.replace("\n", " "))
    layout = re.sub(r'^name = ".*"$', lambda _: f"name = {name}", layout, count=1, flags=re.M)
    layout = re.sub(r'^summary = ".*"$', lambda _: f"summary = {summary}", layout, flags=re.M)
    odd = "ev'il #define INJECTED 5.toml"  # a layout file name that reaches the comment
    (tmp_path / odd).write_text(layout)
    design = tmp_path / "d.toml"
    design.write_text(ONE + _output(odd, "DT", "dt.h").replace(
        f'target = "{odd}"', f"target = {json.dumps(odd)}"))
    code, out, err = run_cli(["build", str(design)])
    assert code == 0, out + err
    header = tmp_path / "dt.h"
    assert "INJECTED" in header.read_text()  # the text is there, made inert
    expected = {"DT_H"} | {f"DT_{m}" for m in (
        "FORMAT_VERSION", "TIMER_CLOCK_HZ", "CLOCK_TOL_PPB", "SUB_STEPS", "DIVIDER_CODE",
        "DIVIDER", "GAP_CODE", "GAP_SHIFT", "GAP_MASK", "REGISTER", "PWM_COUNTING_CENTER",
        "PWM_PERIOD_COUNTS", "PWM_TOP_COUNTS", "PWM_COMPARE_COUNTS", "DUTY_MIN_COUNTS",
        "DUTY_MAX_COUNTS")} | {f"DT_{e}_{m}" for e in ("TO_HIGH", "TO_LOW") for m in (
            "STEPS", "REQUESTED_PS", "ACHIEVED_PS", "ACHIEVED_MIN_PS", "ACHIEVED_MAX_PS")}
    # the invented stage's window minimum (no maximum: no loss budget)
    expected |= {f"DT_WINDOW_{e}_MIN_PS" for e in ("TO_HIGH", "TO_LOW")}
    assert _defined_macros(header) == expected
    cc = shutil.which("gcc")
    assert cc is not None
    src = tmp_path / "use.c"
    src.write_text('#include "dt.h"\nint dt_word(void) { return (int)DT_REGISTER; }\n')
    proc = subprocess.run([cc, "-std=c89", "-Wall", "-Wextra", "-Wpedantic", "-Werror",
                           "-trigraphs", "-c", str(src), "-o", str(tmp_path / "use.o")],
                          capture_output=True, text=True, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr


@pytest.mark.parametrize("file", ['a"b.h', "a*/b.h", "x\n#define INJECTED 1\n.h", "a\x07.h",
                                  "a\\b.h"])
def test_hostile_output_file_names_are_refused(file: str, tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    design.write_text(ONE + '[[output]]\ntarget = "shared-8bit-linear"\nprefix = "DT"\n'
                      f"file = {json.dumps(file)}\n")
    before = _snapshot(tmp_path)
    code, _, err = run_cli(["build", str(design), "--parents"])
    assert code == 2
    assert "output[0].file" in _one_line(err)
    assert _snapshot(tmp_path) == before


TARGETS_DIR = EXAMPLES.parent / "targets"


# ---------------------------------------------------------------------------------------------
# the optional outputs: C self-test and JSON record


def test_self_test_of_every_layout_compiles_runs_and_catches_an_edit(tmp_path: Path) -> None:
    cc = shutil.which("gcc")
    if cc is None:
        pytest.skip("gcc is not installed")
    design = tmp_path / "d.toml"
    design.write_text(ONE.replace('"edge"', '"center"') + "".join(
        _output(t, f"L{i}", f"l{i}.h") for i, t in enumerate(BUILTINS)))
    code, _, err = run_cli(["build", str(design), "--self-test"])
    assert code == 0, err
    for i in range(len(BUILTINS)):
        src = tmp_path / f"l{i}_selftest.c"
        exe = tmp_path / f"st{i}"
        proc = subprocess.run([cc, "-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Werror",
                               "-Wconversion", f"-I{tmp_path}", str(src), "-o", str(exe)],
                              capture_output=True, text=True)
        assert proc.returncode == 0, proc.stderr
        run = subprocess.run([str(exe)], capture_output=True, text=True)
        assert (run.returncode, run.stdout) == (0, "ok\n"), (BUILTINS[i], run.stdout)
    # a hand edit of a derived macro is caught
    header = tmp_path / "l0.h"
    text = header.read_text()
    header.write_text(re.sub(r"(#define L0_DUTY_MIN_COUNTS +)(\d+)u",
                             lambda m: f"{m.group(1)}{int(m.group(2)) + 1}u", text))
    subprocess.run([cc, "-std=c99", f"-I{tmp_path}", str(tmp_path / "l0_selftest.c"), "-o",
                    str(tmp_path / "st0")], check=True)
    run = subprocess.run([str(tmp_path / "st0")], capture_output=True, text=True)
    assert run.returncode == 1 and "FAILED: L0_DUTY_MIN_COUNTS" in run.stdout


RECORD_KEYS = ["schema", "schema_version", "generator", "design", "layout", "prefix", "header",
               "timer", "register", "fields", "edges", "pwm", "shared", "gate_driver", "adaptive",
               "verdict", "reason", "caution"]  # gate_driver and adaptive: issue 22 (keys may be added)


def test_record_has_stable_keys_and_matches_the_header() -> None:
    record = json.loads((EXAMPLES / "out" / "buck_dead_time.json").read_text())
    assert list(record) == RECORD_KEYS
    assert (record["schema"], record["schema_version"]) == ("gapforge-dead-time-record", 1)
    header = (EXAMPLES / "out" / "buck_dead_time.h").read_text()
    macros = {m.group(1): int(m.group(2), 0) for m in re.finditer(
        r"^#define BUCK_DT_(\w+) +(0x[0-9a-f]+|\d+)", header, re.M)}
    assert record["register"]["word"] == macros["REGISTER"]
    assert list(record["fields"]) == ["scale", "to_high_count", "to_low_count"]  # MSB first
    for name, field in record["fields"].items():
        assert field["code"] == macros[f"{name.upper()}_CODE"]
        assert field["mask"] == macros[f"{name.upper()}_MASK"]
    for edge, values in record["edges"].items():
        e = edge.upper()
        assert values["steps"] == macros[f"{e}_STEPS"]
        assert values["achieved_min_ps"] == macros[f"{e}_ACHIEVED_MIN_PS"]
        assert values["window_min_ps"] == macros[f"WINDOW_{e}_MIN_PS"]
    assert record["pwm"]["top_counts"] == macros["PWM_TOP_COUNTS"]


def test_report_creates_missing_folders_only_with_parents(tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    design.write_text(ONE + _output("shared-8bit-linear", "A", "a.h"))
    before = _snapshot(tmp_path)
    code, _, err = run_cli(["report", str(design), "-o", str(tmp_path / "a" / "b" / "r.html")])
    assert code == 2 and "give --parents" in _one_line(err)
    assert _snapshot(tmp_path) == before
    code, _, err = run_cli(["report", str(design), "-o", str(tmp_path / "a" / "b" / "r.html"),
                            "--parents"])
    assert code == 0, err
    assert (tmp_path / "a" / "b" / "r.html").is_file()
