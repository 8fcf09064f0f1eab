"""`gapforge firmware`: write the C capture-line formatter for the bench firmware."""

from __future__ import annotations

from pathlib import Path

import click

from gapforge.base import caution
from gapforge.base.files import write_files
from gapforge.outputs.firmware import render_capture_helper


@click.command()
@click.option("--out", "out_dir", type=click.Path(path_type=Path, file_okay=False), required=True,
              help="Directory for gapforge_capture_fmt.h and gapforge_capture_fmt.c.")
@click.option("--counter-bits", type=click.Choice(["16", "32", "64"]), default="32",
              show_default=True, help="Width of the capture counter.")
def command(out_dir: Path, counter_bits: str) -> None:
    """Write the C helper that formats gate-edge capture lines (protocol of `measure --serial`).

    A design aid: verify every dead time on the bench at reduced voltage with current limiting;
    local codes and licensed practice prevail.
    """
    texts = render_capture_helper(int(counter_bits))
    written = write_files({out_dir / name: text for name, text in texts.items()})
    for path in written:
        click.echo(f"wrote {path}")
    click.echo(caution.SHORT)
