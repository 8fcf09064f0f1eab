"""The generated C capture-line formatter, compiled by the host C compiler (an outside reference
program) in strict C99, run, and its output fed through the Python stream reader: a round trip."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest
from click.testing import CliRunner

from gapforge.bench.measure import measure_capture
from gapforge.bench.serial_stream import LineDecoder
from gapforge.cli import cli
from gapforge.outputs.firmware import render_capture_helper

CC = shutil.which("gcc") or shutil.which("cc")
FLAGS = ["-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Werror", "-Wconversion"]

# An invented bench program: a 16-bit capture counter at 50 MHz, gaps of 11 and 13 counts, the
# counter wrapping every few periods, a keep-alive line per period, and checks of the error path.
MAIN_C = r"""
#include <stdio.h>
#include <string.h>
#include "gapforge_capture_fmt.h"

static char line[GFCAP_BUFFER_SIZE];

static void put(size_t n) { if (n == 0u) { fputs("FORMAT FAILED\n", stdout); } else { fputs(line, stdout); } }

int main(void)
{
    uint32_t t = 60000u;
    uint8_t seq = 0u;
    unsigned k;
    char tiny[4];
    if (gfcap_format_edge(tiny, sizeof tiny, 'H', 1u, 1u, 0u) != 0u) { return 2; }
    if (gfcap_format_edge(line, sizeof line, 'Q', 1u, 1u, 0u) != 0u) { return 3; }
    if (gfcap_format_edge(line, sizeof line, 'H', 2u, 1u, 0u) != 0u) { return 4; }
    if (gfcap_format_header(line, sizeof line, 0u) != 0u) { return 5; }
    put(gfcap_format_header(line, sizeof line, 50000000u));
    if (strlen(line) > GFCAP_HEADER_MAX_LEN) { return 6; }
    put(gfcap_format_edge(line, sizeof line, GFCAP_SIDE_LOW, 1u, (gfcap_counter_t)(t - 100u), seq++));
    for (k = 0u; k < 25u; k++) {
        put(gfcap_format_edge(line, sizeof line, GFCAP_SIDE_LOW, 0u, (gfcap_counter_t)t, seq++));
        put(gfcap_format_edge(line, sizeof line, GFCAP_SIDE_HIGH, 1u, (gfcap_counter_t)(t + 11u), seq++));
        put(gfcap_format_edge(line, sizeof line, GFCAP_SIDE_HIGH, 0u, (gfcap_counter_t)(t + 5011u), seq++));
        if (strlen(line) != GFCAP_EDGE_LINE_LEN) { return 7; }
        put(gfcap_format_edge(line, sizeof line, GFCAP_SIDE_LOW, 1u, (gfcap_counter_t)(t + 5024u), seq++));
        put(gfcap_format_keepalive(line, sizeof line, (gfcap_counter_t)(t + 30000u), seq++));
        t += 50000u;
    }
    return 0;
}
"""


def test_render_is_deterministic_and_logic_free() -> None:
    a = render_capture_helper(32)
    assert a == render_capture_helper(32)
    assert set(a) == {"gapforge_capture_fmt.h", "gapforge_capture_fmt.c"}
    assert "#define GFCAP_COUNTER_DIGITS 8u" in a["gapforge_capture_fmt.h"]
    assert "typedef uint16_t gfcap_counter_t;" in render_capture_helper(16)["gapforge_capture_fmt.h"]
    assert "CAUTION" in a["gapforge_capture_fmt.h"]
    for name in ("capture_fmt.h.j2", "capture_fmt.c.j2"):
        text = (Path(__file__).parents[1] / "gen/gapforge/outputs/templates" / name).read_text()
        assert "{%" not in text  # layout only: Python computes everything


@pytest.mark.skipif(CC is None, reason="no C compiler on this machine")
@pytest.mark.parametrize("std", ["-std=c99", "-std=c11"])
def test_c_helper_round_trip(tmp_path: Path, std: str) -> None:
    assert CC is not None
    for name, text in render_capture_helper(16).items():
        (tmp_path / name).write_text(text)
    (tmp_path / "main.c").write_text(MAIN_C)
    exe = tmp_path / "bench"
    flags = [std, *FLAGS[1:]]
    build = subprocess.run([CC, *flags, "-o", str(exe), "main.c", "gapforge_capture_fmt.c"],
                           cwd=tmp_path, capture_output=True, text=True, check=False)
    assert build.returncode == 0, build.stderr
    run = subprocess.run([str(exe)], capture_output=True, check=False, timeout=20)
    assert run.returncode == 0, run.stdout
    assert b"FAILED" not in run.stdout
    dec = LineDecoder()
    dec.feed(run.stdout)
    dec.finish()
    assert dec.status.garbage == 0 and dec.status.lost_lines == 0 and dec.status.partial == 0
    assert dec.status.clock_hz == 50_000_000 and dec.status.counter_bits == 16
    cap = dec.capture("c-helper")
    assert cap is not None
    m = measure_capture(cap)
    assert m.to_high.gaps_ticks.tolist() == [11] * 25
    assert m.to_low.gaps_ticks.tolist() == [13] * 25
    assert m.to_high.min_s == pytest.approx(11 / 50e6)
    # 24 periods of 50000 counts between the first and last high turn-on, across 16-bit wraps
    assert int(cap.high_times[-2]) - int(cap.high_times[0]) == 24 * 50_000


def test_firmware_command_writes_files(tmp_path: Path) -> None:
    result = CliRunner().invoke(cli, ["firmware", "--out", str(tmp_path / "fw"),
                                      "--counter-bits", "16"])
    assert result.exit_code == 0, result.output
    assert (tmp_path / "fw/gapforge_capture_fmt.h").read_text() == render_capture_helper(16)[
        "gapforge_capture_fmt.h"]
    # issue 10: the short caution once, last; the full text stays in the generated files
    assert result.output.splitlines()[-1].startswith("Caution:")
    assert result.output.count("reduced voltage") == 1


# --- issue 14 (7): text reaching a C comment or string is escaped or refused -------------------

@pytest.mark.parametrize("hostile", ["ends */ int injected;", "line\nbreak", "nul\x00",
                                     "tab\there", "opens /* a comment", "caf\u00e9"])
def test_hostile_comment_text_is_refused(monkeypatch: pytest.MonkeyPatch, hostile: str) -> None:
    from gapforge.base import caution
    from gapforge.base.errors import GapforgeError
    from gapforge.outputs import firmware

    monkeypatch.setattr(caution, "LINES", (*caution.LINES, hostile))
    with pytest.raises(GapforgeError, match=r"generated C|comment delimiter"):
        firmware.render_capture_helper(32)
    monkeypatch.setattr(caution, "LINES", caution.LINES[:-1])
    monkeypatch.setattr(firmware, "__version__", hostile)
    with pytest.raises(GapforgeError):
        firmware.render_capture_helper(32)


def test_string_text_is_escaped() -> None:
    from gapforge.base.errors import GapforgeError
    from gapforge.outputs.firmware import _string

    assert _string('a "quoted" \\ path??=\n', "x") == 'a \\"quoted\\" \\\\ path\\?\\?=\\n'
    with pytest.raises(GapforgeError):
        _string("two\nlines\n", "x")


def test_generated_c_has_balanced_comments_and_only_its_declarations() -> None:
    import re

    for bits in (16, 32, 64):
        files = render_capture_helper(bits)
        for text in files.values():
            assert text.count("/*") == text.count("*/")
            assert all(" " <= ch <= "~" or ch == "\n" for ch in text)
        header = files["gapforge_capture_fmt.h"]
        declared = re.findall(r"^(?:size_t (\w+)\(|typedef \w+ (\w+);)", header, flags=re.M)
        declared = ["".join(names) for names in declared]
        assert sorted(declared) == ["gfcap_counter_t", "gfcap_format_edge", "gfcap_format_header",
                                    "gfcap_format_keepalive"]


def test_protocol_2_lines_carry_the_check() -> None:
    # the C helper's header line for 50 MHz, checked by the Python reader's CRC
    from gapforge.bench.serial_protocol import Header, checked, parse_line

    line = checked("#GFCAP 2 clock_hz=50000000 counter_bits=16")
    assert parse_line(line.encode()) == Header(2, 50_000_000, 16)
    assert "#define GFCAP_PROTOCOL       2u" in render_capture_helper(16)["gapforge_capture_fmt.h"]


# An invented running stream (issue 20): the firmware sends its header at start-up and again
# whenever gfcap_header_due says so; a reader joins at an arbitrary byte.
STREAM_C = r"""
#include <stdio.h>
#include "gapforge_capture_fmt.h"

