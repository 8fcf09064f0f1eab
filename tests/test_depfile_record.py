"""`build --depfile` under GNU Make, and the record carrying the table (issue 22).

Outside check: GNU Make itself reads the depfile (its rules: a target is remade when a
prerequisite is newer; `make -q` exits 0 when everything is up to date, 1 otherwise). File
times are set with os.utime, never waited for.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from conftest import EXAMPLES, REPO, run_cli


def _layout_copy(tmp: Path) -> str:
    text = (EXAMPLES / "adaptive-gan.toml").read_text()
    shutil.copy(REPO / "targets" / "split-10bit-tenths.toml", tmp / "my layout.toml")
    return text.replace('target = "split-10bit-tenths"', 'target = "my layout.toml"')


def test_depfile_names_design_layout_and_templates(tmp_path: Path) -> None:
    (tmp_path / "d.toml").write_text(_layout_copy(tmp_path))
    code, _, err = run_cli(["build", str(tmp_path / "d.toml"), "--parents", "--self-test",
                            "--depfile", str(tmp_path / "gan.d")])
    assert code == 0, err
    text = (tmp_path / "gan.d").read_text()
    targets, deps = text.split(": \\\n", 1)
    assert targets.split() == [str(tmp_path / "out/adaptive_gan.h"),
                               str(tmp_path / "out/adaptive_gan_selftest.c")]
    lines = [x.strip().rstrip(" \\") for x in deps.splitlines()]
    assert lines[0] == str(tmp_path / "d.toml")
    assert lines[1] == str(tmp_path / "my\\ layout.toml")  # a space escaped for Make
    assert lines[2].endswith("templates/header.h.j2") and Path(lines[2]).is_file()


def test_make_reruns_gapforge_when_an_input_changes(tmp_path: Path) -> None:
    make = shutil.which("make")
    if make is None:
        pytest.skip("make is not installed")
    (tmp_path / "d.toml").write_text(_layout_copy(tmp_path))
    gapforge = f"{sys.executable} -m gapforge"
    # the README's two-line rule, plus including the depfile
    (tmp_path / "Makefile").write_text(
        "out/adaptive_gan.h: d.toml\n"
        f"\t{gapforge} build d.toml --parents --depfile gan.d\n"
        "-include gan.d\n"
    )
    env = {**os.environ, "PYTHONPATH": str(REPO / "gen")}
    first = subprocess.run([make], cwd=tmp_path, capture_output=True, text=True, env=env)
    assert first.returncode == 0, first.stdout + first.stderr
    header = tmp_path / "out" / "adaptive_gan.h"
    t = header.stat().st_mtime
    assert subprocess.run([make, "-q"], cwd=tmp_path, env=env).returncode == 0  # up to date
    for changed in ("my layout.toml", "d.toml"):
        os.utime(tmp_path / changed, (t + 10, t + 10))
        assert subprocess.run([make, "-q"], cwd=tmp_path, env=env).returncode == 1, changed
        again = subprocess.run([make], cwd=tmp_path, capture_output=True, text=True, env=env)
        assert again.returncode == 0, again.stderr
        os.utime(header, (t + 20, t + 20))  # gapforge leaves an unchanged header untouched
        assert subprocess.run([make, "-q"], cwd=tmp_path, env=env).returncode == 0
        t += 20


def test_record_carries_the_table_and_check_catches_its_drift(tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    text = (EXAMPLES / "adaptive-gan.toml").read_text()
    design.write_text(text)
    code, _, err = run_cli(["build", str(design), "--parents", "--record"])
    assert code == 0, err
    rec = json.loads((tmp_path / "out" / "adaptive_gan.json").read_text())
    header = (tmp_path / "out" / "adaptive_gan.h").read_text()
    a = rec["adaptive"]
    assert [b["edge_ma"] for b in a["bins"]] == [0, 1000, 2000, 4000, 8000, 16000]
    assert a["hysteresis_ma"] == 107  # 100 mA + 6.25 mA, rounded up
    assert a["hysteresis_adc_codes"] == 9  # 106.25 / 12.5 = 8.5, rounded up
    for b in a["bins"]:  # every register word as the header writes it
        assert b["positive"]["register_hex"] + "ul" in header
    assert rec["gate_driver"]["duty_min_counts"] == 11
    assert rec["gate_driver"]["bootstrap_every_periods"] == 1
    # a changed current_error changes only the table's bins and band: --check sees it
    design.write_text(text.replace('current_error = "0.1A"', 'current_error = "0.2A"'))
    code, out, _ = run_cli(["build", str(design), "--record", "--check"])
    assert code == 1 and "stale: " in out and "adaptive_gan.json" in out
