"""Compiled templates kept beside the templates (Jinja2's bytecode cache, as Python keeps .pyc):
the output never depends on the cache, a stale or broken cache file compiles afresh, and a
folder that cannot be written, or Python told to write no bytecode, writes nothing and fails
nothing."""

from __future__ import annotations

import os
import sys
from pathlib import Path

import jinja2
import pytest

from gapforge.outputs.templating import _CompiledTemplates, environment


def _env(folder: Path) -> jinja2.Environment:
    return jinja2.Environment(
        loader=jinja2.DictLoader({"t.j2": "{% for x in xs %}[{{ x }}]{% endfor %}\n"}),
        undefined=jinja2.StrictUndefined, keep_trailing_newline=True,
        bytecode_cache=_CompiledTemplates(str(folder), "__jinja2_test_%s.cache"))


@pytest.fixture(autouse=True)
def _bytecode_written(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(sys, "dont_write_bytecode", False)  # whatever the environment says


def test_a_cached_template_renders_as_a_fresh_one(tmp_path: Path) -> None:
    folder = tmp_path / "__pycache__"
    first = _env(folder).get_template("t.j2").render(xs=[1, 2])
    written = sorted(folder.iterdir())
    assert len(written) == 1 and written[0].name.startswith("__jinja2_test_")
    second = _env(folder).get_template("t.j2").render(xs=[1, 2])  # from the cache
    assert first == second == "[1][2]\n"


def test_a_broken_or_stale_cache_file_compiles_afresh(tmp_path: Path) -> None:
    folder = tmp_path / "__pycache__"
    _env(folder).get_template("t.j2")
    (cached,) = folder.iterdir()
    for junk in (b"", b"j2garbage", cached.read_bytes()[:-7], os.urandom(64)):
        cached.write_bytes(junk)
        assert _env(folder).get_template("t.j2").render(xs=[3]) == "[3]\n"


def test_an_unwritable_folder_or_no_bytecode_writes_nothing(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    assert _env(blocker / "__pycache__").get_template("t.j2").render(xs=[4]) == "[4]\n"
    folder = tmp_path / "__pycache__"
    monkeypatch.setattr(sys, "dont_write_bytecode", True)
    assert _env(folder).get_template("t.j2").render(xs=[5]) == "[5]\n"
    assert not folder.exists()


def test_the_package_environments_cache_beside_the_templates() -> None:
    # the header template (C kind) and the report (HTML kind) never share a cache file: the
    # same source compiles differently with autoescape and block trimming
    c_cache = environment().bytecode_cache
    html_cache = environment(html=True).bytecode_cache
    assert isinstance(c_cache, _CompiledTemplates) and isinstance(html_cache, _CompiledTemplates)
    assert c_cache.directory == html_cache.directory
    assert Path(c_cache.directory).parent.name == "templates"
    assert c_cache.pattern != html_cache.pattern


def test_other_options_never_take_the_compiled_code(tmp_path: Path) -> None:
    # review rev3b: Jinja2's own check is the template's source and Python's version; code
    # compiled with trim_blocks off was taken by an environment with it on ("\n[1]\n\n"
    # instead of "[1]\n", Jinja2's documented trim_blocks: the newline after a block tag is
    # removed). The package's cache file names carry a fingerprint of the options.
    from gapforge.outputs.templating import fingerprint

    source = {"t.j2": "{% for x in xs %}\n[{{ x }}]\n{% endfor %}\n"}

    def render(trim: bool, pattern: str) -> str:
        env = jinja2.Environment(loader=jinja2.DictLoader(source), trim_blocks=trim,
                                 keep_trailing_newline=True,
                                 bytecode_cache=_CompiledTemplates(str(tmp_path), pattern))
        return env.get_template("t.j2").render(xs=[1])

    assert render(False, "shared_%s") == "\n[1]\n\n"
    assert render(True, "shared_%s") == "\n[1]\n\n"  # the stale code Jinja2 alone would take
    patterns = {trim: f"p_{fingerprint({'trim_blocks': trim})}_%s" for trim in (False, True)}
    assert patterns[False] != patterns[True]
    assert render(False, patterns[False]) == "\n[1]\n\n"
    assert render(True, patterns[True]) == "[1]\n"
    c_pattern = environment().bytecode_cache.pattern  # type: ignore[union-attr]
    html_pattern = environment(html=True).bytecode_cache.pattern  # type: ignore[union-attr]
    assert jinja2.__version__ not in c_pattern and len(c_pattern.split("_")[-2]) == 12
    assert c_pattern.split("_")[-2] != html_pattern.split("_")[-2]


def test_a_well_formed_file_without_code_compiles_afresh(tmp_path: Path) -> None:
    # the file's header (magic, checksum) intact, a marshalled integer in place of the code:
    # it used to reach `exec` and fail the render
    import marshal
    import pickle

    from jinja2.bccache import bc_magic

    folder = tmp_path / "__pycache__"
    _env(folder).get_template("t.j2")
    (cached,) = folder.iterdir()
    data = cached.read_bytes()
    assert data.startswith(bc_magic)
    header = len(bc_magic) + len(pickle.dumps(pickle.loads(data[len(bc_magic):]), 2))  # as Jinja2 writes it
    cached.write_bytes(data[:header] + marshal.dumps(42))
    assert _env(folder).get_template("t.j2").render(xs=[6]) == "[6]\n"
