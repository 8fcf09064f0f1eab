"""Timer dead-time layouts described as data (targets/*.toml, a schema of our own).

A layout says how a timer's dead-time unit turns register codes into time:

- the dead-time step: the timer clock period x divider / sub_steps (sub_steps > 1 for
  high-resolution units that count in fractions of a clock period);
- one field shared by both edges (role "both"), or one field per edge ("to_high", "to_low"),
  plus an optional divider field whose code selects `dividers[code]`;
- encodings: linear, steps = code + add; segmented, the code's top `select_bits` select a
  range whose steps = base + low_bits x multiplier;
- allowed codes (min_code..max_code minus `reserved`), packed into an 8-, 16- or 32-bit word.

Loading validates everything (key names, packing overlaps, a table that is strictly monotonic in
code order, gap-free and overlap-free between ranges) and collects every problem before failing.
All dead-time values here are integers of steps; seconds come from `fit`.
"""

from __future__ import annotations

import bisect
import hashlib
from dataclasses import field, replace
from functools import cached_property
from pathlib import Path

from gapforge.base.errors import GapforgeError, quoted
from gapforge.base.provenance import content_sha256
from gapforge.base.records import record
from gapforge.base.schema import Reader, Table, load_toml

EDGES = ("to_high", "to_low")
ROLES = ("both", "to_high", "to_low", "divider")
ENCODINGS = ("linear", "segmented")
FORMAT_VERSION = 1
# Widest dead-time field: every allowed code is tabulated (a 20-bit field is a million entries).
MAX_FIELD_BITS = 20
MAX_DIVIDER = 1 << 16
# Most ranges of a segmented code (select_bits <= 6): real units have a handful; the cap keeps a
# hostile file's validation and fit quick.
MAX_SEGMENTS = 64
# Longest built-in layout name; anything else must be a path to a .toml file.
MAX_NAME = 64
# Field names whose macros (<P>_<NAME>_CODE/_SHIFT/_MASK) would collide with the header's fixed
# macros (<P>_DIVIDER_CODE). Compared case-insensitively: macro names are upper-cased.
RESERVED_FIELD_NAMES = frozenset({"divider"})


@record
class Segment:
    """One range of a segmented code: steps = base + low_bits x multiplier."""

    select: int
    base: int
    multiplier: int


@record
class Field:
    """One register field: where it sits and, for a dead-time field, how codes become steps."""

    name: str
    role: str
    offset: int
    width: int
    encoding: str = "linear"
    add: int = 0
    select_bits: int = 0
    segments: tuple[Segment, ...] = ()
    min_code: int = 0
    max_code: int = 0
    reserved: frozenset[int] = frozenset()
    description: str = ""

    @property
    def mask(self) -> int:
        """The field's mask, unshifted."""
        return (1 << self.width) - 1

    def allowed(self, code: int) -> bool:
        return self.min_code <= code <= self.max_code and code not in self.reserved

    def decode(self, code: int) -> int:
        """Dead-time steps for a code (any code in 0..mask, allowed or not)."""
        if not 0 <= code <= self.mask:
            raise ValueError(f"code {code} does not fit field {self.name}")
        if self.encoding == "linear":
            return code + self.add
        low_bits = self.width - self.select_bits
        segment = self._by_select.get(code >> low_bits)
        if segment is None:
            raise ValueError(f"code {code} selects no range of field {self.name}")
        return segment.base + (code & ((1 << low_bits) - 1)) * segment.multiplier

    @cached_property
    def _by_select(self) -> dict[int, Segment]:
        return {s.select: s for s in self.segments}

    @cached_property
    def table(self) -> tuple[tuple[int, ...], tuple[int, ...]]:
        """(steps, codes) of every allowed code, in increasing steps (strictly, once validated)."""
        if self.encoding == "linear":  # already in increasing order: skip decode and sort
            span = range(self.min_code, self.max_code + 1)
            codes = (
                tuple(c for c in span if c not in self.reserved) if self.reserved else tuple(span)
            )
            add = self.add
            return tuple(c + add for c in codes), codes
        # by arithmetic, one range at a time: steps = base + low x multiplier
        low_bits = self.width - self.select_bits
        pairs: list[tuple[int, int]] = []
        for seg in self.segments:
            first = max(self.min_code, seg.select << low_bits)
            last = min(self.max_code, ((seg.select + 1) << low_bits) - 1)
            low0 = first - (seg.select << low_bits)
            pairs.extend(
                (seg.base + (low0 + i) * seg.multiplier, code)
                for i, code in enumerate(range(first, last + 1))
                if code not in self.reserved
            )
        pairs.sort()
        return tuple(p[0] for p in pairs), tuple(p[1] for p in pairs)

    def at_least(self, steps: int) -> int | None:
        """Index into `table` of the smallest allowed value >= steps, or None."""
        values = self.table[0]
        i = bisect.bisect_left(values, steps)
        return i if i < len(values) else None


