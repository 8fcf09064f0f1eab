"""Options shared by several commands, defined once, and the click parameter types behind them."""

from __future__ import annotations

import json
from collections.abc import Callable
from fractions import Fraction
from typing import Any, TypeVar

import click

from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import parse_quantity, parse_tolerance

F = TypeVar("F", bound=Callable[..., Any])


class Quantity(click.ParamType):
    """Engineering notation, parsed exactly to a Fraction ('160MHz', '6.25ns', '4.7k')."""

    name = "quantity"

    def __init__(self, unit: str, allow_zero: bool = False) -> None:
        self.unit = unit
        self.allow_zero = allow_zero

    def convert(self, value: Any, param: click.Parameter | None, ctx: click.Context | None) -> Any:
        if isinstance(value, Fraction):
            return value
        where = f"--{param.name.replace('_', '-')}" if param and param.name else "value"
        try:
            return parse_quantity(value, self.unit, where, allow_zero=self.allow_zero)
        except GapforgeError as exc:
            self.fail(exc.message, param, ctx)


class Tolerance(click.ParamType):
    name = "tolerance"

    def convert(self, value: Any, param: click.Parameter | None, ctx: click.Context | None) -> Any:
        if isinstance(value, Fraction):
            return value
        try:
            return parse_tolerance(value, "tolerance")
        except GapforgeError as exc:
            self.fail(exc.message, param, ctx)


def json_option(f: F) -> F:
    return click.option("--json", "as_json", is_flag=True, help="Print JSON instead of text.")(f)


# Typical clock tolerances (common practice; see the README's "Required inputs"):
# a crystal is good to tens of ppm, a trimmed on-chip RC oscillator to 1-2 % (more over
# temperature). The fastest clock gives the shortest dead time, so it is never assumed.
CLOCK_TOL_HINT = (
    "the timer clock's tolerance is required (the fastest clock gives the shortest dead time): "
    "crystal tens of ppm (e.g. 50ppm), internal RC oscillator 1-2 % (more over temperature); "
    "give 0ppm only for a clock that is exact"
)


def require_clock_tol(value: Fraction | None, where: str = "--clock-tol") -> Fraction:
    """The stated clock tolerance, or exit 2 naming typical values (issue 19)."""
    if value is None:
        raise GapforgeError(CLOCK_TOL_HINT, where)
    return value


def clock_options(f: F) -> F:
    f = click.option(
        "--clock-tol",
        type=Tolerance(),
        default=None,
        help="Timer clock tolerance, required: '50ppm' (crystal), '2%' (RC oscillator), "
        "'0ppm' stated for an exact clock.",
    )(f)
    f = click.option(
        "--clock", type=Quantity("Hz"), required=True, help="Timer clock frequency, e.g. 160MHz."
    )(f)
    return f


def diagram_options(f: F) -> F:
    f = click.option(
        "--ascii", "ascii_only", is_flag=True, help="Plain ASCII in the timing diagram (for logs)."
    )(f)
    f = click.option("--no-diagram", is_flag=True, help="Leave out the text timing diagram.")(f)
    return f


def emit_json(doc: Any) -> None:
    click.echo(json.dumps(doc, indent=2, sort_keys=False))


def warn_renamed(name: str) -> None:
    """One line on stderr when a built-in layout is given by its old name (it still loads)."""
    from gapforge.timer.layouts import rename_warning

    warning = rename_warning(name)
    if warning is not None:
        click.echo(f"warning: {warning}", err=True)
