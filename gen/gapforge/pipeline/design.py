"""Design files (TOML, a schema of our own): what the firmware needs, read into frozen values.

    format = 1
    [timer]      clock, tolerance, clock_macro
    [pwm]        frequency, counting = "edge" | "center"
    [dead_time]  value (both edges) or to_high / to_low, rounding, source
    [reference]  the analog RC-diode-Schmitt network (read by gapforge.analog)
    [stage]      the power stage's timing and costs (read by gapforge.stage.window)
    [[output]]   target (built-in name or layout file), prefix, file, struct

`source` says where the dead time to reproduce comes from: "explicit" (the values given),
"reference-typical" or "reference-minimum" (the analog network's typical value or worst-case
minimum), or "window" (the power stage's minimum). Without a value, the default is "window" when
there is a [stage] section, else "reference-minimum" when there is a [reference] section.
"""

from __future__ import annotations

import hashlib
import re
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path
from typing import Any

from gapforge.base.errors import GapforgeError
from gapforge.base.schema import Reader, load_toml
from gapforge.timer.fit import ROUNDINGS
from gapforge.timer.layouts import EDGES, Layout, load_layout
from gapforge.timer.limits import COUNTINGS, PwmSpec, compare_counts

FORMAT_VERSION = 1
SOURCES = ("explicit", "reference-typical", "reference-minimum", "window")

_TOP = frozenset(
    {"format", "name", "description", "timer", "pwm", "dead_time", "reference", "stage", "output"}
    | {"adaptive", "gate_driver"}
)
_TIMER = frozenset({"clock", "tolerance", "clock_macro"})
_PWM = frozenset({"frequency", "counting"})
_DEAD = frozenset({"value", "to_high", "to_low", "rounding", "source"})
_OUTPUT = frozenset({"target", "prefix", "file", "struct"})

_MACRO = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")


@dataclass(frozen=True)
class Output:
    target: str
    layout: Layout
    prefix: str
    file: str
    struct: bool


@dataclass(frozen=True)
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
    data, raw = load_toml(path)
    reader = Reader(str(path))
    top = reader.table(data, "")
    top.check_keys(_TOP, {"format", "timer", "output"})
    version = top.integer("format", FORMAT_VERSION)
    if version != FORMAT_VERSION:
        reader.problem(
            "format", f"design format {version} is not supported (expected {FORMAT_VERSION})"
        )

    timer = top.sub("timer", required=True) or reader.table({}, "timer")
    timer.check_keys(_TIMER, {"clock"})
    clock = timer.quantity("clock", "Hz", Fraction(1))
    tol = timer.tolerance("tolerance", Fraction(0))
    clock_macro = timer.string("clock_macro", "TIMER_CLOCK_HZ")
    if not _MACRO.match(clock_macro):
        reader.problem("timer.clock_macro", f"{clock_macro!r} is not a C identifier")

    pwm = None
    pwm_t = top.sub("pwm")
    if pwm_t is not None:
        pwm_t.check_keys(_PWM, {"frequency"})
        freq = pwm_t.quantity("frequency", "Hz", Fraction(1))
        counting = pwm_t.string("counting", "edge", COUNTINGS)
        assert freq is not None
        pwm = PwmSpec(freq, counting)
        if clock is not None and not reader.problems:
            try:
                compare_counts(clock, pwm)
            except GapforgeError as exc:
                reader.problem("pwm.frequency", exc.message)

    reference = None
    ref_t = top.sub("reference")
    if ref_t is not None:
        from gapforge.analog.parameters import read_reference

        reference = read_reference(ref_t)
    stage = None
    stage_t = top.sub("stage")
    if stage_t is not None:
        from gapforge.stage import window as stage_mod

        # each switch turns on and off once per PWM period: the stage switches at the PWM
        # frequency (the default for stage.fsw), and the loss budget's maximum depends on it
        stage = stage_mod.read_stage(stage_t, pwm.frequency_hz if pwm is not None else None)
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

    from gapforge.stage.adaptive import read_adaptive

    adaptive = read_adaptive(top, stage)
    from gapforge.timer.driver import read_gate_driver

    gate_driver = read_gate_driver(top)
    if gate_driver is not None and pwm is None:
        reader.problem("gate_driver", "[gate_driver] limits the duty: it needs a [pwm] section")

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
    source = dead_t.string("source", default_source, SOURCES)
    if source == "explicit" and explicit is None:
        reader.problem(
            "dead_time",
            "give value (or to_high and to_low), or a [reference] or [stage] section to derive it",
        )
    if source.startswith("reference") and ref_t is None:
        reader.problem("dead_time.source", f"{source!r} needs a [reference] section")
    if source == "window" and stage_t is None:
        reader.problem("dead_time.source", "'window' needs a [stage] section")
    if source != "explicit" and explicit is not None:
        reader.problem(
            "dead_time.source", f"{source!r} derives the dead time: drop value/to_high/to_low"
        )

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
    reader.finish()
    assert clock is not None
    return Design(
        path=path,
        label=path.name,
        sha256=hashlib.sha256(raw).hexdigest(),
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
