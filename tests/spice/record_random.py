"""Record ngspice results for a seeded random family of reference-network edges (issue 15).

    PYTHONPATH=gen python tests/spice/record_random.py

A family of our own, drawn with its own seed and ranges (wider than, and apart from, the networks
the model was tuned on): supply 1.6..5.5 V, R 470 ohm..220 kohm, C 4.7 pF..4.7 nF, driver
resistance 5..80 ohm, either diode orientation, IS 1e-12..1e-5 A, N 1..2, CJO 0..40 pF, VJ
0.3..1 V, M 0.3..0.6, EG 0.69 or 1.11 eV, XTI 2..3, -40..150 C, thresholds 25..75 % of the
supply. Both edges of every network. Writes tests/spice/random_results.json (each edge's circuit,
ngspice's source ramp, step and stop time, and its measured crossing); netlists are regenerated
from the circuit by `simulate.spice_netlist`, so no .cir files are kept for this family.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
import tempfile
from dataclasses import asdict
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parents[1] / "gen"))

import numpy as np  # noqa: E402

from gapforge.analog.network import parse_diode  # noqa: E402
from gapforge.analog.simulate import EdgeCircuit, simulate_edge, spice_netlist  # noqa: E402

SEED = 90_417
NETWORKS = 40


def cases() -> list[tuple[str, EdgeCircuit]]:
    rng = np.random.default_rng(SEED)
    out: list[tuple[str, EdgeCircuit]] = []
    for k in range(NETWORKS):
        vdd = float(rng.uniform(1.6, 5.5))
        r = float(10 ** rng.uniform(np.log10(470), np.log10(220e3)))
        c = float(10 ** rng.uniform(np.log10(4.7e-12), np.log10(4.7e-9)))
        rout = float(rng.uniform(5, 80))
        text = (f"IS={10 ** rng.uniform(-12, -5):.4g} N={rng.uniform(1, 2):.4g} "
                f"RS={rng.uniform(0.2, 5):.3g} CJO={rng.uniform(0, 40e-12):.4g} "
                f"VJ={rng.uniform(0.3, 1.0):.3g} M={rng.uniform(0.3, 0.6):.3g} "
                f"EG={rng.choice([0.69, 1.11]):g} XTI={rng.uniform(2, 3):.3g}")
        diode = parse_diode(text, "case")
        temp = float(rng.uniform(-40, 150))
        bypass_falling = bool(rng.integers(0, 2))
        for rising in (True, False):
            th = float(rng.uniform(0.25, 0.75)) * vdd
            v0, v1 = (0.0, vdd) if rising else (vdd, 0.0)
            kind = "bypassed" if rising != bypass_falling else "slow"
            edge = "rising" if rising else "falling"
            out.append((f"random{k:02d}_{edge}_{kind}",
                        EdgeCircuit(v0, v1, rout, r, c, diode, bypass_falling, temp, th)))
    return out


def main() -> None:
    results = {}
    with tempfile.TemporaryDirectory() as tmp:
        for name, circuit in cases():
            delay = simulate_edge(circuit).delay_s
            rise, step = delay * 1e-5, delay / 1000.0
            path = Path(tmp) / "edge.cir"
            path.write_text(spice_netlist(circuit, rise, step, delay * 3.0))
            proc = subprocess.run(["ngspice", "-b", str(path)], capture_output=True, text=True,
                                  timeout=120, check=False)
            match = re.search(r"^tcross\s*=\s*([-+0-9.eE]+)", proc.stdout, re.M)
            if not match:
                print(f"{name}: no measurement (skipped)")
                continue
            circuit_json = asdict(circuit)
            circuit_json["diode"] = circuit.diode.card() if circuit.diode else None
            results[name] = {"circuit": circuit_json, "rise_s": rise, "step_s": step,
                             "stop_s": delay * 3.0, "ngspice_tcross_s": float(match.group(1))}
            print(f"{name}: gapforge {delay:.6e} ngspice {float(match.group(1)):.6e}")
    (HERE / "random_results.json").write_text(json.dumps(results, indent=1, sort_keys=True) + "\n")


if __name__ == "__main__":
    main()
