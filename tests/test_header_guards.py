"""The header's compile-time guards and conventions, checked by the C compiler (issue 11).

Outside checks: the compiler and preprocessor themselves (gcc, g++, clang when present). The
window guards are held to exact rational arithmetic done here from the macros' own values: N steps
of a clock f with divider D and S sub-steps last N D / (S f) seconds, shortest at the fastest
clock f (1 + tol) and longest at the slowest f (1 - tol) (common practice,
reference-facts.md "Clock tolerance").
"""

from __future__ import annotations

import re
import shutil
import subprocess
from fractions import Fraction
from pathlib import Path

import pytest

from conftest import BUILTINS, EXAMPLES, SMALL_STAGE, run_cli

STRICT = ["-Wall", "-Wextra", "-Wpedantic", "-Werror", "-Wconversion", "-Wsign-conversion",
          "-Wundef"]


def _cc(name: str = "gcc") -> str:
    path = shutil.which(name)
    if path is None:
        pytest.skip(f"{name} is not installed")
    return path


@pytest.fixture(scope="module")
def buck(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("buck")
    code, _, err = run_cli(["build", str(EXAMPLES / "gan-buck.toml"), "--out", str(out),
                            "--parents"])
    assert code == 0, err
    return out / "out" / "buck_dead_time.h"


def _macros(text: str) -> dict[str, int]:
    found = {}
    for m in re.finditer(r"^#define (\w+) +(0x[0-9a-f]+|\d+)u?l{0,2}\b", text, re.M):
        found[m.group(1)] = int(m.group(2), 0)
    return found


def _compile(src: Path, args: list[str], cc: str = "gcc") -> subprocess.CompletedProcess[str]:
    return subprocess.run([_cc(cc), *args, "-c", str(src), "-o", str(src.with_suffix(".o"))],
                          capture_output=True, text=True)


def _including(tmp_path: Path, header: Path, before: str = "", name: str = "use.c") -> Path:
    src = tmp_path / name
    src.write_text(f'{before}#include "{header}"\nint gapforge_unused_marker;\n')
    return src


@pytest.mark.parametrize("std", ["c89", "c99", "c11"])
def test_header_is_clean_under_every_standard_with_strict_warnings(
    buck: Path, tmp_path: Path, std: str
) -> None:
    proc = _compile(_including(tmp_path, buck), [f"-std={std}", *STRICT])
    assert proc.returncode == 0, proc.stderr
    cxx = _compile(_including(tmp_path, buck, name="use.cpp"),
                   ["-x", "c++", "-std=c++98", *STRICT], "g++")
    assert cxx.returncode == 0, cxx.stderr


CAST = "-DBOARD_PWM_CLOCK_HZ=((uint32_t)160000000u)"
CAST_WRONG = "-DBOARD_PWM_CLOCK_HZ=((uint32_t)170000000u)"


@pytest.mark.parametrize("std", ["c89", "c99", "c11"])
def test_clock_check_accepts_a_cast_clock_macro(buck: Path, tmp_path: Path, std: str) -> None:
    # a vendor-style clock macro with a cast cannot be evaluated by #if; the default check works
    src = _including(tmp_path, buck, before="#include <stdint.h>\n")
    right = _compile(src, [f"-std={std}", *STRICT, CAST])
    assert right.returncode == 0, right.stderr
    wrong = _compile(src, [f"-std={std}", *STRICT, CAST_WRONG])
    assert wrong.returncode != 0
    # every standard: the negative-array typedef (an error on every compiler, issue 22) carries
    # the message in its name
    assert "clock_differs_rerun_gapforge_build" in wrong.stderr
    cxx = _compile(_including(tmp_path, buck, before="#include <stdint.h>\n", name="c.cpp"),
                   ["-x", "c++", *STRICT, CAST_WRONG], "g++")
    assert cxx.returncode != 0


def test_preprocessor_clock_check_for_plain_literals(buck: Path, tmp_path: Path) -> None:
    src = _including(tmp_path, buck)
    flags = ["-std=c99", *STRICT, "-DGAPFORGE_CLOCK_CHECK_PREPROCESSOR"]
    assert _compile(src, [*flags, "-DBOARD_PWM_CLOCK_HZ=160000000ul"]).returncode == 0
    wrong = _compile(src, [*flags, "-DBOARD_PWM_CLOCK_HZ=170000000ul"])
    assert wrong.returncode != 0 and "#error" in wrong.stderr


def _edited(header: Path, tmp_path: Path, macro: str, value: int) -> Path:
    text = header.read_text()
    new, n = re.subn(rf"^(#define {macro} +)\d+u?l{{0,2}}", rf"\g<1>{value}u", text, flags=re.M)
    assert n == 1
    out = tmp_path / f"edited_{macro}_{value}.h"
    out.write_text(new)
    return out


def test_window_guard_fires_when_the_steps_macro_is_edited_down_by_one(
    buck: Path, tmp_path: Path
) -> None:
    steps = _macros(buck.read_text())["BUCK_DT_TO_HIGH_STEPS"]
    ok = _compile(_including(tmp_path, buck), ["-std=c99", *STRICT])
    assert ok.returncode == 0, ok.stderr
    edited = _edited(buck, tmp_path, "BUCK_DT_TO_HIGH_STEPS", steps - 1)
    bad = _compile(_including(tmp_path, edited, name="edited.c"), ["-std=c99", *STRICT])
    assert bad.returncode != 0
    assert "to_high: worst-case dead time below the window minimum" in bad.stderr


def _exact_verdict(m: dict[str, int], steps: int, edge: str) -> tuple[bool, bool]:
    """(below the minimum, above the maximum) for `steps`, exactly, from the macros."""
    p = "BUCK_DT"
    seconds = Fraction(steps * m[f"{p}_DIVIDER"], m[f"{p}_SUB_STEPS"] * m[f"{p}_TIMER_CLOCK_HZ"])
    tol = Fraction(m[f"{p}_CLOCK_TOL_PPB"], 10**9)
    low_ps = seconds / (1 + tol) * 10**12
    high_ps = seconds / (1 - tol) * 10**12
    e = edge.upper()
    return (low_ps < m[f"{p}_WINDOW_{e}_MIN_PS"], high_ps > m[f"{p}_WINDOW_{e}_MAX_PS"])


def test_window_guards_agree_with_exact_arithmetic_for_every_nearby_step_count(
    buck: Path, tmp_path: Path
) -> None:
    m = _macros(buck.read_text())
    steps = m["BUCK_DT_TO_LOW_STEPS"]
    seen = set()
    for n in range(steps - 6, steps + 8):
        edited = _edited(buck, tmp_path, "BUCK_DT_TO_LOW_STEPS", n)
        proc = subprocess.run([_cc(), "-std=c99", "-E", str(edited)], capture_output=True,
                              text=True)
        below, above = _exact_verdict(m, n, "to_low")
        assert ("below the window minimum" in proc.stderr) == below, n
        assert ("above the window maximum" in proc.stderr) == above, n
        assert (proc.returncode != 0) == (below or above), n
        seen.add((below, above))
    assert seen == {(True, False), (False, False), (False, True)}  # all three cases met


# ---------------------------------------------------------------------------------------------
# conventions: fields most significant first, and the write example compiles and works


@pytest.fixture(scope="module")
def every_layout(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, list[str]]:
    """One invented design with one output per built-in layout."""
    out = tmp_path_factory.mktemp("layouts")
    outputs = "".join(
        f'[[output]]\ntarget = "{t}"\nprefix = "L{i}"\nfile = "l{i}.h"\n'
        for i, t in enumerate(BUILTINS)
    )
    (out / "d.toml").write_text(
        "# invented test design\nformat = 1\n"
        '[timer]\nclock = "100MHz"\ntolerance = "100ppm"\n[dead_time]\nvalue = "60ns"\n'
        + outputs + SMALL_STAGE
    )
    code, _, err = run_cli(["build", str(out / "d.toml")])
    assert code == 0, err
    return out, [f"L{i}" for i in range(len(BUILTINS))]


def test_fields_are_listed_most_significant_first(every_layout: tuple[Path, list[str]]) -> None:
    out, prefixes = every_layout
    for i, p in enumerate(prefixes):
        text = (out / f"l{i}.h").read_text()
        shifts = [int(s) for s in re.findall(rf"^#define {p}_\w+_SHIFT +(\d+)u", text, re.M)]
        assert shifts == sorted(shifts, reverse=True) and len(shifts) >= 1
        tops = [int(t) for t in re.findall(r"^ \*   bits? (\d+)", text, re.M)]
        assert tops == sorted(tops, reverse=True) and len(tops) == len(shifts)


def test_register_write_example_compiles_and_writes_the_word(
    every_layout: tuple[Path, list[str]], tmp_path: Path
) -> None:
    out, prefixes = every_layout
    for i, p in enumerate(prefixes):
        header = out / f"l{i}.h"
        text = header.read_text()
        start = text.index("Writing the register")
        block = text[start:text.index("DEAD_TIME_REG = word;", start)].splitlines()[1:]
        body = "\n".join(line.removeprefix(" *") for line in block)
        # issue 22: the uint_leastN_t family (exists on every target)
        kind = re.search(r"^\s+(uint_least(\d+)_t) word", body, re.M)
        assert kind is not None
        m = _macros(text)
        bits = int(kind.group(2))
        masks = sum(v for k, v in m.items() if k.endswith("_MASK"))
        src = tmp_path / f"write{i}.c"
        src.write_text(
            "#include <stdint.h>\n#include <stdio.h>\n"
            f'#include "{header}"\n'
            f"static {kind.group(1)} DEAD_TIME_REG;\n"
            f"static void write_word(void) {{\n{body}\n    DEAD_TIME_REG = word;\n}}\n"
            "int main(void) {\n"
            "    DEAD_TIME_REG = 0u; write_word();\n"
            '    printf("%lu\\n", (unsigned long)DEAD_TIME_REG);\n'
            f"    DEAD_TIME_REG = ({kind.group(1)})~0u; write_word();\n"
            '    printf("%lu\\n", (unsigned long)DEAD_TIME_REG);\n'
            "    return 0;\n}\n"
        )
        exe = tmp_path / f"write{i}"
        proc = subprocess.run([_cc(), "-std=c99", *STRICT, str(src), "-o", str(exe)],
                              capture_output=True, text=True)
        assert proc.returncode == 0, proc.stderr
        got = subprocess.run([str(exe)], capture_output=True, text=True, check=True).stdout
        word = m[f"{p}_REGISTER"]
        ones = (1 << bits) - 1
        # from zero: exactly the word; from all ones: the word, other bits left set
        assert [int(x) for x in got.split()] == [word, (ones & ~masks) | word]


def test_no_macro_name_repeats_a_word(every_layout: tuple[Path, list[str]]) -> None:
    out, prefixes = every_layout
    for i in range(len(prefixes)):
        for name in re.findall(r"^#define (\w+)", (out / f"l{i}.h").read_text(), re.M):
            words = name.split("_")
            assert len(words) == len(set(words)), name


def test_readme_firmware_example_compiles_against_the_golden_header(tmp_path: Path) -> None:
    """The README's register-write example is the golden header's own, and compiles with the
    cast clock macro it shows (README "In firmware")."""
    readme = (EXAMPLES.parent / "README.md").read_text(encoding="utf-8")
    section = readme[readme.index("### In firmware"):]
    block = section[section.index("```c\n") + 5:section.index("```", section.index("```c\n") + 5)]
    src = tmp_path / "fw.c"
    src.write_text("#include <stdint.h>\nstatic volatile uint32_t reg;\n#define DEAD_TIME_REG reg\n"
                   + block)
    proc = _compile(src, ["-std=c99", *STRICT, f"-I{EXAMPLES / 'out'}"])
    assert proc.returncode == 0, proc.stderr
    header = (EXAMPLES / "out" / "buck_dead_time.h").read_text()
    for line in block.splitlines():
        if line.strip().startswith("word = "):
            assert line.strip() in header  # the same lines as the header comment


def test_comment_text_takes_printable_ascii_whole_and_escapes_the_rest() -> None:
    # issue 22 took printable ASCII (0x20..0x7e) whole instead of character by character; the
    # result must equal the character-by-character escape for every string, and stay inert in
    # a C comment (C11 6.4.9: a comment ends only at */; 5.2.1.1 trigraphs; 5.1.1.2 splicing).
    import random

    from gapforge.outputs.c_text import _visible, comment

    rng = random.Random(22)
    pools = [range(0x20, 0x7F), range(0, 0x80), range(0x80, 0x11000)]
    for _ in range(20_000):
        text = "".join(chr(rng.choice(rng.choice(pools))) for _ in range(rng.randrange(0, 8)))
        text += rng.choice(["", "*/", "/*", "??/", "\\"])
        slow = "".join(_visible(ch) for ch in text)
        while "*/" in slow or "/*" in slow or "??" in slow:
            slow = slow.replace("*/", "*\\/").replace("/*", "/\\*").replace("??", "?\\?")
        if slow.endswith("\\"):
            slow += " "
        got = comment(text)
        assert got == slow
        assert "*/" not in got and "/*" not in got and "??" not in got
        assert not got.endswith("\\") and all(0x20 <= ord(c) < 0x7F for c in got)
