"""Text that reaches generated C, made inert (issue 14, item 7).

Names and descriptions from design and layout files (an output's `file`, a layout's `name`,
`summary` or `source`, the design file's name) are user text. Inside a C block comment, `*/` would
close the comment and what follows would be compiled; a newline inside a `#error` line would end
the directive and start a new one; a quote would end a string. Every such text passes through one
of these two functions before it reaches a template, so the only C a header holds is the C that
gapforge wrote.

- `comment(text)`: one line of printable ASCII safe inside `/* ... */` (no `*/`, no `/*`, no
  control character, no trigraph `??x`, no line-splicing backslash); anything else becomes a
  visible escape (`\\u00b5`, `\\x0a`), so the reader still sees what the file said.
- `string_body(text)`: the inside of a C string literal (quotes, backslashes and control
  characters escaped as octal, `??` split so no trigraph forms).
"""

from __future__ import annotations


def _visible(ch: str) -> str:
    code = ord(ch)
    if code < 0x20 or code == 0x7F:
        return f"\\x{code:02x}"
    if code > 0x7F:
        return f"\\u{code:04x}" if code <= 0xFFFF else f"\\U{code:08x}"
    return ch


def comment(text: str) -> str:
    """One line safe inside a C block comment, on every standard (C89 trigraphs included)."""
    # printable ASCII (0x20..0x7e) is every character `_visible` keeps: most text, taken whole
    printable = text.isascii() and text.isprintable()
    out = text if printable else "".join(_visible(ch) for ch in text)
    # a backslash escape above keeps its backslash; make every backslash harmless at a line end
    # and never part of a trigraph: C comments end only at */, so a plain backslash is inert
    # except as the last character of a line (line splicing), which the trailing guard prevents
    while "*/" in out or "/*" in out or "??" in out:
        out = out.replace("*/", "*\\/").replace("/*", "/\\*").replace("??", "?\\?")
    if out.endswith("\\"):
        out += " "
    return out


def string_body(text: str) -> str:
    """The characters of a C string literal that reads as `text` (ASCII; others escaped)."""
    parts: list[str] = []
    for ch in text:
        code = ord(ch)
        if ch in ('"', "\\"):
            parts.append("\\" + ch)
        elif code < 0x20 or code >= 0x7F:
            # octal, three digits: never swallows a following digit the way \x would
            parts.append(f"\\{code:03o}" if code < 0x100 else "?")
        elif ch == "?" and parts and parts[-1] == "?":
            parts.append("\\?")
        else:
            parts.append(ch)
    return "".join(parts)
