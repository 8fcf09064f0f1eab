"""What sdcc actually put in the image: every example header's values read back from the linked
Intel HEX file of two 8-bit ports (issue 22 follow-up).

For every example header (built with --self-test --record), a small C file of our own includes
the header and places the values that matter into one const object of known layout, the probe:
a byte-order marker, its own size, every integer macro the record describes (as unsigned long),
and a pointer to each of the header's own const objects (every `p_adapt_*` array, every member
of the struct form) with its element size. sdcc compiles AND links it for mcs51 and stm8 in
every standard the header claims, warnings as errors, to an Intel HEX image.

Outside checks: the compiler and linker themselves (sdcc); the image is read with a strict
Intel HEX reader (tests/intel_hex.py, Intel Hexadecimal Object File Format Specification rev A);
the probe is found by its address in the linker's map (.map), the header's objects by the
linker records of sdcc's debug output (.cdb, `L:` lines, written with --debug), and their sizes
by the cdb's symbol records (`S:` lines, `({size}...`). The byte order is read from the bytes of
a known value in the probe, not assumed. Every value read back is compared with the record
(--record, exact integers) and, where a textbook formula gives it, recomputed: the register word
as the sum of code << offset over its fields, the dead time as steps x divider / (sub-steps x
clock) (rounded down; over the clock tolerance, min down and max up), the PWM period as N or 2N
(common practice). Element sizes must hold the bits their uint_leastN_t names (ISO C99
7.18.1.2: "width of at least N").
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from fractions import Fraction
from pathlib import Path
from typing import Any

import pytest

from conftest import EXAMPLES, SMALL_STAGE, run_cli
from intel_hex import read_bytes, read_intel_hex

PORTS = ("mcs51", "stm8")
STANDARDS = ("c89", "c95", "c99", "c11")
ORDER_MARK = 0x0A0B0C0D  # four different bytes: their order in the image is the port's order
END_MARK = 0xA5
PS = 10**12
PPB = 10**9


def _sdcc() -> str:
    path = shutil.which("sdcc")
    if path is None:
        pytest.skip("sdcc is not installed")
    return path


# ---------------------------------------------------------------------------------------------
# the example headers and their records


# Two invented designs beside the examples. The first: the struct form with edges that differ (every example
# with the struct form has equal edges, so a swapped member would pass unseen) and a divider
# code other than 0 (to_low needs divider 2 on the 10-bit field), edge-aligned.
ASYMMETRIC = (
    "# invented test design\nformat = 1\n"
    '[timer]\nclock = "160MHz"\ntolerance = "50ppm"\n'
    '[pwm]\nfrequency = "100kHz"\ncounting = "edge"\n'
    '[dead_time]\nsource = "explicit"\nto_high = "30ns"\nto_low = "900ns"\n'
    '[[output]]\ntarget = "split-10bit-tenths"\nprefix = "ASYM"\nfile = "asym_struct.h"\n'
    "struct = true\n" + SMALL_STAGE
)
# The second: a 50 ms dead time at 1 MHz, beyond 2^32 ps: the header claims C99 and holds its
# picoseconds in 64 bits (ull literals, uint_least64_t struct members), read back in 64 bits.
LONG_C99 = (
    "# invented test design\nformat = 1\n"
    '[timer]\nclock = "1MHz"\ntolerance = "1%"\n'
    '[pwm]\nfrequency = "1Hz"\ncounting = "edge"\n'
    '[dead_time]\nsource = "explicit"\nvalue = "50ms"\n'
    '[[output]]\ntarget = "shared-16bit-plus-one"\nprefix = "LONG"\nfile = "long_c99.h"\n'
    "struct = true\n" + SMALL_STAGE
)


@pytest.fixture(scope="module")
def built(tmp_path_factory: pytest.TempPathFactory) -> dict[str, tuple[Path, dict[str, Any]]]:
    """Header stem -> (header, record) for every output of every example design and the
    two invented ones."""
    out = tmp_path_factory.mktemp("sdccbytes")
    found: dict[str, tuple[Path, dict[str, Any]]] = {}
    (out / "asymmetric.toml").write_text(ASYMMETRIC)
    (out / "long.toml").write_text(LONG_C99)
    for design in [*sorted(EXAMPLES.glob("*.toml")), out / "asymmetric.toml", out / "long.toml"]:
        code, stdout, stderr = run_cli(["build", str(design), "--out", str(out), "--parents",
                                        "--self-test", "--record", "--json"])
        assert code == 0, (design.name, stdout[-2000:], stderr)
        for entry in json.loads(stdout)["outputs"]:
            header = out / entry["file"]
            record = json.loads(header.with_suffix(".json").read_text())
            assert record["prefix"] == entry["prefix"]
            found[header.stem] = (header, record)
    return found


# Every example output; a new one must be added here (the test below says so).
HEADERS = ("adaptive_gan", "adaptive_silicon", "buck_dead_time", "motor_dead_time",
           "motor_dead_time_alt", "sic_dead_time", "asym_struct",
           "long_c99")


def test_every_example_header_is_read_back(
    built: dict[str, tuple[Path, dict[str, Any]]]
) -> None:
    assert sorted(built) == sorted(HEADERS)
    _, record = built["asym_struct"]
    assert record["register"]["divider_code"] != 0
    assert record["edges"]["to_high"]["steps"] != record["edges"]["to_low"]["steps"]
    _, record = built["long_c99"]
    assert record["edges"]["to_high"]["achieved_ps"] >= 1 << 32
    assert [h for h in HEADERS if not _claims_c90(built[h][0])] == sorted(C99_ONLY)


def _claims_c90(header: Path) -> bool:
    line = next(x for x in header.read_text().splitlines() if x.startswith(" * Language:"))
    if "ISO C90 (C89) and later" in line:
        return True
    assert "ISO C99 and later" in line, line
    return False


# ---------------------------------------------------------------------------------------------
# what the probe holds, from the record


def _values(record: dict[str, Any]) -> dict[str, int]:
    """Macro name -> the value the record says it has."""
    p = record["prefix"]
    clock = Fraction(record["timer"]["clock_hz_exact"])
    assert clock.denominator == 1, "the header's clock macro is an integer"
    reg = record["register"]
    v: dict[str, int] = {
        "FORMAT_VERSION": 1,  # DEVELOPERS.md, "Emitted macros": header format (1)
        "TIMER_CLOCK_HZ": int(clock),
        "CLOCK_TOL_PPB": record["timer"]["tolerance_ppb"],
        "SUB_STEPS": reg["sub_steps"],
        "DIVIDER_CODE": reg["divider_code"],
        "DIVIDER": reg["divider"],
        "REGISTER": reg["word"],
    }
    for name, field in record["fields"].items():
        v[f"{name.upper()}_CODE"] = field["code"]
        v[f"{name.upper()}_SHIFT"] = field["offset"]
        v[f"{name.upper()}_MASK"] = field["mask"]
    for edge, e in record["edges"].items():
        E = edge.upper()
        for key in ("steps", "requested_ps", "achieved_ps", "achieved_min_ps", "achieved_max_ps"):
            v[f"{E}_{key.upper()}"] = e[key]
        for key in ("min", "max"):
            if e[f"window_{key}_ps"] is not None:
                v[f"WINDOW_{E}_{key.upper()}_PS"] = e[f"window_{key}_ps"]
    pwm = record["pwm"]
    v["PWM_COUNTING_CENTER"] = 1 if pwm["counting"] == "center" else 0
    for key in ("period_counts", "top_counts", "compare_counts"):
        v[f"PWM_{key.upper()}"] = pwm[key]
    for key in ("duty_min_counts", "duty_max_counts"):
        v[key.upper()] = pwm[key]
    driver = record["gate_driver"]
    if driver is not None:
        v["DRIVER_DUTY_MIN_COUNTS"] = driver["duty_min_counts"]
        v["DRIVER_DUTY_MAX_COUNTS"] = driver["duty_max_counts"]
        for key in ("bootstrap_compare_max", "bootstrap_every_periods"):
            if driver[key] is not None:
                v[key.upper()] = driver[key]
    adaptive = record["adaptive"]
    if adaptive is not None:
        bins = adaptive["bins"]
        signs = ("positive", "negative")
        v["ADAPT_BINS"] = len(bins)
        v["ADAPT_POLICY_BELOW_SWING_HARD"] = 1 if adaptive["policy_below_swing"] == "hard" else 0
        for edge in ("to_high", "to_low"):
            v[f"ADAPT_{edge.upper()}_CODE_MAX"] = max(b[s][f"{edge}_code"] for b in bins
                                                      for s in signs)
        v["ADAPT_REGISTER_MAX"] = max(b[s]["register"] for b in bins for s in signs)
        # DEVELOPERS.md, "Emitted macros": the selector state's negative flag (0x80) and bin
        v["ADAPT_STATE_NEGATIVE"] = 0x80
        v["ADAPT_STATE_BIN_MASK"] = 0x7F
        for key in ("adc_zero_code", "compensation_band_ma", "hysteresis_ma", "sign_band_ma",
                    "hysteresis_adc_codes", "sign_band_adc_codes"):
            if adaptive[key] is not None:
                v[f"ADAPT_{key.upper()}"] = adaptive[key]
    return {f"{p}_{name}": value for name, value in v.items()}


def _objects(record: dict[str, Any], header_text: str) -> list[tuple[str, str, list[int]]]:
    """The header's own const objects: (symbol, C expression of the first element, values)."""
    low = record["prefix"].lower()
    out: list[tuple[str, str, list[int]]] = []
    adaptive = record["adaptive"]
    if adaptive is not None:
        bins = adaptive["bins"]
        tables: dict[str, list[int]] = {"edge_ma": [b["edge_ma"] for b in bins]}
        for short, sign in (("pos", "positive"), ("neg", "negative")):
            for key in ("to_high_code", "to_low_code", "register", "to_high_min_ps",
                        "to_low_min_ps"):
                tables[f"{short}_{key}"] = [b[sign][key] for b in bins]
            if adaptive["adc_zero_code"] is not None:
                tables[f"{short}_edge_adc"] = [b[sign]["edge_adc"] for b in bins]
            if adaptive["compensation_band_ma"] is not None:
                tables[f"compensation_{short}_counts"] = [b[sign]["compensation_counts"]
                                                          for b in bins]
        for name, values in tables.items():
            out.append((f"{low}_adapt_{name}", f"{low}_adapt_{name}[0]", values))
    config = f"{low}_dead_time_config"
    if config in header_text:
        reg, edges = record["register"], record["edges"]
        members = {
            "register_word": reg["word"],
            "divider_code": reg["divider_code"],
            "to_high_steps": edges["to_high"]["steps"],
            "to_low_steps": edges["to_low"]["steps"],
            "to_high_achieved_ps": edges["to_high"]["achieved_ps"],
            "to_low_achieved_ps": edges["to_low"]["achieved_ps"],
        }
        for member, value in members.items():
            out.append((config, f"{config}.{member}", [value]))
    return out


