"""The command line: one lazily loaded module per command, one place that catches user errors.

`gapforge --help` and `gapforge targets` import neither numpy nor any command they don't run.
Every command module exposes a click command named `command`. User mistakes raise
`GapforgeError`; `main` prints them as one line and exits 2. Limit violations exit 1.
"""

from __future__ import annotations

import importlib
import importlib.util
import sys
from typing import Any

import click

from gapforge import __version__
from gapforge.base.errors import GapforgeError

# command name -> (module, one-line help). Order is the order shown in --help.
COMMANDS: dict[str, tuple[str, str]] = {
    "targets": ("gapforge.cli.targets_cmd", "List the built-in target layouts, or show one."),
    "fit": ("gapforge.cli.fit_cmd", "Fit a dead time onto one target layout's codes."),
    "build": ("gapforge.cli.build_cmd", "Fit a design file's outputs and write C headers."),
    "analog": ("gapforge.cli.analog_cmd", "Model the RC-diode-Schmitt reference network."),
    "window": ("gapforge.cli.window_cmd", "Derive the power stage's dead-time window."),
    "sweep": ("gapforge.cli.sweep_cmd", "Compare layouts x clocks x dividers against a window."),
    "measure": ("gapforge.cli.measure_cmd", "Measure dead times in a capture or serial stream."),
    "firmware": ("gapforge.cli.firmware_cmd", "Write the C capture-line formatter for a bench."),
    "report": ("gapforge.cli.report_cmd", "Write a self-contained HTML design report."),
}


class LazyGroup(click.Group):
    """A group whose subcommands are imported only when run (or when their help is asked for)."""

    def list_commands(self, ctx: click.Context) -> list[str]:
        return [name for name in COMMANDS if _available(name)]

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        if cmd_name not in COMMANDS or not _available(cmd_name):
            return None
        module = importlib.import_module(COMMANDS[cmd_name][0])
        command: click.Command = module.command
        return command

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        rows = [(name, COMMANDS[name][1]) for name in self.list_commands(ctx)]
        if rows:
            with formatter.section("Commands"):
                formatter.write_dl(rows)


def _available(name: str) -> bool:
    return importlib.util.find_spec(COMMANDS[name][0]) is not None


@click.group(cls=LazyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, "--version", prog_name="gapforge")
def cli() -> None:
    """gapforge: fit half-bridge dead times onto timer codes, safely.

    A design aid. Verify every dead time on the bench at reduced voltage with current limiting
    before full power; local codes and licensed practice prevail.

    Exit codes: 0 ok, 1 a limit violated or a target unreachable, 2 bad input or usage.
    """


def main(argv: list[str] | None = None) -> Any:
    """Run the CLI. Every user mistake ends as one line on stderr and exit code 2."""
    try:
        cli.main(args=argv, prog_name="gapforge", standalone_mode=False)
    except click.exceptions.Exit as exc:
        sys.exit(exc.exit_code)
    except click.UsageError as exc:
        where = exc.ctx.command_path if exc.ctx is not None else "gapforge"
        # "gapforge: error: gapforge: ..." says the program's name twice: name a subcommand only
        prefix = "" if where == "gapforge" else f"{where}: "
        _fail(f"{prefix}{exc.format_message()}", exc.exit_code)
    except click.ClickException as exc:
        _fail(exc.format_message(), exc.exit_code)
    except click.Abort:
        _fail("aborted", 130)
    except GapforgeError as exc:
        _fail(exc.line(), 2)
    sys.exit(0)


def _fail(message: str, code: int) -> None:
    click.echo(f"gapforge: error: {' '.join(message.split())}", err=True)
    sys.exit(code)
