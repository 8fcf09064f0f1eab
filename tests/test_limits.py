"""PWM edge-case limits (gapforge.timer.limits): worked examples with the arithmetic beside them.

Counting conventions (common practice, from memory): edge-aligned up-counting repeats every N
timer clocks; centre-aligned up/down counting takes 2N clocks per period, the compare value c
giving 2c clocks on. A pulse shorter than the dead time in front of it vanishes.
The duty lost to one dead time per period is t_dead x f_pwm: the same product as the textbook
inverter output-voltage error dV = Vd x t_dead x f_sw (Mohan, Undeland & Robbins, Power
Electronics, 3rd ed., ch. 8, from memory; reference-facts.md "Cost of too much dead time").
"""

from __future__ import annotations

import json
import math
from fractions import Fraction

import pytest

from conftest import run_cli
from gapforge.base.errors import GapforgeError
from gapforge.timer.fit import FitRequest, FitResult, fit
from gapforge.timer.layouts import EDGES, load_layout
from gapforge.timer.limits import PwmSpec, pwm_limits

F = Fraction
NS = F(1, 10**9)
MHZ = F(10**6)
KHZ = F(10**3)
ZERO = F(0)


def fitted(target: str, clock: Fraction, dead: Fraction, tol: Fraction = ZERO,
           to_low: Fraction | None = None) -> FitResult:
    r = fit(load_layout(target), FitRequest(clock, tol, dead, dead if to_low is None else to_low))
    assert r.ok
    return r


def test_edge_aligned_whole_counts() -> None:
    r = fitted("shared-8bit-linear", 160 * MHZ, 25 * NS)  # 25 ns x 160 MHz = 4 counts
    lim = pwm_limits(r, PwmSpec(100 * KHZ, "edge"))
    # N = 160e6 / 100e3 = 1600 counts, a whole number: the real frequency is the requested one
    assert (lim.counts, lim.period_counts, lim.exact) == (1600, 1600, True)
    assert lim.real_frequency_hz == 100 * KHZ
    assert lim.duty_bits == pytest.approx(math.log2(1600))  # 10.64 bits
    # high-side pulse needs c > 4 -> c >= 5; low-side pulse needs 1600 - c > 4 -> c <= 1595
    assert (lim.duty_min_counts, lim.duty_max_counts) == (5, 1595)
    assert lim.duty_min == F(5, 1600) and lim.duty_max == F(1595, 1600)
    for e in EDGES:
        assert lim.edges[e].dead_counts == 4
        assert lim.edges[e].share == F(4, 1600)  # 0.25 %
        assert lim.edges[e].lost_duty == F(4, 1600)
    assert lim.both_off_share == F(8, 1600)
    assert lim.verdict == "ok" and lim.reason == ""


def test_center_aligned_with_sub_clock_dead_time() -> None:
    r = fitted("split-10bit-tenths", 160 * MHZ, 25 * NS, F(50, 10**6))  # 41 sub-steps
    lim = pwm_limits(r, PwmSpec(500 * KHZ, "center"))
    # N = 160e6 / (2 x 500e3) = 160, period 2N = 320 clocks
    assert (lim.counts, lim.period_counts, lim.exact) == (160, 320, True)
    # dead time 41 / 10 = 4.1 clocks; c must exceed 4.1 / 2 = 2.05 -> c >= 3;
    # low side: 160 - c > 2.05 -> c <= 157
    assert lim.edges["to_high"].dead_counts == F(41, 10)
    assert (lim.duty_min_counts, lim.duty_max_counts) == (3, 157)
    assert lim.edges["to_high"].share == F(41, 10 * 320)  # 1.28 %


def test_non_integer_period_reports_the_real_frequency() -> None:
    r = fitted("shared-8bit-linear", 160 * MHZ, 25 * NS)
    # edge: 160e6 / 300e3 = 533.33 -> 533 counts; real 160e6 / 533 = 300187.6 Hz
    lim = pwm_limits(r, PwmSpec(300 * KHZ, "edge"))
    assert (lim.counts, lim.exact) == (533, False)
    assert lim.real_frequency_hz == F(160 * 10**6, 533)
    # centre: 160e6 / 600e3 = 266.67 -> 267, period 534 clocks; real 160e6 / 534 = 299625.5 Hz
    lim = pwm_limits(r, PwmSpec(300 * KHZ, "center"))
    assert (lim.counts, lim.period_counts, lim.exact) == (267, 534, False)
    assert lim.real_frequency_hz == F(160 * 10**6, 534)


