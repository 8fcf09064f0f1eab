"""`gapforge fit`: fit a dead time onto one layout."""

from __future__ import annotations

import sys
from fractions import Fraction

import click

from gapforge.base.caution import SHORT as CAUTION
from gapforge.base.display import verdict_word
from gapforge.base.errors import GapforgeError
from gapforge.cli.options import (
    Quantity,
    clock_options,
    diagram_options,
    emit_json,
    json_option,
    require_clock_tol,
    warn_renamed,
)
from gapforge.outputs.views import fit_json, fit_text
from gapforge.timer.fit import ROUNDINGS, FitRequest, fit
from gapforge.timer.layouts import load_layout
from gapforge.timer.limits import COUNTINGS, PwmSpec, compare_counts, pwm_limits


@click.command()
@clock_options
@click.option(
    "--dead-time",
    type=Quantity("s"),
    default=None,
    help="Dead time for both edges, e.g. 25ns.",
)
@click.option(
    "--to-high",
    type=Quantity("s"),
    default=None,
    help="Gap before the high-side output turns on (overrides --dead-time).",
)
@click.option(
    "--to-low",
    type=Quantity("s"),
    default=None,
    help="Gap before the low-side output turns on (overrides --dead-time).",
)
@click.option("--target", required=True, help="Built-in target layout name or a target layout .toml file.")
@click.option(
    "--rounding",
    type=click.Choice(ROUNDINGS),
    default="safe",
    show_default=True,
    help="safe: never below the request at the fastest clock; nearest: closest nominal.",
)
@click.option(
    "--divider-code",
    type=int,
    default=None,
    help="Use only this divider code (default: search every divider).",
)
@click.option("--pwm", type=Quantity("Hz"), default=None, help="PWM frequency for the limits.")
@click.option(
    "--counting",
    type=click.Choice(COUNTINGS),
    default="edge",
    show_default=True,
    help="PWM counting: edge-aligned up, or center-aligned up/down.",
)
@click.option(
    "--turn-clocks",
    type=click.IntRange(1, 2),
    default=None,
    help="Centre-aligned: clocks the counter spends at 0 and at the top (2: compare c gives 2c "
    "clocks; 1: it turns at the top once, 2c - 1). Default: the worse of the two.",
)
@diagram_options
@json_option
def command(
    clock: Fraction,
    clock_tol: Fraction | None,
    dead_time: Fraction | None,
    to_high: Fraction | None,
    to_low: Fraction | None,
    target: str,
    rounding: str,
    divider_code: int | None,
    pwm: Fraction | None,
    counting: str,
    turn_clocks: int | None,
    no_diagram: bool,
    ascii_only: bool,
    as_json: bool,
) -> None:
    """Fit a requested dead time onto one target layout's codes, exactly."""
    tol = require_clock_tol(clock_tol)
    high = to_high if to_high is not None else dead_time
    low = to_low if to_low is not None else dead_time
    if high is None or low is None:
        raise GapforgeError("give --dead-time, or both --to-high and --to-low", "fit")
    try:
        layout = load_layout(target)
    except GapforgeError as exc:
        raise exc.at("--target") if exc.where is None else exc from None
    warn_renamed(target)
    if divider_code is not None and not 0 <= divider_code < len(layout.dividers):
        raise GapforgeError(
            f"divider code {divider_code} is not one of 0..{len(layout.dividers) - 1} "
            f"for layout {layout.name}",
            "--divider-code",
        )
    if turn_clocks is not None and (pwm is None or counting != "center"):
        raise GapforgeError("needs --pwm F --counting center", "--turn-clocks")
    spec = None
    if pwm is not None:
        try:
            spec = PwmSpec(pwm, counting, None, turn_clocks)
            compare_counts(clock, spec)
        except GapforgeError as exc:
            raise exc.at("--pwm") from None
    result = fit(layout, FitRequest(clock, tol, high, low, rounding), divider_code)
    limits = pwm_limits(result, spec) if spec is not None and result.ok else None
    from gapforge.outputs.answer import fit_answer, fit_verdict

    verdict, reason = fit_verdict(result, limits)
    if as_json:
        doc = fit_json(result, limits)
        doc["verdict"] = verdict_word(verdict)
        doc["reason"] = reason
        emit_json(doc)
    else:
        click.echo(fit_answer(result, verdict, reason))  # the answer first (issue 10)
        click.echo("")
        click.echo(fit_text(result, limits, verdict_word(verdict)))
        if not no_diagram and result.ok:
            from gapforge.outputs.diagram import pair_diagram_for_fit

            click.echo("")
            click.echo(pair_diagram_for_fit(result, limits, ascii_only=ascii_only))
        click.echo(CAUTION)
    sys.exit(0 if verdict == "ok" else 1)
