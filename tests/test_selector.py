"""The generated bin selector against its Python model, on the host and on an 8-bit AVR (issue 22).

Outside checks: the C compiler (gcc on the host; avr-gcc for an 8-bit ATmega run on the simavr
simulator, where int is 16 bits) executes the C function the header carries; its answers must
equal the model in gapforge.outputs.selector for every code of the example's 12-bit converter
and every previous state, and over a milliampere grid that covers every edge and band boundary.
The model is then held to the rules the issue states (never a bin above the measured current;
up only at edge + band; a dither narrower than the band changes the bin at most once).
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from dataclasses import replace
from pathlib import Path

import pytest

from conftest import EXAMPLES, run_cli
from gapforge.outputs import selector
from gapforge.outputs.selector import NEGATIVE, SelectorModel, select_adc, select_ma

STRICT = ["-Wall", "-Wextra", "-Wpedantic", "-Werror", "-Wconversion", "-Wsign-conversion"]
MA_RANGE = range(-20_000, 20_001, 7)  # plus every edge +/- band +/- 1, below


def _tool(name: str) -> str:
    path = shutil.which(name)
    if path is None:
        pytest.skip(f"{name} is not installed")
    return path


@pytest.fixture(scope="module")
def gan(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, SelectorModel]:
    """The GaN example's header and the selector model of its table."""
    out = tmp_path_factory.mktemp("sel")
    code, stdout, err = run_cli(["build", str(EXAMPLES / "adaptive-gan.toml"), "--out", str(out),
                                 "--parents", "--json"])
    assert code == 0, err
    entry = json.loads(stdout)["outputs"][0]
    from gapforge.pipeline.build import plan_design
    from gapforge.pipeline.design import load_design

    plan = plan_design(load_design(EXAMPLES / "adaptive-gan.toml"))
    adaptive = plan.outputs[0].adaptive
    assert adaptive is not None
    return out / entry["file"], selector.model(adaptive)


def _states(m: SelectorModel) -> list[int]:
    n = len(m.edges_ma)
    # every bin of both signs, and one state no call returns (a corrupted variable): bin n
    return [b | s for s in (0, NEGATIVE) for b in range(n)] + [n]


def _currents(m: SelectorModel) -> list[int]:
    extra = {s * (e + d) for e in m.edges_ma for d in (-1, 0, 1, m.band_ma - 1, m.band_ma,
                                                        m.band_ma + 1) for s in (1, -1)}
    extra |= {s * (m.sign_band_ma + d) for d in (-1, 0, 1) for s in (1, -1)}
    return sorted(set(MA_RANGE) | extra)


def _host_program(header: Path, m: SelectorModel) -> str:
    assert m.adc is not None
    states = ", ".join(f"{s}u" for s in _states(m))
    currents = ", ".join(f"{c}L" for c in _currents(m))
    return f"""#include <stdio.h>
#define GAN_AD_DEFINE_SELECTOR
#include "{header}"
static const unsigned int states[] = {{{states}}};
static const long currents[] = {{{currents}}};
int main(void)
{{
    unsigned int i;
    unsigned long c;
    for (i = 0u; i < sizeof(states) / sizeof(states[0]); ++i) {{
        printf("adc %u", states[i]);
        for (c = 0ul; c < 4096ul; ++c) {{
            printf(" %u", gan_ad_adapt_select_adc(c, states[i]));
        }}
        printf("\\nma %u", states[i]);
        for (c = 0ul; c < sizeof(currents) / sizeof(currents[0]); ++c) {{
            printf(" %u", gan_ad_adapt_select_ma(currents[c], states[i]));
        }}
        printf("\\n");
    }}
    return 0;
}}
"""


