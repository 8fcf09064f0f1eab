"""The built-in layouts ship inside the wheel: build it, install it into a fresh virtual
environment, and run the installed `gapforge` from outside the repository.

Slow (a wheel build and a venv), so marked `slow`, but part of the default run.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

from conftest import BUILTINS, EXAMPLES, REPO


def _env() -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "PYTHONHOME")}
    env["PIP_DISABLE_PIP_VERSION_CHECK"] = "1"
    return env


@pytest.mark.slow
def test_wheel_installs_and_finds_its_layouts(tmp_path: Path) -> None:
    dist = tmp_path / "dist"
    proc = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-q",
         "-w", str(dist), str(REPO)],
        capture_output=True, text=True, env=_env(), timeout=300,
    )
    assert proc.returncode == 0, proc.stderr
    wheels = list(dist.glob("gapforge-*.whl"))
    assert len(wheels) == 1
    with zipfile.ZipFile(wheels[0]) as whl:
        names = set(whl.namelist())
    for name in BUILTINS:
        assert f"gapforge/targets/{name}.toml" in names
    assert "gapforge/outputs/templates/header.h.j2" in names

    venv = tmp_path / "venv"
    subprocess.run([sys.executable, "-m", "venv", "--system-site-packages", str(venv)],
                   check=True, env=_env(), timeout=300)
    python = venv / "bin" / "python"
    proc = subprocess.run(
        [str(python), "-m", "pip", "install", "-q", "--no-deps", "--no-index", str(wheels[0])],
        capture_output=True, text=True, env=_env(), timeout=300,
    )
    assert proc.returncode == 0, proc.stderr

    outside = tmp_path / "elsewhere"
    outside.mkdir()
    # the installed package, not the repository's gen/ (the editable install is also visible
    # through --system-site-packages, but the venv's own site-packages comes first)
    where = subprocess.run(
        [str(python), "-c", "import gapforge; print(gapforge.__file__)"],
        capture_output=True, text=True, env=_env(), cwd=outside, check=True,
    ).stdout.strip()
    assert where.startswith(str(venv)), where

    gapforge = venv / "bin" / "gapforge"
    listing = subprocess.run([str(gapforge), "targets"], capture_output=True, text=True,
                             env=_env(), cwd=outside, timeout=120)
    assert listing.returncode == 0, listing.stderr
    listed = [line.split()[0] for line in listing.stdout.splitlines()[2:] if line.strip()]
    for name in BUILTINS:
        assert name in listed

    show = subprocess.run([str(gapforge), "targets", "show", "split-10bit-tenths", "--clock",
                           "160MHz"], capture_output=True, text=True, env=_env(), cwd=outside)
    assert show.returncode == 0, show.stderr
    assert "625 ps" in show.stdout  # 1 / (10 x 160 MHz)

    # a build from the installed wheel gives the golden header byte for byte
    shutil.copy(EXAMPLES / "gan-buck.toml", outside / "gan-buck.toml")
    build = subprocess.run([str(gapforge), "build", "gan-buck.toml", "--parents"], capture_output=True,
                           text=True, env=_env(), cwd=outside, timeout=120)
    assert build.returncode == 0, build.stderr
    golden = (EXAMPLES / "out" / "buck_dead_time.h").read_bytes()
    assert (outside / "out" / "buck_dead_time.h").read_bytes() == golden
