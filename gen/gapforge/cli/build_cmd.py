"""`gapforge build`: fit every output of a design file and write the C headers."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from gapforge.base.caution import SHORT as CAUTION
from gapforge.base.files import write_files
from gapforge.cli.options import diagram_options, emit_json, json_option
from gapforge.outputs.header import render_headers
from gapforge.outputs.views import plan_json, plan_text
from gapforge.pipeline.build import plan_design
from gapforge.pipeline.design import load_design


@click.command()
@click.argument("design", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "--out",
    "out_dir",
    type=click.Path(file_okay=False, path_type=Path),
    default=None,
    help="Directory for the headers (default: the design file's directory).",
)
@click.option(
    "--check",
    is_flag=True,
    help="Write nothing; exit 1 listing headers that are missing or stale (for CI).",
)
@diagram_options
@json_option
def command(
    design: Path,
    out_dir: Path | None,
    check: bool,
    no_diagram: bool,
    ascii_only: bool,
    as_json: bool,
) -> None:
    """Fit a design file's outputs and write one C header per output.

    Nothing is written unless every output fits: an error leaves existing files untouched.
    """
    loaded = load_design(design)
    plan = plan_design(loaded)
    if as_json:
        emit_json(plan_json(plan))
    else:
        click.echo(plan_text(plan))
        if not no_diagram and plan.outputs and plan.outputs[0].fit.ok:
            from gapforge.outputs.diagram import pair_diagram_for_fit

            first = plan.outputs[0]
            click.echo("")
            click.echo(pair_diagram_for_fit(first.fit, first.limits, ascii_only=ascii_only))
    if plan.verdict != "ok":
        if not as_json:
            click.echo("nothing written: fix the verdict above first", err=True)
            click.echo(CAUTION)
        sys.exit(1)
    directory = out_dir if out_dir is not None else design.parent
    texts = {directory / name: text for name, text in render_headers(plan).items()}
    if check:
        stale = [
            p for p, t in texts.items() if not p.is_file() or p.read_text(encoding="utf-8") != t
        ]
        for p in stale:
            click.echo(f"stale: {p}", err=True)
        if not as_json:
            click.echo(CAUTION)
        sys.exit(1 if stale else 0)
    written = write_files(texts)
    if not as_json:
        for p in written:
            click.echo(f"wrote {p}")
        click.echo(CAUTION)
