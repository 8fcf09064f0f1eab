"""Reading TOML files against explicit sets of allowed keys.

Layout files and design files are read through `Reader`: each section lists its allowed keys,
unknown keys get a "did you mean" hint, every problem is collected with its key path, and
`Reader.finish()` raises one `GapforgeError` naming the file, the first problem's key path, and
how many more there are. tomllib reports line numbers only for syntax errors; those are passed on.
"""

from __future__ import annotations

import re
import tomllib
from collections.abc import Iterator
from fractions import Fraction
from pathlib import Path
from typing import Any

from gapforge.base.errors import GapforgeError, cap, quoted
from gapforge.base.quantities import parse_quantity, parse_tolerance

# Designs and layouts are a few kilobytes; the cap keeps a hostile file from costing seconds (the
# standard TOML parser is quadratic on long dotted headers) or memory (a device file never ends).
MAX_TOML_BYTES = 32 * 1024


def load_toml(path: Path) -> tuple[dict[str, Any], bytes]:
    """The parsed table and the raw bytes (for provenance hashes) of a TOML file.

    Only a regular file is read (never a device, a FIFO or a socket), at most MAX_TOML_BYTES. A
    UTF-8 byte-order mark at the start is skipped.
    """
    raw = _read_regular(path, MAX_TOML_BYTES)
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise GapforgeError(f"not UTF-8 text (byte {exc.start})", str(path)) from None
    text = text.removeprefix("\ufeff")
    try:
        return tomllib.loads(text), raw
    except tomllib.TOMLDecodeError as exc:
        raise GapforgeError(f"TOML syntax error: {exc}", str(path)) from None
    except RecursionError:
        raise GapforgeError("TOML nesting too deep to read", str(path)) from None
    except ValueError:  # an integer beyond Python's digit limit
        raise GapforgeError("a number in it has too many digits to read", str(path)) from None


def _read_regular(path: Path, limit: int) -> bytes:
    """The bytes of a regular file of at most `limit` bytes, or one clear GapforgeError."""
    import os
    import stat

    where = str(path)
    try:
        info = os.stat(path)
        if stat.S_ISDIR(info.st_mode):
            raise GapforgeError("is a directory, expected a TOML file", where)
        if not stat.S_ISREG(info.st_mode):
            raise GapforgeError("is not a regular file (a device, FIFO or socket?)", where)
        if info.st_size > limit:
            raise GapforgeError(
                f"is {info.st_size} bytes, above the {limit // 1024} KiB cap for a TOML file", where
            )
        with open(path, "rb") as handle:
            raw = handle.read(limit + 1)
    except FileNotFoundError:
        raise GapforgeError("file not found", where) from None
    except IsADirectoryError:
        raise GapforgeError("is a directory, expected a TOML file", where) from None
    except (OSError, ValueError) as exc:  # ValueError: a NUL byte in the path
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)
        raise GapforgeError(f"cannot read: {reason}", where) from None
    if len(raw) > limit:
        raise GapforgeError(f"is above the {limit // 1024} KiB cap for a TOML file", where)
    return raw


# Problems of one file listed in its error line (at most this many, and within LISTED_CHARS
# characters so the line stays readable); the rest are counted.
MAX_LISTED = 10
LISTED_CHARS = 500


class Reader:
    """Collects problems found while reading one file."""

    def __init__(self, source: str) -> None:
        self.source = source
        self.problems: list[tuple[str, str]] = []

    def problem(self, path: str, message: str) -> None:
        self.problems.append((path, message))

    def finish(self) -> None:
        """Raise one error naming every problem of the file (up to MAX_LISTED, each with its
        key path and hint), on one line: "f.toml: 2 problems: a.b: ...; c: ..."."""
        if not self.problems:
            return
        # a key reported missing that a misspelt key's "did you mean" already names is the same
        # mistake: said once
        meant = {f"{path.rpartition('.')[0]}.{m.group(1)}".lstrip(".")
                 for path, message in self.problems
                 if (m := re.search(r"did you mean '([^']+)'", message))}
        problems = [(path, message) for path, message in self.problems
                    if not (path in meant and message.startswith("required"))] or self.problems
        if len(problems) == 1:
            path, message = problems[0]
            raise GapforgeError(message, f"{self.source}: {path}" if path else self.source)
        listed: list[str] = []
        shown: set[str] = set()
        used = 0
        for path, message in problems[:MAX_LISTED]:
            # a list of allowed keys is said once, at its first problem
            allowed = re.search(r" \(expected one of: [^)]*\)", message)
            if allowed:
                if allowed.group(0) in shown:
                    message = message.replace(allowed.group(0), "")
                shown.add(allowed.group(0))
            item = cap(f"{path}: {message}" if path else message, 300)
            if listed and used + len(item) > LISTED_CHARS:
                break  # the line stays readable: the rest are counted
            listed.append(item)
            used += len(item) + 2
        more = len(problems) - len(listed)
        tail = f"; and {more} more problem{'s' if more > 1 else ''}" if more else ""
        raise GapforgeError(f"{len(problems)} problems: " + "; ".join(listed) + tail,
                            self.source, limit=LISTED_CHARS + 60)

    def table(self, data: Any, path: str) -> Table:
        if not isinstance(data, dict):
            self.problem(path, f"expected a table, got {type(data).__name__}")
            data = {}
        return Table(self, data, path)


