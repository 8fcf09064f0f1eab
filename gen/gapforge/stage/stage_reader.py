"""Reading a [stage] table (design file or the command line's stage options) into a StageSpec.

No term of the minimum's sum is ever assumed (issue 19): turn-off delay, fall time, turn-on
delay, the driver's propagation delay range, channel mismatch, isolator skew and timer skew are
all required, each named with the datasheet it comes from when it is missing. `0ns` given
means "checked, there is none" and the breakdown echoes it as given.

Inputs of the maximum that would make the window wider when left out are required too, but only
where the maximum is asked for (a `loss_budget`): the load current (0 A would allow half a
period), the recovery charge of a silicon or SiC body diode (none would leave budget that the
recovery takes), the kind when the reverse-conduction voltage falls back to its default, and a
GaN gate-off voltage added to a `vsd` read at 0 V gate. Documented defaults that stay: margin
1.2 (common practice), the rise time (not counted, kept as reserve), `vsd` (the upper end of the
kind's usual range, the safe side), `fsw` (the design's PWM frequency).
"""

from __future__ import annotations

from fractions import Fraction

from gapforge.base.errors import GapforgeError
from gapforge.base.schema import Table
from gapforge.stage.window import (
    DEFAULT_MARGIN,
    KINDS,
    SIDE_KEYS,
    SIDES,
    STAGE_KEYS,
    StageSpec,
    SwitchTiming,
    stage_problems,
)

# Every term of the minimum's sum: key -> (what it is, where a datasheet gives it).
SIDE_TERMS: dict[str, tuple[str, str]] = {
    "td_off": ("the switch's turn-off delay, max", "switch datasheet"),
    "td_on": ("the switch's turn-on delay, min", "switch datasheet"),
    "t_fall": ("the switch's fall time, max", "switch datasheet"),
    "prop_delay": (
        "the gate driver's propagation delay range MIN:MAX",
        "driver datasheet",
    ),
}
SHARED_TERMS: dict[str, tuple[str, str]] = {
    "mismatch": (
        "the gate driver's part-to-part / channel-to-channel delay mismatch",
        "driver datasheet",
    ),
    "isolator_skew": ("the isolator's or level shifter's skew", "isolator datasheet"),
    "timer_skew": (
        "the skew between the timer's complementary outputs",
        "the controller's datasheet",
    ),
}
REQUIRED_TERMS = {**SIDE_TERMS, **SHARED_TERMS}


def missing_term(key: str) -> str:
    """The one-line message for a term of the minimum's sum that was left out."""
    what, source = REQUIRED_TERMS[key]
    return (
        f"required: {what} ({source}); no term of the minimum is assumed, "
        "give 0ns only after checking there is none"
    )


def read_stage(table: Table, default_fsw: Fraction | None = None) -> StageSpec:
    """A StageSpec from a design file's [stage] table. Problems are recorded on the Reader.

    Timing keys at [stage] apply to both switches; [stage.high] / [stage.low] override them for
    one switch and its driver channel. `current` sets both edges; `current_to_high` /
    `current_to_low` override it (signed: positive flows out of the switch node).
    """
    table.check_keys(STAGE_KEYS)
    sides: dict[str, Table | None] = {}
    for side in SIDES:
        sub = table.sub(side)
        if sub is not None:
            sub.check_keys(SIDE_KEYS)
        sides[side] = sub
    timings = {side: _read_timing(table, sides[side]) for side in SIDES}

    def time(key: str) -> Fraction:
        value = table.quantity(key, "s", Fraction(0), allow_zero=True)
        return value if value is not None else Fraction(0)

    margin = table.quantity("margin", "", DEFAULT_MARGIN)
    kind = table.string("kind", "silicon", KINDS)
    current = table.quantity("current", "A", Fraction(0), allow_zero=True, allow_negative=True)
    current = current if current is not None else Fraction(0)
    i_high = table.quantity("current_to_high", "A", current, allow_zero=True, allow_negative=True)
    i_low = table.quantity("current_to_low", "A", current, allow_zero=True, allow_negative=True)
    gate_off = table.quantity("gate_off", "V", Fraction(0), allow_zero=True, allow_negative=True)
    defaulted = {k for k in ("margin", "kind", "gate_off", "fsw") if not table.has(k)}
    for side in SIDES:
        sub = sides[side]
        if not table.has("t_rise") and not (sub is not None and sub.has("t_rise")):
            defaulted.add(f"{side}.t_rise")
    spec = StageSpec(
        high=timings["high"],
        low=timings["low"],
        mismatch=time("mismatch"),
        isolator_skew=time("isolator_skew"),
        timer_skew=time("timer_skew"),
        margin=margin if margin is not None else DEFAULT_MARGIN,
        kind=kind,
        vsd=table.quantity("vsd", "V", required=False),
        gate_off=gate_off if gate_off is not None else Fraction(0),
        vsd_at_gate_off=table.boolean("vsd_at_gate_off", False),
        current_to_high=i_high if i_high is not None else current,
        current_to_low=i_low if i_low is not None else current,
        fsw=table.quantity("fsw", "Hz", default_fsw, required=False),
        loss_budget=table.quantity("loss_budget", "W", required=False, allow_zero=True),
        qrr=table.quantity("qrr", "C", required=False, allow_zero=True),
        bus_voltage=table.quantity("bus_voltage", "V", required=False),
        defaulted=frozenset(defaulted),
    )
    # a value given wrongly is named first; then every term left out, then the maximum's inputs
    _require_terms(table, sides)
    _require_for_maximum(table)
    if not table.reader.problems:
        for side, key, message in stage_problems(spec):
            where = table.key_path(key)
            side_table = sides.get(side)
            if side_table is not None and side_table.has(key):
                where = side_table.key_path(key)
            table.reader.problem(where, message)
    return spec


