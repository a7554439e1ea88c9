"""The production record: its schema and the one interface over two back ends.

``record_open.open_record(where)`` opens an SQLite file (the embedded default: one
station, one folder; record_sqlite.py) or, for a ``postgresql://`` URI, a PostgreSQL
server shared by the stations of a line (record_postgres.py). Both hold the same
versioned schema and give the same guarantees:

- one transaction per group of units (``group()``), rolled back whole if the process dies;
- ``lock(serials)`` inside it: no other station can record those serials until the commit
  (SQLite: the database write lock taken at BEGIN IMMEDIATE; PostgreSQL: a transaction
  advisory lock per serial, taken in sorted order);
- at most one current row per serial (a unique partial index), revisions 1, 2, ... per
  serial (unique), rows never deleted: a recalibration inserts a new revision and clears
  ``current`` on the old one;
- the schema is created, or migrated from an older version, on first use.

Schema version 2 (one table, ``calibrations``; ``record_info`` holds ('schema', '2')):

    id, serial, revision, current (0/1), lot, station, operator, tool_version,
    recorded_utc (wall clock of the insert), cal_time_utc (from the readings), spec_name,
    spec_sha256, readings_file, readings_sha256, readings (JSON: the unit's readings),
    standards (JSON: the reference standards used, as registered), constants (JSON of
    integers), figures (JSON), criteria (JSON), points (JSON: each reading's firmware output,
    error and limit), verdict ('pass'/'fail'), reasons (JSON), hex_file, hex_sha256.

Version 1 (no lot, operator, tool version, readings, standards, criteria, points) is
migrated by adding those columns, empty for the old rows.
"""

from __future__ import annotations

import json
import operator
import re
from collections.abc import Iterator, Sequence
from contextlib import AbstractContextManager
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Protocol

from hosttool.errors import OutputError

SCHEMA_VERSION = 2

#: Every column a caller writes, in table order (``id`` is the back end's).
COLUMNS = ("serial", "revision", "current", "lot", "station", "operator", "tool_version",
           "recorded_utc", "cal_time_utc", "spec_name", "spec_sha256", "readings_file",
           "readings_sha256", "readings", "standards", "constants", "figures", "criteria",
           "points", "verdict", "reasons", "hex_file", "hex_sha256")
#: Columns holding JSON text.
#: A row's values in the order of COLUMNS, from its dict (one C-level call per row).
row_values = operator.itemgetter(*COLUMNS)
JSON_COLUMNS = ("readings", "standards", "constants", "figures", "criteria", "points",
                "reasons")

#: The table, written once for both back ends: ``{id}`` is the back end's key column.
TABLE = """
CREATE TABLE IF NOT EXISTS calibrations (
    id              {id},
    serial          TEXT    NOT NULL,
    revision        INTEGER NOT NULL CHECK (revision >= 1),
    current         INTEGER NOT NULL CHECK (current IN (0, 1)),
    lot             TEXT    NOT NULL DEFAULT '',
    station         TEXT    NOT NULL,
    operator        TEXT    NOT NULL DEFAULT '',
    tool_version    TEXT    NOT NULL DEFAULT '',
    recorded_utc    TEXT    NOT NULL,
    cal_time_utc    TEXT    NOT NULL,
    spec_name       TEXT    NOT NULL,
    spec_sha256     TEXT    NOT NULL,
    readings_file   TEXT    NOT NULL,
    readings_sha256 TEXT    NOT NULL,
    readings        TEXT    NOT NULL DEFAULT '[]',
    standards       TEXT    NOT NULL DEFAULT '[]',
    constants       TEXT    NOT NULL,
    figures         TEXT    NOT NULL,
    criteria        TEXT    NOT NULL DEFAULT '[]',
    points          TEXT    NOT NULL DEFAULT '[]',
    verdict         TEXT    NOT NULL CHECK (verdict IN ('pass', 'fail')),
    reasons         TEXT    NOT NULL,
    hex_file        TEXT,
    hex_sha256      TEXT,
    CHECK ((verdict = 'pass') = (hex_file IS NOT NULL AND hex_sha256 IS NOT NULL)),
    UNIQUE (serial, revision)
);
CREATE UNIQUE INDEX IF NOT EXISTS calibrations_current ON calibrations (serial)
    WHERE current = 1;
CREATE INDEX IF NOT EXISTS calibrations_lot ON calibrations (lot);
"""

#: Statements that bring a record of version N to N + 1.
MIGRATIONS: dict[int, tuple[str, ...]] = {
    1: tuple(f"ALTER TABLE calibrations ADD COLUMN {name} TEXT NOT NULL DEFAULT '{empty}'"
             for name, empty in (("lot", ""), ("operator", ""), ("tool_version", ""),
                                 ("readings", "[]"), ("standards", "[]"), ("criteria", "[]"),
                                 ("points", "[]")))
    + ("CREATE INDEX IF NOT EXISTS calibrations_lot ON calibrations (lot)",),
}


@dataclass(frozen=True)
class Row:
    """What the batch needs of a serial's current calibration."""

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


#: The current rows of some serials (``{serials}``: one ``?`` per serial).
ROWS_QUERY = ("SELECT id, serial, revision, station, cal_time_utc, spec_sha256, constants, "
              "verdict, hex_file, hex_sha256 FROM calibrations WHERE current = 1 AND serial "
              "IN ({serials})")
