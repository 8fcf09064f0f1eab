"""Record ngspice results for the analog reference comparison (run by hand when cases change).

    PYTHONPATH=gen python tests/spice/record.py

Writes one netlist per case (tests/spice/<name>.cir) and tests/spice/results.json with each
case's circuit and ngspice's measured crossing time, so tests/test_simulate_spice.py can compare
gapforge's transient against ngspice where ngspice is not installed. The reference program is
ngspice (an OS package, `ngspice -b`), run with tight reltol and a time step of 0.1 % of the
delay.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
from dataclasses import asdict
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parents[1] / "gen"))

from gapforge.analog.network import parse_diode  # noqa: E402
from gapforge.analog.simulate import EdgeCircuit, simulate_edge, spice_netlist  # noqa: E402

SCHOTTKY = "IS=1e-6 N=1.05 RS=1 CJO=20p VJ=0.4 M=0.5 EG=0.69 XTI=2"  # the example
SCHOTTKY_NO_CJ = "IS=1e-6 N=1.05 RS=1 CJO=0 VJ=0.4 M=0.5 EG=0.69 XTI=2"
# invented small-signal silicon diode (the analog default)
SILICON = "IS=4n N=1.9 RS=0.6 CJO=1.5p VJ=0.7 M=0.4 EG=1.11 XTI=3 BV=75"


def cases() -> list[tuple[str, EdgeCircuit]]:
    out: list[tuple[str, EdgeCircuit]] = []
    levels = {"3v3": (3.3, 2.0, 1.3), "1v8": (1.8, 1.17, 0.63)}
    rcs = {"small": (1e3, 22e-12), "large": (47e3, 2.2e-9)}
    diodes = {"cj": SCHOTTKY, "nocj": SCHOTTKY_NO_CJ}
    for lname, (vdd, vtp, vtm) in levels.items():
        for rname, (r, c) in rcs.items():
            for temp in (27.0, 125.0):
                for dname, text in diodes.items():
                    for bypass in ("rising", "falling"):
                        for edge in ("rising", "falling"):
                            v0, v1, th = (0.0, vdd, vtp) if edge == "rising" else (vdd, 0.0, vtm)
                            kind = "bypassed" if edge == bypass else "slow"
                            name = f"{lname}_{rname}_{int(temp)}C_{dname}_by{bypass}_{edge}_{kind}"
                            out.append((name, EdgeCircuit(
                                v0, v1, 25.0, r, c + 7e-12, parse_diode(text, "case"),
                                bypass == "falling", temp, th)))
                if temp == 27.0:
                    for edge in ("rising", "falling"):
                        v0, v1, th = (0.0, vdd, vtp) if edge == "rising" else (vdd, 0.0, vtm)
                        out.append((f"{lname}_{rname}_27C_nodiode_{edge}_slow", EdgeCircuit(
                            v0, v1, 25.0, r, c + 7e-12, None, False, 27.0, th)))
        # the default silicon diode at low voltage: the bypassed edge's knee
        out.append((f"{lname}_small_27C_silicon_byfalling_falling_bypassed", EdgeCircuit(
            vdd, 0.0, 25.0, 4.7e3, 100e-12, parse_diode(SILICON, "case"), True, 27.0, vtm)))
    return out


def main() -> None:
    results = {}
    for name, circuit in cases():
        delay = simulate_edge(circuit).delay_s
        rise, step = delay * 1e-5, delay / 1000.0
        netlist = spice_netlist(circuit, rise, step, delay * 3.0)
        (HERE / f"{name}.cir").write_text(netlist)
        proc = subprocess.run(["ngspice", "-b", f"{name}.cir"], cwd=HERE, capture_output=True,
                              text=True, timeout=120)
        match = re.search(r"^tcross\s*=\s*([-+0-9.eE]+)", proc.stdout, re.M)
        if not match:
            raise SystemExit(f"{name}: no measurement\n{proc.stdout}\n{proc.stderr}")
        circuit_json = asdict(circuit)
        circuit_json["diode"] = circuit.diode.card() if circuit.diode else None
        results[name] = {"circuit": circuit_json, "rise_s": rise, "step_s": step,
                         "stop_s": delay * 3.0, "ngspice_tcross_s": float(match.group(1))}
        print(f"{name}: gapforge {delay:.6e} ngspice {float(match.group(1)):.6e}")
    (HERE / "results.json").write_text(json.dumps(results, indent=1, sort_keys=True) + "\n")


if __name__ == "__main__":
    main()