def _require_terms(table: Table, sides: dict[str, Table | None]) -> None:
    """Every term of the minimum's sum, per switch (shared or per side) or shared."""
    for key in SIDE_TERMS:
        present = [sub is not None and sub.has(key) for sub in sides.values()]
        if not table.has(key) and not all(present):
            missing = next(s for s, here in zip(SIDES, present, strict=True) if not here)
            target = sides[missing] or table
            target.reader.problem(target.key_path(key), missing_term(key))
    for key in SHARED_TERMS:
        if not table.has(key):
            table.reader.problem(table.key_path(key), missing_term(key))


def _require_for_maximum(table: Table) -> None:
    """With a loss budget, the inputs whose default would widen the maximum must be given."""
    if not table.has("loss_budget"):
        return
    problem = table.reader.problem
    currents = ("current", "current_to_high", "current_to_low")
    if not table.has("current") and not all(table.has(k) for k in currents[1:]):
        key = next(k for k in currents[1:] if not table.has(k))
        problem(
            table.key_path(key),
            "required with loss_budget: the load current at this transition (0 A would allow "
            "a dead time of half a period); give current, or current_to_high and current_to_low",
        )
    if not table.has("vsd") and not table.has("kind"):
        problem(
            table.key_path("kind"),
            "required with loss_budget when vsd is not given: the reverse-conduction voltage "
            "defaults to the upper end of the kind's usual range (silicon, sic or gan)",
        )
    kind = table.raw("kind", "silicon")
    if kind in ("silicon", "sic") and not table.has("qrr"):
        problem(
            table.key_path("qrr"),
            "required with loss_budget: the body diode's reverse-recovery charge Qrr (switch "
            "datasheet; its loss does not shrink with the dead time); give 0nC only after "
            "checking there is none",
        )
    if kind == "gan" and not table.has("gate_off") and not table.raw("vsd_at_gate_off", False):
        problem(
            table.key_path("gate_off"),
            "required with loss_budget for kind 'gan': the gate-off voltage (driver supply), "
            "added once to a vsd read at 0 V gate; give 0V for a gate turned off at 0 V",
        )


def _read_timing(table: Table, side: Table | None) -> SwitchTiming:
    def get(key: str) -> Fraction:
        source = side if side is not None and side.has(key) else table
        value = source.quantity(key, "s", Fraction(0), allow_zero=True)
        return value if value is not None else Fraction(0)

    source = side if side is not None and side.has("prop_delay") else table
    prop_min, prop_max = Fraction(0), Fraction(0)
    if source.has("prop_delay"):
        try:
            prop_min, prop_max = parse_span(source.raw("prop_delay"), source.key_path("prop_delay"))
        except GapforgeError as exc:
            source.reader.problem(source.key_path("prop_delay"), exc.message)
    return SwitchTiming(
        td_off_max=get("td_off"),
        t_fall_max=get("t_fall"),
        td_on_min=get("td_on"),
        t_rise=get("t_rise"),
        prop_min=prop_min,
        prop_max=prop_max,
    )


def parse_span(text: object, where: str) -> tuple[Fraction, Fraction]:
    """'MIN:MAX' propagation delays in seconds ('20ns:35ns'); one value means MIN = MAX."""
    from gapforge.base.quantities import parse_quantity

    if not isinstance(text, str):
        value = parse_quantity(text, "s", where, allow_zero=True)
        return value, value
    parts = text.split(":")
    if len(parts) > 2:
        raise GapforgeError(f"expected MIN:MAX such as '20ns:35ns', got {text!r}", where)
    low = parse_quantity(parts[0], "s", where, allow_zero=True)
    high = parse_quantity(parts[-1], "s", where, allow_zero=True)
    if low > high:
        raise GapforgeError(f"MIN {parts[0].strip()!r} is above MAX {parts[-1].strip()!r}", where)
    return low, high
