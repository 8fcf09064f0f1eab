"""A Make/Ninja depfile for `gapforge build --depfile FILE` (issue 22).

One rule: every file the build writes depends on the design file, every layout file its outputs
use (built-in ones where they are installed) and the templates the headers are rendered from, so
a firmware build reruns gapforge when any of them changes. Paths are written as the build sees
them; a space is escaped with a backslash, `#` as `\\#` and `$` as `$$` (GNU Make's rules; Ninja
reads the same form). A path with a newline cannot be written and is refused.
"""

from __future__ import annotations

import importlib.resources
from pathlib import Path

from gapforge.base.errors import GapforgeError
from gapforge.pipeline.build import BuildPlan
from gapforge.timer.layouts import resolve

TEMPLATES = ("header.h.j2",)


def _escape(path: Path | str) -> str:
    text = str(path)
    if "\n" in text or "\r" in text:
        raise GapforgeError("a path with a line break cannot go into a depfile", text)
    return text.replace("$", "$$").replace("#", "\\#").replace(" ", "\\ ")


def inputs(plan: BuildPlan) -> list[Path]:
    """The design, every layout file and the templates, each once, in a stable order."""
    design = plan.design.path
    found: list[Path] = [design]
    for op in plan.outputs:
        target = op.output.target
        is_path = target.endswith(".toml") or "/" in target or "\\" in target
        found.append(resolve(str(design.parent / target) if is_path else target))
    templates = importlib.resources.files("gapforge") / "outputs" / "templates"
    found += [Path(str(templates / name)) for name in TEMPLATES]
    unique: list[Path] = []
    for path in found:
        if path not in unique:
            unique.append(path)
    return unique


def depfile_text(plan: BuildPlan, outputs: list[Path]) -> str:
    targets = " ".join(_escape(p) for p in outputs)
    deps = " \\\n  ".join(_escape(p) for p in inputs(plan))
    return f"{targets}: \\\n  {deps}\n"
