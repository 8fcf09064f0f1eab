"""The power-stage window and costs (gapforge.stage.window), checked against worked arithmetic.

Every scenario here is invented. The minimum-dead-time sum is common practice (no single
published source; see /work/shared/reference-facts.md). The inverter voltage error is the
textbook result of Mohan, Undeland & Robbins, Power Electronics, 3rd ed., ch. 8 (effect of
blanking time on the PWM inverter output voltage; section number from memory), also Jeong &
Park, IEEE Trans. Ind. Electron. 38(2), 1991.
"""

from __future__ import annotations

from fractions import Fraction

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from gapforge.base.errors import GapforgeError
from gapforge.base.schema import Reader
from gapforge.stage.stage_reader import read_stage
from gapforge.stage.window import (
    StageSpec,
    SwitchTiming,
    judge,
    stage_costs,
    stage_problems,
    stage_window,
)

NS = Fraction(1, 10**9)
PS = Fraction(1, 10**12)


def timing(
    td_off: int, t_fall: int, td_on: int, prop: tuple[int, int], t_rise: int = 0
) -> SwitchTiming:
    """A switch and its driver channel, all in whole nanoseconds."""
    return SwitchTiming(
        td_off_max=td_off * NS,
        t_fall_max=t_fall * NS,
        td_on_min=td_on * NS,
        t_rise=t_rise * NS,
        prop_min=prop[0] * NS,
        prop_max=prop[1] * NS,
    )


def silicon_inverter(**changes: object) -> StageSpec:
    """Invented silicon-MOSFET inverter leg: both switches and channels alike."""
    sw = timing(35, 20, 10, (20, 45), t_rise=15)
    values: dict[str, object] = dict(
        high=sw,
        low=sw,
        mismatch=5 * NS,
        isolator_skew=Fraction(0),
        timer_skew=Fraction(0),
        current_to_high=Fraction(10),
        current_to_low=Fraction(10),
        fsw=Fraction(20_000),
        loss_budget=Fraction(1, 2),
        bus_voltage=Fraction(48),
    )
    values.update(changes)
    return StageSpec(**values)  # type: ignore[arg-type]


def read(text: str) -> tuple[StageSpec, Reader]:
    import tomllib

    reader = Reader("design.toml")
    table = reader.table(tomllib.loads(text), "")
    stage = table.sub("stage", required=True)
    assert stage is not None
    return read_stage(stage), reader


# ---------------------------------------------------------------------------------------------
# the minimum (common practice: t_min = margin x (td_off,max + t_f,max - td_on,min
#   + tpd,max - tpd,min + other skew); reference-facts.md, "Dead-time requirement")


def test_minimum_worked_example() -> None:
    window = stage_window(silicon_inverter())
    # 35 + 20 - 10 + (45 - 20) + 5 = 75 ns; x 1.2 = 90 ns. The rise time (15 ns) is not counted.
    for edge in ("to_high", "to_low"):
        assert window.edges[edge].raw_sum_s == 75 * NS
        assert window.edges[edge].min_s == 90 * NS
    names = [t.name for t in window.breakdown["to_high"]]
    assert "turn-off delay max, low-side switch" in names
    assert "turn-on delay min, high-side switch" in names
    rise = next(t for t in window.edges["to_high"].breakdown if t.name.startswith("rise time"))
    assert rise.value == 15 * NS and not rise.counted


def test_minimum_per_edge_uses_the_switch_turning_off_and_the_one_turning_on() -> None:
    high = timing(50, 30, 12, (18, 40))
    low = timing(30, 10, 8, (22, 60))
    spec = silicon_inverter(high=high, low=low, mismatch=Fraction(0), isolator_skew=3 * NS,
                            timer_skew=2 * NS, margin=Fraction(1))
    window = stage_window(spec)
    # to_high: low turns off, high turns on: 30 + 10 - 12 + (60 - 18) + 3 + 2 = 75 ns
    assert window.edges["to_high"].min_s == 75 * NS
    # to_low: high turns off, low turns on: 50 + 30 - 8 + (40 - 22) + 3 + 2 = 95 ns
    assert window.edges["to_low"].min_s == 95 * NS


