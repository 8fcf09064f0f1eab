"""Properties of the analog model over its validated parameter space (issue 15).

- No traceback: every parameter set that passes validation gives ranges and findings, or one
  GapforgeError; never another exception (bounded: hypothesis, seeded, few examples, no
  deadline per example but a small count).
- The closed form's worst case (corners, ECSS-Q-HB-30-01A extreme-value analysis) contains every
  Monte Carlo sample (JCGM 101:2008) of the same network: the RC edge is monotone in every
  part, so its corners are its extremes.
"""

from __future__ import annotations

import warnings

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from gapforge.analog.findings import reference_findings
from gapforge.analog.parameters import network_from_options
from gapforge.analog.tolerance import QUANTITIES, corner_extremes, monte_carlo_samples, worst_case
from gapforge.base.errors import GapforgeError

FAST = settings(max_examples=30, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow])


def _eng(value: float, unit: str = "") -> str:
    return f"{value:.4g}{unit}"


@st.composite
def networks(draw: st.DrawFn) -> dict[str, str]:
    """Raw parameters spanning (and a little beyond) what validation accepts."""
    vdd = draw(st.floats(1.0, 15.0))
    r = 10 ** draw(st.floats(-3.5, 10.5))
    c = 10 ** draw(st.floats(-16.5, 0.2))
    is_ = 10 ** draw(st.floats(-24, -2))
    n = draw(st.floats(0.5, 5.0))
    cjo = draw(st.sampled_from([0.0, 1e-12, 3e-11, 1e-9, 1e-6]))
    vj = draw(st.floats(0.06, 2.0))
    t_lo = draw(st.floats(-60.0, 200.0))
    t_hi = draw(st.floats(t_lo, 200.0))
    raw = {
        "vdd": _eng(vdd), "r": _eng(r), "c": _eng(c, "F"),
        "rout": f"{draw(st.floats(0.01, 100.0)):.4g}",
        "bypass": draw(st.sampled_from(["rising", "falling", "none"])),
        "diode": f"IS={is_:.3g} N={n:.3g} RS={draw(st.floats(0, 100)):.3g} CJO={cjo:g} "
                 f"VJ={vj:.3g} M=0.5 EG={draw(st.floats(0.1, 5.0)):.3g} "
                 f"XTI={draw(st.floats(0, 10)):.3g} BV={vdd * 2 + 1:.3g}",
        "temp": f"{t_lo:.3g}:{(t_lo + t_hi) / 2:.3g}:{t_hi:.3g}",
        "output_inverter": draw(st.sampled_from(["true", "false"])),
    }
    if draw(st.booleans()):
        raw["vf"] = f"{draw(st.floats(0.01, 0.9)) * vdd:.3g}V at {t_lo:.3g}C"
    if draw(st.booleans()):
        raw["ir_max"] = f"{10 ** draw(st.floats(-12, -3)):.3g}A at {t_hi:.3g}C {vdd:.3g}V"
    return raw


@FAST
@given(networks())
def test_no_validated_network_gives_a_traceback(raw: dict[str, str]) -> None:
    try:
        net = network_from_options(raw)
    except GapforgeError:
        return  # refused in one line: the promise
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")  # no library warning either (issue 14)
            result = worst_case(net)
            findings = reference_findings(net, result.pair)
    except GapforgeError:
        return  # e.g. a non-finite delay, refused in one line
    assert all(isinstance(f, str) and "\n" not in f for f in findings)
    for key in ("to_high", "to_low"):
        assert result.pair[key].min_s <= result.pair[key].typ_s <= result.pair[key].max_s


RC = settings(max_examples=15, deadline=None, derandomize=True,
              suppress_health_check=[HealthCheck.too_slow])


@RC
@given(
    st.floats(1.5, 5.0), st.floats(2.0, 5.5), st.floats(-11.0, -7.0), st.sampled_from(
        ["0", "1%", "5%", "20%"]), st.sampled_from(["0", "2%", "10%"]),
    st.integers(0, 2**31 - 1),
)
def test_closed_form_worst_case_contains_every_monte_carlo_sample(
    vdd: float, log_r: float, log_c: float, r_tol: str, c_tol: str, seed: int
) -> None:
    net = network_from_options({
        "vdd": f"{vdd * 0.9:.4g}:{vdd:.4g}:{vdd * 1.1:.4g}", "r": f"{10 ** log_r:.4g}",
        "c": f"{10 ** log_c:.4g}F", "r_tol": r_tol, "c_tol": c_tol, "bypass": "none",
        "driver_delay": "1n:2n:3n", "schmitt_delay": "2n:3n:5n", "inverter_delay": "1n:2n:4n",
        "output_inverter": "true",
    })
    corners = corner_extremes(net)
    samples = monte_carlo_samples(net, 4000, seed=seed)
    for key in QUANTITIES:
        lo, _typ, hi = corners[key]
        slack = 1e-9 * max(abs(lo), abs(hi))
        assert float(np.min(samples[key])) >= lo - slack, key
        assert float(np.max(samples[key])) <= hi + slack, key