static char line[GFCAP_BUFFER_SIZE];
static uint16_t since = 0u;
static uint8_t seq = 0u;

static void header(void) { fputs(gfcap_format_header(line, sizeof line, 50000000u) ? line : "FAILED\n", stdout); }
static void sent(size_t n) {
    fputs(n ? line : "FAILED\n", stdout);
    if (gfcap_header_due(&since)) { header(); }
}

int main(void)
{
    uint32_t t = 1000u;
    unsigned k;
    header();
    for (k = 0u; k < 400u; k++) {
        sent(gfcap_format_edge(line, sizeof line, GFCAP_SIDE_LOW, 0u, (gfcap_counter_t)t, seq++));
        sent(gfcap_format_edge(line, sizeof line, GFCAP_SIDE_HIGH, 1u, (gfcap_counter_t)(t + 11u), seq++));
        sent(gfcap_format_edge(line, sizeof line, GFCAP_SIDE_HIGH, 0u, (gfcap_counter_t)(t + 5011u), seq++));
        sent(gfcap_format_edge(line, sizeof line, GFCAP_SIDE_LOW, 1u, (gfcap_counter_t)(t + 5024u), seq++));
        sent(gfcap_format_keepalive(line, sizeof line, (gfcap_counter_t)(t + 30000u), seq++));
        t += 50000u;
    }
    return 0;
}
"""


@pytest.mark.skipif(CC is None, reason="no C compiler on this machine")
def test_joining_a_running_stream_at_any_byte(tmp_path: Path) -> None:
    import random

    from gapforge.bench.serial_protocol import HEADER_EVERY

    assert CC is not None
    for name, text in render_capture_helper(16).items():
        (tmp_path / name).write_text(text)
    (tmp_path / "main.c").write_text(STREAM_C)
    exe = tmp_path / "stream"
    build = subprocess.run([CC, *FLAGS, "-o", str(exe), "main.c", "gapforge_capture_fmt.c"],
                           cwd=tmp_path, capture_output=True, text=True, check=False)
    assert build.returncode == 0, build.stderr
    data = subprocess.run([str(exe)], capture_output=True, check=True, timeout=20).stdout
    assert b"FAILED" not in data
    headers = data.count(b"#GFCAP")
    assert headers == 1 + (400 * 5) // HEADER_EVERY  # start-up, then every HEADER_EVERY lines
    rng = random.Random(20)  # seeded: arbitrary bytes, the same every run
    last_header = data.rfind(b"#GFCAP")
    for start in [0, 1, 7, *(rng.randrange(0, last_header) for _ in range(12))]:
        dec = LineDecoder()
        for k in range(start, len(data), 61):  # arrives in pieces, as from a port
            dec.feed(data[k : k + 61])
        dec.finish()
        cap = dec.capture("joined")
        assert cap is not None, start
        assert dec.status.garbage == 0 and dec.status.lost_lines == 0, start
        m = measure_capture(cap)
        # every hand-over after the header is measured exactly (the outside reference: the
        # gaps the C program wrote, 11 and 13 counts)
        assert set(m.to_high.gaps_ticks.tolist()) == {11}, start
        assert set(m.to_low.gaps_ticks.tolist()) <= {13}, start
        assert m.missing_edge_count == 0 and m.verdict == "ok", start
        if start > 0:
            assert any("joined a running stream" in w for w in cap.warnings), start
