"""Design files (TOML, a schema of our own): what the firmware needs, read into frozen values.

    format = 1
    [timer]      clock, tolerance, clock_macro
    [pwm]        frequency, counting = "edge" | "center", counter_bits (optional),
                 turn_clocks = 1 | 2 (centre-aligned; optional: the worse of the two)
    [dead_time]  value (both edges) or to_high / to_low, rounding, source
    [reference]  the analog RC-diode-Schmitt network (read by gapforge.analog)
    [stage]      the power stage's timing and costs (read by gapforge.stage.window)
    [[output]]   target (built-in name or layout file), prefix, file, struct

`source` names the dead-time policy (gapforge.pipeline.policy, where each is explained):
"explicit", "window", "reference-typical", "reference-minimum" or "window-within-reference".
With a [stage] section the default is "window" ("explicit" when values are given); without one
`source` is required (issue 19: nothing judges such a dead time, so the policy is stated) and the
build's verdict is `inconclusive`. `[timer] tolerance` is required (never assumed exact).

`load_design` reads the file in named steps, one per section (format, timer, pwm, reference,
stage, adaptive, dead_time, outputs); `load_window_sections` runs only the steps the window of a
design needs (for `window --design`), so both read those sections with the same code.
"""

from __future__ import annotations

import re
from fractions import Fraction
from pathlib import Path
from typing import Any

from gapforge.base.errors import GapforgeError
from gapforge.base.provenance import content_sha256
from gapforge.base.records import record
from gapforge.base.schema import Reader, Table, load_toml
from gapforge.pipeline.policy import SOURCES
from gapforge.timer.fit import ROUNDINGS
from gapforge.timer.layouts import EDGES, Layout, load_layout
from gapforge.timer.limits import COUNTINGS, PwmSpec, compare_counts

FORMAT_VERSION = 1

_TOP = frozenset(
    {"format", "name", "description", "timer", "pwm", "dead_time", "reference", "stage", "output"}
    | {"adaptive", "gate_driver"}
)
_TIMER = frozenset({"clock", "tolerance", "clock_macro"})
_PWM = frozenset({"frequency", "counting", "counter_bits", "turn_clocks"})
_DEAD = frozenset({"value", "to_high", "to_low", "rounding", "source"})
_OUTPUT = frozenset({"target", "prefix", "file", "struct"})

_MACRO = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")


@record
class Output:
    target: str
    layout: Layout
    prefix: str
    file: str
    struct: bool


@record
class Design:
    path: Path
    label: str  # the file name as recorded in provenance (no directories)
    sha256: str
    name: str
    description: str
    clock_hz: Fraction
    clock_tol: Fraction
    clock_macro: str
    pwm: PwmSpec | None
    dead_time: dict[str, Fraction] | None  # explicit values, per edge
    rounding: str
    source: str
    reference: Any  # gapforge.analog.network.ReferenceNetwork or None
    stage: Any  # gapforge.stage.window.StageSpec or None
    outputs: tuple[Output, ...]
    adaptive: Any = None  # gapforge.stage.adaptive.AdaptiveSpec or None ([adaptive])
    gate_driver: Any = None  # gapforge.timer.driver.GateDriverSpec or None ([gate_driver])


def load_design(path: Path) -> Design:
    data, _raw = load_toml(path)
    reader = Reader(str(path))
    top = reader.table(data, "")
    top.check_keys(_TOP, {"format", "timer", "output"})
    _read_format(top)
    clock, tol, clock_macro = _read_timer(top)
    pwm = _read_pwm(top, clock)
    reference = _read_reference(top)
    stage = _read_stage(top, pwm)
    adaptive = _read_adaptive(top, stage)
    gate_driver = _read_gate_driver(top, pwm)
    rounding, explicit, source = _read_dead_time(top, reference, stage)
    outputs = _read_outputs(top, path)
    reader.finish()
    assert clock is not None
    return Design(
        path=path,
        label=path.name,
        sha256=content_sha256(data),  # what the file means (issue 11), not its bytes
        name=top.string("name", path.stem),
        description=top.string("description", ""),
        clock_hz=clock,
        clock_tol=tol,
        clock_macro=clock_macro,
        pwm=pwm,
        dead_time=explicit,
        rounding=rounding,
        source=source,
        reference=reference,
        stage=stage,
        outputs=tuple(outputs),
        adaptive=adaptive,
        gate_driver=gate_driver,
    )


@record
class WindowSections:
    """The sections the window of a design is computed from (see gapforge.pipeline.policy)."""

    path: Path
    pwm: PwmSpec | None
    reference: Any
    stage: Any
    source: str