def test_minimum_rounds_up_to_a_whole_picosecond() -> None:
    sw = SwitchTiming(Fraction(10000005, 10**16), Fraction(0), Fraction(0), Fraction(0),
                      Fraction(0), Fraction(0))  # 1000.0005 ps
    zero = {"mismatch": Fraction(0), "isolator_skew": Fraction(0), "timer_skew": Fraction(0)}
    spec = StageSpec(high=sw, low=sw, margin=Fraction(1), **zero)
    assert stage_window(spec).edges["to_high"].min_s == 1001 * PS
    # margin 1.2 on 1000.0005 ps = 1200.0006 ps -> 1201 ps
    assert stage_window(StageSpec(high=sw, low=sw, **zero)).edges["to_low"].min_s == 1201 * PS


# ---------------------------------------------------------------------------------------------
# the maximum (common practice: P = Vsd x I x t x fsw per reverse-conducting interval)


def test_maximum_worked_example() -> None:
    window = stage_window(silicon_inverter())
    # budget 0.5 W / (1.2 V default silicon Vsd x (10 + 10) A x 20 kHz) = 1.041666... us
    # rounded down to 1 ps: 1 041 666 ps
    assert window.edges["to_high"].max_s == 1_041_666 * PS
    assert window.edges["to_low"].max_s == 1_041_666 * PS
    assert window.edges["to_high"].max_reason == "loss budget"
    assert not window.empty


def test_maximum_counts_recovery_loss_first() -> None:
    spec = silicon_inverter(qrr=Fraction(100, 10**9))
    window = stage_window(spec)
    # recovery: Qrr x Vbus x fsw = 100 nC x 48 V x 20 kHz = 0.096 W, only on to_high (I > 0:
    # the high-side switch takes the current from the low-side diode).
    # (0.5 - 0.096) / (1.2 x 20 x 20000) = 0.404 / 480000 = 841.666... ns -> 841 666 ps
    assert window.edges["to_high"].max_s == 841_666 * PS


def test_gan_reverse_voltage_includes_the_gate_off_voltage() -> None:
    spec = silicon_inverter(kind="gan", vsd=Fraction(2), gate_off=Fraction(-3))
    assert spec.reverse_voltage == 5
    # 0.5 / (5 x 20 x 20000) = 250 ns exactly
    assert stage_window(spec).edges["to_high"].max_s == 250 * NS


def test_no_current_means_only_half_a_period_limits_the_maximum() -> None:
    spec = silicon_inverter(current_to_high=Fraction(0), current_to_low=Fraction(0))
    # half of 1 / 20 kHz = 25 us
    assert stage_window(spec).edges["to_low"].max_s == 25_000 * NS


def test_no_budget_means_no_maximum() -> None:
    spec = silicon_inverter(loss_budget=None)
    assert stage_window(spec).edges["to_high"].max_s is None


def test_empty_window_when_the_budget_is_too_small() -> None:
    # 0.01 W / (1.2 x 20 x 20000) = 20.833 ns < 90 ns minimum
    window = stage_window(silicon_inverter(loss_budget=Fraction(1, 100)))
    assert window.edges["to_high"].max_s == 20_833 * PS
    assert window.empty
    verdict, _, _ = judge(window.edges["to_high"], 50 * NS, 50 * NS)
    assert verdict == "empty-window"


# ---------------------------------------------------------------------------------------------
# costs


def test_reverse_conduction_loss_of_a_synchronous_buck() -> None:
    # common practice: P = Vsd x I x t_dead x fsw x k, k = 2 for a synchronous buck with
    # positive current: 1.2 V x 10 A x 90 ns x 20 kHz x 2 = 43.2 mW
    spec = silicon_inverter()
    costs = stage_costs(spec, {"to_high": 90 * NS, "to_low": 90 * NS})
    assert costs.reverse_conduction_w == Fraction(432, 10**4)
    assert costs.edges["to_high"].reverse_conduction_w == Fraction(216, 10**4)
    # both switches off for 2 x 90 ns of a 50 us period = 0.36 %
    assert costs.dead_share == Fraction(36, 10**4)
    # the high-side output loses only the to_high gap (I > 0 holds the node low): 0.18 %
    assert costs.duty_lost == Fraction(18, 10**4)


