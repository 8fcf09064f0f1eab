"""`gapforge --help` and `gapforge targets` stay light: they must not import numpy.

Each command runs in a fresh interpreter (a module imported by an earlier test would hide the
problem); a wrapper runs the CLI and then reports whether numpy ended up in sys.modules.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys

import pytest

from conftest import REPO

WRAPPER = """
import importlib, json, sys
for name in sys.argv[2:]:
    importlib.import_module(name)
from gapforge.cli import main
code = 0
try:
    main(json.loads(sys.argv[1]))
except SystemExit as exc:
    code = exc.code if isinstance(exc.code, int) else 1
sys.stderr.write("\\nRESULT " + json.dumps({"code": code,
                 "numpy": "numpy" in sys.modules}) + "\\n")
"""


def _run(args: list[str], preload: tuple[str, ...] = ()) -> dict[str, object]:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(REPO / "gen")
    proc = subprocess.run([sys.executable, "-c", WRAPPER, json.dumps(args), *preload],
                          capture_output=True, text=True, env=env, cwd=REPO, timeout=60)
    marker = [line for line in proc.stderr.splitlines() if line.startswith("RESULT ")]
    assert marker, proc.stderr
    result: dict[str, object] = json.loads(marker[-1][len("RESULT "):])
    result["stdout"] = proc.stdout
    return result


@pytest.mark.parametrize(
    "args",
    [["--help"], ["targets"], ["targets", "--json"], ["targets", "show", "split-10bit-div1-8"],
     ["--version"]],
)
def test_light_commands_do_not_import_numpy(args: list[str]) -> None:
    result = _run(args)
    assert result["code"] == 0
    assert result["numpy"] is False
    assert result["stdout"]  # the command did its job


def test_the_wrapper_can_see_numpy_when_it_is_imported() -> None:
    # a check on the checker: with numpy imported first, the same wrapper reports it
    result = _run(["--help"], preload=("numpy",))
    assert result["code"] == 0
    assert result["numpy"] is True
