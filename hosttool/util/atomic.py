"""Atomic file writes: a temporary file in the same folder, fsync, rename, fsync the folder.

A reader (or a crash) sees either the old file or the whole new one, never a part.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from hosttool.errors import OutputError


def _mode_for(path: Path) -> int:
    """The existing file's permissions, else what a plain open() would give (0666 & ~umask)."""
    try:
        return path.stat().st_mode & 0o7777
    except FileNotFoundError:
        umask = os.umask(0)
        os.umask(umask)
        return 0o666 & ~umask


def make_folder(folder: Path) -> Path:
    """``folder``, created with its missing parents if it does not exist yet.

    Refused in one line (OutputError) when the path, or a part of it, is a file, or when
    the folder cannot be created (permissions, read-only file system).
    """
    if folder.is_dir():
        return folder
    for part in (folder, *folder.parents):
        if part.exists() and not part.is_dir():
            what = "exists" if part == folder else f"is inside {part}, which exists"
            raise OutputError(f"{folder}: {what} and is not a folder")
        if part.exists():
            break
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{folder}: cannot create the folder: {exc.strerror}") from None
    return folder


def write_atomic(path: str | Path, data: bytes | str) -> Path:
    """Write ``data`` to ``path`` atomically; text is UTF-8 with the newlines given."""
    path = Path(path)
    payload = data.encode("utf-8") if isinstance(data, str) else data
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise OutputError(f"{path}: folder {folder} does not exist")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    except OSError as exc:
        raise OutputError(f"{path}: cannot write in {folder}: {exc.strerror}") from None
    try:
        os.fchmod(fd, _mode_for(path))
        with os.fdopen(fd, "wb") as handle:
            handle.write(payload)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except OSError as exc:
        Path(tmp).unlink(missing_ok=True)
        raise OutputError(f"{path}: cannot write: {exc.strerror}") from None
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    dir_fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(dir_fd)
    finally:
        os.close(dir_fd)
    return path
