"""The public Python API (issue 13): every name in `gapforge.__all__` resolves, `import gapforge`
stays light, and the README's API example runs as written."""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import gapforge

REPO = Path(__file__).resolve().parents[1]


def test_every_public_name_resolves_to_what_its_module_defines() -> None:
    assert "load_design" in gapforge.__all__ and "fit" in gapforge.__all__
    assert set(gapforge.__all__) == {"__version__", *gapforge._PUBLIC}
    for name in gapforge.__all__:
        assert getattr(gapforge, name) is not None, name


def test_an_unknown_name_is_an_attribute_error() -> None:
    try:
        gapforge.no_such_name  # noqa: B018
    except AttributeError as exc:
        assert "no_such_name" in str(exc)
    else:
        raise AssertionError("an unknown name must raise AttributeError")


def test_import_gapforge_does_not_import_numpy_or_the_subpackages() -> None:
    code = ("import sys, gapforge; "
            "print(sorted(m for m in sys.modules if m == 'numpy' or m.startswith('gapforge.')))")
    env = dict(os.environ, PYTHONPATH=str(REPO / "gen"))
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env,
                         check=True, timeout=60).stdout.strip()
    assert out == "[]"


def test_readme_api_example_runs(tmp_path: Path) -> None:
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    section = readme[readme.index("## Python API"):]
    code = re.search(r"```python\n(.*?)```", section, re.S)
    assert code is not None
    env = dict(os.environ, PYTHONPATH=str(REPO / "gen"))
    proc = subprocess.run([sys.executable, "-c", code.group(1)], capture_output=True, text=True,
                          env=env, cwd=REPO, timeout=120)
    assert proc.returncode == 0, proc.stderr
    lines = proc.stdout.strip().splitlines()
    # one line per output of the example design, then the fitted register word
    assert any(".h 0x" in line for line in lines), lines
    assert lines[-1].isdigit()
