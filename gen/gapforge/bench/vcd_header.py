"""The declarations of a value change dump (IEEE 1364-2005 clause 18): timescale, scopes, vars.

The header is read up to `$enddefinitions $end` and cut into commands at each `$end`. A header
may declare a million signals of which two are wanted, so a `$var` is parsed into a `Variable`
only when its name could be one asked for (same last name component) or when it is among the
first `HINT_VARS` commands (the names listed when a requested one is not found); the others are only
counted, and a C-level test skips them before any Python work. Every command is still checked for its shape (a word outside a command, a command
without `$end`, an `$upscope` without a `$scope`).

A header without `$timescale` is read in 1 ns units (IEEE 1364 leaves the unit to the writing
tool; 1 ns is common practice) and says so: `Header.timescale_given` is False, and the
measurement cannot judge a window with an assumed unit.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Sequence
from fractions import Fraction
from pathlib import Path

from gapforge.base.errors import GapforgeError
from gapforge.base.quantities import TIME_UNITS
from gapforge.base.records import record

HINT_VARS = 2000  # declarations kept whatever their name, to list when a name is not found
DEFAULT_TIMESCALE = Fraction(1, 10**9)


@record
class Variable:
    """One $var declaration."""

    path: str  # hierarchical name without range, e.g. "top.bus"
    var_type: str
    width: int
    code: str
    msb: int | None
    lsb: int | None

    def bit_position(self, bit: int | None) -> int | None:
        """Position of `bit` counted from the rightmost digit, or None if out of range."""
        if bit is None:
            return 0 if self.width == 1 else None
        msb = self.width - 1 if self.msb is None else self.msb
        lsb = 0 if self.lsb is None else self.lsb
        if msb >= lsb:
            return bit - lsb if lsb <= bit <= msb else None
        return lsb - bit if msb <= bit <= lsb else None

    def display(self) -> str:
        if self.msb is None:
            return self.path
        if self.lsb is None or self.lsb == self.msb:
            return f"{self.path}[{self.msb}]"
        return f"{self.path}[{self.msb}:{self.lsb}]"


@record
class Header:
    timescale_s: Fraction
    variables: tuple[Variable, ...]  # the ones kept (see the module docstring)
    body_offset: int
    timescale_given: bool = True
    declared: int = 0  # every $var in the file
    sample_rate_hz: Fraction | None = None  # a rate the header's $comment states ("at 16 MHz")


def parse_timescale(words: Sequence[str], where: str) -> Fraction:
    """'1ns', '10 ps', '100us': 1, 10 or 100 of s, ms, us, ns, ps or fs."""
    text = "".join(words)
    match = re.fullmatch(r"(1|10|100)(s|ms|us|ns|ps|fs)", text)
    if not match:
        shown = " ".join(words)[:40]
        raise GapforgeError(
            f"bad $timescale {shown!r} (expected 1, 10 or 100 and s, ms, us, ns, ps, fs)", where
        )
    return int(match.group(1)) * TIME_UNITS[match.group(2)]


_RATE = re.compile(rb"\bat\s+(\d{1,12}(?:\.\d{1,12})?)\s*([kMG]?)Hz\b")
_RATE_PREFIX = {b"": 1, b"k": 10**3, b"M": 10**6, b"G": 10**9}


def stated_rate(text: bytes) -> Fraction | None:
    """The sample rate a logic analyser states in a comment ("... channels at 16 MHz"), exact;
    None when the comment states none."""
    match = _RATE.search(text)
    if match is None:
        return None
    rate = Fraction(match.group(1).decode("ascii")) * _RATE_PREFIX[match.group(2)]
    return rate if rate > 0 else None


# the last bracket is the bit range; any before it belong to the name: a simulator writes each
# element of an unpacked array as its own variable ("leg[1] [1:0]": element 1 of `leg`, bits 1..0)
_REF = re.compile(r"^(?P<name>[^\[]+?(?:\[-?\d+\])*?)(?:\[(?P<msb>-?\d+)(?::(?P<lsb>-?\d+))?\])?$")
_SELECT = re.compile(r"^(?P<name>.+?)\s*\[\s*(?P<bit>-?\d+)\s*\]$")


def _leaf(name: str) -> str:
    """The last name component of a requested signal, without a bit select."""
    wanted = name.strip()
    match = _SELECT.match(wanted)
    base = match.group("name") if match else wanted
    return _last(base)


def _last(name: str) -> str:
    """The last name component without element indices ("tb.leg[1]" -> "leg")."""
    return name.rsplit(".", 1)[-1].split("[", 1)[0]


_DEFINITIONS_END = re.compile(rb"\$enddefinitions\s+\$end")


def _header_bytes(path: Path, where: str) -> tuple[bytes, int]:
    """The declarations (before $enddefinitions) and the offset of the body (read block by
    block, each block searched once)."""
    data = bytearray()
    start = 0  # where $enddefinitions may begin
    try:
        with path.open("rb") as handle:
            while True:
                block = handle.read(1 << 20)
                data += block
                at = data.find(b"$enddefinitions", start)
                if at >= 0:
                    end = _DEFINITIONS_END.match(data, at)
                    if end is not None:
                        return bytes(data[:at]), end.end()
                    start = at if block else at + 1
                    if not block and data.find(b"$enddefinitions", start) < 0:
                        at = -1
                else:
                    start = max(len(data) - len(b"$enddefinitions"), 0)
                if not block and at < 0:
                    raise GapforgeError("no '$enddefinitions $end': not a VCD file or truncated",
                                        where)
    except OSError as exc:
        raise GapforgeError(f"cannot read: {exc.strerror}", where) from None


def read_header(path: Path, names: Sequence[str] | None = None) -> Header:
    """Read the declarations up to $enddefinitions $end, keeping the variables that `names`
    could select (every variable when `names` is None)."""
    where = str(path)
    head, body_offset = _header_bytes(path, where)
    if head.startswith(b"\xef\xbb\xbf"):  # a UTF-8 byte order mark (an editor's save): blank
        head = b"   " + head[3:]
    if not head.isascii():
        bad = next(i for i, b in enumerate(head) if b > 127)
        line = head[:bad].count(b"\n") + 1
        raise GapforgeError("binary data in the VCD header", f"{where}:{line}")
    _before_declarations(head, where)
    leaves = None if names is None else {_leaf(n).encode("ascii", "replace") for n in names}
    reader = _Declarations(where, leaves)
    commands = _commands(head)
    rest = commands.pop()  # after the last $end: only whitespace in a complete header
    for command in commands[:HINT_VARS]:
        reader.command(command)
    # past the first commands only those that are no $var, or hold a wanted name, reach
    # Python: the test runs in C (a header of a million declarations is read in seconds)
    for command in filter(_interesting(leaves), commands[HINT_VARS:]):
        reader.command(command)
    reader.declared = sum(head.count(b"$var" + space) for space in (b" ", b"\t", b"\n", b"\r"))
    if rest.strip():
        word = rest.split()[0].decode("ascii")[:40]
        if word.startswith("$"):
            raise GapforgeError(f"{word} without $end", where)
        raise GapforgeError(f"unexpected {word!r} in the VCD header", where)
    if not reader.variables:
        raise GapforgeError("no $var declarations", where)
    given = reader.timescale is not None
    return Header(reader.timescale or DEFAULT_TIMESCALE, tuple(reader.variables), body_offset,
                  given, reader.declared, reader.rate)


def _before_declarations(head: bytes, where: str) -> None:
    """A line before the first $ command (another tool's metadata, e.g. "META ...") is
    refused with what the file seems to be and what is expected."""
    start = head.lstrip()
    if not start or start.startswith(b"$"):
        return
    first = start.split(b"\n", 1)[0].strip()
    line = head[: len(head) - len(start)].count(b"\n") + 1
    shown = first[:40].decode("ascii", "replace")
    raise GapforgeError(
        f"the line {shown!r} comes before the VCD declarations: the file seems to be a value "
        "change dump with another tool's line in front; a VCD begins with a $ command ($date, "
        "$timescale, $scope, $var): remove the lines before it", f"{where}:{line}")


def _interesting(leaves: set[bytes] | None) -> Callable[[bytes], object]:
    """A test for the commands worth reading: any that is not a $var (or is malformed), and
    any $var whose text holds one of `leaves` (every command when `leaves` is None)."""
    if leaves is None:
        return lambda _command: True
    wanted = b"|".join(re.escape(leaf) for leaf in sorted(leaves))
    pattern = rb"^\s*(?:$|[^$\s]|\$(?!var\s))" + (b"|" + wanted if wanted else b"")
    return re.compile(pattern).search


def _commands(head: bytes) -> list[bytes]:
    """The header cut at every `$end` token (a `$end...` word that is longer stays whole)."""
    pieces = head.split(b"$end")
    out = [pieces[0]]
    last = len(pieces) - 1
    for k in range(1, len(pieces)):
        piece = pieces[k]
        ends_word = piece[:1].isspace() or (k == last and not piece)
        if ends_word and (not out[-1] or out[-1][-1:].isspace()):
            out.append(piece)
        else:  # "$end" inside a longer word: glue it back
            out[-1] += b"$end" + piece
    return out


class _Declarations:
    """The header's commands one by one: scopes, the timescale and the variables kept."""

    def __init__(self, where: str, leaves: set[bytes] | None) -> None:
        self.where = where
        self.leaves = leaves
        self.scopes: list[str] = []
        self.variables: list[Variable] = []
        self.timescale: Fraction | None = None
        self.rate: Fraction | None = None  # a sample rate stated in a $comment
        self.read = 0  # $var commands parsed
        self.declared = 0  # $var words in the header

    def command(self, text: bytes) -> None:
        body = text.lstrip()
        if not body.startswith(b"$"):
            if not body:
                raise GapforgeError("$end without a command", self.where)
            word = body.split(None, 1)[0]
            raise GapforgeError(f"unexpected {word[:40].decode('ascii')!r} in the VCD header",
                                self.where)
        if body.startswith(b"$var") and body[4:5].isspace():
            self._var(body.split()[1:])
            return
        words = body.split()
        word = words[0]
        if word == b"$scope":
            if len(words) < 2:
                raise GapforgeError("$scope without a name", self.where)
            self.scopes.append(words[-1].decode("ascii"))
        elif word == b"$upscope":
            if not self.scopes:
                raise GapforgeError("$upscope without an open $scope", self.where)
            self.scopes.pop()
        elif word == b"$timescale":
            args = [w.decode("ascii") for w in words[1:]]
            self.timescale = parse_timescale(args, f"{self.where}: $timescale")
        elif word == b"$comment" and self.rate is None:
            self.rate = stated_rate(body[len(b"$comment"):])
        # $comment, $date, $version and unknown header commands carry only text

    def _var(self, args: list[bytes]) -> None:
        self.read += 1
        if self.leaves is not None and self.read > HINT_VARS:
            # the leaf as `_parse_var` reads it: a range written apart ("leg [1:0]") is no
            # part of the name (review rev3b: such a wanted variable was dropped here)
            ref = b" ".join(args[3:]).split(b"[", 1)[0].rstrip()
            if ref.rsplit(b".", 1)[-1] not in self.leaves:
                return  # not asked for: counted only
        text = [a.decode("ascii") for a in args]
        self.variables.append(_parse_var(text, self.scopes, self.where))


def _parse_var(args: list[str], scopes: list[str], where: str) -> Variable:
    if len(args) < 4:
        shown = " ".join(args)[:60]
        raise GapforgeError(f"$var needs type, size, code and name, got {shown!r}", where)
    var_type, size_text, code = args[0], args[1], args[2]
    if not size_text.isdigit() or len(size_text) > 9 or int(size_text) < 1:
        shown = " ".join(args)[:60]
        raise GapforgeError(f"$var {shown!r}: size must be a positive integer", where)
    # the reference as written: a logic analyser writes a channel name with spaces as typed
    # ("High Side PWM"); a range written apart ("data [7:0]") joins its name
    # and an index written with spaces inside ("[ 1 : 0 ]") is read as "[1:0]"
    ref = _INDEX.sub(_tight, re.sub(r"\s+\[", "[", " ".join(args[3:])))
    match = _REF.match(ref)
    if not match:
        shown = " ".join(args)[:60]
        raise GapforgeError(f"$var {shown!r}: cannot read the reference", where)
    size = int(size_text)
    name = match.group("name")
    msb = _bit_index(match.group("msb"), where)
    lsb = _bit_index(match.group("lsb"), where) if match.group("lsb") is not None else msb
    if match.group("lsb") is None and msb is not None and size > 1:
        # one index on a vector ("leg[3]", 2 bits): element 3 of an array, its bits
        # size-1..0 (review rev3b: it was read as bit 3, the value's rightmost digit)
        name, msb, lsb = f"{name}[{msb}]", None, None
    if msb is not None and lsb is not None and abs(msb - lsb) + 1 != size:
        shown = " ".join(args)[:60]
        raise GapforgeError(f"$var {shown!r}: size {size} but the range holds "
                            f"{abs(msb - lsb) + 1} bits", where)
    return Variable(".".join([*scopes, name]), var_type, size, code, msb, lsb)


_INDEX = re.compile(r"\[\s*(-?\d+)\s*(?::\s*(-?\d+)\s*)?\]")


def _tight(match: re.Match[str]) -> str:
    lsb = match.group(2)
    return f"[{match.group(1)}]" if lsb is None else f"[{match.group(1)}:{lsb}]"


def _bit_index(text: str | None, where: str) -> int | None:
    if text is None:
        return None
    if len(text) > 10:
        raise GapforgeError(f"$var bit index {text[:20]!r}... is too long", where)
    return int(text)


@record
class Selection:
    name: str
    variable: Variable
    position: int  # bit position from the rightmost digit


def select(header: Header, name: str, where: str) -> Selection:
    """Find a signal by hierarchical name ('top.gate_h', 'top.bus[3]' or a unique leaf name)."""
    wanted = name.strip()
    match = _SELECT.match(wanted)
    base, bit = (match.group("name"), int(match.group("bit"))) if match else (wanted, None)
    candidates = [v for v in header.variables if v.path == base]
    if not candidates:
        candidates = [v for v in header.variables if v.path.endswith("." + base)]
    if bit is not None and len({v.path for v in candidates}) == 1:
        # one name declared bit by bit (an unpacked array of single bits, "leg[0]", "leg[1]"):
        # the declaration whose range holds the bit
        candidates = [v for v in candidates if v.bit_position(bit) is not None] or candidates
    if not candidates and bit is not None:
        # a name with an element index and no bit ("tb.leg[1]" of "leg[1] [1:0]")
        candidates = [v for v in header.variables
                      if v.path == wanted or v.path.endswith("." + wanted)]
        base, bit = wanted, None
    # several names on one code are one signal; distinct codes are ambiguous
    codes = {v.code for v in candidates}
    if len(codes) > 1:
        shown = ", ".join(sorted(v.display() for v in candidates)[:12])
        raise GapforgeError(f"signal {name[:60]!r} is ambiguous: {shown}", where)
    if not candidates:
        raise GapforgeError(f"no signal {name[:60]!r} in the capture{_hint(header, wanted, base)}",
                            where)
    variable = candidates[0]
    if variable.var_type.lower() in ("real", "realtime", "string", "event"):
        raise GapforgeError(f"signal {name!r} is a {variable.var_type} variable, not a logic level", where)
    position = variable.bit_position(bit)
    if position is None:
        if bit is None:
            raise GapforgeError(
                f"signal {name!r} is {variable.width} bits wide ({variable.display()}): "
                f"select one bit, e.g. {variable.path}[0]",
                where,
            )
        raise GapforgeError(f"bit {bit} is outside {variable.display()}", where)
    if position >= variable.width:
        raise GapforgeError(f"bit {bit} is outside {variable.display()}", where)
    return Selection(name, variable, position)


def _hint(header: Header, wanted: str, base: str) -> str:
    """The names the file has (no guess: a close name may be the other gate)."""
    del wanted, base
    names = sorted({v.display() for v in header.variables})
    more = f" (of {header.declared} declared)" if header.declared > len(names) else ""
    shown = ", ".join(repr(n) for n in names[:24])
    rest = f" and {len(names) - 24} more" if len(names) > 24 else ""
    return f"; the file has {shown}{rest}{more}"
