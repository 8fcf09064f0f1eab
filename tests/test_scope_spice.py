"""Analog (oscilloscope) captures against ngspice: the measured gaps equal the crossing instants
ngspice computes itself (`meas ... WHEN`), within a tolerance taken from the sample interval.

Outside reference: ngspice, the general-purpose circuit simulator, runs invented half-bridge
gate networks (tests/scope_spice.py: series RLC gates that ring, a stated switch-node waveform);
its `meas` statements give the true threshold crossings at its own 20 ps step. The waveforms are
resampled every TS = 1 ns as a 1 GS/s scope would, written as scope CSVs, and measured by
`gapforge measure`.

Tolerance: a crossing lies inside one sample interval, and linear interpolation (IEEE 181's
reference-level instant) on an edge that is smooth at the scale of the interval errs by a small
part of it; a gap is the difference of two instants, so the claim checked is the tool's own
stated resolution: |gap - ngspice gap| <= TS (the tool reports resolution_s = TS). With 8-bit
quantisation (step q = 50 V / 256 = 0.195 V) and noise (sigma 0.05 V) an instant moves by at
most (q/2 + 4 sigma) / slope, under 0.3 ns at the >= 1 V/ns slopes of these edges at their
thresholds: still inside TS.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from conftest import run_cli
from scope_spice import NGSPICE, Drive, Run, scope_samples, simulate, write_csv

pytestmark = pytest.mark.skipif(NGSPICE is None, reason="ngspice not installed")

TS = 1e-9
TH_HIGH, TH_LOW = 1.5, 3.0  # per-gate thresholds: a 0/6 V gate and a 0/15 V gate (invented)
HIGH = Drive((140e-9, 1140e-9), (500e-9, 1500e-9), 0.0, 6.0, False)
LOW = Drive((540e-9, 1540e-9), (100e-9, 1100e-9), 0.0, 15.0, True)
# the node swings fully inside each dead time (soft turn-ons)
FULL = [(0, 0), (110e-9, 0), (130e-9, 400), (510e-9, 400), (530e-9, 0), (1110e-9, 0),
        (1130e-9, 400), (1510e-9, 400), (1530e-9, 0)]
# the node reaches only 160 V before the high side turns on (hard), then the switch pulls it up
PARTIAL = [(0, 0), (110e-9, 0), (130e-9, 160), (150e-9, 160), (152e-9, 400), (510e-9, 400),
           (530e-9, 0), (1110e-9, 0), (1130e-9, 160), (1150e-9, 160), (1152e-9, 400),
           (1510e-9, 400), (1530e-9, 0)]
MEAS = [
    "meas tran loff1 WHEN v(gl)=3 FALL=1", "meas tran hon1 WHEN v(gh)=1.5 RISE=1",
    "meas tran hoff1 WHEN v(gh)=1.5 FALL=1", "meas tran lon1 WHEN v(gl)=3 RISE=1 TD=520n",
    "meas tran loff2 WHEN v(gl)=3 FALL=1 TD=1000n", "meas tran hon2 WHEN v(gh)=1.5 RISE=2",
    "meas tran hoff2 WHEN v(gh)=1.5 FALL=2", "meas tran lon2 WHEN v(gl)=3 RISE=1 TD=1520n",
    "meas tran ringmax MAX v(gl) FROM=112n TO=138n",
    "meas tran sw_hon1 FIND v(sw) WHEN v(gh)=1.5 RISE=1",
    "meas tran sw_lon1 FIND v(sw) WHEN v(gl)=3 RISE=1 TD=520n",
]
THRESHOLDS = ["--threshold-high", "1.5V", "--threshold-low", "3V"]
HYSTERESIS = ["--hysteresis", "3V"]  # above the 4.4 V ring after the low side's turn-off


@pytest.fixture(scope="module")
def full(tmp_path_factory: pytest.TempPathFactory) -> Run:
    return simulate(tmp_path_factory.mktemp("spice"), "full", HIGH, LOW, FULL, MEAS)


@pytest.fixture(scope="module")
def partial(tmp_path_factory: pytest.TempPathFactory) -> Run:
    return simulate(tmp_path_factory.mktemp("spice"), "partial", HIGH, LOW, PARTIAL, MEAS)


def _gaps(run: Run) -> dict[str, list[float]]:
    m = run.meas
    return {"to_high": [m["hon1"] - m["loff1"], m["hon2"] - m["loff2"]],
            "to_low": [m["lon1"] - m["hoff1"], m["lon2"] - m["hoff2"]]}


def _measure(args: list[str]) -> tuple[int, dict, str]:
    code, out, err = run_cli(["measure", *args, "--json"])
    assert code in (0, 1), err
    return code, json.loads(out), err


def _check(doc: dict, run: Run, tol: float = TS) -> None:
    truth = _gaps(run)
    for edge in ("to_high", "to_low"):
        e = doc["edges"][edge]
        assert e["count"] == 2
        assert e["min_s"] == pytest.approx(min(truth[edge]), abs=tol)
        assert e["max_s"] == pytest.approx(max(truth[edge]), abs=tol)
        assert e["p50_s"] == pytest.approx(float(np.median(truth[edge])), abs=tol)
    assert doc["resolution_s"] == pytest.approx(TS, rel=1e-6)


def test_the_circuit_rings_through_the_low_threshold(full: Run) -> None:
    # the premise of the hysteresis checks: after turn-off the low gate rings back above 3 V
    assert 3.0 < full.meas["ringmax"] < 3.0 + 3.0 / 2


def test_gaps_match_ngspice_with_per_gate_thresholds_and_hysteresis(full: Run,
                                                                   tmp_path: Path) -> None:
    path = write_csv(tmp_path / "scope.csv", scope_samples(full, TS), ["gh", "gl", "sw"])
    code, doc, _ = _measure([str(path), "--high", "gh", "--low", "gl", *THRESHOLDS, *HYSTERESIS])
    assert code == 0 and doc["verdict"] == "ok" and doc["overlaps"] == 0
    _check(doc, full)
    assert doc["analog"]["high"]["threshold_v"] == 1.5
    assert doc["analog"]["low"]["threshold_v"] == 3.0
    assert doc["analog"]["hysteresis_v"] == 3.0
    assert doc["glitches"] == 0 and doc["missing_edges"] == 0


def test_ringing_without_hysteresis_never_lengthens_a_gap(full: Run, tmp_path: Path) -> None:
    # the ring above 3 V reads as the low gate turning on again: the dead time ends there,
    # so the measured to_high gap is shorter than ngspice's (the safe side), never longer
    path = write_csv(tmp_path / "scope.csv", scope_samples(full, TS), ["gh", "gl", "sw"])
    _, doc, _ = _measure([str(path), "--high", "gh", "--low", "gl", *THRESHOLDS])
    assert doc["missing_edges"] > 0
    assert doc["edges"]["to_high"]["min_s"] < min(_gaps(full)["to_high"]) - TS


def test_noise_and_8bit_quantisation(full: Run, tmp_path: Path) -> None:
    samples = scope_samples(full, TS, bits=8, full_scale=(-20.0, 30.0), noise_v=0.05, seed=7)
    path = write_csv(tmp_path / "scope.csv", samples, ["gh", "gl", "sw"])
    _, doc, _ = _measure([str(path), "--high", "gh", "--low", "gl", *THRESHOLDS, *HYSTERESIS])
    _check(doc, full)


def test_probe_skew_one_file_per_channel(full: Run, tmp_path: Path) -> None:
    # the high-side probe is 2 ns late and the low-side one 0.5 ns early (invented)
    samples = scope_samples(full, TS, skew={"gh": 2e-9, "gl": -0.5e-9})
    h = write_csv(tmp_path / "ch_high.csv", samples, ["gh"])
    lo = write_csv(tmp_path / "ch_low.csv", samples, ["gl"], units=False)
    base = [str(h), str(lo), "--high", "gh", "--low", "gl", *THRESHOLDS, *HYSTERESIS]
    _, doc, _ = _measure([*base, "--deskew-high", "2ns", "--deskew-low", "-0.5ns"])
    _check(doc, full)
    assert doc["analog"]["high"]["deskew_s"] == pytest.approx(2e-9)
    _, skewed, _ = _measure(base)  # without deskew, to_high reads 2.5 ns longer
    truth = _gaps(full)["to_high"]
    assert skewed["edges"]["to_high"]["min_s"] == pytest.approx(min(truth) + 2.5e-9, abs=TS)


def test_an_overlap_fails(tmp_path: Path) -> None:
    # the high side is driven on 5 ns before the low side's drive turns off: shoot-through
    high = Drive((95e-9, 1140e-9), (500e-9, 1500e-9), 0.0, 6.0, False)
    run = simulate(tmp_path, "overlap", high, LOW, FULL, MEAS)
    path = write_csv(tmp_path / "scope.csv", scope_samples(run, TS), ["gh", "gl", "sw"])
    code, doc, _ = _measure([str(path), "--high", "gh", "--low", "gl", *THRESHOLDS, *HYSTERESIS])
    assert code == 1 and doc["verdict"] == "fail" and doc["overlaps"] == 1
    gap = run.meas["hon1"] - run.meas["loff1"]
    assert gap < 0  # ngspice: the high gate crosses its threshold before the low one falls
    assert doc["edges"]["to_high"]["min_s"] == pytest.approx(gap, abs=TS)


def test_node_that_swings_fully_is_soft(full: Run, tmp_path: Path) -> None:
    path = write_csv(tmp_path / "scope.csv", scope_samples(full, TS), ["gh", "gl", "sw"])
    _, doc, _ = _measure([str(path), "--high", "gh", "--low", "gl", *THRESHOLDS, *HYSTERESIS,
                          "--node", "sw", "--bus", "400V"])
    node = doc["node"]
    assert node["to_high"]["turn_ons"] == 2 and node["to_high"]["hard"] == 0
    assert node["to_low"]["turn_ons"] == 2 and node["to_low"]["hard"] == 0
    # ngspice's node voltage at the high side's first turn-on: 400 V (share 1)
    assert node["to_high"]["min_share"] == pytest.approx(full.meas["sw_hon1"] / 400, abs=0.01)
    assert node["to_low"]["max_share"] == pytest.approx(full.meas["sw_lon1"] / 400, abs=0.01)


def test_node_that_does_not_swing_is_hard(partial: Run, tmp_path: Path) -> None:
    path = write_csv(tmp_path / "scope.csv", scope_samples(partial, TS), ["gh", "gl", "sw"])
    _, doc, _ = _measure([str(path), "--high", "gh", "--low", "gl", *THRESHOLDS, *HYSTERESIS,
                          "--node", "sw", "--bus", "400V", "--soft-within", "10%"])
    node = doc["node"]
    # ngspice: the node sits at 160 V (40 % of the bus) when the high side turns on
    assert partial.meas["sw_hon1"] == pytest.approx(160, abs=1)
    assert node["to_high"]["hard"] == 2
    assert node["to_high"]["max_share"] == pytest.approx(partial.meas["sw_hon1"] / 400, abs=0.01)
    assert node["to_low"]["hard"] == 0


def test_level_50_percent_finds_the_state_levels(full: Run, tmp_path: Path) -> None:
    # IEEE 181 histogram method: the 0/6 V and 0/15 V gates have state levels near 0 and the
    # drive level, so 50 % is 3 V and 7.5 V; the instants are ngspice's at those levels
    path = write_csv(tmp_path / "scope.csv", scope_samples(full, TS), ["gh", "gl", "sw"])
    _, doc, _ = _measure([str(path), "--high", "gh", "--low", "gl", "--level", "50%",
                          "--hysteresis", "3V"])
    high = doc["analog"]["high"]
    assert high["state_levels_v"][0] == pytest.approx(0.0, abs=0.1)
    assert high["state_levels_v"][1] == pytest.approx(6.0, abs=0.1)
    assert high["threshold_v"] == pytest.approx(3.0, abs=0.1)
    t = full.t
    h_on = _crossing(t, full.gh, high["threshold_v"], rising=True, after=0.0)
    l_off = _crossing(t, full.gl, doc["analog"]["low"]["threshold_v"], rising=False, after=0.0)
    assert doc["edges"]["to_high"]["min_s"] == pytest.approx(h_on - l_off, abs=TS)


def _crossing(t: np.ndarray, v: np.ndarray, level: float, rising: bool, after: float) -> float:
    """The first crossing in ngspice's own 20 ps output (linear between its points)."""
    a, b = v[:-1], v[1:]
    hits = ((a < level) & (b >= level)) if rising else ((a > level) & (b <= level))
    k = int(np.flatnonzero(hits & (t[:-1] >= after))[0])
    return float(t[k] + (level - a[k]) / (b[k] - a[k]) * (t[k + 1] - t[k]))


def test_simulator_steps_unevenly_spaced(full: Run, tmp_path: Path) -> None:
    # ngspice's own time points (its step varies): reported as unevenly spaced; the resolution
    # is the longest step around a crossing that made an edge (at most the 20 ps maximum step)
    keep = np.concatenate(([True], np.diff(full.t) > 0))  # ngspice may repeat a breakpoint
    samples = {n: (full.t[keep], w[keep]) for n, w in (("gh", full.gh), ("gl", full.gl),
                                                        ("sw", full.sw))}
    path = write_csv(tmp_path / "steps.csv", samples, ["gh", "gl", "sw"], fmt="%.14e")
    _, doc, _ = _measure([str(path), "--high", "gh", "--low", "gl", *THRESHOLDS, *HYSTERESIS])
    assert any("unevenly spaced" in w for w in doc["warnings"])
    assert 0 < doc["resolution_s"] <= 0.02e-9 * 1.001
    truth = _gaps(full)
    for edge in ("to_high", "to_low"):  # ngspice prints meas results to 7 digits: 0.1 ps here
        assert doc["edges"][edge]["min_s"] == pytest.approx(min(truth[edge]), abs=2e-12)