def _declared_types(header_text: str, record: dict[str, Any]) -> dict[str, str]:
    """C expression of the first element -> the uint_leastN_t type the header declares."""
    low = record["prefix"].lower()
    types = {f"{name}[0]": kind for kind, name in
             re.findall(r"static const (uint_least\d+_t) (\w+)\[\] =", header_text)}
    struct = re.search(rf"struct {low}_dead_time \{{(.*?)\}};", header_text, re.S)
    if struct:
        for kind, member in re.findall(r"(uint_least\d+_t) (\w+);", struct.group(1)):
            types[f"{low}_dead_time_config.{member}"] = kind
    return types


def _probe_source(header: Path, values: dict[str, int],
                  objects: list[tuple[str, str, list[int]]], value_type: str) -> str:
    lines = [
        "/* gapforge test probe (issue 22 follow-up): the header's values in one const object */",
        f'#include "{header}"',
        "struct gapforge_probe {",
        "    unsigned long order;",
        "    unsigned char value_size;",
        "    unsigned char pointer_size;",
        "    unsigned int probe_size;",
        f"    {value_type} values[{len(values)}];",
    ]
    if objects:
        lines += [f"    const void *objects[{len(objects)}];",
                  f"    unsigned char sizes[{len(objects)}];"]
    lines += [
        "    unsigned char end;",
        "};",
        "const struct gapforge_probe gapforge_probe = {",
        f"    0x{ORDER_MARK:08X}ul, (unsigned char)sizeof({value_type}),"
        " (unsigned char)sizeof(const void *), (unsigned int)sizeof(struct gapforge_probe),",
        "    {" + ", ".join(values) + "},",
    ]
    if objects:
        lines.append("    {" + ", ".join(f"&{expr}" for _, expr, _ in objects) + "},")
        lines.append("    {" + ", ".join(f"(unsigned char)sizeof({expr})"
                                         for _, expr, _ in objects) + "},")
    lines += [f"    0x{END_MARK:02X}u", "};", "int main(void)", "{",
              "    return gapforge_probe.end == 0u;", "}", ""]
    return "\n".join(lines)


