"""Invented half-bridge gate networks simulated by ngspice, exported as oscilloscope CSVs.

Shared by tests/test_scope_spice.py. The circuits are our own (not any real part): each gate
is a drive voltage through a gate resistor and a loop inductance into a gate capacitance (a
series RLC, so turn-off rings); the switch node is a stated voltage waveform. ngspice computes
the true crossing instants with its `meas` statements (its own fine time step, reltol 1e-6):
those are the outside reference. The waveforms are written by ngspice's `wrdata` and resampled
here on a uniform grid, the way an oscilloscope samples (optionally with 8-bit quantisation,
seeded noise and a probe delay).
"""

from __future__ import annotations

import re
import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

import numpy as np

NGSPICE = shutil.which("ngspice")


@dataclass(frozen=True)
class Drive:
    """Edge times (s) of one gate's drive: on at each `on`, off at each `off`, 1 ns ramps."""

    on: tuple[float, ...]
    off: tuple[float, ...]
    v_off: float
    v_on: float
    initially_on: bool


def _pwl(d: Drive, stop: float) -> str:
    points = [(0.0, d.v_on if d.initially_on else d.v_off)]
    events = sorted([(t, 1) for t in d.on] + [(t, 0) for t in d.off])
    level = points[0][1]
    for t, to_on in events:
        target = d.v_on if to_on else d.v_off
        points += [(t, level), (t + 1e-9, target)]
        level = target
    points.append((stop, level))
    return " ".join(f"{t:.6e} {v:g}" for t, v in points)


def _node_pwl(points: list[tuple[float, float]], stop: float) -> str:
    return " ".join(f"{t:.6e} {v:g}" for t, v in [*points, (stop, points[-1][1])])


@dataclass(frozen=True)
class Run:
    t: np.ndarray
    gh: np.ndarray
    gl: np.ndarray
    sw: np.ndarray
    meas: dict[str, float]


def simulate(work: Path, name: str, high: Drive, low: Drive, node: list[tuple[float, float]],
             meas: list[str], stop: float = 2.2e-6) -> Run:
    """Run ngspice on the invented half bridge; return its waveforms and measurements."""
    assert NGSPICE is not None
    dat = work / f"{name}.dat"
    netlist = f"""* invented half-bridge gate networks for gapforge tests (not a real part)
VDH dh 0 PWL({_pwl(high, stop)})
RGH dh ah 4
LGH ah gh 20n
CGH gh 0 1n
VDL dl 0 PWL({_pwl(low, stop)})
RGL dl al 1.2
LGL al gl 20n
CGL gl 0 2n
VSW sw 0 PWL({_node_pwl(node, stop)})
.options reltol=1e-6
.control
set wr_singlescale
tran 0.02n {stop:.6e} 0 0.02n
{chr(10).join(meas)}
wrdata {dat} v(gh) v(gl) v(sw)
.endc
.end
"""
    cir = work / f"{name}.cir"
    cir.write_text(netlist)
    proc = subprocess.run([NGSPICE, "-b", str(cir)], capture_output=True, text=True, timeout=120,
                          check=False)
    found = {m.group(1): float(m.group(2)) for m in
             re.finditer(r"^(\w+)\s*=\s*([-+0-9.eE]+)", proc.stdout, re.MULTILINE)}
    missing = [line.split()[2] for line in meas if line.split()[2] not in found]
    assert not missing, f"ngspice did not measure {missing}:\n{proc.stdout}\n{proc.stderr}"
    data = np.loadtxt(dat)
    return Run(data[:, 0], data[:, 1], data[:, 2], data[:, 3], found)


def scope_samples(run: Run, interval: float, *, skew: dict[str, float] | None = None,
                  bits: int | None = None, full_scale: tuple[float, float] = (-20.0, 30.0),
                  noise_v: float = 0.0, seed: int = 1) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Each channel sampled every `interval` like a scope: a probe delay shifts what the scope
    sees later (`skew`), quantisation rounds to the ADC step over `full_scale`, noise is
    Gaussian (seeded). The node channel is kept exact (a separate probe)."""
    rng = np.random.default_rng(seed)
    t = np.arange(0.0, run.t[-1] - 5e-9, interval)
    out = {}
    for name, wave in (("gh", run.gh), ("gl", run.gl), ("sw", run.sw)):
        delay = (skew or {}).get(name, 0.0)
        v = np.interp(t - delay, run.t, wave)
        if name != "sw":
            if noise_v:
                v = v + rng.normal(0.0, noise_v, v.size)
            if bits:
                lo, hi = full_scale
                step = (hi - lo) / 2**bits
                v = lo + np.clip(np.round((v - lo) / step), 0, 2**bits - 1) * step
        out[name] = (t, v)
    return out


def write_csv(path: Path, channels: dict[str, tuple[np.ndarray, np.ndarray]],
              names: list[str], units: bool = True, fmt: str = "%.6e") -> Path:
    """One scope-like CSV of the named channels (they share one time axis)."""
    t = channels[names[0]][0]
    cols = [t] + [channels[n][1] for n in names]
    with path.open("w") as f:
        f.write("# invented capture simulated with ngspice (gapforge tests)\n")
        f.write("Time," + ",".join(names) + "\n")
        if units:
            f.write("s," + ",".join("V" for _ in names) + "\n")
        np.savetxt(f, np.column_stack(cols), delimiter=",", fmt=fmt)
    return path
