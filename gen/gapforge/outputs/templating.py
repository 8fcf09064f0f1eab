"""The Jinja2 environment for every template: loaded from the package, StrictUndefined.

Templates hold layout only (loops over rows prepared in Python; no arithmetic, no conditions).
"""

from __future__ import annotations

from functools import lru_cache

import jinja2


@lru_cache(maxsize=2)
def environment(*, html: bool = False) -> jinja2.Environment:
    """C and text templates keep every newline as written; HTML escapes and trims block lines.

    One environment per kind for the process: it keeps its compiled templates, so a design
    with several outputs compiles the header template once (the caller only renders)."""
    return jinja2.Environment(
        loader=jinja2.PackageLoader("gapforge.outputs", "templates"),
        undefined=jinja2.StrictUndefined,
        autoescape=html,
        keep_trailing_newline=True,
        trim_blocks=html,
        lstrip_blocks=html,
    )