@record
class Layout:
    """A timer's dead-time unit. Built-in layouts are generic designs of our own."""

    name: str
    summary: str
    description: str
    source: str
    sha256: str
    register_bits: int
    sub_steps: int
    dividers: tuple[int, ...]
    divider_field: str | None
    fields: tuple[Field, ...] = field(default=())

    def field_named(self, name: str) -> Field:
        for f in self.fields:
            if f.name == name:
                return f
        raise KeyError(name)

    def edge_field(self, edge: str) -> Field:
        """The field that encodes one edge's dead time."""
        for f in self.fields:
            if f.role == "both" or f.role == edge:
                return f
        raise KeyError(edge)

    @property
    def shared(self) -> bool:
        return any(f.role == "both" for f in self.fields)

    @property
    def dead_time_fields(self) -> tuple[Field, ...]:
        return tuple(f for f in self.fields if f.role != "divider")

    def pack(self, codes: dict[str, int]) -> int:
        word = 0
        for f in self.fields:
            word |= (codes.get(f.name, 0) & f.mask) << f.offset
        return word

    def unpack(self, word: int) -> dict[str, int]:
        return {f.name: (word >> f.offset) & f.mask for f in self.fields}


# ---------------------------------------------------------------------------------------------
# Finding layout files


def _builtin_dir() -> Path:
    """targets/ inside an installed wheel, or the repository's top-level targets/."""
    # the package's own folder, as importlib.resources.files("gapforge") gives it for a package
    # on the file system, without importing importlib.resources on every build
    packaged = Path(__file__).parent.parent / "targets"
    if packaged.is_dir():
        return packaged
    return Path(__file__).resolve().parents[3] / "targets"


def builtin_names() -> list[str]:
    directory = _builtin_dir()
    if not directory.is_dir():
        return []
    return sorted(p.stem for p in directory.glob("*.toml"))


# Built-ins renamed for what they are: the old name still loads, with `rename_warning`, but
# `targets` lists only the new one.
RENAMED = {"split-10bit-div4": "split-10bit-div1-8"}


def rename_warning(name: str) -> str | None:
    """The warning for a built-in layout given by its old name, or None."""
    new = RENAMED.get(name)
    if new is None:
        return None
    return (f"layout '{name}' was renamed '{new}' (its divider field selects 1, 2, 4 or 8, "
            f"not a divide-by-4): the old name still loads; write '{new}'")


def resolve(name_or_path: str) -> Path:
    """A built-in name (or a renamed built-in's old name) or a path to a layout file."""
    if name_or_path.endswith(".toml") or "/" in name_or_path or "\\" in name_or_path:
        return Path(name_or_path)
    name_or_path = RENAMED.get(name_or_path, name_or_path)
    if len(name_or_path) > MAX_NAME or not name_or_path.isprintable():
        raise GapforgeError(
            f"no built-in layout named {quoted(name_or_path)} (names are at most {MAX_NAME} "
            "characters; or give a path to a .toml layout file)"
        )
    candidate = _builtin_dir() / f"{name_or_path}.toml"
    if candidate.is_file():
        return candidate
    import difflib

    names = builtin_names()
    hint = difflib.get_close_matches(name_or_path, names, n=1)
    suggestion = f"; did you mean '{hint[0]}'?" if hint else ""
    raise GapforgeError(
        f"no built-in layout named {name_or_path!r}{suggestion} "
        f"(built-ins: {', '.join(names)}; or give a path to a .toml layout file)"
    )


_CACHE: dict[tuple[str, str], Layout] = {}


