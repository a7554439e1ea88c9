"""Open the production record at a path (SQLite) or a postgresql:// URI (a server)."""

from __future__ import annotations

from pathlib import Path

from hosttool.production.record import Record, is_server
from hosttool.production.record_sqlite import SqliteRecord


def open_record(where: str | Path) -> Record:
    """Open (creating or migrating its schema) the record at a path or a postgresql:// URI."""
    if is_server(where):
        # imported here on purpose: psycopg is loaded only by a station using a server
        from hosttool.production.record_postgres import PostgresRecord
        return PostgresRecord(str(where))
    return SqliteRecord(Path(where))