def test_recovery_loss_on_the_hard_commutated_edge_only() -> None:
    spec = silicon_inverter(qrr=Fraction(100, 10**9), current_to_low=Fraction(-4))
    costs = stage_costs(spec, {"to_high": 90 * NS, "to_low": 90 * NS})
    # to_high with I = +10 A and to_low with I = -4 A both hard-commutate a diode:
    # each 100 nC x 48 V x 20 kHz = 0.096 W
    assert costs.edges["to_high"].recovery_w == Fraction(96, 1000)
    assert costs.edges["to_low"].recovery_w == Fraction(96, 1000)
    spec = silicon_inverter(qrr=Fraction(100, 10**9), current_to_low=Fraction(4))
    costs = stage_costs(spec, {"to_high": 90 * NS, "to_low": 90 * NS})
    assert costs.edges["to_low"].recovery_w == 0  # soft: its own diode hands over to its channel


@pytest.mark.parametrize(
    ("current", "sign"),
    [(Fraction(10), -1), (Fraction(-10), 1)],
)
def test_inverter_voltage_error_matches_the_textbook(current: Fraction, sign: int) -> None:
    # Mohan, Undeland & Robbins, Power Electronics, 3rd ed., ch. 8 (blanking-time effect; from
    # memory): over one switching period the average output changes by
    #   dV = -(t_delta / Ts) x Vd  for i > 0,   +(t_delta / Ts) x Vd  for i < 0.
    # Invented inverter: Vd = 300 V, t_delta = 2 us, Ts = 1 / 10 kHz = 100 us -> |dV| = 6 V.
    vd, t_delta, ts = Fraction(300), Fraction(2, 10**6), Fraction(1, 10**4)
    textbook = sign * (t_delta / ts) * vd
    assert textbook == sign * 6
    spec = silicon_inverter(
        bus_voltage=vd, fsw=1 / ts, current_to_high=current, current_to_low=current,
        loss_budget=None,
    )
    costs = stage_costs(spec, {"to_high": t_delta, "to_low": t_delta})
    assert costs.voltage_error_v == textbook


def test_costs_reject_a_missing_or_negative_dead_time() -> None:
    with pytest.raises(GapforgeError):
        stage_costs(silicon_inverter(), {"to_high": 90 * NS})
    with pytest.raises(GapforgeError):
        stage_costs(silicon_inverter(), {"to_high": 90 * NS, "to_low": -NS})


# ---------------------------------------------------------------------------------------------
# judging


def test_judge_verdicts_and_margins() -> None:
    edge = stage_window(silicon_inverter()).edges["to_high"]  # 90 ns .. 1041.666 ns
    assert judge(edge, 100 * NS, 110 * NS) == ("ok", 10 * NS, 1_041_666 * PS - 110 * NS)
    assert judge(edge, 89 * NS, 95 * NS)[0] == "too-short"
    verdict, low, high = judge(edge, 1000 * NS, 1100 * NS)
    assert verdict == "too-long" and high is not None and high < 0 and low == 910 * NS
    unbounded = stage_window(silicon_inverter(loss_budget=None)).edges["to_low"]
    assert judge(unbounded, 1, 1) == ("ok", 1 - 90 * NS, None)


# ---------------------------------------------------------------------------------------------
# bad input


def test_a_turn_on_delay_larger_than_everything_is_refused() -> None:
    spec = silicon_inverter(high=timing(35, 20, 500, (20, 45)))
    problems = stage_problems(spec)
    assert [(side, key) for side, key, _ in problems] == [("high", "td_on")]
    with pytest.raises(GapforgeError) as info:
        stage_window(spec)
    assert "zero or negative" in info.value.line() and "\n" not in info.value.line()


def test_margin_below_one_is_refused() -> None:
    with pytest.raises(GapforgeError, match="at least 1"):
        stage_window(silicon_inverter(margin=Fraction(9, 10)))


# ---------------------------------------------------------------------------------------------
# reading [stage]

# every term of the minimum (issue 19), invented values; a body's own line wins
EVERY_TERM = {"t_fall": '"20ns"', "prop_delay": '"20ns:45ns"', "mismatch": '"0ns"',
              "isolator_skew": '"0ns"', "timer_skew": '"0ns"'}


