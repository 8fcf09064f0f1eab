"""`gapforge build`: fit every output of a design file and write the C headers.

The first lines are the answer (per output: verdict, register word, worst-case dead times, or
every reason it fails); the build report follows. Writing is all or nothing: every output's path
is checked first (no two the same file once normalised or ignoring case, none inside another, no
unportable character), a header whose bytes would not change is left untouched ("unchanged"),
and missing folders are created only with --parents. `--check` writes nothing and lists missing,
stale and unchanged files; its text, JSON and exit code agree.
"""

from __future__ import annotations

import sys
from pathlib import Path, PurePosixPath
from typing import Any

import click

from gapforge.base.caution import SHORT as CAUTION
from gapforge.base.errors import GapforgeError
from gapforge.base.files import check_output_set, commit, compare, prepare
from gapforge.cli.options import diagram_options, emit_json, json_option
from gapforge.pipeline.build import BuildPlan, plan_design
from gapforge.pipeline.design import load_design
from gapforge.timer.limits import counter_problem

# refused in an output's file name: control characters, and what Windows file systems or a C
# #include "..." line cannot hold
_UNPORTABLE = set('"*<>|?:\\') | {chr(c) for c in range(32)} | {chr(127)}


@click.command()
@click.argument("design", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--out", "out_dir", type=click.Path(file_okay=False, path_type=Path), default=None,
              help="Directory for the headers (default: the design file's directory).")
@click.option("--parents", is_flag=True,
              help="Create missing folders for the outputs (without it a missing folder is an "
              "error, and a failed build never creates one).")
@click.option("--check", is_flag=True,
              help="Write nothing; list missing, stale and unchanged files; exit 1 when any is "
              "missing or stale (for CI).")
@click.option("--details", is_flag=True, help="With --check: print the build report too.")
@click.option("--self-test", "self_test", is_flag=True,
              help="Also write <header>_selftest.c beside each header: a C program that "
              "recomputes the derived macros (compile and run it in firmware CI).")
@click.option("--record", is_flag=True,
              help="Also write <header>.json beside each header: the fitted values as a "
              "versioned JSON record (schema gapforge-dead-time-record).")
@click.option("--depfile", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Also write a Make/Ninja depfile: every file written depends on the design, "
              "every layout file and the templates (so a firmware build reruns gapforge when one "
              "changes).")
@click.option("--strict", is_flag=True,
              help="Refuse (exit 1, nothing written) when a PWM count does not fit the design's "
              "[pwm] counter_bits, instead of warning.")
@diagram_options
@json_option
def command(
    design: Path,
    out_dir: Path | None,
    parents: bool,
    check: bool,
    details: bool,
    self_test: bool,
    record: bool,
    depfile: Path | None,
    strict: bool,
    no_diagram: bool,
    ascii_only: bool,
    as_json: bool,
) -> None:
    """Fit a design file's outputs and write one C header per output.

    Nothing is written unless every output fits: an error leaves existing files untouched.
    """
    plan = plan_design(load_design(design))
    problems = _strict_problems(plan) if strict else []
    # an inconclusive design (no [stage]: not judged) is written as asked, and exits 1
    ok = plan.verdict in ("ok", "inconclusive") and not problems
    texts = _texts(plan, design, out_dir, self_test, record) if ok else {}
    if depfile is not None and texts:
        from gapforge.outputs.depfile import depfile_text

        texts[depfile] = depfile_text(plan, sorted(texts))
    done = 0 if plan.verdict == "ok" else 1
    if check:
        _check(plan, texts, ok, problems, details, no_diagram, ascii_only, as_json)
        return
    prepared = prepare(texts, parents=parents)  # every path and folder checked before output
    if as_json:
        from gapforge.outputs.views import plan_json

        doc = plan_json(plan)
        if not ok:
            doc["strict"] = problems
            emit_json(doc)
            sys.exit(1)
        outcome = commit(prepared)
        doc["files"] = {"written": [str(p) for p in outcome.written],
                        "unchanged": [str(p) for p in outcome.unchanged]}
        emit_json(doc)
        sys.exit(done)
    _report(plan, problems, no_diagram, ascii_only)
    if not ok:
        click.echo("nothing written: fix the verdict above first", err=True)
        click.echo(CAUTION)
        sys.exit(1)
    outcome = commit(prepared)
    for p in outcome.written:
        click.echo(f"wrote {p}")
    for p in outcome.unchanged:
        click.echo(f"unchanged {p}")
    click.echo(CAUTION)
    sys.exit(done)


