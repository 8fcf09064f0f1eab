"""Malformed inputs (design files, layout files, command arguments): exit 2, exactly one line on
stderr naming what and where, no traceback, and no file touched. Limit violations exit 1 and write
nothing either; `build --check` lists stale headers and exits 1.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

from conftest import EXAMPLES, SMALL_STAGE, run_cli, run_subprocess

BASE = """# invented test design
format = 1
[timer]
clock = "160MHz"
tolerance = "50ppm"
[pwm]
frequency = "500kHz"
counting = "center"
[dead_time]
value = "25ns"
source = "explicit"
[[output]]
target = "split-10bit-tenths"
prefix = "DT"
file = "dt.h"
"""

SENTINEL = "/* an existing header that a failing build must leave alone */\n"

BUILTIN_LIST = (
    "shared-16bit-plus-one, shared-8bit-linear, shared-8bit-segmented, split-10bit-div1-8, "
    "split-10bit-tenths, split-6bit-div2-reserved"
)

BAD_LAYOUT = (
    '# invented test layout\nformat = 1\nsummary = "s"\nregister_bits = 16\n'
    '[clock]\ndividers = [1, 2]\ndivider_field = "div"\n'
    '[[field]]\nname = "gap"\nrole = "both"\noffset = 0\nwidth = 8\n'
    '[[field]]\nname = "div"\nrole = "divider"\noffset = 7\nwidth = 1\n'
)

# case -> (design text or bytes, expected stderr line after "gapforge: error: <file>: ")
DESIGNS: dict[str, tuple[str | bytes, str]] = {
    "clock-unit": (BASE.replace('"160MHz"', '"160MHzz"'),
                   "timer.clock: unknown unit 'MHzz' in '160MHzz' (expected an SI prefix and Hz)"),
    "clock-zero": (BASE.replace('"160MHz"', '"0Hz"'),
                   "timer.clock: '0Hz' must be greater than zero"),
    "clock-negative": (BASE.replace('"160MHz"', '"-160MHz"'),
                       "timer.clock: '-160MHz' must not be negative"),
    "clock-nan": (BASE.replace('"160MHz"', "nan"), "timer.clock: nan is not a finite number"),
    "clock-inf": (BASE.replace('"160MHz"', "inf"), "timer.clock: inf is not a finite number"),
    "clock-bool": (BASE.replace('"160MHz"', "true"),
                   "timer.clock: expected a quantity in Hz, got True"),
    "clock-missing": (BASE.replace('clock = "160MHz"\n', ""), "timer.clock: required key is missing"),
    "tolerance-too-big": (BASE.replace('"50ppm"', '"150%"'),
                          "timer.tolerance: tolerance '150%' must be below 100 %"),
    "tolerance-unit": (BASE.replace('"50ppm"', '"50ppx"'),
                       "timer.tolerance: unknown unit 'ppx' in '50ppx' (expected an SI prefix "
                       "and no unit)"),
    "counting": (BASE.replace('"center"', '"centre"'),
                 "pwm.counting: 'centre' is not one of edge, center; did you mean 'center'?"),
    "pwm-unit": (BASE.replace('"500kHz"', '"500kHs"'),
                 "pwm.frequency: unknown unit 'kHs' in '500kHs' (expected an SI prefix and Hz)"),
    "dead-time-missing": (BASE.replace('value = "25ns"\n', ""),
                          "dead_time: give value (or to_high and to_low), or a [reference] or "
                          "[stage] section to derive it"),
    "dead-time-all-three": (BASE.replace('value = "25ns"', 'value = "25ns"\nto_high = "1ns"\n'
                                         'to_low = "2ns"'),
                            "dead_time.value: give value, or to_high and to_low, not all three"),
    "rounding": (BASE.replace('value = "25ns"', 'value = "25ns"\nrounding = "down"'),
                 "dead_time.rounding: 'down' is not one of safe, nearest"),
    # issue 23: the missing "tolerance" is the same mistake as the misspelt key that names it:
    # said once (it was "(and 1 more problem)")
    "unknown-timer-key": (BASE.replace("tolerance =", "tolerence ="),
                          "timer.tolerence: unknown key; did you mean 'tolerance'? (expected one "
                          "of: clock, clock_macro, tolerance)"),
    "unknown-output-key": (BASE.replace('prefix = "DT"', 'prefix = "DT"\nstrukt = true'),
                           "output[0].strukt: unknown key; did you mean 'struct'? (expected one "
                           "of: file, prefix, struct, target)"),
    "format": (BASE.replace("format = 1", "format = 3"),
               "format: design format 3 is not supported (expected 1)"),
    "no-output": (BASE.split("[[output]]")[0], "output: required key is missing"),
    "unknown-target": (BASE.replace('"split-10bit-tenths"', '"split-10bit-tenth"'),
                       "output[0].target: no built-in layout named 'split-10bit-tenth'; "
                       "did you mean 'split-10bit-tenths'? (built-ins: " + BUILTIN_LIST
                       + "; or give a path to a .toml layout file)"),
    "prefix": (BASE.replace('"DT"', '"1DT"'),
               "output[0].prefix: '1DT' is not a C identifier prefix"),
    "file-absolute": (BASE.replace('"dt.h"', '"/tmp/dt.h"'),
                      "output[0].file: '/tmp/dt.h' must be a relative path ending in .h"),
    "file-parent": (BASE.replace('"dt.h"', '"../dt.h"'),
                    "output[0].file: '../dt.h' must be a relative path ending in .h"),
    "file-not-header": (BASE.replace('"dt.h"', '"dt.c"'),
                        "output[0].file: 'dt.c' must be a relative path ending in .h"),
    "struct-not-bool": (BASE.replace('file = "dt.h"', 'file = "dt.h"\nstruct = "yes"'),
                        "output[0].struct: expected true or false, got 'yes'"),
    "clock-macro": (BASE.replace('tolerance = "50ppm"', 'tolerance = "50ppm"\n'
                                 'clock_macro = "APP CLOCK"'),
                    "timer.clock_macro: 'APP CLOCK' is not a C identifier"),
    "duplicate-prefix": (BASE + '[[output]]\ntarget = "split-10bit-div1-8"\nprefix = "DT"\n'
                         'file = "dt2.h"\n', "output[1].prefix: prefix 'DT' is used twice (include guards ignore case)"),
    "duplicate-file": (BASE + '[[output]]\ntarget = "split-10bit-div1-8"\nprefix = "DT2"\n'
                       'file = "dt.h"\n', "output[1].file: file 'dt.h' is written twice"),
    "toml-syntax": (BASE + "[[output]\n",
                    "TOML syntax error: Expected ']]' at the end of an array declaration "
                    "(at line 16, column 9)"),
    "not-utf8": (b"format = 1\n# \xff\xfe\n", "not UTF-8 text (byte 13)"),
    # issue 9, section 3: a bare number meant something else; issue 14: hostile files
    "dead-time-bare": (BASE.replace('"25ns"', '"400"'),
                       "dead_time.value: 400 what? did you mean 400ns? (a bare number is refused "
                       "here)"),
    "dead-time-bare-toml-number": (BASE.replace('"25ns"', "25"),
                                   "dead_time.value: 25 what? did you mean 25ns? (a bare number "
                                   "is refused here)"),
    "tolerance-bare": (BASE.replace('"50ppm"', '"2"'),
                       "timer.tolerance: 2 what? did you mean 2%? (a tolerance needs %, ppm or "
                       "ppb)"),
    "clock-milli-hertz-mixed-case": (BASE.replace('"160MHz"', '"160mHZ"'),
                                     "timer.clock: '160mHZ': 'm' means milli; write M for mega "
                                     "(e.g. 160MHz)"),
    "dead-time-siemens": (BASE.replace('"25ns"', '"1.2uS"'),
                          "dead_time.value: '1.2uS': S is siemens; seconds are a lower-case s "
                          "(e.g. 1.2us)"),
    "nested-arrays": (BASE + "x = " + "[" * 600 + "]" * 600 + "\n",
                      "TOML nesting too deep to read"),
    "integer-too-long": (BASE.replace('"160MHz"', "1" * 5000),
                         "a number in it has too many digits to read"),
    "clock-400-digits": (BASE.replace('"160MHz"', "1" * 400),
                         "timer.clock: 1111111111111111111111111111111111111... (400 characters) "
                         "is out of range (at most 1e30)"),
    "clock-long-text": (BASE.replace('"160MHz"', '"' + "9" * 20000 + '"'),
                        "timer.clock: '" + "9" * 36 + "... (20000 "
                        "characters) is too long for a quantity (at most 64 characters)"),
    "too-big": (BASE + "# " + "x" * 40_000 + "\n",
                f"is {len(BASE) + 40_003} bytes, above the 32 KiB cap for a TOML file"),
    "target-name-300": (BASE.replace('"split-10bit-tenths"', '"' + "a" * 300 + '"'),
                        "output[0].target: no built-in layout named '" + "a" * 36 + "... "
                        "(300 characters) (names are at most 64 characters; or give "
                        "a path to a .toml layout file)"),
    "layout-device": (BASE.replace('"split-10bit-tenths"', '"/dev/zero"'),
                      "output[0].target: /dev/zero: is not a regular file (a device, FIFO or "
                      "socket?)"),
    "layout-fifo": (BASE.replace('"split-10bit-tenths"', '"fifo.toml"'),
                    "output[0].target: {dir}/fifo.toml: is not a regular file (a device, FIFO "
                    "or socket?)"),
    "layout-file-missing": (BASE.replace('"split-10bit-tenths"', '"nosuch.toml"'),
                            "output[0].target: {dir}/nosuch.toml: file not found"),
    "layout-file-bad": (BASE.replace('"split-10bit-tenths"', '"bad-layout.toml"'),
                        "output[0].target: {dir}/bad-layout.toml: field[1]: field 'div' "
                        "overlaps field 'gap'"),
}


def _snapshot(directory: Path) -> dict[str, tuple[bytes, int]]:
    return {
        str(p.relative_to(directory)): (p.read_bytes(), p.stat().st_mtime_ns)
        for p in sorted(directory.rglob("*")) if p.is_file()
    }


def _one_line(err: str) -> str:
    assert "Traceback" not in err
    lines = err.splitlines()
    assert len(lines) == 1, err
    return lines[0]


@pytest.mark.parametrize("case", sorted(DESIGNS))
def test_bad_design_file(case: str, tmp_path: Path) -> None:
    text, message = DESIGNS[case]
    design = tmp_path / "d.toml"
    if isinstance(text, bytes):
        design.write_bytes(text)
    else:
        design.write_text(text, encoding="utf-8")
    (tmp_path / "bad-layout.toml").write_text(BAD_LAYOUT)
    os.mkfifo(tmp_path / "fifo.toml")  # reading it would hang: it must be refused unopened
    (tmp_path / "dt.h").write_text(SENTINEL)
    (tmp_path / "dt2.h").write_text(SENTINEL)
    before = _snapshot(tmp_path)
    for extra in ([], ["--check"], ["--json"]):
        code, _, err = run_cli(["build", str(design), *extra])
        assert code == 2
        line = _one_line(err)
        assert line == f"gapforge: error: {design}: " + message.format(dir=tmp_path)
    assert _snapshot(tmp_path) == before


LAYOUT_ARGS = ["fit", "--clock", "100MHz", "--clock-tol", "0ppm", "--dead-time", "50ns", "--target"]


@pytest.mark.parametrize(
    ("layout", "message"),
    [
        (BAD_LAYOUT, "field[1]: field 'div' overlaps field 'gap'"),
        (BAD_LAYOUT.replace("offset = 7", "offset = 12").replace("width = 8", "width = 8\nofset = 1"),
         "field[0].ofset: unknown key; did you mean 'offset'? (expected one of: add, description, "
         "encoding, max_code, min_code, name, offset, reserved, role, segment, select_bits, width)"),
        (BAD_LAYOUT.replace("offset = 7", "offset = 15").replace("width = 1", "width = 2"),
         "field[1]: bits 15..16 do not fit a 16-bit register"),
        (BAD_LAYOUT.replace("dividers = [1, 2]", "dividers = [1, 2, 4]").replace(
            "offset = 7", "offset = 8"),
         "clock.dividers: 3 dividers do not fit the 1-bit field 'div'"),
    ],
)
@pytest.mark.parametrize("command", ["fit", "targets-show"])
def test_bad_layout_file_on_the_command_line(
    layout: str, message: str, command: str, tmp_path: Path
) -> None:
    path = tmp_path / "layout.toml"
    path.write_text(layout)
    args = [*LAYOUT_ARGS, str(path)] if command == "fit" else ["targets", "show", str(path)]
    code, out, err = run_cli(args)
    assert code == 2
    assert _one_line(err) == f"gapforge: error: {path}: {message}"
    assert out == ""


@pytest.mark.parametrize(
    ("args", "line"),
    [
        (["fit", "--clock", "160MHz", "--clock-tol", "0ppm", "--dead-time", "25ns", "--target", "shared-8bit-linaer"],
         "gapforge: error: --target: no built-in layout named 'shared-8bit-linaer'; did you mean "
         f"'shared-8bit-linear'? (built-ins: {BUILTIN_LIST}; or give a path to a .toml layout "
         "file)"),
        (["fit", "--clock", "160MHz", "--clock-tol", "0ppm", "--target", "shared-8bit-linear"],
         "gapforge: error: fit: give --dead-time, or both --to-high and --to-low"),
        (["fit", "--clock", "160MHz", "--clock-tol", "0ppm", "--to-high", "25ns", "--target", "shared-8bit-linear"],
         "gapforge: error: fit: give --dead-time, or both --to-high and --to-low"),
        (["targets", "show", "nosuch"],
         "gapforge: error: TARGET: no built-in layout named 'nosuch' (built-ins: "
         f"{BUILTIN_LIST}; or give a path to a .toml layout file)"),
        (["targets", "show", "missing.toml"], "gapforge: error: missing.toml: file not found"),
        (["build", "missing-design.toml"], "gapforge: error: missing-design.toml: file not found"),
    ],
)
def test_bad_arguments_reported_by_gapforge(args: list[str], line: str, tmp_path: Path) -> None:
    code, out, err = run_cli(args, cwd=tmp_path)
    assert code == 2
    assert _one_line(err) == line
    assert out == ""
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize(
    ("args", "option"),
    [
        (["fit", "--clock", "160MHzz", "--clock-tol", "0ppm", "--dead-time", "25ns", "--target", "shared-8bit-linear"],
         "'--clock'"),
        (["fit", "--clock", "nan", "--clock-tol", "0ppm", "--dead-time", "25ns", "--target", "shared-8bit-linear"],
         "'--clock'"),
        (["fit", "--clock", "160MHz", "--clock-tol", "0ppm", "--dead-time", "-5ns", "--target", "shared-8bit-linear"],
         "'--dead-time'"),
        (["fit", "--clock", "160MHz", "--clock-tol", "0ppm", "--clock-tol", "200%", "--dead-time", "25ns",
          "--target", "shared-8bit-linear"], "'--clock-tol'"),
        (["fit", "--clock", "160MHz", "--clock-tol", "0ppm", "--dead-time", "25ns", "--target", "shared-8bit-linear",
          "--rounding", "up"], "'--rounding'"),
        (["fit", "--dead-time", "25ns", "--target", "shared-8bit-linear"], "'--clock'"),
        (["fit", "--clock", "160MHz", "--clock-tol", "0ppm", "--dead-time", "25ns", "--target", "shared-8bit-linear",
          "--colour"], "--colour"),
        (["fit", "--clock", "160MHz", "--clock-tol", "0ppm", "--dead-time", "25ns", "--target", "shared-8bit-linear",
          "--divider-code", "one"], "'--divider-code'"),
        (["targets", "show", "shared-8bit-linear", "--clock", "fast"], "'--clock'"),
        (["build"], "'DESIGN'"),
        (["frobnicate"], "frobnicate"),
    ],
)
def test_bad_option_values_are_one_line(args: list[str], option: str, tmp_path: Path) -> None:
    code, out, err = run_cli(args, cwd=tmp_path)
    assert code == 2
    line = _one_line(err)
    assert line.startswith("gapforge: error: ")
    assert option in line  # names the option or argument
    assert out == ""
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize(
    ("kind", "args", "where"),
    [
        ("option", ["fit", "--clock", "160MHz", "--clock-tol", "0ppm", "--dead-time", "25ns", "--target",
                    "shared-8bit-linear", "--divider-code", "3"], "--divider-code"),
        ("option", ["fit", "--clock", "160MHz", "--clock-tol", "0ppm", "--dead-time", "25ns", "--target",
                    "shared-8bit-linear", "--pwm", "200MHz"], "--pwm"),
        ("design", ["build", "d.toml"], "d.toml: pwm.frequency"),
    ],
)
def test_late_errors_name_the_option_or_file(
    kind: str, args: list[str], where: str, tmp_path: Path
) -> None:
    if kind == "design":
        # 160 MHz / 200 MHz = 0.8 counts per period: bad input found only when fitting
        (tmp_path / "d.toml").write_text(BASE.replace('"500kHz"', '"200MHz"'))
    code, _, err = run_cli(args, cwd=tmp_path)
    assert code == 2
    line = _one_line(err)
    assert line.startswith(f"gapforge: error: {where}: ")


def test_console_entry_point_error_in_a_fresh_process(tmp_path: Path) -> None:
    code, out, err = run_subprocess(["build", "nothing-here.toml"], cwd=tmp_path)
    assert code == 2 and out == ""
    assert err == "gapforge: error: nothing-here.toml: file not found\n"


# ---------------------------------------------------------------------------------------------
# limit violations: exit 1 and nothing written


def test_unreachable_second_output_leaves_every_file_untouched(tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    # 3 us at 160 MHz: split-10bit-div1-8 reaches it (1023 x 8 / 160 MHz = 51 us), but
    # shared-8bit-linear tops out at 255 / 160 MHz = 1.59 us
    design.write_text(
        BASE.replace('value = "25ns"', 'value = "3us"').replace(
            '"split-10bit-tenths"', '"split-10bit-div1-8"').replace('"500kHz"', '"20kHz"')
        + '[[output]]\ntarget = "shared-8bit-linear"\nprefix = "DT2"\nfile = "dt2.h"\n'
    )
    (tmp_path / "dt.h").write_text(SENTINEL)
    (tmp_path / "dt2.h").write_text(SENTINEL)
    before = _snapshot(tmp_path)
    code, out, err = run_cli(["build", str(design)])
    assert code == 1
    assert "nothing written" in err and "Traceback" not in err
    assert "unreachable" in out
    assert _snapshot(tmp_path) == before
    code, out, _ = run_cli(["build", str(design), "--json"])
    assert code == 1 and '"reason": "unreachable"' in out
    assert _snapshot(tmp_path) == before


def test_check_lists_stale_and_missing_headers(tmp_path: Path) -> None:
    shutil.copy(EXAMPLES / "motor-inverter.toml", tmp_path / "m.toml")
    code, _, err = run_cli(["build", str(tmp_path / "m.toml"), "--parents"])
    assert code == 0, err
    code, out, err = run_cli(["build", str(tmp_path / "m.toml"), "--check"])
    assert code == 0 and err == ""
    stale = tmp_path / "out" / "motor_dead_time.h"
    stale.write_text(stale.read_text() + "/* edited by hand */\n")
    missing = tmp_path / "out" / "motor_dead_time_alt.h"
    missing.unlink()
    before = _snapshot(tmp_path)
    code, out, err = run_cli(["build", str(tmp_path / "m.toml"), "--check"])
    assert code == 1
    # the answer first, then only the list (issue 11), each kind named
    lines = out.splitlines()
    assert lines[0] == "check fail: 1 missing, 1 stale, 0 unchanged"
    assert lines[1:3] == [f"missing: {missing}", f"stale: {stale}"]
    assert _snapshot(tmp_path) == before  # --check writes nothing


def test_write_failure_is_one_line_and_leaves_no_temporary_files(tmp_path: Path) -> None:
    # a file sits where the output directory should be (works as root too, unlike chmod)
    shutil.copy(EXAMPLES / "gan-buck.toml", tmp_path / "g.toml")
    (tmp_path / "out").write_text("a file where the output directory should be\n")
    before = _snapshot(tmp_path)
    code, _, err = run_cli(["build", str(tmp_path / "g.toml")])
    assert code == 2
    line = _one_line(err)
    assert line.startswith(f"gapforge: error: {tmp_path / 'out'}: cannot create directory")
    assert _snapshot(tmp_path) == before



TWO_OUTPUTS = """# invented test design
format = 1
[timer]
clock = "100MHz"
tolerance = "0ppm"
[dead_time]
value = "50ns"
[[output]]
target = "shared-8bit-linear"
prefix = "A"
file = "a.h"
[[output]]
target = "split-10bit-div1-8"
prefix = "B"
file = "b.h"
""" + SMALL_STAGE


def test_output_path_that_is_a_directory_is_bad_input_and_writes_nothing(tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    design.write_text(TWO_OUTPUTS)
    (tmp_path / "a.h").write_text(SENTINEL)
    (tmp_path / "b.h").mkdir()  # in the way of the second output
    before = _snapshot(tmp_path)
    code, _, err = run_subprocess(["build", str(design)], cwd=tmp_path)
    assert "Traceback" not in err
    assert code == 2
    assert _one_line(err).startswith("gapforge: error: ")
    assert _snapshot(tmp_path) == before


def test_write_files_is_all_or_nothing_when_a_directory_cannot_be_made(tmp_path: Path) -> None:
    from gapforge.base.errors import GapforgeError
    from gapforge.base.files import write_files

    (tmp_path / "a.h").write_text(SENTINEL)
    (tmp_path / "blocked").write_text("a file, not a directory\n")
    before = _snapshot(tmp_path)
    with pytest.raises(GapforgeError) as info:
        write_files({tmp_path / "a.h": "new\n", tmp_path / "blocked" / "b.h": "new\n"})
    assert info.value.where == str(tmp_path / "blocked")
    assert _snapshot(tmp_path) == before  # a.h untouched, no temporary files left


def test_write_files_writes_utf8_with_newlines(tmp_path: Path) -> None:
    from gapforge.base.files import write_files

    target = tmp_path / "sub" / "x.h"
    assert write_files({target: "/* \u00b5s */\n"}) == [target]
    assert target.read_bytes() == "/* \u00b5s */\n".encode()
    assert [p.name for p in target.parent.iterdir()] == ["x.h"]


def test_written_headers_respect_the_umask(tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    design.write_text(TWO_OUTPUTS)
    code, _, err = run_cli(["build", str(design)])
    assert code == 0, err
    umask = os.umask(0)
    os.umask(umask)
    for name in ("a.h", "b.h"):
        assert (tmp_path / name).stat().st_mode & 0o777 == 0o666 & ~umask