def with_every_term(body: str) -> str:
    head, sep, rest = body.partition("\n[")
    keys = {line.split("=")[0].strip() for line in head.splitlines() if "=" in line}
    extra = "".join(f"{k} = {v}\n" for k, v in EVERY_TERM.items() if k not in keys)
    return extra + head + sep + rest


def test_every_missing_term_is_reported_once_with_its_source() -> None:
    # issue 19: no term of the minimum's sum is assumed (common practice: the sum in
    # reference-facts.md, "Dead-time requirement", has every term)
    _, reader = read('[stage]\ntd_off = "35ns"')
    paths = [p for p, _ in reader.problems]
    assert paths == ["stage.td_on", "stage.t_fall", "stage.prop_delay", "stage.mismatch",
                     "stage.isolator_skew", "stage.timer_skew"]
    messages = dict(reader.problems)
    assert "switch datasheet" in messages["stage.t_fall"]
    assert "driver datasheet" in messages["stage.prop_delay"]
    assert "mismatch" in messages["stage.mismatch"] and "driver" in messages["stage.mismatch"]
    assert "isolator" in messages["stage.isolator_skew"]


def test_read_stage_with_per_switch_overrides() -> None:
    spec, reader = read(
        """
        [stage]   # invented
        td_off = "35ns"
        t_fall = "20ns"
        td_on = "10ns"
        prop_delay = "20ns:45ns"
        mismatch = "5ns"
        isolator_skew = "0ns"
        timer_skew = "0ns"
        kind = "silicon"
        qrr = "0nC"
        current = "10A"
        current_to_low = "-3A"
        fsw = "20kHz"
        loss_budget = "0.5W"
        [stage.high]
        td_off = "50ns"
        """
    )
    assert reader.problems == []
    assert spec.high.td_off_max == 50 * NS and spec.low.td_off_max == 35 * NS
    assert spec.high.prop_max == 45 * NS
    assert spec.current_to_high == 10 and spec.current_to_low == -3
    window = stage_window(spec)
    # to_low: high turns off: 50 + 20 - 10 + 25 + 5 = 90 ns x 1.2 = 108 ns
    assert window.edges["to_low"].min_s == 108 * NS
    assert window.edges["to_high"].min_s == 90 * NS
    # 0.5 / (1.2 x (10 + 3) x 20000) = 1.602564... us -> 1 602 564 ps
    assert window.edges["to_high"].max_s == 1_602_564 * PS


@pytest.mark.parametrize(
    ("body", "path", "words"),
    [
        ('td_of = "35ns"\ntd_on = "1ns"', "stage.td_of", "did you mean 'td_off'"),
        ('td_off = "-35ns"\ntd_on = "1ns"', "stage.td_off", "must not be negative"),
        ('td_off = "35ns"', "stage.td_on", "required"),
        ('td_on = "1ns"\n[stage.high]\ntd_off = "3ns"', "stage.td_off", "required"),
        ('td_off = "35ns"\ntd_on = "1ns"\nprop_delay = "9ns:3ns"', "stage.prop_delay", "above MAX"),
        ('td_off = "35ns"\ntd_on = "1ns"\nmargin = 0.8', "stage.margin", "at least 1"),
        ('td_off = "35ns"\ntd_on = "1ns"\nkind = "gallium"', "stage.kind", "not one of"),
        ('td_off = "35ns"\ntd_on = "1ns"\nloss_budget = "1W"\ncurrent = "1A"\nkind = "sic"\n'
         'qrr = "0nC"', "stage.fsw", "needs"),
        ('td_off = "35ns"\ntd_on = "1ns"\nloss_budget = "1W"\nkind = "sic"\nqrr = "0nC"',
         "stage.current_to_high", "0 A"),
        ('td_off = "35ns"\ntd_on = "1ns"\nloss_budget = "1W"\ncurrent = "1A"\nqrr = "0nC"',
         "stage.kind", "vsd"),
        ('td_off = "35ns"\ntd_on = "1ns"\nloss_budget = "1W"\ncurrent = "1A"\nkind = "sic"',
         "stage.qrr", "recovery"),
        ('td_off = "35ns"\ntd_on = "1ns"\nloss_budget = "1W"\ncurrent = "1A"\nkind = "gan"',
         "stage.gate_off", "gate-off"),
        ('td_off = "35ns"\ntd_on = "1ns"\nqrr = "10nC"\nfsw = "1kHz"', "stage.bus_voltage",
         "needs"),
        ('td_off = "35ns"\ntd_on = "1ns"\nkind = "gan"\nqrr = "1nC"', "stage.qrr", "GaN"),
        ('td_off = "35ns"\ntd_on = "1ns"\ngate_off = "-3V"', "stage.gate_off", "gan"),
        ('td_off = "35ns"\ntd_on = "1ns"\nfsw = "fast"', "stage.fsw", "not a number"),
        ('td_off = "35ns"\ntd_on = "1ns"\n[stage.high]\ntd_on = "90ns"', "stage.high.td_on",
         "zero or negative"),
        ('td_off = "35ns"\ntd_on = "1ns"\n[stage.low]\nvsd = "1V"', "stage.low.vsd", "unknown key"),
    ],
)
def test_read_stage_problems_name_the_key(body: str, path: str, words: str) -> None:
    _, reader = read("[stage]\n" + with_every_term(body))
    assert reader.problems, "expected a problem"
    where, message = reader.problems[0]
    assert where == path
    assert words in message
    with pytest.raises(GapforgeError) as info:
        reader.finish()
    assert "\n" not in info.value.line()


