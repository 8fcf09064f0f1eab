"""Generated C headers compile cleanly and mean what gapforge says they mean.

The outside check here is the C compiler itself: it, not gapforge, turns the emitted macros back
into a dead time (STEPS x DIVIDER x 10^12 / (SUB_STEPS x TIMER_CLOCK_HZ) picoseconds in 64-bit
unsigned arithmetic, ISO C99 7.18 uint64_t) and re-packs the register word from the field
CODE/SHIFT/MASK macros; the test compares what the compiled program prints with gapforge's JSON.

Compilers: the host gcc (required), clang and the 32-bit MCU cross compiler arm-none-eabi-gcc
(-march=armv6-m -mthumb, compile only) when present; they skip cleanly otherwise.
"""

from __future__ import annotations

import json
import math
import re
import shutil
import subprocess
from fractions import Fraction
from pathlib import Path
from typing import Any

import pytest

from conftest import BUILTINS, EXAMPLES, run_cli

# -Wconversion passes too, so it is part of the set
WARNINGS = ["-Wall", "-Wextra", "-Wpedantic", "-Werror", "-Wconversion"]
DESIGNS = ("gan-buck", "motor-inverter")


def _compiler(name: str) -> str:
    path = shutil.which(name)
    if path is None:
        pytest.skip(f"{name} is not installed")
    return path


@pytest.fixture(scope="module")
def built(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, list[dict[str, Any]]]:
    """Both examples built into a temporary directory: (directory, JSON output entries)."""
    out = tmp_path_factory.mktemp("headers")
    entries: list[dict[str, Any]] = []
    for design in DESIGNS:
        code, stdout, stderr = run_cli(
            ["build", str(EXAMPLES / f"{design}.toml"), "--out", str(out), "--json"]
        )
        assert code == 0, stderr
        doc = json.loads(stdout)
        entries.extend(doc["outputs"])
    assert len(entries) == 3
    for entry in entries:
        assert (out / entry["file"]).is_file()
    return out, entries


def _layout_fields(entry: dict[str, Any]) -> list[str]:
    from gapforge.layouts import load_layout

    return [f.name for f in load_layout(entry["target"]).fields]


def _check_program(header: Path, entry: dict[str, Any]) -> str:
    """A C99 program that recomputes the dead times and re-packs the register from the macros."""
    p = entry["prefix"]
    lines = [
        "#include <stdio.h>",
        "#include <stdint.h>",
        f'#include "{header}"',
        f'#include "{header}"  /* twice: the include guard must hold */',
        "",
        "static uint64_t dead_ps(uint64_t steps) {",
        f"    return steps * (uint64_t){p}_DIVIDER * 1000000000000ull",
        f"        / ((uint64_t){p}_SUB_STEPS * (uint64_t){p}_TIMER_CLOCK_HZ);",
        "}",
        "",
        "int main(void) {",
        "    uint64_t word = 0u;",
    ]
    for name in _layout_fields(entry):
        n = f"{p}_{name.upper()}"
        lines += [
            f"    word |= ((uint64_t){n}_CODE << {n}_SHIFT) & (uint64_t){n}_MASK;",
            f'    printf("field {name} %lu\\n", (unsigned long){n}_CODE);',
        ]
    lines += [
        f'    printf("register %lu\\n", (unsigned long){p}_REGISTER);',
        f'    printf("repacked %d\\n", word == (uint64_t){p}_REGISTER ? 1 : 0);',
    ]
    for edge in ("TO_HIGH", "TO_LOW"):
        e = edge.lower()
        lines += [
            f'    printf("{e} steps %lu\\n", (unsigned long){p}_{edge}_STEPS);',
            f'    printf("{e} ps %llu\\n", (unsigned long long)dead_ps({p}_{edge}_STEPS));',
            f'    printf("{e} macro_ps %llu\\n", (unsigned long long){p}_{edge}_ACHIEVED_PS);',
        ]
    lines += ["    return 0;", "}", ""]
    return "\n".join(lines)


def _parse(stdout: str) -> dict[str, int]:
    values: dict[str, int] = {}
    for line in stdout.splitlines():
        *key, value = line.split()
        values[" ".join(key)] = int(value)
    return values


