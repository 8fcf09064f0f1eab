"""The one error type for user mistakes.

Raised with a location (file, key path, option, line) and caught once in the CLI, which prints
one line and exits with code 2. Never used for programming errors.

A bad value can be huge (a 10 MB string in a design file): `quoted` cuts a value to a readable
length for a message, and `GapforgeError.line` caps the location and the message as a last guard,
so an error line stays one readable line whatever the input.
"""

from __future__ import annotations

# Longest quoted value in a message, and longest location / message in an error line.
QUOTE_LIMIT = 40
WHERE_LIMIT = 200
MESSAGE_LIMIT = 400


def quoted(value: object, limit: int = QUOTE_LIMIT) -> str:
    """repr(value), cut to `limit` characters with the full length named when it is longer."""
    if isinstance(value, str | bytes) and len(value) > 4 * limit:
        text = repr(value[: 2 * limit])  # never build the repr of a huge value
        total = len(value)
    else:
        text = repr(value)
        total = len(value) if isinstance(value, str | bytes) else len(text)
    if len(text) <= limit:
        return text
    return f"{text[: limit - 3]}... ({total} characters)"


def cap(text: str, limit: int = MESSAGE_LIMIT) -> str:
    if len(text) <= limit:
        return text
    keep = limit - 30
    return f"{text[: keep // 2]} ...[{len(text) - keep} characters cut]... {text[-(keep // 2):]}"


class GapforgeError(Exception):
    """A user mistake: bad input, bad file, bad option. Printed as one line, exit code 2."""

    def __init__(self, message: str, where: str | None = None, *,
                 limit: int = MESSAGE_LIMIT) -> None:
        self.message = message
        self.where = where
        self.limit = limit  # a list of a file's problems may be longer (each capped itself)
        super().__init__(self.line())

    def line(self) -> str:
        text = cap(" ".join(self.message.split()), self.limit)
        if not self.where:
            return text
        return f"{cap(' '.join(self.where.split()), WHERE_LIMIT)}: {text}"

    def at(self, where: str) -> GapforgeError:
        """The same error, located under an outer location (file name, option)."""
        inner = self.where
        return GapforgeError(self.message, f"{where}: {inner}" if inner else where,
                             limit=self.limit)