# ---------------------------------------------------------------------------------------------
# sdcc's own output files


def _map_address(map_text: str, symbol: str) -> int:
    """The address sdcc's linker gives a global symbol in its .map."""
    hits = re.findall(rf"^\s*(?:[A-Z]:)?\s*([0-9A-F]{{8}})\s+{re.escape(symbol)}\s",
                      map_text, re.M)
    assert len(hits) == 1, (symbol, hits)
    return int(hits[0], 16)


def _cdb_symbols(cdb_text: str) -> dict[str, tuple[int, int]]:
    """Name -> (address, size) of every global and file-static object in sdcc's .cdb."""
    addresses: dict[str, int] = {}
    for m in re.finditer(r"^L:([GF]\w*)\$(\w+)\$0_0\$0:([0-9A-F]+)$", cdb_text, re.M):
        addresses[m[2]] = int(m[3], 16)
    sizes = {m[2]: int(m[3]) for m in
             re.finditer(r"^S:([GF]\w*)\$(\w+)\$0_0\$0\(\{(\d+)\}", cdb_text, re.M)}
    return {name: (address, sizes[name]) for name, address in addresses.items()
            if name in sizes}


def _unsigned(raw: bytes, little: bool) -> int:
    return int.from_bytes(raw, "little" if little else "big")