@pytest.mark.parametrize("counting", ["edge", "center"])
def test_lost_duty_is_dead_time_times_real_frequency(counting: str) -> None:
    # outside formula: duty lost per period = t_dead x f_pwm (Mohan et al. ch. 8, from memory)
    r = fitted("split-10bit-div1-8", 320 * MHZ, 850 * NS, F(2, 100))
    lim = pwm_limits(r, PwmSpec(17 * KHZ, counting))
    for e in EDGES:
        achieved = r.edges[e].achieved_s
        assert achieved is not None
        assert lim.edges[e].lost_duty == achieved * lim.real_frequency_hz


def test_clock_tolerance_moves_the_dead_time() -> None:
    r = fitted("shared-8bit-segmented", 320 * MHZ, 850 * NS, F(2, 100))
    lim = pwm_limits(r, PwmSpec(20 * KHZ, "center"))
    # 875 ns nominal; fast clock: 875 / 1.02 = 857.843 ns (-17.157 ns); slow: 875 / 0.98
    # = 892.857 ns (+17.857 ns). The ratio to the period does not move (same clock).
    assert lim.edges["to_high"].tol_minus_s == 875 * NS - 875 * NS / F(102, 100)
    assert lim.edges["to_high"].tol_plus_s == 875 * NS / F(98, 100) - 875 * NS
    assert lim.edges["to_high"].dead_counts == 280


def test_share_of_half_a_period_is_too_long() -> None:
    r = fitted("shared-8bit-linear", 160 * MHZ, 25 * NS)  # 4 counts
    # 20 MHz edge: N = 8 counts, 4 / 8 = exactly half a period -> refused
    lim = pwm_limits(r, PwmSpec(20 * MHZ, "edge"))
    assert lim.verdict == "too-long"
    assert lim.reason == "to_high 4 clocks is 50 % of the PWM period (8 clocks): at least half a period"
    # 160 / 9 MHz: N = 9; 4 / 9 < 1/2, but c >= 5 for a high pulse and c <= 4 for a low pulse
    lim = pwm_limits(r, PwmSpec(F(160, 9) * MHZ, "edge"))
    assert lim.counts == 9
    assert (lim.duty_min_counts, lim.duty_max_counts) == (5, 4)
    assert lim.verdict == "too-long"
    assert lim.reason.startswith("no commanded duty gives a pulse on both outputs")
    # N = 10: c in 5..5 still works: ok
    lim = pwm_limits(r, PwmSpec(16 * MHZ, "edge"))
    assert (lim.duty_min_counts, lim.duty_max_counts, lim.verdict) == (5, 5, "ok")


def test_too_long_share_exits_1_from_the_command_line() -> None:
    code, out, _ = run_cli([
        "fit", "--clock", "160MHz", "--clock-tol", "0ppm", "--dead-time", "25ns", "--target", "shared-8bit-linear",
        "--pwm", "20MHz", "--json",
    ])
    assert code == 1
    doc = json.loads(out)
    assert doc["verdict"] == "fail" and doc["reason"].startswith("too-long: ")
    assert doc["pwm"]["verdict"] == "fail" and doc["pwm"]["reason"].startswith("too-long")
    assert doc["pwm"]["edges"]["to_high"]["share"] == 0.5


def test_pwm_json_from_the_command_line() -> None:
    code, out, _ = run_cli([
        "fit", "--clock", "160MHz", "--clock-tol", "0ppm", "--clock-tol", "50ppm", "--dead-time", "25ns",
        "--target", "split-10bit-tenths", "--pwm", "500kHz", "--counting", "center", "--json",
    ])
    assert code == 0
    pwm = json.loads(out)["pwm"]
    assert (pwm["compare_counts"], pwm["period_counts"]) == (160, 320)
    assert (pwm["duty_min_counts"], pwm["duty_max_counts"]) == (3, 157)
    assert pwm["real_hz"] == 500e3 and pwm["exact"] is True
    assert pwm["edges"]["to_low"]["dead_counts"] == 4.1


def test_pwm_faster_than_two_counts_is_bad_input() -> None:
    r = fitted("shared-8bit-linear", 160 * MHZ, 25 * NS)
    with pytest.raises(GapforgeError) as info:
        pwm_limits(r, PwmSpec(200 * MHZ, "edge"))  # 0.8 counts per period
    assert "at least 2 are needed" in info.value.line()


def test_bad_pwm_spec() -> None:
    with pytest.raises(GapforgeError):
        PwmSpec(F(0), "edge")
    with pytest.raises(GapforgeError):
        PwmSpec(KHZ, "centre")