def _compare(values: dict[str, int], entry: dict[str, Any]) -> None:
    for name, code in entry["fields"].items():
        assert values[f"field {name}"] == code
    assert values["register"] == entry["register"]
    assert values["repacked"] == 1
    for edge in ("to_high", "to_low"):
        e = entry["edges"][edge]
        assert values[f"{edge} steps"] == e["steps"]
        exact_ps = e["achieved_s"] * 1e12  # a float: close to, not exactly, the true value
        # the compiler's integer result is the true value rounded down
        assert values[f"{edge} ps"] == math.floor(exact_ps + 1e-6)
        assert values[f"{edge} ps"] <= exact_ps + 1e-6 < values[f"{edge} ps"] + 1
        # and the header's own ACHIEVED_PS macro says the same
        assert values[f"{edge} macro_ps"] == values[f"{edge} ps"]


@pytest.mark.parametrize("cc", ["gcc", "clang"])
@pytest.mark.parametrize("std", ["c99", "c11"])
def test_headers_compile_and_recompute(
    built: tuple[Path, list[dict[str, Any]]], cc: str, std: str, tmp_path: Path
) -> None:
    compiler = _compiler(cc)
    out, entries = built
    for entry in entries:
        header = out / entry["file"]
        src = tmp_path / f"check_{entry['prefix']}.c"
        exe = tmp_path / f"check_{entry['prefix']}"
        src.write_text(_check_program(header, entry))
        proc = subprocess.run([compiler, f"-std={std}", *WARNINGS, str(src), "-o", str(exe)],
                              capture_output=True, text=True)
        assert proc.returncode == 0, proc.stderr
        run = subprocess.run([str(exe)], capture_output=True, text=True, check=True)
        _compare(_parse(run.stdout), entry)


