"""`gapforge targets`: list the built-in target layouts, or show one.

A *target layout* describes one timer's dead-time register (fields, codes, dividers) as data;
`--target` elsewhere picks one by name or file. One word across commands, help, README, report.
"""

from __future__ import annotations

import click

from gapforge.base import caution
from gapforge.base.errors import GapforgeError
from gapforge.cli.options import Quantity, emit_json, json_option, warn_renamed
from gapforge.outputs.views import layout_json, layout_text, table
from gapforge.timer.layouts import builtin_names, load_layout


@click.group(invoke_without_command=True)
@json_option
@click.pass_context
def command(ctx: click.Context, as_json: bool) -> None:
    """List the built-in target layouts (timer dead-time registers described as data; generic
    designs of our own), or show one."""
    if ctx.invoked_subcommand is not None:
        return
    layouts = [load_layout(name) for name in builtin_names()]
    if as_json:
        emit_json(
            [{"name": lay.name, "summary": lay.summary, "source": lay.source} for lay in layouts]
        )
        return
    click.echo(table(["name", "summary"], [[lay.name, lay.summary] for lay in layouts]))
    click.echo(
        "\nShow one with: gapforge targets show NAME [--clock F]; "
        "pass your own target layout file anywhere a name is accepted."
    )


@command.command("show")
@click.argument("target")
@click.option(
    "--clock", type=Quantity("Hz"), default=None, help="Show steps and ranges at this clock."
)
@json_option
def show(target: str, clock: object, as_json: bool) -> None:
    """Show one target layout (a built-in NAME or a target layout FILE)."""
    from fractions import Fraction

    try:
        layout = load_layout(target)
    except GapforgeError as exc:
        raise exc.at("TARGET") if exc.where is None else exc from None
    warn_renamed(target)
    clk = clock if isinstance(clock, Fraction) else None
    if as_json:
        # the dead-time ranges shown are what the codes give, not what a stage needs
        emit_json({**layout_json(layout, clk), "caution": caution.TEXT})
    else:
        click.echo(layout_text(layout, clk))
        click.echo(caution.SHORT)