_MISSING = object()


class Table:
    """One TOML table with its key path; typed getters record problems instead of raising."""

    def __init__(self, reader: Reader, data: dict[str, Any], path: str) -> None:
        self.reader = reader
        self.data = data
        self.path = path

    def key_path(self, key: str) -> str:
        return f"{self.path}.{key}" if self.path else key

    def check_keys(
        self, allowed: set[str] | frozenset[str], required: set[str] | None = None
    ) -> None:
        for key in sorted(self.data):
            if key not in allowed:
                import difflib  # only for a mistake: a correct file never pays its import

                hint = difflib.get_close_matches(key, sorted(allowed), n=1)
                suggestion = f"; did you mean '{hint[0]}'?" if hint else ""
                choices = ", ".join(sorted(allowed))
                self.reader.problem(
                    self.key_path(key), f"unknown key{suggestion} (expected one of: {choices})"
                )
        for key in sorted(required or ()):
            if key not in self.data:
                self.reader.problem(self.key_path(key), "required key is missing")

    def has(self, key: str) -> bool:
        return key in self.data

    def raw(self, key: str, default: Any = _MISSING) -> Any:
        return self.data.get(key, None if default is _MISSING else default)

    def sub(self, key: str, required: bool = False) -> Table | None:
        if key not in self.data:
            if required:
                self.reader.problem(self.key_path(key), "required section is missing")
            return None
        return self.reader.table(self.data[key], self.key_path(key))

    def subs(self, key: str) -> Iterator[Table]:
        value = self.data.get(key, [])
        if isinstance(value, dict):
            value = [value]
        if not isinstance(value, list):
            self.reader.problem(self.key_path(key), "expected an array of tables")
            return
        for i, item in enumerate(value):
            yield self.reader.table(item, f"{self.key_path(key)}[{i}]")

    def string(self, key: str, default: str | None = None, choices: tuple[str, ...] = ()) -> str:
        value = self.data.get(key, _MISSING)
        if value is _MISSING:
            if default is None:
                self.reader.problem(self.key_path(key), "required key is missing")
                return ""
            return default
        if not isinstance(value, str):
            self.reader.problem(self.key_path(key), f"expected a string, got {quoted(value)}")
            return default or ""
        if choices and value not in choices:
            import difflib  # only for a mistake, as in check_keys

            hint = difflib.get_close_matches(value, choices, n=1)
            suggestion = f"; did you mean '{hint[0]}'?" if hint else ""
            self.reader.problem(
                self.key_path(key),
                f"{quoted(value)} is not one of {', '.join(choices)}{suggestion}",
            )
            return default or choices[0]
        return value

    def integer(
        self, key: str, default: int | None = None, lo: int | None = None, hi: int | None = None
    ) -> int:
        value = self.data.get(key, _MISSING)
        if value is _MISSING:
            if default is None:
                self.reader.problem(self.key_path(key), "required key is missing")
                return lo if lo is not None else 0
            return default
        if isinstance(value, bool) or not isinstance(value, int):
            self.reader.problem(self.key_path(key), f"expected an integer, got {quoted(value)}")
            return default if default is not None else (lo or 0)
        if (lo is not None and value < lo) or (hi is not None and value > hi):
            span = f"{lo if lo is not None else '-inf'}..{hi if hi is not None else 'inf'}"
            self.reader.problem(self.key_path(key), f"{quoted(value)} is outside {span}")
            return default if default is not None else (lo or 0)
        return value

    def boolean(self, key: str, default: bool) -> bool:
        value = self.data.get(key, default)
        if not isinstance(value, bool):
            self.reader.problem(self.key_path(key), f"expected true or false, got {quoted(value)}")
            return default
        return value

    def quantity(
        self,
        key: str,
        unit: str,
        default: Fraction | None = None,
        *,
        required: bool = True,
        allow_zero: bool = False,
        allow_negative: bool = False,
    ) -> Fraction | None:
        value = self.data.get(key, _MISSING)
        if value is _MISSING:
            if default is None and required:
                self.reader.problem(self.key_path(key), "required key is missing")
            return default
        try:
            return parse_quantity(
                value,
                unit,
                self.key_path(key),
                allow_zero=allow_zero,
                allow_negative=allow_negative,
            )
        except GapforgeError as exc:
            self.reader.problem(self.key_path(key), exc.message)
            return default

    def tolerance(self, key: str, default: Fraction | None = None) -> Fraction:
        value = self.data.get(key, _MISSING)
        if value is _MISSING:
            if default is None:
                self.reader.problem(self.key_path(key), "required key is missing")
                return Fraction(0)
            return default
        try:
            return parse_tolerance(value, self.key_path(key))
        except GapforgeError as exc:
            self.reader.problem(self.key_path(key), exc.message)
            return default if default is not None else Fraction(0)

    def int_list(self, key: str, default: list[int] | None = None) -> list[int]:
        value = self.data.get(key, _MISSING)
        if value is _MISSING:
            if default is None:
                self.reader.problem(self.key_path(key), "required key is missing")
                return []
            return default
        if not isinstance(value, list) or not all(
            isinstance(v, int) and not isinstance(v, bool) for v in value
        ):
            self.reader.problem(self.key_path(key), f"expected a list of integers, got {quoted(value)}")
            return default or []
        return list(value)
