"""Atomic writes of a group of files: what a production line needs per group of units.

Each file is written to a temporary file in the target folder, all of them are fsynced at
once (their data is on disk; issued together, the file system can commit them in one
journal write), then each is renamed into place and the folder fsynced once (the names are on disk).
A reader or a crash sees each file either absent (or as before) or complete; when
``write_group`` returns, data and names are on disk. Only this group's files are flushed:
``os.sync()`` would wait for every pending write of the whole machine (other programs,
other disks), which made a batch's time swing with whatever else the machine was doing.
Temporary files are named ``.<name>.tmp``.
"""

from __future__ import annotations

import os
from concurrent.futures import Executor, ThreadPoolExecutor
from pathlib import Path

from hosttool.errors import OutputError

#: Most fsyncs in flight at once for one group.
FSYNC_THREADS = 32


def fsync_folder(folder: Path) -> None:
    """fsync a folder: the names created or renamed in it so far survive a power cut."""
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def write_group(folder: Path, files: dict[str, bytes], fsyncs: Executor | None = None
                ) -> None:
    """Write ``files`` (name -> bytes) into ``folder``, each atomically, all durably.

    The caller must have exclusive use of the folder for these names (the batch holds the
    folder's lock): the temporary file of ``name`` is always ``.<name>.tmp``. ``fsyncs``:
    threads that issue the fsyncs together (a caller writing many groups keeps one pool of
    ``FSYNC_THREADS``; without it, one is started for this group).
    """
    if not files:
        return
    temps: list[tuple[Path, Path]] = []
    fds: list[int] = []
    try:
        for name, data in files.items():
            tmp = folder / f".{name}.tmp"
            temps.append((tmp, folder / name))
            fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o666)
            fds.append(fd)
            view = memoryview(data)
            while view:
                view = view[os.write(fd, view):]
        # fsyncs issued together let the file system commit them in one journal write
        if fsyncs is not None:
            list(fsyncs.map(os.fsync, fds))
        else:
            with ThreadPoolExecutor(max_workers=min(FSYNC_THREADS, len(fds))) as pool:
                list(pool.map(os.fsync, fds))
        for fd in fds:
            os.close(fd)
        fds = []
        for tmp, final in temps:
            os.replace(tmp, final)
    except OSError as exc:
        for fd in fds:
            os.close(fd)
        for tmp, _ in temps:
            tmp.unlink(missing_ok=True)
        raise OutputError(f"{folder}: cannot write {exc.filename or ''}: {exc.strerror}") \
            from None
    fsync_folder(folder)
