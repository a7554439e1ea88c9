"""``hosttool record``: query and export the production record (SQLite file or server)."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path
from typing import Any

from hosttool.commands.calibrate import columns
from hosttool.errors import InputError
from hosttool.production.certificate import recorded_row, write_certificate
from hosttool.production.lot_report import CPK_FLOOR, write_lot_report
from hosttool.production.record import COLUMNS, JSON_COLUMNS, Filter, decode_row
from hosttool.production.record_open import open_record
from hosttool.util.atomic import write_atomic
from hosttool.util.utctime import format_time_utc, parse_time_utc

VERDICTS = ("pass", "fail")
FORMATS = ("csv", "json")


def make_filter(*, lot: str | None = None, serial: str | None = None,
                verdict: str | None = None, station: str | None = None,
                since: str | None = None, until: str | None = None,
                all_revisions: bool = False) -> Filter:
    """The options of ``record list`` and ``export`` as a Filter (times checked)."""
    if verdict is not None and verdict not in VERDICTS:
        raise InputError(f"--verdict: {verdict!r} is not 'pass' or 'fail'")
    return Filter(lot=lot, serial=serial, verdict=verdict, station=station,
                  since=None if since is None else format_time_utc(
                      parse_time_utc(since, "--since")),
                  until=None if until is None else format_time_utc(
                      parse_time_utc(until, "--until")),
                  current_only=not all_revisions)


def fetch(db: str, which: Filter) -> list[dict[str, Any]]:
    """The rows ``which`` selects, JSON columns decoded."""
    record = open_record(db)
    try:
        rows = record.select(which)
    finally:
        record.close()
    return [decode_row(row) for row in rows]


def row_summary(row: dict[str, Any]) -> dict[str, Any]:
    """The object of one row in ``record list --json`` (docs/json.md)."""
    return {"serial": row["serial"], "revision": row["revision"],
            "current": bool(row["current"]), "verdict": row["verdict"], "lot": row["lot"],
            "station": row["station"], "operator": row["operator"],
            "cal_time_utc": row["cal_time_utc"], "recorded_utc": row["recorded_utc"],
            "spec_name": row["spec_name"], "image": row["hex_file"],
            "reasons": row["reasons"]}


def list_text(rows: list[dict[str, Any]], where: str) -> str:
    """One line per row, then the count."""
    if not rows:
        return f"{where}: no rows match\n"
    table: list[tuple[str, ...]] = [("serial", "rev", "verdict", "lot", "station", "operator",
                                     "calibrated", "image")]
    for r in rows:
        table.append((r["serial"], str(r["revision"]) + ("" if r["current"] else " (old)"),
                      r["verdict"].upper() if r["verdict"] == "fail" else r["verdict"],
                      r["lot"] or "-", r["station"], r["operator"] or "-", r["cal_time_utc"],
                      r["hex_file"] or "-"))
    passed = sum(r["verdict"] == "pass" for r in rows)
    return "\n".join(columns(table, (False, True, False, False, False, False, False, False))
                     + [f"{len(rows)} rows ({passed} passed, {len(rows) - passed} failed) "
                        f"in {where}"]) + "\n"


def show_text(rows: list[dict[str, Any]], serial: str) -> str:
    """Every revision of one serial, newest last, with what an auditor asks for."""
    lines = [f"unit {serial}: {len(rows)} revision(s)"]
    for r in rows:
        lines += ["", f"revision {r['revision']}" + (" (current)" if r["current"] else
                                                    " (superseded)")]
        standards = ", ".join(f"{s['id']} (certificate {s['certificate']}, due {s['due']})"
                              for s in r["standards"]) or "-"
        facts = [("verdict", r["verdict"]), ("lot", r["lot"] or "-"),
                 ("station", r["station"]), ("operator", r["operator"] or "-"),
                 ("calibrated", r["cal_time_utc"]), ("recorded", r["recorded_utc"]),
                 ("tool version", r["tool_version"] or "-"),
                 ("spec", f"{r['spec_name']} (sha256 {r['spec_sha256'][:16]}...)"),
                 ("readings", f"{r['readings_file']} (sha256 {r['readings_sha256'][:16]}..., "
                              f"{len(r['readings'])} readings kept)"),
                 ("standards", standards),
                 ("constants", json.dumps(r["constants"], sort_keys=True)),
                 ("image", "-" if r["hex_file"] is None else
                  f"{r['hex_file']} (sha256 {r['hex_sha256'][:16]}...)")]
        lines += columns(facts, (False, False))
        lines += [f"  - {reason}" for reason in r["reasons"]]
    return "\n".join(lines) + "\n"


def run_show(db: str, serial: str) -> list[dict[str, Any]]:
    """Every revision of ``serial``; InputError if the record has none."""
    rows = fetch(db, Filter(serial=serial, current_only=False))
    if not rows:
        raise InputError(f"{serial}: not in the record {db}")
    return rows


def export_text(rows: list[dict[str, Any]], fmt: str) -> str:
    """Every column of every row: CSV (JSON columns as JSON text) or a JSON array."""
    if fmt == "json":
        return json.dumps(rows, indent=1, sort_keys=False) + "\n"
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(("id",) + COLUMNS)
    for row in rows:
        writer.writerow([json.dumps(row[c], sort_keys=True) if c in JSON_COLUMNS else
                         "" if row[c] is None else row[c] for c in ("id",) + COLUMNS])
    return buffer.getvalue()


def run_export(db: str, which: Filter, *, fmt: str, out: Path | None) -> str:
    """The export text, or (with ``out``) write it and return the line to print."""
    if fmt not in FORMATS:
        raise InputError(f"--format: {fmt!r} is not csv or json")
    rows = fetch(db, which)
    text = export_text(rows, fmt)
    if out is None:
        return text
    write_atomic(out, text)
    return f"wrote {out}: {len(rows)} rows ({fmt})\n"


def run_certificate(db: str, serial: str, *, revision: int | None, out: Path) -> str:
    """Write the certificate of one recorded serial; return the line to print."""
    record = open_record(db)
    try:
        row = recorded_row(record, serial, revision)
    finally:
        record.close()
    write_certificate(row, out)
    return f"wrote {out}: certificate of unit {serial}, revision {row['revision']}\n"


def run_report(db: str, lot: str, *, out: Path) -> str:
    """Write the report of one lot; return the lines to print."""
    record = open_record(db)
    try:
        rows = [decode_row(r) for r in record.select(Filter(lot=lot, current_only=False))]
        where = record.where
    finally:
        record.close()
    stats = write_lot_report(lot, rows, out, record=where)
    low = [c.label for c in stats.capability if c.cpk is not None and c.cpk < CPK_FLOOR]
    lines = [f"wrote {out}: lot {lot}, {stats.units} units, {stats.passed} passed",
             f"  Cpk below {CPK_FLOOR}: {', '.join(low) or 'none'}",
             f"  units far from the lot: {len({o.serial for o in stats.outliers})}"]
    return "\n".join(lines) + "\n"