# ---------------------------------------------------------------------------------------------
# properties

ns = st.integers(min_value=0, max_value=2000)


@st.composite
def specs(draw: st.DrawFn) -> StageSpec:
    def sw() -> SwitchTiming:
        lo = draw(st.integers(0, 200))
        return timing(draw(ns), draw(ns), draw(st.integers(0, 50)), (lo, lo + draw(ns)))

    high, low = sw(), sw()
    spec = StageSpec(
        high=high,
        low=low,
        mismatch=draw(ns) * NS,
        isolator_skew=Fraction(0),
        timer_skew=draw(st.integers(251, 400)) * NS,  # > td_on + prop min: every sum > 0
        margin=Fraction(draw(st.integers(100, 300)), 100),
        kind=draw(st.sampled_from(["silicon", "sic"])),
        current_to_high=Fraction(draw(st.integers(-50, 50))),
        current_to_low=Fraction(draw(st.integers(-50, 50))),
        fsw=Fraction(draw(st.integers(1_000, 2_000_000))),
        loss_budget=Fraction(draw(st.integers(0, 10_000)), 1000),
    )
    return spec


@settings(deadline=None)
@given(specs(), st.integers(0, 300))
def test_a_larger_margin_never_shortens_the_minimum(spec: StageSpec, extra: int) -> None:
    from dataclasses import replace

    before = stage_window(spec)
    after = stage_window(replace(spec, margin=spec.margin + Fraction(extra, 100)))
    for edge in ("to_high", "to_low"):
        assert after.edges[edge].min_s >= before.edges[edge].min_s
        # and the minimum is the exact product rounded up by less than 1 ps
        exact = before.edges[edge].raw_sum_s * spec.margin
        assert exact <= before.edges[edge].min_s < exact + PS


@settings(deadline=None)
@given(specs(), st.integers(0, 10_000))
def test_a_smaller_loss_budget_never_lengthens_the_maximum(spec: StageSpec, cut: int) -> None:
    from dataclasses import replace

    assert spec.loss_budget is not None
    smaller = replace(spec, loss_budget=spec.loss_budget * Fraction(10_000 - cut, 10_000))
    for edge in ("to_high", "to_low"):
        big = stage_window(spec).edges[edge].max_s
        small = stage_window(smaller).edges[edge].max_s
        assert big is not None and small is not None
        assert small <= big
        # the maximum never spends more than the budget (checked with the cost function)
    window = stage_window(smaller)
    top = {edge: window.edges[edge].max_s or Fraction(0) for edge in ("to_high", "to_low")}
    costs = stage_costs(smaller, top)
    assert smaller.loss_budget is not None
    assert costs.reverse_conduction_w + costs.recovery_w <= smaller.loss_budget
