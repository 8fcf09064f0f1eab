"""The Jinja2 environment for every template: loaded from the package, StrictUndefined.

Templates hold layout only (loops over rows prepared in Python; no arithmetic, no conditions).

Compiled templates are kept as Python keeps compiled modules: in a `__pycache__` folder beside
the templates, one file per template and kind of environment, checked against the template's
own source (Jinja2's bytecode cache: a changed template, or another Python version, compiles
afresh). The file name holds a fingerprint of everything else that shapes the compiled code
(Jinja2's version and the environment's options), which Jinja2's own check leaves out: code
compiled under other options is never taken (review rev3b). Nothing is written where Python writes no bytecode (`-B`, PYTHONDONTWRITEBYTECODE) or
where the folder cannot be written; the output never depends on the cache, only the time does.
"""

from __future__ import annotations

import hashlib
import pickle
import sys
import types
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
            return
        if bucket.code is not None and not isinstance(bucket.code, types.CodeType):
            bucket.reset()  # a well-formed file holding no code: compile afresh


def fingerprint(options: dict[str, object]) -> str:
    """What shapes a template's compiled code besides its source and Python's version: Jinja2's
    version and the environment's options (sorted, by repr), hashed to 12 hex digits."""
    text = repr((jinja2.__version__, sorted(options.items())))
    return hashlib.sha256(text.encode()).hexdigest()[:12]


@lru_cache(maxsize=2)
def environment(*, html: bool = False) -> jinja2.Environment:
    """C and text templates keep every newline as written; HTML escapes and trims block lines.

    One environment per kind for the process: it keeps its compiled templates, so a design
    with several outputs compiles the header template once (the caller only renders)."""
    kind = "html" if html else "c"
    options: dict[str, object] = {
        "undefined": jinja2.StrictUndefined,
        "autoescape": html,
        "keep_trailing_newline": True,
        "trim_blocks": html,
        "lstrip_blocks": html,
    }
    shown = {k: getattr(v, "__qualname__", v) for k, v in options.items()}
    return jinja2.Environment(
        loader=jinja2.PackageLoader("gapforge.outputs", "templates"),
        bytecode_cache=_CompiledTemplates(str(CACHE),
                                          f"__jinja2_{kind}_{fingerprint(shown)}_%s.cache"),
        **options,  # type: ignore[arg-type]
    )