def test_c_selector_on_the_host_equals_the_model(
    gan: tuple[Path, SelectorModel], tmp_path: Path
) -> None:
    header, m = gan
    assert m.adc is not None and len(m.adc.pos_edges) == 6
    src = tmp_path / "host.c"
    src.write_text(_host_program(header, m))
    exe = tmp_path / "host"
    proc = subprocess.run([_tool("gcc"), "-std=c89", *STRICT, "-O1", str(src), "-o", str(exe)],
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    lines = subprocess.run([str(exe)], capture_output=True, text=True, check=True).stdout.split("\n")
    checked = 0
    currents = _currents(m)
    for line in filter(None, lines):
        kind, prev, *got = line.split()
        previous = int(prev)
        if kind == "adc":
            want = [select_adc(m, code, previous) for code in range(4096)]
        else:
            want = [select_ma(m, c, previous) for c in currents]
        assert [int(g) for g in got] == want, (kind, previous)
        checked += len(want)
    # every one of the 4096 codes for each of the 13 previous states, and the mA grid
    assert checked == 13 * (4096 + len(currents))


def _bin_of_adc(m: SelectorModel, code: int, negative: bool) -> int:
    """The highest bin whose edge the code reaches in that sign (no memory)."""
    a = m.adc
    assert a is not None
    best = 0
    for k in range(1, len(a.pos_edges)):
        if (code <= a.neg_edges[k]) if negative else (code >= a.pos_edges[k]):
            best = k
    return best


def test_model_never_uses_a_bin_above_the_measured_current(
    gan: tuple[Path, SelectorModel]
) -> None:
    """Every bin is judged for a current at or above its edge (issue 22: the longer dead time
    wins while in doubt): the state after any call is at most the memoryless bin of its sign."""
    _, m = gan
    for previous in _states(m):
        for code in range(4096):
            state = select_adc(m, code, previous)
            negative = bool(state & NEGATIVE)
            assert state & 0x7F <= _bin_of_adc(m, code, negative), (previous, code)
        for current in _currents(m):
            state = select_ma(m, current, previous)
            magnitude = -current if state & NEGATIVE else current
            assert m.edges_ma[state & 0x7F] <= max(0, magnitude), (previous, current)


def test_model_moves_up_only_at_edge_plus_band(gan: tuple[Path, SelectorModel]) -> None:
    _, m = gan
    for k in range(1, len(m.edges_ma)):
        below, at = m.edges_ma[k] + m.band_ma - 1, m.edges_ma[k] + m.band_ma
        assert select_ma(m, below, k - 1) == k - 1
        assert select_ma(m, at, k - 1) == k
        # and back down as soon as the current is below the bin's own edge
        assert select_ma(m, m.edges_ma[k], k) == k
        assert select_ma(m, m.edges_ma[k] - 1, k) == k - 1
        assert select_ma(m, -below, (k - 1) | NEGATIVE) == (k - 1) | NEGATIVE
        assert select_ma(m, -at, (k - 1) | NEGATIVE) == k | NEGATIVE


def _changes(m: SelectorModel, sequence: list[int], start: int) -> int:
    state, changes = start, 0
    for current in sequence:
        new = select_ma(m, current, state)
        changes += new != state
        state = new
    return changes


def test_a_dither_narrower_than_the_band_does_not_chatter(
    gan: tuple[Path, SelectorModel]
) -> None:
    """A current dithering around any edge (and around 0 A) by less than the band changes the
    state at most once over 1000 samples; with the band removed the same dither chatters, so the
    test can tell the two apart."""
    _, m = gan
    assert m.band_ma == 107  # 0.1 A current_error + half of 12.5 mA, rounded up
    for k in range(1, len(m.edges_ma)):
        for centre in range(m.edges_ma[k] - m.band_ma + 1, m.edges_ma[k] + m.band_ma, 13):
            low = max(centre - (m.band_ma - 1) // 2, m.edges_ma[k] - m.band_ma + 1)
            high = low + m.band_ma - 1  # the whole span is narrower than the band
            dither = [low if i % 2 else high for i in range(1000)]
            for start in (k - 1, k):
                assert _changes(m, dither, start) <= 1, (k, centre, start)
                neg = [-c for c in dither]
                assert _changes(m, neg, start | NEGATIVE) <= 1, (k, centre, start)
    around_zero = [(-1) ** i * m.sign_band_ma for i in range(1000)]
    assert _changes(m, around_zero, 0) == 0
    bare = replace(m, band_ma=0)
    edge = m.edges_ma[1]
    assert _changes(bare, [edge - 1 if i % 2 else edge for i in range(1000)], 0) > 100


# ---------------------------------------------------------------------------------------------
# on an 8-bit AVR under simavr

AVR_MCU = "atmega2560"

UART = r"""
#include <avr/io.h>
#include <avr/interrupt.h>
#include <avr/sleep.h>
#include <stdio.h>
static int uart_put(char c, FILE *stream)
{
    (void)stream;
    while (!(UCSR0A & (1 << UDRE0))) {
    }
    UDR0 = (uint8_t)c;
    return 0;
}
static FILE uart_out = FDEV_SETUP_STREAM(uart_put, NULL, _FDEV_SETUP_WRITE);
static void uart_init(void)
{
    UCSR0B = (uint8_t)(1 << TXEN0);
    stdout = &uart_out;
}
static void stop(void)
{
    /* simavr ends the run when the core sleeps with interrupts off */
    cli();
    sleep_cpu();
}
"""


def _fletcher(values: list[int]) -> int:
    """Fletcher-16 over a byte sequence (J. G. Fletcher, IEEE Trans. Commun. 1982)."""
    a = b = 0
    for v in values:
        a = (a + v) % 255
        b = (b + a) % 255
    return (b << 8) | a


def _simavr(elf: Path) -> str:
    proc = subprocess.run([_tool("simavr"), "-m", AVR_MCU, "-f", "16000000", str(elf)],
                          capture_output=True, text=True, timeout=300)
    # simavr writes the UART's lines to stderr, coloured: strip the escape sequences
    return re.sub(r"\x1b\[[0-9;]*m", "", proc.stdout + proc.stderr)


def test_selector_on_simavr_equals_the_model(
    gan: tuple[Path, SelectorModel], tmp_path: Path
) -> None:
    header, m = gan
    assert m.adc is not None
    states = _states(m)
    currents = list(range(-20_000, 20_001, 11))
    src = tmp_path / "avr_selector.c"
    src.write_text(
        "#define GAN_AD_DEFINE_SELECTOR\n"
        f'#include "{header}"\n{UART}\n'
        f"static const unsigned int states[] = {{{', '.join(f'{s}u' for s in states)}}};\n"
        "static unsigned int a, b;\n"
        "static void add(unsigned int v) { a = (a + v) % 255u; b = (b + a) % 255u; }\n"
        "int main(void)\n{\n    unsigned int i; unsigned long c; long ma;\n"
        "    uart_init();\n"
        "    for (i = 0u; i < sizeof(states) / sizeof(states[0]); ++i) {\n"
        f"        for (c = 0ul; c < 4096ul; ++c) add(gan_ad_adapt_select_adc(c, states[i]));\n"
        "        for (ma = -20000L; ma <= 20000L; ma += 11L)"
        " add(gan_ad_adapt_select_ma(ma, states[i]));\n"
        "    }\n"
        '    printf("sizeof_int %u\\n", (unsigned int)sizeof(int));\n'
        '    printf("fletcher %u\\n", (b << 8) | a);\n'
        "    stop();\n    return 0;\n}\n"
    )
    elf = tmp_path / "sel.elf"
    proc = subprocess.run([_tool("avr-gcc"), f"-mmcu={AVR_MCU}", "-std=c99", "-Os", *STRICT,
                           "-Wno-sign-conversion", "-Wno-conversion", str(src), "-o", str(elf)],
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    out = _simavr(elf)
    want: list[int] = []
    for s in states:
        want += [select_adc(m, c, s) for c in range(4096)]
        want += [select_ma(m, c, s) for c in currents]
    assert "sizeof_int 2" in out, out  # a real 16-bit-int target
    got = re.search(r"fletcher (\d+)", out)
    assert got is not None, out
    assert int(got.group(1)) == _fletcher(want)


@pytest.mark.parametrize("design", ["adaptive-gan.toml", "gan-buck.toml"])
def test_self_test_passes_on_simavr(design: str, tmp_path: Path) -> None:
    code, stdout, err = run_cli(["build", str(EXAMPLES / design), "--out", str(tmp_path),
                                 "--parents", "--self-test", "--json"])
    assert code == 0, err
    header = tmp_path / json.loads(stdout)["outputs"][0]["file"]
    selftest = header.with_name(f"{header.stem}_selftest.c")
    wrapper = tmp_path / "wrapper.c"
    wrapper.write_text(UART + "int gapforge_selftest_main(void);\nint main(void)\n{\n"
                       "    int rc;\n    uart_init();\n    rc = gapforge_selftest_main();\n"
                       '    printf("exit %d\\n", rc);\n    stop();\n    return 0;\n}\n')
    cc = _tool("avr-gcc")
    objs = []
    for src, extra in ((selftest, ["-Dmain=gapforge_selftest_main"]), (wrapper, [])):
        obj = src.with_suffix(".o")
        proc = subprocess.run([cc, f"-mmcu={AVR_MCU}", "-std=c99", "-Os", "-Wall", "-Wextra",
                               "-Werror", *extra, "-I", str(header.parent), "-c", str(src),
                               "-o", str(obj)], capture_output=True, text=True)
        assert proc.returncode == 0, proc.stderr
        objs.append(str(obj))
    elf = tmp_path / "selftest.elf"
    subprocess.run([cc, f"-mmcu={AVR_MCU}", *objs, "-o", str(elf)], check=True)
    out = _simavr(elf)
    # simavr shows each line's newline as "."
    assert re.search(r"^ok\.?$", out, re.M) and re.search(r"^exit 0\.?$", out, re.M), out
    assert "FAILED" not in out