def load_layout(name_or_path: str, label: str | None = None) -> Layout:
    """Load and validate a layout by built-in name or file path (cached per resolved path).

    `label` is how provenance names a user's layout file (by default the path as given); a
    built-in is always named `targets/<name>.toml`, wherever it is installed.
    """
    path = resolve(name_or_path)
    builtin = path.parent.resolve() == _builtin_dir().resolve()
    source = f"targets/{path.name}" if builtin else (label or name_or_path)
    data, raw = load_toml(path)
    key = (str(path.resolve()), hashlib.sha256(raw).hexdigest())
    if key not in _CACHE:
        # problems name the file as found (builtins by their short name); provenance uses `source`
        where = source if builtin else str(path)
        _CACHE[key] = parse_layout(data, raw, where, default_name=path.stem)
    cached = _CACHE[key]
    return cached if cached.source == source else replace(cached, source=source)


# ---------------------------------------------------------------------------------------------
# Reading and validating

_TOP_KEYS = frozenset(
    {"format", "name", "summary", "description", "register_bits", "clock", "field"}
)
_CLOCK_KEYS = frozenset({"sub_steps", "dividers", "divider_field"})
_FIELD_KEYS = frozenset(
    {
        "name",
        "role",
        "offset",
        "width",
        "encoding",
        "add",
        "select_bits",
        "segment",
        "min_code",
        "max_code",
        "reserved",
        "description",
    }
)
_SEGMENT_KEYS = frozenset({"select", "base", "multiplier"})


def parse_layout(data: dict[str, object], raw: bytes, source: str, default_name: str) -> Layout:
    reader = Reader(source)
    top = reader.table(data, "")
    top.check_keys(_TOP_KEYS, {"format", "summary", "register_bits", "field"})
    version = top.integer("format", FORMAT_VERSION)
    if version != FORMAT_VERSION:
        reader.problem(
            "format", f"layout format {version} is not supported (expected {FORMAT_VERSION})"
        )
    name = top.string("name", default_name)
    summary = top.string("summary", "")
    if "\n" in summary:
        reader.problem("summary", "must be one line")
    description = top.string("description", "")
    register_bits = top.integer("register_bits", 32)
    if register_bits not in (8, 16, 32):
        reader.problem("register_bits", f"{register_bits} must be 8, 16 or 32")
        register_bits = 32

    clock = top.sub("clock") or reader.table({}, "clock")
    clock.check_keys(_CLOCK_KEYS)
    sub_steps = clock.integer("sub_steps", 1, lo=1, hi=1 << 16)
    dividers = tuple(clock.int_list("dividers", [1]))
    if not dividers:
        reader.problem("clock.dividers", "must list at least one divider")
        dividers = (1,)
    for i, d in enumerate(dividers):
        if not 1 <= d <= MAX_DIVIDER:
            reader.problem(f"clock.dividers[{i}]", f"divider {d} must be in 1..{MAX_DIVIDER}")
    divider_field = clock.raw("divider_field", None)
    if divider_field is not None and not isinstance(divider_field, str):
        reader.problem("clock.divider_field", f"expected a field name, got {divider_field!r}")
        divider_field = None

    fields = [_read_field(t) for t in top.subs("field")]
    _check_fields(reader, fields, register_bits, dividers, divider_field)
    reader.finish()
    return Layout(
        name=name,
        summary=summary,
        description=description.strip(),
        source=source,
        sha256=content_sha256(data),  # what the file means (issue 11), not its bytes
        register_bits=register_bits,
        sub_steps=sub_steps,
        dividers=dividers,
        divider_field=divider_field,
        fields=tuple(fields),
    )


def _parse_codes(t: Table, key: str, width: int) -> frozenset[int]:
    value = t.raw(key, [])
    codes: set[int] = set()
    if not isinstance(value, list):
        t.reader.problem(t.key_path(key), "expected a list of codes or 'a..b' ranges")
        return frozenset()
    for i, item in enumerate(value):
        where = f"{t.key_path(key)}[{i}]"
        if isinstance(item, int) and not isinstance(item, bool):
            lo = hi = item
        elif isinstance(item, str) and ".." in item:
            a, _, b = item.partition("..")
            try:
                lo, hi = int(a, 0), int(b, 0)
            except ValueError:
                t.reader.problem(where, f"{item!r} is not a range 'a..b' of integers")
                continue
        else:
            t.reader.problem(where, f"{item!r} is not a code or an 'a..b' range")
            continue
        if lo > hi or lo < 0 or hi >= (1 << width):
            t.reader.problem(where, f"{item!r} is outside the field's codes 0..{(1 << width) - 1}")
            continue
        codes.update(range(lo, hi + 1))
    return frozenset(codes)