def _link(tmp: Path, port: str, std: str, source: str) -> tuple[dict[int, int], str, str]:
    src = tmp / "probe.c"
    src.write_text(source)
    proc = subprocess.run([_sdcc(), f"-m{port}", f"--std-{std}", "--debug", "probe.c",
                           "-o", "probe.ihx"], capture_output=True, text=True, cwd=tmp)
    output = proc.stdout + proc.stderr
    # warnings as errors: --Werror is not in every sdcc, so any "warning" line fails
    assert proc.returncode == 0 and "warning" not in output.lower(), (port, std, output)
    memory = read_intel_hex((tmp / "probe.ihx").read_text())
    return memory, (tmp / "probe.map").read_text(), (tmp / "probe.cdb").read_text()


# ---------------------------------------------------------------------------------------------
# the read back


C99_ONLY = {"long_c99"}  # the header claims C99 and later (the test above checks it)


def _configurations() -> list[tuple[str, str, str]]:
    """Every header x port x standard the header claims (the C89 #error of a C99 header is
    test_small_targets')."""
    return [(h, port, std) for h in HEADERS for port in PORTS for std in STANDARDS
            if h not in C99_ONLY or std not in ("c89", "c95")]


@pytest.mark.parametrize(("stem", "port", "std"), _configurations())
def test_sdcc_image_holds_the_header_values(
    built: dict[str, tuple[Path, dict[str, Any]]], stem: str, port: str, std: str,
    tmp_path: Path,
) -> None:
    _sdcc()
    header, record = built[stem]
    assert _claims_c90(header) == (stem not in C99_ONLY), stem
    text = header.read_text()
    values = _values(record)
    objects = _objects(record, text)
    # 64-bit values only where the header claims C99 (C90 has no long long)
    value_type = "unsigned long" if _claims_c90(header) else "unsigned long long"
    memory, map_text, cdb_text = _link(tmp_path, port, std,
                                       _probe_source(header, values, objects, value_type))
    probe = _map_address(map_text, "_gapforge_probe")
    symbols = _cdb_symbols(cdb_text)
    assert symbols["gapforge_probe"][0] == probe  # the map and the debug records agree

    # the byte order, from the bytes of a known value
    mark = read_bytes(memory, probe, 4)
    assert mark in (ORDER_MARK.to_bytes(4, "little"), ORDER_MARK.to_bytes(4, "big")), mark.hex()
    little = mark == ORDER_MARK.to_bytes(4, "little")
    # from memory (sdcc manual): mcs51 stores multi-byte ints little-endian, stm8 big-endian;
    # the marker above decided, this only says the two ports differ as expected
    assert little == (port == "mcs51"), (port, mark.hex())
    value_size, pointer_size = read_bytes(memory, probe + 4, 2)
    # ISO C90 5.2.4.2.1: unsigned long holds at least 32 bits (C99: long long at least 64);
    # a wider type would only hold the same values
    assert value_size * 8 >= (32 if value_type == "unsigned long" else 64), value_size
    size = _unsigned(read_bytes(memory, probe + 6, 2), little)
    n, m = len(values), len(objects)
    expected_size = 8 + value_size * n + (pointer_size + 1) * m + 1
    assert size == expected_size == symbols["gapforge_probe"][1], (size, expected_size)
    assert read_bytes(memory, probe + size - 1, 1)[0] == END_MARK

    # every macro value
    at = probe + 8
    got: dict[str, int] = {}
    for name in values:
        got[name] = _unsigned(read_bytes(memory, at, value_size), little)
        at += value_size
    assert got == values, {k: (got[k], values[k]) for k in values if got[k] != values[k]}
    _recompute(record, {k[len(record["prefix"]) + 1:]: val for k, val in got.items()})

    # every const object of the header, through its pointer in the probe
    pointers = [read_bytes(memory, at + i * pointer_size, pointer_size) for i in range(m)]
    sizes = list(read_bytes(memory, at + m * pointer_size, m))
    declared = _declared_types(text, record)
    tags = set()
    for (symbol, expr, expected), raw, element in zip(objects, pointers, sizes, strict=True):
        # the address is the pointer's first two bytes in the port's order; a third byte
        # (mcs51's generic pointer) says which memory: the same for every const object
        address = _unsigned(raw[:2], little)
        tags.add(raw[2:])
        base, total = symbols[symbol]
        if expr.endswith("[0]"):
            assert address == base, (symbol, hex(address), hex(base))
            assert total == element * len(expected), (symbol, total, element)
        else:
            assert base <= address and address + element <= base + total, (expr, hex(address))
        kind = re.fullmatch(r"uint_least(\d+)_t", declared[expr])
        assert kind is not None, (expr, declared[expr])
        bits = int(kind[1])
        assert element * 8 >= bits, (expr, declared[expr], element)
        read = [_unsigned(read_bytes(memory, address + k * element, element), little)
                for k in range(len(expected))]
        assert read == expected, (expr, read, expected)
    assert len(tags) <= 1, tags
    if m == 0:
        assert record["adaptive"] is None and f"{record['prefix'].lower()}_dead_time" not in text


