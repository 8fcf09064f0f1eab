"""The Jinja2 environment for every template: loaded from the package, StrictUndefined.

Templates hold layout only (loops over rows prepared in Python; no arithmetic, no conditions).

Compiled templates are kept as Python keeps compiled modules: in a `__pycache__` folder beside
the templates, one file per template and kind of environment, checked against the template's
own source (Jinja2's bytecode cache: a changed template, or another Python version, compiles
afresh). Nothing is written where Python writes no bytecode (`-B`, PYTHONDONTWRITEBYTECODE) or
where the folder cannot be written; the output never depends on the cache, only the time does.
"""

from __future__ import annotations

import pickle
import sys
from functools import lru_cache
from pathlib import Path

import jinja2
from jinja2.bccache import Bucket

CACHE = Path(__file__).resolve().parent / "templates" / "__pycache__"


class _CompiledTemplates(jinja2.FileSystemBytecodeCache):
    """Jinja2's file cache that never fails a run: a folder it cannot create or write is simply
    not used, and it writes nothing when Python writes no bytecode."""

    def dump_bytecode(self, bucket: Bucket) -> None:
        if sys.dont_write_bytecode:
            return
        try:
            Path(self.directory).mkdir(exist_ok=True)
            super().dump_bytecode(bucket)
        except OSError:
            pass

    def load_bytecode(self, bucket: Bucket) -> None:
        try:
            super().load_bytecode(bucket)
        except (OSError, EOFError, ValueError, TypeError, pickle.UnpicklingError):
            bucket.reset()  # unreadable: compile afresh


@lru_cache(maxsize=2)
def environment(*, html: bool = False) -> jinja2.Environment:
    """C and text templates keep every newline as written; HTML escapes and trims block lines.

    One environment per kind for the process: it keeps its compiled templates, so a design
    with several outputs compiles the header template once (the caller only renders)."""
    kind = "html" if html else "c"
    return jinja2.Environment(
        loader=jinja2.PackageLoader("gapforge.outputs", "templates"),
        undefined=jinja2.StrictUndefined,
        autoescape=html,
        keep_trailing_newline=True,
        trim_blocks=html,
        lstrip_blocks=html,
        bytecode_cache=_CompiledTemplates(str(CACHE), f"__jinja2_{kind}_%s.cache"),
    )