def _read_field(t: Table) -> Field:
    t.check_keys(_FIELD_KEYS, {"name", "role", "offset", "width"})
    name = t.string("name", "")
    role = t.string("role", "both", ROLES)
    offset = t.integer("offset", 0, lo=0, hi=31)
    width = t.integer("width", 1, lo=1, hi=32)
    if role == "divider":
        for key in (
            "encoding",
            "add",
            "select_bits",
            "segment",
            "min_code",
            "max_code",
            "reserved",
        ):
            if t.has(key):
                t.reader.problem(t.key_path(key), "does not apply to a divider field")
        return Field(
            name,
            role,
            offset,
            width,
            max_code=(1 << width) - 1,
            description=t.string("description", ""),
        )
    if width > MAX_FIELD_BITS:
        t.reader.problem(
            t.key_path("width"),
            f"a {width}-bit dead-time field is wider than the {MAX_FIELD_BITS} bits gapforge tabulates",
        )
        width = MAX_FIELD_BITS
    encoding = t.string("encoding", "linear", ENCODINGS)
    add = t.integer("add", 0, lo=-(1 << 32), hi=1 << 32)
    min_code = t.integer("min_code", 0, lo=0, hi=(1 << width) - 1)
    max_code = t.integer("max_code", (1 << width) - 1, lo=0, hi=(1 << width) - 1)
    if min_code > max_code:
        t.reader.problem(
            t.key_path("min_code"), f"min_code {min_code} is above max_code {max_code}"
        )
    reserved = _parse_codes(t, "reserved", width)
    select_bits = 0
    segments: list[Segment] = []
    if encoding == "segmented":
        given = t.raw("segment", [])
        count = len(given) if isinstance(given, list) else 1
        if count > MAX_SEGMENTS:
            t.reader.problem(
                t.key_path("segment"),
                f"{count} ranges: at most {MAX_SEGMENTS} (select_bits at most 6)",
            )
            return Field(name=name, role=role, offset=offset, width=width)
        select_bits = t.integer("select_bits", 1, lo=1, hi=max(1, min(width - 1, 6)))
        for s in t.subs("segment"):
            s.check_keys(_SEGMENT_KEYS, {"select", "base", "multiplier"})
            segments.append(
                Segment(
                    select=s.integer("select", 0, lo=0, hi=(1 << select_bits) - 1),
                    base=s.integer("base", 0, lo=0),
                    multiplier=s.integer("multiplier", 1, lo=1),
                )
            )
    else:
        for key in ("select_bits", "segment"):
            if t.has(key):
                t.reader.problem(t.key_path(key), "applies only to encoding = 'segmented'")
    return Field(
        name=name,
        role=role,
        offset=offset,
        width=width,
        encoding=encoding,
        add=add,
        select_bits=select_bits,
        segments=tuple(segments),
        min_code=min_code,
        max_code=max_code,
        reserved=reserved,
        description=t.string("description", ""),
    )


def _check_fields(
    reader: Reader,
    fields: list[Field],
    register_bits: int,
    dividers: tuple[int, ...],
    divider_field: str | None,
) -> None:
    names = [f.name.lower() for f in fields]
    for i, f in enumerate(fields):
        where = f"field[{i}]"
        if not f.name.isidentifier() or not f.name.isascii():
            reader.problem(
                f"{where}.name", f"{f.name!r} must be an ASCII identifier (it names macros)"
            )
        if names.count(f.name.lower()) > 1 and names.index(f.name.lower()) == i:
            reader.problem(
                f"{where}.name",
                f"field name {f.name!r} is used more than once (names are compared ignoring case)",
            )
        if f.name.lower() in RESERVED_FIELD_NAMES:
            reader.problem(
                f"{where}.name",
                f"{f.name!r} is reserved: its macros would collide with the header's own",
            )
        if f.offset + f.width > register_bits:
            reader.problem(
                where,
                f"bits {f.offset}..{f.offset + f.width - 1} do not fit a {register_bits}-bit register",
            )
        for j in range(i):
            g = fields[j]
            if f.offset < g.offset + g.width and g.offset < f.offset + f.width:
                reader.problem(where, f"field {f.name!r} overlaps field {g.name!r}")
        if f.role != "divider":
            _check_encoding(reader, where, f)

    roles = [f.role for f in fields]
    if "both" in roles:
        if roles.count("both") > 1 or "to_high" in roles or "to_low" in roles:
            reader.problem(
                "field", "give one field with role 'both', or one 'to_high' and one 'to_low'"
            )
    elif roles.count("to_high") != 1 or roles.count("to_low") != 1:
        reader.problem(
            "field", "give one field with role 'both', or one 'to_high' and one 'to_low'"
        )

    divider_roles = [f for f in fields if f.role == "divider"]
    if len(divider_roles) > 1:
        reader.problem("field", "at most one field may have role 'divider'")
    if len(dividers) > 1 and divider_field is None:
        reader.problem("clock.divider_field", "required when more than one divider is listed")
    if divider_field is not None:
        match = [f for f in divider_roles if f.name == divider_field]
        if not match:
            reader.problem(
                "clock.divider_field", f"no field with role 'divider' named {divider_field!r}"
            )
        elif len(dividers) > (1 << match[0].width):
            reader.problem(
                "clock.dividers",
                f"{len(dividers)} dividers do not fit the {match[0].width}-bit field {divider_field!r}",
            )
    elif divider_roles:
        reader.problem("clock.divider_field", "name the divider field here")