def _strict_problems(plan: BuildPlan) -> list[str]:
    return [
        f"{op.output.prefix}: {counter_problem(op.limits)}"
        for op in plan.outputs
        if op.limits is not None and counter_problem(op.limits)
    ]


def _texts(
    plan: BuildPlan, design: Path, out_dir: Path | None, self_test: bool, record: bool
) -> dict[Path, str]:
    """Every file of the build, rendered, with its path checked before anything is written."""
    from gapforge.outputs.header import header_text

    directory = out_dir if out_dir is not None else design.parent
    texts: dict[Path, str] = {}
    paths: list[Path] = []  # every target, duplicates kept (pathlib already folds "./")
    for i, op in enumerate(plan.outputs):
        name = op.output.file
        bad = sorted({c for c in name if c in _UNPORTABLE})
        if bad:
            shown = ", ".join(repr(c) for c in bad)
            raise GapforgeError(f"unportable character(s) {shown} in the file name",
                                f"{design}: output[{i}].file")
        texts[directory / name] = header_text(plan, op)
        paths.append(directory / name)
        if self_test:
            from gapforge.outputs.selftest import selftest_name, selftest_text

            texts[directory / selftest_name(name)] = selftest_text(plan, op)
            paths.append(directory / selftest_name(name))
        if record:
            from gapforge.outputs.record import record_text

            json_name = str(PurePosixPath(name).with_suffix(".json"))
            texts[directory / json_name] = record_text(plan, op)
            paths.append(directory / json_name)
    check_output_set(paths)
    return texts


def _report(plan: BuildPlan, problems: list[str], no_diagram: bool, ascii_only: bool) -> None:
    # (the report's modules are imported where a report is shown: an up-to-date --check
    # shows none)
    from gapforge.outputs.answer import plan_answer
    from gapforge.outputs.views import plan_text

    for line in plan_answer(plan):
        click.echo(line)
    for line in problems:
        click.echo(f"fail (strict): {line}")
    click.echo("")
    click.echo(plan_text(plan))
    if not no_diagram and plan.outputs and plan.outputs[0].fit.ok:
        from gapforge.outputs.diagram import pair_diagram_for_fit

        first = plan.outputs[0]
        click.echo("")
        click.echo(pair_diagram_for_fit(first.fit, first.limits, ascii_only=ascii_only))


def _check(
    plan: BuildPlan,
    texts: dict[Path, str],
    ok: bool,
    problems: list[str],
    details: bool,
    no_diagram: bool,
    ascii_only: bool,
    as_json: bool,
) -> None:
    """Compare without writing; the verdict is ok only when every file is present and current."""
    outcome = compare(texts)
    verdict = "ok" if ok and not outcome.missing and not outcome.stale else "fail"
    if verdict == "ok" and plan.verdict == "inconclusive":
        verdict = "inconclusive"  # current files, but nobody judged the dead time (issue 19)
    lists = {"missing": outcome.missing, "stale": outcome.stale, "unchanged": outcome.unchanged}
    if as_json:
        from gapforge.outputs.views import plan_json

        doc: dict[str, Any] = plan_json(plan)
        doc["verdict"] = verdict  # the check's: ok only when the design builds and all is current
        doc["check"] = {k: [str(p) for p in v] for k, v in lists.items()}
        doc["strict"] = problems
        emit_json(doc)
    else:
        counts = ", ".join(f"{len(v)} {k}" for k, v in lists.items())
        if ok:
            why = f" ({plan.reasons[0]})" if plan.verdict == "inconclusive" else ""
            click.echo(f"check {verdict}{why}: {counts}")
        else:
            from gapforge.outputs.answer import plan_answer

            click.echo("check fail: the design does not build, so no file can be current")
            for line in [*plan_answer(plan), *problems]:
                click.echo(f"  {line}")
        for kind, paths in lists.items():
            for p in paths:
                click.echo(f"{kind}: {p}")
        if details:
            click.echo("")
            _report(plan, problems, no_diagram, ascii_only)
        click.echo(CAUTION)
    sys.exit(0 if verdict == "ok" else 1)
