"""docs/json.md lists every command's JSON keys (issue 10); each documented key must exist in the
real output of the example command written under its heading. The outside reference here is the
page itself: a key renamed in the code without the page (or the reverse) fails this test."""

from __future__ import annotations

import json
import re
import shlex
import sys
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner

from conftest import REPO
from gapforge.cli import cli

DOC = REPO / "docs" / "json.md"


def sections() -> list[tuple[str, str, list[str]]]:
    """(heading, example command, documented key paths) per command."""
    out = []
    for block in DOC.read_text(encoding="utf-8").split("\n## ")[1:]:
        heading = block.splitlines()[0].strip()
        command = re.search(r"Example: `([^`]+)`", block)
        assert command, heading
        keys = re.findall(r"^\| `([^`]+)` \|", block, re.M)
        out.append((heading, command.group(1), keys))
    return out


def resolve(doc: Any, path: str) -> bool:
    """Whether some value in `doc` sits at `path` ('<x>' any key, '[]' any array element)."""
    tokens = [t for t in re.split(r"\.|(?=\[\])", path) if t]
    values = [doc]
    for token in tokens:
        found: list[Any] = []
        for v in values:
            if token == "[]":
                found += v if isinstance(v, list) else []
            elif token.startswith("<"):
                found += list(v.values()) if isinstance(v, dict) else []
            elif isinstance(v, dict) and token in v:
                found.append(v[token])
        values = found
        if not values:
            return False
    return True


def test_resolve_reads_the_page_notation() -> None:
    doc = {"edges": {"to_high": {"min_s": 1}}, "rows": [{"fields": {"gap": 3}}]}
    assert resolve(doc, "edges.<edge>.min_s") and resolve(doc, "rows[].fields.<field>")
    assert not resolve(doc, "edges.<edge>.max_s") and not resolve(doc, "rows[].code")


@pytest.mark.parametrize("heading", [s[0] for s in sections()])
def test_every_documented_key_exists(heading: str, tmp_path: Path) -> None:
    sys.path.insert(0, str(REPO / "tests"))
    from test_report import capture_csv

    capture = tmp_path / "cap.csv"
    capture_csv(capture)
    _, command, keys = next(s for s in sections() if s[0] == heading)
    args = shlex.split(command.format(capture=capture))
    assert args[0] == "gapforge"
    args = [str(REPO / a) if a.startswith("examples/") else a for a in args[1:]]
    result = CliRunner().invoke(cli, args)
    assert result.exit_code in (0, 1), result.output
    doc = json.loads(result.stdout)
    missing = [k for k in keys if not resolve(doc, k)]
    assert not missing, f"{heading}: documented but absent: {missing}"
    assert len(keys) >= 3
