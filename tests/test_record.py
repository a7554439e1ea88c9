"""The record's interface on the embedded back end: schema migration, rework, queries.

Sources: sqlite3 (standard library) reading the file directly; the version 1 schema as
hosttool 0.2.0 wrote it (copied below).
"""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import pytest
from test_production import _batch, _lot, _rows, _truths

from hosttool.production import record_sqlite
from hosttool.production.record import SCHEMA_VERSION, Filter
from hosttool.production.record_open import open_record

V1 = """
CREATE TABLE record_info (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE calibrations (
    id INTEGER PRIMARY KEY, serial TEXT NOT NULL, revision INTEGER NOT NULL,
    current INTEGER NOT NULL, station TEXT NOT NULL, recorded_utc TEXT NOT NULL,
    cal_time_utc TEXT NOT NULL, spec_name TEXT NOT NULL, spec_sha256 TEXT NOT NULL,
    readings_file TEXT NOT NULL, readings_sha256 TEXT NOT NULL, constants TEXT NOT NULL,
    figures TEXT NOT NULL, verdict TEXT NOT NULL, reasons TEXT NOT NULL, hex_file TEXT,
    hex_sha256 TEXT, UNIQUE (serial, revision));
CREATE UNIQUE INDEX calibrations_current ON calibrations (serial) WHERE current = 1;
INSERT INTO record_info VALUES ('schema', '1');
INSERT INTO calibrations VALUES (1, 'OLD1', 1, 1, 'bench', '2025-01-01T00:00:00.000000Z',
    '2025-01-01T00:00:00Z', 'x', 'ab', 'r.csv', 'cd', '{}', '{}', 'fail', '["too noisy"]',
    NULL, NULL);
"""


def test_version_1_record_is_migrated_on_first_use(tmp_path: Path) -> None:
    path = tmp_path / "old.sqlite"
    db = sqlite3.connect(path)
    db.executescript(V1)
    db.close()
    record = open_record(path)
    rows = record.select(Filter())
    record.close()
    assert [(r["serial"], r["lot"], r["operator"], r["readings"]) for r in rows] == [
        ("OLD1", "", "", "[]")]
    db = sqlite3.connect(path)
    assert db.execute("SELECT value FROM record_info").fetchone()[0] == str(SCHEMA_VERSION)
    db.close()


def test_a_new_record_has_32_kib_pages_an_old_one_keeps_its_own(tmp_path: Path) -> None:
    """Source: SQLite's page_size pragma (sqlite.org/pragma.html): it sets the page size
    of a database not yet created; an existing one keeps its own until a VACUUM."""
    new = tmp_path / "new.sqlite"
    open_record(new).close()
    old = tmp_path / "old.sqlite"
    db = sqlite3.connect(old)
    db.executescript(V1)
    before = db.execute("PRAGMA page_size").fetchone()[0]
    db.close()
    open_record(old).close()
    sizes = []
    for path in (new, old):
        db = sqlite3.connect(path)
        sizes.append(db.execute("PRAGMA page_size").fetchone()[0])
        db.close()
    assert sizes == [32768, before] and before < 32768


def test_reworked_failed_unit_is_recorded_again_without_recalibrate(tmp_path: Path) -> None:
    """A unit whose last record is a failure gets a new revision; passed units still need
    --recalibrate (the old code refused both)."""
    out = tmp_path / "out"
    out.mkdir()
    assert _batch(_lot(tmp_path / "a.csv", _truths(3, failing=1)), out).returncode == 1
    second = _batch(_lot(tmp_path / "b.csv", _truths(3), seed=2), out, "--operator", "kim")
    assert second.returncode == 2
    rows = _rows(out)
    assert [(r["serial"], r["revision"], r["current"], r["verdict"]) for r in rows] == [
        ("HV0000", 1, 1, "pass"), ("HV0001", 1, 0, "fail"), ("HV0001", 2, 1, "pass"),
        ("HV0002", 1, 1, "pass")]
    assert rows[2]["operator"] == "kim" and rows[2]["lot"] == "b"
    readings = json.loads(str(rows[2]["readings"]))
    assert readings[0]["line"] > 0 and {"raw_mean_counts", "direction"} <= set(readings[0])
    assert second.stdout.count("already recorded as passed") == 2


class _RefusingConnection:
    """Answers ``PRAGMA journal_mode=WAL`` as SQLite does while another station makes the
    same new file: "database is locked" at once, ``refusals`` times, then "wal"."""

    def __init__(self, refusals: int, error: str = "database is locked"):
        self.refusals, self.error, self.tries = refusals, error, 0

    def execute(self, sql: str) -> _RefusingConnection:
        assert sql == "PRAGMA journal_mode=WAL"
        self.tries += 1
        if self.tries <= self.refusals:
            raise sqlite3.OperationalError(self.error)
        return self

    def fetchone(self) -> tuple[str]:
        return ("wal",)


def test_the_switch_to_the_log_is_tried_again_while_another_station_makes_the_file() -> None:
    # SQLite refuses the switch to WAL with "database is locked" without its busy wait
    # while another connection is making the file (seen with two stations starting a new
    # record together; the busy handler's limits: sqlite.org/c3ref/busy_handler.html, from
    # memory); anything else is not retried.
    refusing = _RefusingConnection(3)
    assert record_sqlite._write_ahead_log(refusing) == "wal"  # type: ignore[arg-type]
    assert refusing.tries == 4
    broken = _RefusingConnection(1, "disk I/O error")
    with pytest.raises(sqlite3.OperationalError, match="disk I/O error"):
        record_sqlite._write_ahead_log(broken)  # type: ignore[arg-type]
    assert broken.tries == 1
