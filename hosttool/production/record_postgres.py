"""The production record on a PostgreSQL server (psycopg 3), shared by the stations of a line.

``--db postgresql://USER@HOST:PORT/DBNAME`` (a libpq URI; the password, if any, from
``~/.pgpass`` or ``PGPASSWORD`` rather than the command line). The schema (record.py) is
created or migrated on first use under a transaction advisory lock, so stations starting
together do not race. One transaction per group of units: ``lock(serials)`` takes a
transaction advisory lock per serial (``pg_advisory_xact_lock`` on a 64-bit hash of the
serial, in sorted order so two stations cannot deadlock); a station deciding a serial holds
it until its commit, so another station recording the same serial waits and then sees the
row. A killed station's connection drops and the server rolls its open transaction back:
no half-recorded group. Commits are durable when they return (the server's
``synchronous_commit``).
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from typing import Any

import psycopg

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
    shown,
    stored_version,
)

#: The advisory lock key held while the schema is created or migrated (ASCII "htschema").
SCHEMA_LOCK = 0x6874736368656D61
CONNECT_TIMEOUT_S = 10


def _sql(text: str) -> str:
    """Our ``?`` placeholders in psycopg's ``%s`` form (no literal ? or % in our SQL)."""
    return text.replace("?", "%s")


class PostgresRecord:
    """An open PostgreSQL record (see record.Record for the interface)."""

    def __init__(self, uri: str):
        self.where = shown(uri)
        try:
            self.db = psycopg.connect(uri, autocommit=True, connect_timeout=CONNECT_TIMEOUT_S,
                                      application_name="hosttool")
        except psycopg.Error as exc:
            first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise OutputError(f"{self.where}: cannot connect to the production record: "
                              f"{first}") from None
        try:
            with self.group():
                self.db.execute("SELECT pg_advisory_xact_lock(%s)", (SCHEMA_LOCK,))
                self._schema()
        except psycopg.Error as exc:
            self.db.close()
            raise OutputError(f"{self.where}: cannot open the production record: "
                              f"{str(exc).strip().splitlines()[0]}") from None

    def _schema(self) -> None:
        self.db.execute("CREATE TABLE IF NOT EXISTS record_info "
                        "(key TEXT PRIMARY KEY, value TEXT NOT NULL)")
        found = self.db.execute("SELECT value FROM record_info WHERE key = 'schema'").fetchone()
        version = stored_version(found, str(self.where))
        if found is not None:
            for old in range(version, SCHEMA_VERSION):
                for statement in MIGRATIONS[old]:
                    self.db.execute(statement.encode())
        have = {row[0] for row in self.db.execute(
            "SELECT column_name FROM information_schema.columns WHERE table_name = "
            "'calibrations' AND table_schema = current_schema()")}
        check_columns(have, str(self.where))
        table = TABLE.format(id="BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY")
        for statement in iter_statements(table):
            self.db.execute(statement.encode())
        self.db.execute("INSERT INTO record_info VALUES ('schema', %s) ON CONFLICT (key) "
                        "DO UPDATE SET value = EXCLUDED.value", (str(SCHEMA_VERSION),))

    def close(self) -> None:
        """Close the connection."""
        self.db.close()

    @contextmanager
    def group(self) -> Iterator[None]:
        """One transaction; rolled back if the body raises (or the process dies)."""
        try:
            with self.db.transaction():
                yield
        except psycopg.Error as exc:
            raise OutputError(f"{self.where}: the production record refused the group: "
                              f"{str(exc).strip().splitlines()[0]}") from None

    def lock(self, serials: Sequence[str]) -> None:
        """Hold each serial (advisory lock, sorted order) until the group commits: one
        statement per serial, executed in order, sent together (psycopg's executemany)."""
        with self.db.cursor() as cursor:
            cursor.executemany("SELECT pg_advisory_xact_lock(hashtextextended(%s, 0))",
                               [(serial,) for serial in sorted(set(serials))])

    def currents(self, serials: Sequence[str]) -> dict[str, Row]:
        """The current calibration of each of these serials that has one."""
        return {row.serial: row for marks, part in lookups(serials)
                for row in (Row(*found) for found in self.db.execute(
                    _sql(ROWS_QUERY.format(serials=marks)), part))}

    def revisions(self, serials: Sequence[str]) -> dict[str, int]:
        """The highest revision so far of each of these serials that has one."""
        return {serial: int(top) for marks, part in lookups(serials)
                for serial, top in self.db.execute(
                    _sql(REVISIONS_QUERY.format(serials=marks)), part)}

    def add(self, rows: Sequence[tuple[dict[str, Any], int | None]]) -> None:
        """Insert current rows, each clearing ``current`` on the row it supersedes."""
        with self.db.cursor() as cursor:
            cursor.executemany("UPDATE calibrations SET current = 0 WHERE id = %s",
                               [(old,) for _, old in rows if old is not None])
            cursor.executemany(_sql(INSERT), [row_values(values) for values, _ in rows])

    def select(self, which: Filter) -> list[dict[str, Any]]:
        """Rows as dicts, by serial and revision."""
        where, values = which.where()
        try:
            cursor = self.db.execute(_sql(SELECT_ALL.format(where=where)), values)
        except psycopg.Error as exc:
            raise OutputError(f"{self.where}: cannot read the record: "
                              f"{str(exc).strip().splitlines()[0]}") from None
        names = [d.name for d in cursor.description or ()]
        return [dict(zip(names, row, strict=True)) for row in cursor]
