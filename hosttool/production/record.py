"""The production record: an SQLite database (standard-library sqlite3) of every calibration.

WAL journal, a busy timeout so stations writing at once wait for each other instead of
failing, and one transaction per unit (``BEGIN IMMEDIATE``: the write lock is taken before
the unit's record is read, so two stations cannot both record the same serial). Each
commit is atomic and survives the process being killed; against a power cut the record is
made durable by ``checkpoint()`` (synchronous NORMAL: commits between two checkpoints may
be rolled back by a power cut, never half-applied; the batch checkpoints after every group
of units, whose images are already on disk, so a re-run restores such rows). Rows are
never deleted; a recalibration inserts a new revision and clears ``current`` on the old
one, so the history stays.

Schema version 1:

    record_info(key TEXT PRIMARY KEY, value TEXT)        -- ('schema', '1')
    calibrations(
        id INTEGER PRIMARY KEY,
        serial TEXT, revision INTEGER (1, 2, ... per serial), current INTEGER (0/1),
        station TEXT, recorded_utc TEXT (wall clock of the insert, ISO 8601),
        cal_time_utc TEXT (calibration time, from the readings, ISO 8601),
        spec_name TEXT, spec_sha256 TEXT, readings_file TEXT, readings_sha256 TEXT,
        constants TEXT (JSON object of integers), figures TEXT (JSON object),
        verdict TEXT ('pass'/'fail'), reasons TEXT (JSON array),
        hex_file TEXT (name in the output folder, NULL when failed), hex_sha256 TEXT,
        UNIQUE (serial, revision))
    one current row per serial (a partial unique index enforces it)
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from hosttool.errors import OutputError

SCHEMA_VERSION = 1
BUSY_TIMEOUT_S = 120.0

_SCHEMA = """
CREATE TABLE IF NOT EXISTS record_info (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS calibrations (
    id              INTEGER PRIMARY KEY,
    serial          TEXT    NOT NULL,
    revision        INTEGER NOT NULL CHECK (revision >= 1),
    current         INTEGER NOT NULL CHECK (current IN (0, 1)),
    station         TEXT    NOT NULL,
    recorded_utc    TEXT    NOT NULL,
    cal_time_utc    TEXT    NOT NULL,
    spec_name       TEXT    NOT NULL,
    spec_sha256     TEXT    NOT NULL,
    readings_file   TEXT    NOT NULL,
    readings_sha256 TEXT    NOT NULL,
    constants       TEXT    NOT NULL,
    figures         TEXT    NOT NULL,
    verdict         TEXT    NOT NULL CHECK (verdict IN ('pass', 'fail')),
    reasons         TEXT    NOT NULL,
    hex_file        TEXT,
    hex_sha256      TEXT,
    CHECK ((verdict = 'pass') = (hex_file IS NOT NULL AND hex_sha256 IS NOT NULL)),
    UNIQUE (serial, revision)
);
CREATE UNIQUE INDEX IF NOT EXISTS calibrations_current ON calibrations (serial)
    WHERE current = 1;
"""

COLUMNS = ("serial", "revision", "current", "station", "recorded_utc", "cal_time_utc",
           "spec_name", "spec_sha256", "readings_file", "readings_sha256", "constants",
           "figures", "verdict", "reasons", "hex_file", "hex_sha256")


@dataclass(frozen=True)
class Row:
    """One calibration as recorded."""

    id: int
    serial: str
    revision: int
    station: str
    cal_time_utc: str
    spec_sha256: str
    constants: str
    verdict: str
    hex_file: str | None
    hex_sha256: str | None


class Record:
    """An open production record; use ``unit()`` for each unit's transaction."""

    def __init__(self, path: Path):
        self.path = path
        try:
            self.db = sqlite3.connect(path, timeout=BUSY_TIMEOUT_S, isolation_level=None)
            mode = self.db.execute("PRAGMA journal_mode=WAL").fetchone()[0]
            if mode != "wal":
                raise OutputError(f"{path}: cannot use a write-ahead log here ({mode})")
            self.db.execute("PRAGMA synchronous=NORMAL")
            with self.unit():
                for statement in _SCHEMA.split(";"):
                    if statement.strip():
                        self.db.execute(statement)
                found = self.db.execute(
                    "SELECT value FROM record_info WHERE key = 'schema'").fetchone()
                if found is None:
                    self.db.execute("INSERT INTO record_info VALUES ('schema', ?)",
                                    (str(SCHEMA_VERSION),))
                elif found[0] != str(SCHEMA_VERSION):
                    raise OutputError(f"{path}: record schema {found[0]}, this tool writes "
                                      f"{SCHEMA_VERSION}")
        except sqlite3.Error as exc:
            raise OutputError(f"{path}: cannot open the production record: {exc}") from None

    def close(self) -> None:
        """Close the connection."""
        self.db.close()

    @contextmanager
    def unit(self) -> Iterator[None]:
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

    def checkpoint(self) -> None:
        """Make every commit so far durable (WAL and database fsynced)."""
        try:
            self.db.execute("PRAGMA wal_checkpoint(PASSIVE)")
        except sqlite3.Error as exc:
            raise OutputError(f"{self.path}: cannot checkpoint: {exc}") from None

    def current(self, serial: str) -> Row | None:
        """The serial's current calibration, if any (call inside ``unit()``)."""
        found = self.db.execute(
            "SELECT id, serial, revision, station, cal_time_utc, spec_sha256, constants, "
            "verdict, hex_file, hex_sha256 FROM calibrations WHERE serial = ? AND current = 1",
            (serial,)).fetchone()
        return None if found is None else Row(*found)

    def next_revision(self, serial: str) -> int:
        """1 + the serial's highest revision so far."""
        found = self.db.execute("SELECT MAX(revision) FROM calibrations WHERE serial = ?",
                                (serial,)).fetchone()[0]
        return 1 if found is None else int(found) + 1

    def add(self, values: dict[str, Any], supersedes: int | None) -> None:
        """Insert a current row (clearing ``current`` on the row it supersedes)."""
        if supersedes is not None:
            self.db.execute("UPDATE calibrations SET current = 0 WHERE id = ?", (supersedes,))
        self.db.execute(f"INSERT INTO calibrations ({', '.join(COLUMNS)}) VALUES "
                        f"({', '.join('?' * len(COLUMNS))})",
                        tuple(values[c] for c in COLUMNS))
