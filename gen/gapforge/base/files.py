"""Atomic, all-or-nothing file output. Only the CLI layer calls this.

Every text is rendered before anything is written. The whole set of targets is checked first
(`check_output_set`: no two paths that are one file once normalised, also ignoring case for
checkouts on case-insensitive file systems; no path inside another; no directory in the way;
every parent folder present, or creatable when the caller asked for missing folders). Then each
changed file is written to a temporary file in its own directory and renamed over the target, so
an error leaves existing files untouched, a reader never sees a half-written file, and a failed
write removes the folders it created. A file whose bytes would not change is left alone (same
inode and modification time), so a make-based firmware build does not recompile.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

from gapforge.base.errors import GapforgeError
from gapforge.base.records import record

Texts = Mapping[Path, str | bytes]


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _data(text: str | bytes) -> bytes:
    return text.encode("utf-8") if isinstance(text, str) else text


def _key(path: Path) -> str:
    """The identity of a path on any file system: absolute, normalised, case-folded."""
    return os.path.normpath(os.path.abspath(path)).casefold()


@dataclass
class Outcome:
    """What a write (or a check) found for every target, each list sorted."""

    written: list[Path] = field(default_factory=list)
    unchanged: list[Path] = field(default_factory=list)
    missing: list[Path] = field(default_factory=list)  # (check only) not there at all
    stale: list[Path] = field(default_factory=list)  # (check only) there, with other bytes


def check_output_set(paths: list[Path]) -> None:
    """Refuse (GapforgeError, nothing written) a set of targets that would collide."""
    seen: dict[str, Path] = {}
    for path in sorted(paths):
        key = _key(path)
        if key in seen:
            raise GapforgeError(
                f"two outputs are the same file once normalised (case ignored): "
                f"{seen[key]} and {path}",
                str(path),
            )
        seen[key] = path
    for key, path in seen.items():
        parent = os.path.dirname(key)
        while parent and parent != os.path.dirname(parent):
            if parent in seen:
                raise GapforgeError(
                    f"an output would be a folder of another output ({seen[parent]})", str(path)
                )
            parent = os.path.dirname(parent)


def _missing_folders(path: Path, parents: bool) -> list[Path]:
    """The folders to create (outermost first) for `path`; refuses what cannot work."""
    if path.is_dir():
        raise GapforgeError("is a directory, expected a file to write", str(path))
    directory = path.parent if str(path.parent) else Path(".")
    missing: list[Path] = []
    probe = directory
    while not probe.exists():
        missing.append(probe)
        if probe.parent == probe:
            break
        probe = probe.parent
    if probe.exists() and not probe.is_dir():
        raise GapforgeError("cannot create directory: a file is in the way", str(probe))
    if missing and not parents:
        raise GapforgeError(
            "folder does not exist (create it, or give --parents to create missing folders)",
            str(missing[-1]),
        )
    return list(reversed(missing))


def compare(texts: Texts) -> Outcome:
    """Which targets are missing, stale (other bytes) or unchanged; reads only."""
    outcome = Outcome()
    for path, text in sorted(texts.items()):
        if not path.is_file():
            outcome.missing.append(path)
        elif path.read_bytes() != _data(text):
            outcome.stale.append(path)
        else:
            outcome.unchanged.append(path)
    return outcome


@record
class Prepared:
    """A checked write: what to write, which folders to create, what is already current."""

    texts: Texts
    todo: list[Path]
    folders: list[Path]
    unchanged: list[Path]


def prepare(texts: Texts, *, parents: bool) -> Prepared:
    """Check the whole set of targets and the folders they need; writes nothing."""
    check_output_set(list(texts))
    plan = compare(texts)
    todo = sorted([*plan.missing, *plan.stale])
    folders: list[Path] = []
    for path in todo:
        for folder in _missing_folders(path, parents):
            if folder not in folders:
                folders.append(folder)
    return Prepared(texts, todo, folders, plan.unchanged)


def commit(prepared: Prepared) -> Outcome:
    """Write a prepared set: every changed file atomically, all or nothing."""
    _write(prepared.todo, prepared.texts, prepared.folders)
    return Outcome(written=prepared.todo, unchanged=prepared.unchanged)


def write_outputs(texts: Texts, *, parents: bool) -> Outcome:
    """Check the whole set, then write every changed file atomically (UTF-8 as given)."""
    return commit(prepare(texts, parents=parents))


def _write(todo: list[Path], texts: Texts, folders: list[Path]) -> None:
    staged: list[tuple[str, Path]] = []
    created: list[Path] = []
    done = False
    try:
        for folder in folders:
            try:
                folder.mkdir()
            except FileExistsError:
                continue
            except OSError as exc:
                raise GapforgeError(f"cannot create directory: {exc.strerror}", str(folder)) from None
            created.append(folder)
        for path in todo:
            staged.append((_stage(path, _data(texts[path])), path))
        for tmp, path in staged:
            try:
                os.replace(tmp, path)
            except OSError as exc:
                raise GapforgeError(f"cannot write: {exc.strerror}", str(path)) from None
        done = True
    finally:
        for tmp, _ in staged:
            if os.path.exists(tmp):
                os.unlink(tmp)
        if not done:
            for folder in reversed(created):
                with contextlib.suppress(OSError):
                    folder.rmdir()


def _stage(path: Path, data: bytes) -> str:
    directory = path.parent if str(path.parent) else Path(".")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=directory)
    except OSError as exc:
        raise GapforgeError(f"cannot write: {exc.strerror}", str(path)) from None
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        # mkstemp creates 0600; give the file the mode a plain open() would have
        os.chmod(tmp, 0o666 & ~_umask())
    except BaseException:
        os.unlink(tmp)
        raise
    return tmp


def write_files(texts: Texts, *, parents: bool = True) -> list[Path]:
    """Write every file atomically, all or nothing; returns every target (written or already
    identical). `parents`: create missing folders (a command says so in its help)."""
    outcome = write_outputs(texts, parents=parents)
    return sorted([*outcome.written, *outcome.unchanged])