#: The highest revision of some serials (``{serials}``: one ``?`` per serial).
REVISIONS_QUERY = ("SELECT serial, MAX(revision) FROM calibrations WHERE serial IN ({serials}) "
                   "GROUP BY serial")
#: Serials per lookup (well under SQLite's smallest limit of 999 parameters).
LOOKUP_SIZE = 500
INSERT = (f"INSERT INTO calibrations ({', '.join(COLUMNS)}) VALUES "
          f"({', '.join('?' * len(COLUMNS))})")


def lookups(serials: Sequence[str]) -> Iterator[tuple[str, list[str]]]:
    """``{serials}`` filled for each slice of at most LOOKUP_SIZE distinct serials, with
    the slice."""
    unique = sorted(set(serials))
    for start in range(0, len(unique), LOOKUP_SIZE):
        part = unique[start:start + LOOKUP_SIZE]
        yield ", ".join("?" * len(part)), part


@dataclass(frozen=True)
class Filter:
    """Which rows ``select`` returns; None matches anything. Times are ISO 8601 UTC text
    with whole seconds (2025-03-04T08:15:00Z) compared with the calibration time
    (``cal_time_utc``, same form), ``since`` inclusive, ``until`` exclusive."""

    lot: str | None = None
    serial: str | None = None
    verdict: str | None = None
    station: str | None = None
    since: str | None = None
    until: str | None = None
    current_only: bool = True

    def where(self) -> tuple[str, list[str]]:
        """The WHERE clause (``?`` placeholders) and its parameters."""
        terms: list[str] = []
        values: list[str] = []
        for column, value in (("lot", self.lot), ("serial", self.serial),
                              ("verdict", self.verdict), ("station", self.station)):
            if value is not None:
                terms.append(f"{column} = ?")
                values.append(value)
        if self.since is not None:
            terms.append("cal_time_utc >= ?")
            values.append(self.since)
        if self.until is not None:
            terms.append("cal_time_utc < ?")
            values.append(self.until)
        if self.current_only:
            terms.append("current = 1")
        return (" WHERE " + " AND ".join(terms)) if terms else "", values


SELECT_ALL = ("SELECT id, " + ", ".join(COLUMNS) + " FROM calibrations{where} "
              "ORDER BY serial, revision")


class Record(Protocol):
    """An open production record (either back end)."""

    where: str

    def close(self) -> None:
        """Close the connection."""

    def group(self) -> AbstractContextManager[None]:
        """One transaction for a group of units; rolled back if the body raises."""

    def lock(self, serials: Sequence[str]) -> None:
        """Inside ``group()``: hold these serials against other stations until the commit."""

    def currents(self, serials: Sequence[str]) -> dict[str, Row]:
        """The current calibration of each of these serials that has one."""

    def revisions(self, serials: Sequence[str]) -> dict[str, int]:
        """The highest revision so far of each of these serials that has one."""

    def add(self, rows: Sequence[tuple[dict[str, Any], int | None]]) -> None:
        """Insert current rows (column -> value), each clearing ``current`` on the row (id)
        it supersedes, if any."""

    def select(self, which: Filter) -> list[dict[str, Any]]:
        """Rows as dicts (every column, ``id`` first), by serial and revision."""


_URI = re.compile(r"^postgres(ql)?://", re.IGNORECASE)


def is_server(where: str | Path) -> bool:
    """True when ``where`` names a PostgreSQL server (a libpq URI) rather than a file."""
    return bool(_URI.match(str(where)))


def shown(where: str | Path) -> str:
    """``where`` for messages: a URI without its password."""
    return re.sub(r"(://[^:/@]+):[^@]*@", r"\1:***@", str(where))


def decode_row(row: dict[str, Any]) -> dict[str, Any]:
    """The row with its JSON columns decoded (in place; returned for convenience)."""
    for name in JSON_COLUMNS:
        row[name] = json.loads(row[name])
    return row


def stored_version(found: Sequence[Any] | None, where: str) -> int:
    """The schema version a record holds (``found``: its ``record_info`` row, None when new);
    OutputError for a value that is no version or one newer than this tool writes."""
    if found is None:
        return SCHEMA_VERSION
    if not str(found[0]).isdigit():
        raise OutputError(f"{where}: record_info.schema: {found[0]!r} is not a schema "
                          "version: not a production record of this tool")
    version = int(found[0])
    if version > SCHEMA_VERSION:
        raise OutputError(f"{where}: record schema {version}, this tool writes "
                          f"{SCHEMA_VERSION} (a newer hosttool made it)")
    return version


def check_columns(have: set[str], where: str) -> None:
    """Refuse an existing calibrations table that lacks a column of the schema."""
    lacking = [c for c in ("id", *COLUMNS) if c not in have]
    if have and lacking:
        raise OutputError(f"{where}: calibrations.{lacking[0]}: no such column: not a "
                          f"production record of schema {SCHEMA_VERSION}")


def iter_statements(script: str) -> Iterator[str]:
    """The statements of a script of ';'-separated DDL (no ';' inside any statement)."""
    for statement in script.split(";"):
        if statement.strip():
            yield statement.strip()