def test_all_headers_of_a_design_compile_together(
    built: tuple[Path, list[dict[str, Any]]], tmp_path: Path
) -> None:
    compiler = _compiler("gcc")
    out, entries = built
    src = tmp_path / "together.c"
    src.write_text("".join(f'#include "{out / e["file"]}"\n' for e in entries)
                   + "int main(void) { return 0; }\n")
    proc = subprocess.run([compiler, "-std=c99", *WARNINGS, "-c", str(src), "-o",
                           str(tmp_path / "together.o")], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr


def test_headers_compile_for_a_32_bit_mcu(
    built: tuple[Path, list[dict[str, Any]]], tmp_path: Path
) -> None:
    """On a 32-bit target (long is 32 bits) the literals must not overflow; the cross compiler
    also evaluates the picosecond formula and the register re-pack at compile time."""
    compiler = _compiler("arm-none-eabi-gcc")
    out, entries = built
    for entry in entries:
        p = entry["prefix"]
        checks = []
        for edge in ("TO_HIGH", "TO_LOW"):
            ps = math.floor(entry["edges"][edge.lower()]["achieved_s"] * 1e12 + 1e-6)
            checks.append(
                f"typedef char {p}_{edge}_ps_ok[((uint64_t){p}_{edge}_STEPS * {p}_DIVIDER"
                f" * 1000000000000ull / ((uint64_t){p}_SUB_STEPS * {p}_TIMER_CLOCK_HZ)"
                f" == {ps}ull) ? 1 : -1];"
            )
        checks.append(f"typedef char {p}_reg_ok[({p}_REGISTER == {entry['register']}ul) ? 1 : -1];")
        src = tmp_path / f"mcu_{p}.c"
        src.write_text(
            "#include <stdint.h>\n"
            f'#include "{out / entry["file"]}"\n'
            + "\n".join(checks) + "\n"
            f"uint32_t {p.lower()}_word(void) {{ return (uint32_t){p}_REGISTER; }}\n"
        )
        for std in ("c99", "c11"):
            proc = subprocess.run(
                [compiler, "-march=armv6-m", "-mthumb", f"-std={std}", *WARNINGS,
                 "-Wno-unused-local-typedefs", "-c", str(src), "-o", str(tmp_path / "m.o")],
                capture_output=True, text=True,
            )
            assert proc.returncode == 0, proc.stderr


def _compile_with(header: Path, defines: list[str], tmp_path: Path) -> subprocess.CompletedProcess[str]:
    compiler = _compiler("gcc")
    src = tmp_path / "guard.c"
    src.write_text(f'#include "{header}"\nint main(void) {{ return 0; }}\n')
    return subprocess.run([compiler, "-std=c99", *WARNINGS, *defines, "-c", str(src), "-o",
                           str(tmp_path / "guard.o")], capture_output=True, text=True)


def test_firmware_clock_macro_mismatch_is_an_error(
    built: tuple[Path, list[dict[str, Any]]], tmp_path: Path
) -> None:
    out, entries = built
    buck = next(e for e in entries if e["prefix"] == "BUCK_DT")
    header = out / buck["file"]
    # the firmware's own clock macro (clock_macro = "APP_TIMER_CLOCK_HZ" in gan-buck.toml)
    wrong = _compile_with(header, ["-DAPP_TIMER_CLOCK_HZ=170000000ul"], tmp_path)
    assert wrong.returncode != 0
    assert "APP_TIMER_CLOCK_HZ differs from the timer clock" in wrong.stderr
    assert "#error" in wrong.stderr
    right = _compile_with(header, ["-DAPP_TIMER_CLOCK_HZ=160000000ul"], tmp_path)
    assert right.returncode == 0, right.stderr
    absent = _compile_with(header, [], tmp_path)
    assert absent.returncode == 0, absent.stderr


def test_format_version_guard(built: tuple[Path, list[dict[str, Any]]], tmp_path: Path) -> None:
    out, entries = built
    for entry in entries:
        header = out / entry["file"]
        bad = _compile_with(header, ["-DGAPFORGE_FORMAT_REQUIRED=2"], tmp_path)
        assert bad.returncode != 0
        assert "has gapforge header format 1: regenerate it" in bad.stderr
        good = _compile_with(header, ["-DGAPFORGE_FORMAT_REQUIRED=1"], tmp_path)
        assert good.returncode == 0, good.stderr


def test_struct_flavour_compiles_and_holds_the_same_values(
    built: tuple[Path, list[dict[str, Any]]], tmp_path: Path
) -> None:
    compiler = _compiler("gcc")
    out, entries = built
    buck = next(e for e in entries if e["prefix"] == "BUCK_DT")
    header = out / buck["file"]
    assert "static const struct buck_dt_dead_time buck_dt_dead_time_config" in header.read_text()
    src = tmp_path / "struct.c"
    src.write_text(
        "#include <stdio.h>\n"
        f'#include "{header}"\n'
        "int main(void) {\n"
        '    printf("%lu %u %lu %lu %llu %llu\\n",\n'
        "        (unsigned long)buck_dt_dead_time_config.register_word,\n"
        "        (unsigned)buck_dt_dead_time_config.divider_code,\n"
        "        (unsigned long)buck_dt_dead_time_config.to_high_steps,\n"
        "        (unsigned long)buck_dt_dead_time_config.to_low_steps,\n"
        "        (unsigned long long)buck_dt_dead_time_config.to_high_achieved_ps,\n"
        "        (unsigned long long)buck_dt_dead_time_config.to_low_achieved_ps);\n"
        "    return 0;\n}\n"
    )
    for cc in ("gcc", "clang"):
        path = shutil.which(cc) if cc != "gcc" else compiler
        if path is None:
            continue
        for std in ("c99", "c11"):
            exe = tmp_path / f"struct_{cc}_{std}"
            proc = subprocess.run([path, f"-std={std}", *WARNINGS, str(src), "-o", str(exe)],
                                  capture_output=True, text=True)
            assert proc.returncode == 0, proc.stderr
            got = subprocess.run([str(exe)], capture_output=True, text=True, check=True).stdout
            e = buck["edges"]
            ps = [math.floor(e[x]["achieved_s"] * 1e12 + 1e-6) for x in ("to_high", "to_low")]
            assert got.split() == [str(v) for v in (
                buck["register"], buck["divider_code"], e["to_high"]["steps"],
                e["to_low"]["steps"], *ps)]


def test_field_names_cannot_collide_with_fixed_macros(tmp_path: Path) -> None:
    compiler = _compiler("gcc")
    (tmp_path / "collide.toml").write_text(
        "# invented test layout\nformat = 1\nsummary = \"invented\"\nregister_bits = 16\n"
        '[[field]]\nname = "divider"\nrole = "both"\noffset = 0\nwidth = 8\n'
    )
    (tmp_path / "d.toml").write_text(
        'format = 1\n[timer]\nclock = "100MHz"\n[dead_time]\nvalue = "50ns"\n'
        '[[output]]\ntarget = "collide.toml"\nprefix = "DT"\nfile = "dt.h"\n'
    )
    code, _, err = run_cli(["build", str(tmp_path / "d.toml")])
    if code == 2:  # refused at load time with one line: also a fix
        assert len(err.strip().splitlines()) == 1 and "field[0].name" in err
        return
    assert code == 0
    src = tmp_path / "c.c"
    src.write_text(f'#include "{tmp_path / "dt.h"}"\nint main(void) {{ return 0; }}\n')
    proc = subprocess.run([compiler, "-std=c99", *WARNINGS, "-c", str(src), "-o",
                           str(tmp_path / "c.o")], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr


CORNERS = {
    # (timer clock, PWM frequency, dead time as a share of the layout's nominal maximum)
    "slow-clock-long-gap": ("1MHz", "1Hz", Fraction(9, 10)),
    "fast-clock-short-gap": ("500MHz", "10Hz", None),  # None: 0.5 ns
}


@pytest.mark.parametrize("corner", sorted(CORNERS))
@pytest.mark.parametrize("target", BUILTINS)
def test_every_layout_at_extreme_clocks_compiles_and_recomputes(
    target: str, corner: str, tmp_path: Path
) -> None:
    """Large counts (16-bit layout at 1 MHz: tens of milliseconds, > 2^32 ps) and tiny ones
    must keep their literal suffixes right on the host and on a 32-bit MCU."""
    from gapforge.layouts import load_layout

    compiler = _compiler("gcc")
    clock, pwm, share = CORNERS[corner]
    layout = load_layout(target)
    if share is None:
        dead = "0.5ns"
    else:
        top = layout.edge_field("to_high").table[0][-1] * max(layout.dividers)
        max_s = Fraction(top, layout.sub_steps) / Fraction(10**6)  # at 1 MHz
        dead = f"{math.floor(max_s * share * 10**9)}ns"
    (tmp_path / "d.toml").write_text(
        "# invented corner-case design\nformat = 1\n"
        f'[timer]\nclock = "{clock}"\ntolerance = "1%"\n'
        f'[pwm]\nfrequency = "{pwm}"\ncounting = "edge"\n'
        f'[dead_time]\nvalue = "{dead}"\n'
        f'[[output]]\ntarget = "{target}"\nprefix = "CORNER"\nfile = "corner.h"\nstruct = true\n'
    )
    code, stdout, stderr = run_cli(["build", str(tmp_path / "d.toml"), "--json"])
    assert code == 0, stdout + stderr
    entry = json.loads(stdout)["outputs"][0]
    header = tmp_path / "corner.h"
    if target == "shared-16bit-plus-one" and share is not None:
        # about 0.9 x 65536 counts at 1 MHz = 59 ms = 5.9e10 ps: needs an unsigned long long
        assert entry["edges"]["to_high"]["achieved_s"] * 1e12 > 2**32
        assert re.search(r"CORNER_TO_HIGH_ACHIEVED_PS +\d{11}ull ", header.read_text())
    src = tmp_path / "check.c"
    src.write_text(_check_program(header, entry))
    exe = tmp_path / "check"
    proc = subprocess.run([compiler, "-std=c99", *WARNINGS, str(src), "-o", str(exe)],
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    run = subprocess.run([str(exe)], capture_output=True, text=True, check=True)
    _compare(_parse(run.stdout), entry)
    cross = shutil.which("arm-none-eabi-gcc")
    if cross is not None:
        mcu = tmp_path / "mcu.c"
        mcu.write_text(f'#include "{header}"\nunsigned long word(void) '
                       "{ return (unsigned long)CORNER_REGISTER"
                       " + (unsigned long)corner_dead_time_config.to_high_steps; }\n")
        proc = subprocess.run([cross, "-march=armv6-m", "-mthumb", "-std=c99", *WARNINGS, "-c",
                               str(mcu), "-o", str(tmp_path / "mcu.o")],
                              capture_output=True, text=True)
        assert proc.returncode == 0, proc.stderr


def test_prefixes_differing_in_case_get_distinct_include_guards(tmp_path: Path) -> None:
    compiler = _compiler("gcc")
    (tmp_path / "d.toml").write_text(
        "# invented test design\n"
        'format = 1\n[timer]\nclock = "100MHz"\n[dead_time]\nvalue = "50ns"\n'
        '[[output]]\ntarget = "shared-8bit-linear"\nprefix = "dt"\nfile = "lower.h"\n'
        '[[output]]\ntarget = "split-10bit-div4"\nprefix = "DT"\nfile = "upper.h"\n'
    )
    code, _, err = run_cli(["build", str(tmp_path / "d.toml")])
    if code == 2:  # refused as a clash at load time: also a fix
        assert len(err.strip().splitlines()) == 1 and "prefix" in err
        return
    assert code == 0, err
    src = tmp_path / "both.c"
    src.write_text(f'#include "{tmp_path / "lower.h"}"\n#include "{tmp_path / "upper.h"}"\n'
                   "unsigned long both(void) { return (unsigned long)dt_REGISTER"
                   " + (unsigned long)DT_REGISTER; }\n")
    proc = subprocess.run([compiler, "-std=c99", *WARNINGS, "-c", str(src), "-o",
                           str(tmp_path / "both.o")], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