def load_window_sections(path: Path) -> WindowSections:
    """The [pwm], [reference], [stage] and [dead_time] sections of a design file, read by the
    same steps as `load_design`; a file with only a [stage] section is enough."""
    data, _raw = load_toml(path)
    reader = Reader(str(path))
    top = reader.table(data, "")
    top.check_keys(_TOP)
    _read_format(top)
    pwm = _read_pwm(top, None)
    reference = _read_reference(top)
    stage = _read_stage(top, pwm)
    _rounding, _explicit, source = _read_dead_time(top, reference, stage)
    reader.finish()
    return WindowSections(path, pwm, reference, stage, source)


def _read_format(top: Table) -> None:
    version = top.integer("format", FORMAT_VERSION)
    if version != FORMAT_VERSION:
        top.reader.problem(
            "format", f"design format {version} is not supported (expected {FORMAT_VERSION})"
        )


def _read_timer(top: Table) -> tuple[Fraction | None, Fraction, str]:
    """[timer]: the clock, its tolerance and the firmware's clock macro."""
    timer = top.sub("timer", required=True) or top.reader.table({}, "timer")
    timer.check_keys(_TIMER, {"clock"})
    clock = timer.quantity("clock", "Hz", Fraction(1))
    if not timer.has("tolerance"):
        # issue 19: the fastest clock gives the shortest dead time, so it is never assumed exact
        timer.reader.problem(
            timer.key_path("tolerance"),
            "required: the timer clock's tolerance (crystal tens of ppm, e.g. \"50ppm\"; "
            "internal RC oscillator 1-2 %, more over temperature); \"0ppm\" only for an exact "
            "clock",
        )
    tol = timer.tolerance("tolerance", Fraction(0))
    clock_macro = timer.string("clock_macro", "TIMER_CLOCK_HZ")
    if not _MACRO.match(clock_macro):
        top.reader.problem("timer.clock_macro", f"{clock_macro!r} is not a C identifier")
    return clock, tol, clock_macro


def _read_pwm(top: Table, clock: Fraction | None) -> PwmSpec | None:
    """[pwm]: frequency and counting, checked against the clock when there is one."""
    pwm_t = top.sub("pwm")
    if pwm_t is None:
        return None
    pwm_t.check_keys(_PWM, {"frequency"})
    freq = pwm_t.quantity("frequency", "Hz", Fraction(1))
    counting = pwm_t.string("counting", "edge", COUNTINGS)
    # optional width of the PWM counter: a period or compare count that does not fit warns
    bits = pwm_t.integer("counter_bits", 0, 2, 64) if pwm_t.has("counter_bits") else None
    # centre-aligned: clocks at each turning point (2: compare c gives 2c clocks, 1: 2c - 1);
    # not stated: the worse of the two (timer.limits)
    turn = pwm_t.integer("turn_clocks", 2, 1, 2) if pwm_t.has("turn_clocks") else None
    if turn is not None and counting != "center":
        top.reader.problem("pwm.turn_clocks", "applies to counting = 'center' only")
        turn = None
    assert freq is not None
    pwm = PwmSpec(freq, counting, bits, turn)
    if clock is not None and not top.reader.problems:
        try:
            compare_counts(clock, pwm)
        except GapforgeError as exc:
            top.reader.problem("pwm.frequency", exc.message)
    return pwm


def _read_reference(top: Table) -> Any:
    """[reference]: the old analog network (read by gapforge.analog)."""
    ref_t = top.sub("reference")
    if ref_t is None:
        return None
    from gapforge.analog.parameters import read_reference

    return read_reference(ref_t)


def _read_stage(top: Table, pwm: PwmSpec | None) -> Any:
    """[stage]: the power stage, switching at the PWM frequency."""
    stage_t = top.sub("stage")
    if stage_t is None:
        return None
    from gapforge.stage import stage_reader as stage_mod

    # each switch turns on and off once per PWM period: the stage switches at the PWM
    # frequency (the default for stage.fsw), and the loss budget's maximum depends on it
    stage = stage_mod.read_stage(stage_t, pwm.frequency_hz if pwm is not None else None)
    reader = top.reader
    if (
        pwm is not None
        and stage.fsw is not None
        and not reader.problems
        and stage.fsw != pwm.frequency_hz
    ):
        reader.problem(
            "stage.fsw",
            f"{float(stage.fsw):.6g} Hz differs from pwm.frequency "
            f"{float(pwm.frequency_hz):.6g} Hz (a half bridge switches once per PWM period;"
            " drop stage.fsw or make them equal)",
        )
    return stage


def _read_adaptive(top: Table, stage: Any) -> Any:
    """[adaptive]: the current-indexed table (read by gapforge.stage.adaptive)."""
    if top.sub("adaptive") is None and not _mentions_qoss(top.data.get("stage")):
        return None  # nothing to read or check (the module is not even imported)
    from gapforge.stage.adaptive import read_adaptive

    return read_adaptive(top, stage)


def _mentions_qoss(stage: Any) -> bool:
    """Whether [stage] or [stage.high] / [stage.low] has a qoss (read and checked with
    [adaptive], even when [adaptive] is absent)."""
    if not isinstance(stage, dict):
        return False
    return "qoss" in stage or any(
        isinstance(stage.get(side), dict) and "qoss" in stage[side] for side in ("high", "low")
    )