def _recompute(record: dict[str, Any], v: dict[str, int]) -> None:
    """Values read back from the image against their textbook formulas."""
    fields = record["fields"]
    word = sum(v[f"{name.upper()}_CODE"] << v[f"{name.upper()}_SHIFT"] for name in fields)
    assert v["REGISTER"] == word
    for name, field in fields.items():
        assert v[f"{name.upper()}_MASK"] == ((1 << field["width"]) - 1) << field["offset"]
    clock, tol = v["TIMER_CLOCK_HZ"], v["CLOCK_TOL_PPB"]
    per_step = Fraction(v["DIVIDER"] * PS, v["SUB_STEPS"] * clock)  # t = N x D / (S x f)
    for edge in ("TO_HIGH", "TO_LOW"):
        t = v[f"{edge}_STEPS"] * per_step
        assert v[f"{edge}_ACHIEVED_PS"] == t.__floor__()
        # the fastest clock f (1 + tol) shortens it (round down), the slowest lengthens it (up)
        assert v[f"{edge}_ACHIEVED_MIN_PS"] == (t * PPB / (PPB + tol)).__floor__()
        assert v[f"{edge}_ACHIEVED_MAX_PS"] == (t * PPB / (PPB - tol)).__ceil__()
        # every example's verdict is ok: its worst cases lie inside the window
        if f"WINDOW_{edge}_MIN_PS" in v:
            assert v[f"{edge}_ACHIEVED_MIN_PS"] >= v[f"WINDOW_{edge}_MIN_PS"]
        if f"WINDOW_{edge}_MAX_PS" in v:
            assert v[f"{edge}_ACHIEVED_MAX_PS"] <= v[f"WINDOW_{edge}_MAX_PS"]
    n = v["PWM_COMPARE_COUNTS"]
    # common practice: an up counter repeats every N clocks, an up/down counter every 2N
    assert v["PWM_PERIOD_COUNTS"] == (2 * n if v["PWM_COUNTING_CENTER"] else n)
    assert v["PWM_TOP_COUNTS"] == n - 1
    adaptive = record["adaptive"]
    if adaptive is None:
        return
    roles = {field["role"]: name.upper() for name, field in fields.items()}
    for b in adaptive["bins"]:
        for sign in ("positive", "negative"):
            e = b[sign]
            packed = ((v[f"{roles['divider']}_CODE"] << v[f"{roles['divider']}_SHIFT"])
                      | (e["to_high_code"] << v[f"{roles['to_high']}_SHIFT"])
                      | (e["to_low_code"] << v[f"{roles['to_low']}_SHIFT"]))
            assert e["register"] == packed, (sign, e)


# Integer macros the record does not carry (so the probe cannot state their expected value);
# none of them is in an example header today.
NOT_IN_RECORD = {"ADAPT_COMPENSATION_BAND_ADC_CODES"}


def test_the_probe_covers_every_integer_macro_and_const_object(
    built: dict[str, tuple[Path, dict[str, Any]]]
) -> None:
    """A value the header adds later must be added to the probe too, or this fails."""
    for stem, (header, record) in built.items():
        text = header.read_text()
        p = record["prefix"]
        defined = set(re.findall(rf"^#define ({p}_\w+) +(?:0x[0-9a-f]+|\d+)u?l{{0,2}}\b", text, re.M))
        probed = set(_values(record))
        assert defined - {f"{p}_{n}" for n in NOT_IN_RECORD} == probed, (stem, defined ^ probed)
        objects = {expr for _, expr, _ in _objects(record, text)}
        assert set(_declared_types(text, record)) == objects, stem
