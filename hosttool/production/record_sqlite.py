"""The production record in an SQLite file (standard-library sqlite3): the embedded default.

Pages of 32 KiB (``PAGE_SIZE``), a WAL journal, a busy timeout so stations writing at
once wait for each other instead of failing, and one transaction per group of units
(``BEGIN IMMEDIATE``: the write lock is taken before the group's units are read, so two
stations cannot both record the same serial; ``lock`` has nothing more to do). Each
commit is atomic, survives the process being killed, and is durable when it returns
(synchronous FULL: the write-ahead log is fsynced at each commit, one fsync per group of
units; SQLite checkpoints the log into the file by itself). Schema and migrations:
record.py.
"""

from __future__ import annotations

import sqlite3
import time
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from hosttool.errors import OutputError
from hosttool.production.record import (
    INSERT,
    MIGRATIONS,
    REVISIONS_QUERY,
    ROWS_QUERY,
    SCHEMA_VERSION,
    SELECT_ALL,
    TABLE,
    Filter,
    Row,
    check_columns,
    iter_statements,
    lookups,
    row_values,
    stored_version,
)

BUSY_TIMEOUT_S = 120.0
#: Bytes per page of a record file this version makes (a file keeps the size it was made
#: with): a unit's row (about 6 kB, mostly its JSON texts; up to 32 kB for some 60 readings)
#: fits in a page instead of spilling into a chain of overflow pages, while each commit
#: rewrites few bytes of the pages it only touches (the last leaf, the indexes, the header
#: page): 10,000 units of the hive_scale example wrote about 15 % less to the log than with
#: 64 KiB pages (the batch about 0.25 s faster on 2 cores, interleaved runs), and about
#: 0.2 s less of the recording process's time than with 4 KiB pages.
PAGE_SIZE = 32768


#: Seconds between tries of the switch to the write-ahead log while another station holds
#: the new file.
WAL_RETRY_S = 0.02


def _write_ahead_log(db: sqlite3.Connection) -> str:
    """Switch the file to the write-ahead log; returns the journal mode in force. While
    another station is making the same new file, SQLite refuses the switch at once with
    "database is locked" (its busy wait does not cover this step): tried again until
    ``BUSY_TIMEOUT_S``."""
    deadline = time.monotonic() + BUSY_TIMEOUT_S
    while True:
        try:
            mode: str = db.execute("PRAGMA journal_mode=WAL").fetchone()[0]
            return mode
        except sqlite3.OperationalError as exc:
            if "locked" not in str(exc) or time.monotonic() > deadline:
                raise
            time.sleep(WAL_RETRY_S)


class SqliteRecord:
    """An open SQLite record (see record.Record for the interface)."""

    def __init__(self, path: Path):
        self.path = path
        self.where = str(path)
        try:
            self.db = sqlite3.connect(path, timeout=BUSY_TIMEOUT_S, isolation_level=None)
            self.db.execute(f"PRAGMA page_size={PAGE_SIZE}")   # a new file's; else no-op
            mode = _write_ahead_log(self.db)
            if mode != "wal":
                raise OutputError(f"{path}: cannot use a write-ahead log here ({mode})")
            self.db.execute("PRAGMA synchronous=FULL")
            with self.group():
                self._schema()
        except sqlite3.Error as exc:
            raise OutputError(f"{path}: cannot open the production record: {exc}") from None

    def _schema(self) -> None:
        self.db.execute("CREATE TABLE IF NOT EXISTS record_info "
                        "(key TEXT PRIMARY KEY, value TEXT NOT NULL)")
        found = self.db.execute("SELECT value FROM record_info WHERE key = 'schema'").fetchone()
        version = stored_version(found, str(self.path))
        if found is not None:
            for old in range(version, SCHEMA_VERSION):
                for statement in MIGRATIONS[old]:
                    self.db.execute(statement)
        have = {row[1] for row in self.db.execute("PRAGMA table_info(calibrations)")}
        check_columns(have, str(self.path))
        for statement in iter_statements(TABLE.format(id="INTEGER PRIMARY KEY")):
            self.db.execute(statement)
        self.db.execute("INSERT OR REPLACE INTO record_info VALUES ('schema', ?)",
                        (str(SCHEMA_VERSION),))

    def close(self) -> None:
        """Close the connection."""
        self.db.close()

    @contextmanager
    def group(self) -> Iterator[None]:
        """One transaction holding the write lock; rolled back if the body raises."""
        try:
            self.db.execute("BEGIN IMMEDIATE")
        except sqlite3.Error as exc:
            raise OutputError(f"{self.path}: cannot lock the production record: {exc}") \
                from None
        try:
            yield
        except BaseException:
            self.db.execute("ROLLBACK")
            raise
        try:
            self.db.execute("COMMIT")
        except sqlite3.Error as exc:
            raise OutputError(f"{self.path}: cannot commit: {exc}") from None

    def lock(self, serials: Sequence[str]) -> None:
        """Nothing to add: BEGIN IMMEDIATE holds the whole file's write lock."""

    def currents(self, serials: Sequence[str]) -> dict[str, Row]:
        """The current calibration of each of these serials that has one."""
        query = ROWS_QUERY.format
        return {row.serial: row for marks, part in lookups(serials)
                for row in (Row(*found)
                            for found in self.db.execute(query(serials=marks), part))}

    def revisions(self, serials: Sequence[str]) -> dict[str, int]:
        """The highest revision so far of each of these serials that has one."""
        return {serial: int(top) for marks, part in lookups(serials)
                for serial, top in self.db.execute(REVISIONS_QUERY.format(serials=marks),
                                                   part)}

    def add(self, rows: Sequence[tuple[dict[str, Any], int | None]]) -> None:
        """Insert current rows, each clearing ``current`` on the row it supersedes."""
        try:
            self.db.executemany("UPDATE calibrations SET current = 0 WHERE id = ?",
                                [(old,) for _, old in rows if old is not None])
            self.db.executemany(INSERT, [row_values(values) for values, _ in rows])
        except sqlite3.Error as exc:
            raise OutputError(f"{self.path}: cannot record the group of "
                              f"{rows[0][0]['serial']}: {exc}") from None

    def select(self, which: Filter) -> list[dict[str, Any]]:
        """Rows as dicts, by serial and revision."""
        where, values = which.where()
        try:
            cursor = self.db.execute(SELECT_ALL.format(where=where), values)
        except sqlite3.Error as exc:
            raise OutputError(f"{self.path}: cannot read the record: {exc}") from None
        names = [d[0] for d in cursor.description]
        return [dict(zip(names, row, strict=True)) for row in cursor]
