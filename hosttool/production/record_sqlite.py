"""The production record in an SQLite file (standard-library sqlite3): the embedded default.

WAL journal, a busy timeout so stations writing at once wait for each other instead of
failing, and one transaction per group of units (``BEGIN IMMEDIATE``: the write lock is
taken before the group's units are read, so two stations cannot both record the same
serial; ``lock`` has nothing more to do). Each commit is atomic and survives the process
being killed; against a power cut the record is made durable by ``checkpoint()``
(synchronous NORMAL: commits between two checkpoints may be rolled back by a power cut,
never half-applied; the batch checkpoints after every group, whose images are already on
disk, so a re-run restores such rows). Schema and migrations: record.py.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from hosttool.errors import OutputError
from hosttool.production.record import (
    COLUMNS,
    MIGRATIONS,
    ROW_QUERY,
    SCHEMA_VERSION,
    SELECT_ALL,
    TABLE,
    Filter,
    Row,
    check_columns,
    iter_statements,
    stored_version,
)

BUSY_TIMEOUT_S = 120.0


class SqliteRecord:
    """An open SQLite record (see record.Record for the interface)."""

    def __init__(self, path: Path):
        self.path = path
        self.where = str(path)
        try:
            self.db = sqlite3.connect(path, timeout=BUSY_TIMEOUT_S, isolation_level=None)
            mode = self.db.execute("PRAGMA journal_mode=WAL").fetchone()[0]
            if mode != "wal":
                raise OutputError(f"{path}: cannot use a write-ahead log here ({mode})")
            self.db.execute("PRAGMA synchronous=NORMAL")
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

    def checkpoint(self) -> None:
        """Make every commit so far durable (WAL and database fsynced)."""
        try:
            self.db.execute("PRAGMA wal_checkpoint(PASSIVE)")
        except sqlite3.Error as exc:
            raise OutputError(f"{self.path}: cannot checkpoint: {exc}") from None

    def current(self, serial: str) -> Row | None:
        """The serial's current calibration, if any."""
        found = self.db.execute(ROW_QUERY, (serial,)).fetchone()
        return None if found is None else Row(*found)

    def next_revision(self, serial: str) -> int:
        """1 + the serial's highest revision so far."""
        found = self.db.execute("SELECT MAX(revision) FROM calibrations WHERE serial = ?",
                                (serial,)).fetchone()[0]
        return 1 if found is None else int(found) + 1

    def add(self, values: dict[str, Any], supersedes: int | None) -> None:
        """Insert a current row (clearing ``current`` on the row it supersedes)."""
        try:
            if supersedes is not None:
                self.db.execute("UPDATE calibrations SET current = 0 WHERE id = ?",
                                (supersedes,))
            self.db.execute(f"INSERT INTO calibrations ({', '.join(COLUMNS)}) VALUES "
                            f"({', '.join('?' * len(COLUMNS))})",
                            tuple(values[c] for c in COLUMNS))
        except sqlite3.Error as exc:
            raise OutputError(f"{self.path}: cannot record {values['serial']}: {exc}") \
                from None

    def select(self, which: Filter) -> list[dict[str, Any]]:
        """Rows as dicts, by serial and revision."""
        where, values = which.where()
        try:
            cursor = self.db.execute(SELECT_ALL.format(where=where), values)
        except sqlite3.Error as exc:
            raise OutputError(f"{self.path}: cannot read the record: {exc}") from None
        names = [d[0] for d in cursor.description]
        return [dict(zip(names, row, strict=True)) for row in cursor]
