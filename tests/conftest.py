"""Shared test helpers: hypothesis profiles and ways to run the command line.

Profiles: "default" (the plain `python -m pytest -q` run, which is also what .ci/run runs) and
"ci" (a deeper run, selected with HYPOTHESIS_PROFILE=ci). Tests that the issue requires at >= 10,000 cases carry
their own `@settings(max_examples=10_000, deadline=None)`, so they reach that count in both runs;
the profiles set the size of every other property test.
"""

from __future__ import annotations

import contextlib
import io
import os
import subprocess
import sys
from pathlib import Path

from hypothesis import HealthCheck, settings

settings.register_profile("default", max_examples=200, deadline=None)
settings.register_profile(
    "ci",
    max_examples=1_000,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.too_slow],
)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "default"))

REPO = Path(__file__).resolve().parents[1]
EXAMPLES = REPO / "examples"
TARGETS = REPO / "targets"
BUILTINS = (
    "shared-16bit-plus-one",
    "shared-8bit-linear",
    "shared-8bit-segmented",
    "split-10bit-div1-8",
    "split-10bit-tenths",
    "split-6bit-div2-reserved",
)

# An invented power stage with every term of the window's minimum stated (issue 19: no term is
# assumed): (10 + 5 - 5 + (12 - 10) + 0 + 0 + 0) ns x 1.2 = 14.4 ns minimum, no maximum (no loss
# budget). Test designs that should be judged (ok) append it; a design without [stage] is
# `inconclusive` by design.
SMALL_STAGE = """
[stage]   # invented
td_off = "10ns"
t_fall = "5ns"
td_on = "5ns"
prop_delay = "10ns:12ns"
mismatch = "0ns"
isolator_skew = "0ns"
timer_skew = "0ns"
"""


def run_cli(args: list[str], cwd: Path | None = None) -> tuple[int, str, str]:
    """Run `gapforge ARGS` in this process through `gapforge.cli.main` (standalone semantics,
    so GapforgeError becomes one line on stderr and exit 2, exactly as the console script does).

    Returns (exit code, stdout, stderr). An exception other than SystemExit propagates, so a
    traceback fails the test instead of being mistaken for an exit code.
    """
    from gapforge.cli import main

    out, err = io.StringIO(), io.StringIO()
    old = Path.cwd()
    code: int = 0
    try:
        if cwd is not None:
            os.chdir(cwd)
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            try:
                main(list(args))
            except SystemExit as exc:
                if exc.code is None:
                    code = 0
                elif isinstance(exc.code, int):
                    code = exc.code
                else:  # sys.exit("message") prints the message and exits 1
                    err.write(f"{exc.code}\n")
                    code = 1
    finally:
        os.chdir(old)
    return code, out.getvalue(), err.getvalue()


def run_subprocess(
    args: list[str], cwd: Path | None = None, python: str | None = None
) -> tuple[int, str, str]:
    """Run `python -m gapforge ARGS` in a fresh interpreter: (exit code, stdout, stderr)."""
    env = dict(os.environ)
    src = str(REPO / "gen")
    env["PYTHONPATH"] = src + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    proc = subprocess.run(
        [python or sys.executable, "-m", "gapforge", *args],
        cwd=cwd,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
    )
    return proc.returncode, proc.stdout, proc.stderr