def _read_gate_driver(top: Table, pwm: PwmSpec | None) -> Any:
    """[gate_driver]: minimum pulse and bootstrap refresh (read by gapforge.timer.driver)."""
    if top.sub("gate_driver") is None:
        return None  # (the driver module is not even imported: a build starts faster)
    from gapforge.timer.driver import read_gate_driver

    gate_driver = read_gate_driver(top)
    if gate_driver is not None and pwm is None:
        top.reader.problem("gate_driver", "[gate_driver] limits the duty: it needs a [pwm] section")
    return gate_driver


def _read_dead_time(
    top: Table, reference: Any, stage: Any
) -> tuple[str, dict[str, Fraction] | None, str]:
    """[dead_time]: rounding, explicit values and the policy (`source`)."""
    reader = top.reader
    dead_t = top.sub("dead_time") or reader.table({}, "dead_time")
    dead_t.check_keys(_DEAD)
    rounding = dead_t.string("rounding", "safe", ROUNDINGS)
    explicit: dict[str, Fraction] | None = None
    if dead_t.has("value") or dead_t.has("to_high") or dead_t.has("to_low"):
        both = dead_t.quantity("value", "s", required=False)
        explicit = {}
        for edge in EDGES:
            v = dead_t.quantity(edge, "s", both, required=not dead_t.has("value"))
            explicit[edge] = v if v is not None else Fraction(0)
        if both is not None and dead_t.has("to_high") and dead_t.has("to_low"):
            reader.problem("dead_time.value", "give value, or to_high and to_low, not all three")
    default_source = (
        "explicit"
        if explicit
        else "window"
        if stage is not None
        else "reference-minimum"
        if reference is not None
        else "explicit"
    )
    if stage is None and not dead_t.has("source"):
        # issue 19: without a power stage nothing judges the dead time; the policy is stated
        reader.problem(
            "dead_time.source",
            "required without a [stage] section: name the dead-time policy ("
            + ", ".join(s for s in SOURCES if s != "window")
            + "); without a power stage the dead time is not judged, only fitted",
        )
    source = dead_t.string("source", default_source, SOURCES)
    _check_source(top, source, explicit)
    return rounding, explicit, source


def _check_source(top: Table, source: str, explicit: dict[str, Fraction] | None) -> None:
    """The policy has what it needs: its section, and no values it would ignore."""
    reader = top.reader
    if source == "explicit" and explicit is None:
        reader.problem(
            "dead_time",
            "give value (or to_high and to_low), or a [reference] or [stage] section to derive it",
        )
    if source.startswith("reference") and not top.has("reference"):
        reader.problem("dead_time.source", f"{source!r} needs a [reference] section")
    if source == "window-within-reference" and not top.has("reference"):
        reader.problem("dead_time.source", f"{source!r} needs a [reference] section")
    if source == "window" and not top.has("stage"):
        reader.problem("dead_time.source", "'window' needs a [stage] section")
    if source != "explicit" and explicit is not None:
        reader.problem(
            "dead_time.source", f"{source!r} derives the dead time: drop value/to_high/to_low"
        )


def _read_outputs(top: Table, path: Path) -> list[Output]:
    """[[output]]: one header per layout, each with a unique prefix and file."""
    reader = top.reader
    outputs: list[Output] = []
    prefixes: set[str] = set()
    files: set[str] = set()
    for t in top.subs("output"):
        t.check_keys(_OUTPUT, {"target", "prefix", "file"})
        target = t.string("target", "")
        prefix = t.string("prefix", "")
        file = t.string("file", "")
        struct = t.boolean("struct", False)
        if prefix and not _MACRO.match(prefix):
            reader.problem(t.key_path("prefix"), f"{prefix!r} is not a C identifier prefix")
        if prefix.upper() in prefixes:
            reader.problem(
                t.key_path("prefix"),
                f"prefix {prefix!r} is used twice (include guards ignore case)",
            )
        prefixes.add(prefix.upper())
        if file and (
            Path(file).is_absolute() or ".." in Path(file).parts or not file.endswith(".h")
        ):
            reader.problem(t.key_path("file"), f"{file!r} must be a relative path ending in .h")
        if file in files:
            reader.problem(t.key_path("file"), f"file {file!r} is written twice")
        files.add(file)
        if not target:
            continue
        is_path = target.endswith(".toml") or "/" in target
        try:
            layout = load_layout(str(path.parent / target) if is_path else target, label=target)
        except GapforgeError as exc:
            reader.problem(t.key_path("target"), exc.line())
            continue
        outputs.append(Output(target, layout, prefix, file, struct))
    if not top.has("output"):
        pass  # reported as a missing required key
    elif not outputs and not reader.problems:
        reader.problem("output", "list at least one [[output]]")
    return outputs