def _check_encoding(reader: Reader, where: str, f: Field) -> None:
    """Prove the code table monotonic, gap-free and overlap-free over the whole code space."""
    if f.min_code > f.max_code:
        return
    if f.encoding == "linear":
        if f.min_code + f.add < 0:
            reader.problem(
                f"{where}.add", f"code {f.min_code} + add {f.add} gives a negative dead time"
            )
        if all(not f.allowed(c) for c in range(f.min_code, f.max_code + 1)):
            reader.problem(where, "no allowed code is left")
        return
    selects = sorted(s.select for s in f.segments)
    if selects != list(range(1 << f.select_bits)):
        reader.problem(
            f"{where}.segment",
            f"the {f.select_bits} select bits need exactly one range for each of "
            f"0..{(1 << f.select_bits) - 1} (got {selects})",
        )
        return
    low_count = 1 << (f.width - f.select_bits)
    ordered = sorted(f.segments, key=lambda s: s.select)
    for k in range(1, len(ordered)):
        prev, seg = ordered[k - 1], ordered[k]
        prev_last = prev.base + (low_count - 1) * prev.multiplier
        jump = seg.base - prev_last
        if jump <= 0:
            reader.problem(
                f"{where}.segment[{k}]",
                f"range {seg.select} starts at {seg.base} steps, not above range {prev.select}'s "
                f"last value {prev_last}: ranges overlap or run backwards",
            )
        elif jump > max(prev.multiplier, seg.multiplier):
            reader.problem(
                f"{where}.segment[{k}]",
                f"a gap of {jump} steps between range {prev.select} (ends {prev_last}) and range "
                f"{seg.select} (starts {seg.base}) is wider than either range's step",
            )
    if all(not f.allowed(c) for c in range(f.min_code, f.max_code + 1)):
        reader.problem(where, "no allowed code is left")


def describe_codes(f: Field) -> str:
    """A short human description of a field's encoding (for `targets show`)."""
    if f.role == "divider":
        return f"divider code, {f.width} bits"
    return _describe_encoding(f) + _describe_reserved(f)


def _describe_reserved(f: Field) -> str:
    if not f.reserved:
        return ""
    runs: list[str] = []
    codes = sorted(f.reserved)
    start = prev = codes[0]
    for code in [*codes[1:], None]:
        if code is not None and code == prev + 1:
            prev = code
            continue
        runs.append(str(start) if start == prev else f"{start}..{prev}")
        if code is not None:
            start = prev = code
    return f"; reserved {', '.join(runs)}"


def _describe_encoding(f: Field) -> str:
    if f.encoding == "linear":
        add = f" + {f.add}" if f.add > 0 else (f" - {-f.add}" if f.add < 0 else "")
        return f"steps = code{add}, codes {f.min_code}..{f.max_code}"
    low_bits = f.width - f.select_bits
    parts = [
        f"top {f.select_bits} bits = {s.select}: steps = {s.base} + low x {s.multiplier}"
        for s in sorted(f.segments, key=lambda s: s.select)
    ]
    return f"segmented ({low_bits} low bits): " + "; ".join(parts)


def check_code_fits(layout: Layout, name: str, code: int) -> None:
    f = layout.field_named(name)
    if not 0 <= code <= f.mask:
        raise GapforgeError(f"code {code} does not fit the {f.width}-bit field", name)
