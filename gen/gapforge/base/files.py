"""Atomic, all-or-nothing file output. Only the CLI layer calls this.

Every text is rendered before anything is written; each file is written to a temporary file in
its own directory and renamed over the target, so an error leaves existing files untouched and a
reader never sees a half-written file.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Mapping
from pathlib import Path

from gapforge.base.errors import GapforgeError


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_files(texts: Mapping[Path, str | bytes]) -> list[Path]:
    """Write every file atomically (UTF-8, '\\n' line ends). Returns the paths written."""
    staged: list[tuple[str, Path]] = []
    try:
        for path, text in sorted(texts.items()):
            directory = path.parent if str(path.parent) else Path(".")
            try:
                directory.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise GapforgeError(
                    f"cannot create directory: {exc.strerror}", str(directory)
                ) from None
            if path.is_dir():
                raise GapforgeError("is a directory, expected a file to write", str(path))
            data = text.encode("utf-8") if isinstance(text, str) else text
            try:
                fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=directory)
            except OSError as exc:
                raise GapforgeError(f"cannot write: {exc.strerror}", str(path)) from None
            staged.append((tmp, path))
            with os.fdopen(fd, "wb") as handle:
                handle.write(data)
                handle.flush()
                os.fsync(handle.fileno())
            # mkstemp creates 0600; give the file the mode a plain open() would have
            os.chmod(tmp, 0o666 & ~_umask())
        for tmp, path in staged:
            try:
                os.replace(tmp, path)
            except OSError as exc:
                raise GapforgeError(f"cannot write: {exc.strerror}", str(path)) from None
        return [path for _, path in staged]
    finally:
        for tmp, _ in staged:
            if os.path.exists(tmp):
                os.unlink(tmp)
