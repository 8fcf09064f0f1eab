"""The one error type for user mistakes.

Raised with a location (file, key path, option, line) and caught once in the CLI, which prints
one line and exits with code 2. Never used for programming errors.
"""

from __future__ import annotations


class GapforgeError(Exception):
    """A user mistake: bad input, bad file, bad option. Printed as one line, exit code 2."""

    def __init__(self, message: str, where: str | None = None) -> None:
        self.message = message
        self.where = where
        super().__init__(self.line())

    def line(self) -> str:
        text = " ".join(self.message.split())
        return f"{self.where}: {text}" if self.where else text

    def at(self, where: str) -> GapforgeError:
        """The same error, located under an outer location (file name, option)."""
        inner = self.where
        return GapforgeError(self.message, f"{where}: {inner}" if inner else where)
