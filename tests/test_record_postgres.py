"""The production record on a real PostgreSQL server that the suite starts (conftest.py).

Slow tests. Outside CI they skip when no server binary is found; with CI=true they fail
instead (.ci/run installs Debian's postgresql). Every expected value comes from a clean
single-station run of the same lot into an SQLite record (sqlite3, standard library) and
from the files themselves (intelhex, hashlib), never from the code under test.
"""

from __future__ import annotations

import hashlib
import random
import subprocess
import sys
from pathlib import Path

import psycopg
import pytest
from intelhex import IntelHex
from test_production import ADDRESS, AREA, SAME, SPEC, _batch, _kill_rounds, _lot, _rows, _truths

from hosttool.formats.calblock import decode

pytestmark = pytest.mark.slow


def _pg_rows(uri: str) -> list[dict[str, object]]:
    with psycopg.connect(uri) as db:
        cursor = db.execute("SELECT * FROM calibrations ORDER BY serial, revision")
        names = [d.name for d in cursor.description or ()]
        return [dict(zip(names, r, strict=True)) for r in cursor]


def _start(readings: Path, out: Path, *extra: str) -> subprocess.Popen[bytes]:
    return subprocess.Popen([sys.executable, "-m", "hosttool", "batch", str(SPEC),
                             str(readings), "--out", str(out), *extra],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)


def _consistent(uri: str, folders: dict[str, Path]) -> list[dict[str, object]]:
    """At any moment: one current row per serial, unique revisions, every passed row names
    an image in its station's folder with the recorded SHA-256, every image complete."""
    for folder in folders.values():
        for path in folder.glob("*.hex"):
            block = IntelHex(str(path)).tobinstr(start=ADDRESS, size=AREA)
            assert decode(block).serial == path.name.split(".r")[0]
    rows = _pg_rows(uri)
    current = [r["serial"] for r in rows if r["current"]]
    assert len(current) == len(set(current))
    assert len({(r["serial"], r["revision"]) for r in rows}) == len(rows)
    for r in rows:
        if r["verdict"] == "pass":
            data = (folders[str(r["station"])] / str(r["hex_file"])).read_bytes()
            assert hashlib.sha256(data).hexdigest() == r["hex_sha256"]
    return rows


def _same(rows: list[dict[str, object]]) -> set[tuple[object, ...]]:
    return {tuple(r[c] for c in SAME) for r in rows}


def _split(whole: Path, folder: Path, parts: dict[str, range]) -> dict[str, Path]:
    lines = whole.read_text().splitlines()
    header, body = lines[:2], lines[2:]
    files = {}
    for name, serials in parts.items():
        path = folder / f"{name}.csv"
        path.write_text("\n".join(header + [ln for ln in body if int(ln[2:6]) in serials])
                        + "\n")
        files[name] = path
    return files


def _stations(tmp_path: Path, uri: str, files: dict[str, Path]) -> dict[str, Path]:
    folders = {name: tmp_path / f"out-{name}" for name in files}
    for folder in folders.values():
        folder.mkdir()
    procs = {name: _start(files[name], folders[name], "--db", uri, "--station", name,
                          "--lot", "L1") for name in files}
    for name, proc in procs.items():
        _, err = proc.communicate(timeout=600)
        assert proc.returncode == 0, (name, err.decode())
    return folders


def _clean(tmp_path: Path, whole: Path) -> set[tuple[object, ...]]:
    clean = tmp_path / "clean"
    clean.mkdir()
    assert _batch(whole, clean).returncode in (0, 1)
    return _same(_rows(clean))


def test_two_stations_overlapping_lots_lose_and_duplicate_nothing(
        tmp_path: Path, postgres_uri: str) -> None:
    """Two stations on two folders, one server; units 80 to 159 are in both readings files
    (same readings): each is recorded once, by whichever station held it first."""
    whole = _lot(tmp_path / "whole.csv", _truths(240))
    files = _split(whole, tmp_path, {"A": range(0, 160), "B": range(80, 240)})
    folders = _stations(tmp_path, postgres_uri, files)
    rows = _consistent(postgres_uri, folders)
    assert len(rows) == 240
    assert _same(rows) == _clean(tmp_path, whole)
    assert {r["station"] for r in rows} == {"A", "B"}
    assert {r["lot"] for r in rows} == {"L1"}


def test_four_stations_split_one_lot(tmp_path: Path, postgres_uri: str) -> None:
    """Four stations, one lot of 240 split in four, one server: 240 rows, as one station."""
    whole = _lot(tmp_path / "whole.csv", _truths(240))
    files = _split(whole, tmp_path, {f"S{k}": range(60 * k, 60 * k + 60) for k in range(4)})
    folders = _stations(tmp_path, postgres_uri, files)
    rows = _consistent(postgres_uri, folders)
    assert len(rows) == 240 and _same(rows) == _clean(tmp_path, whole)
    by_station = {name: sum(r["station"] == name for r in rows) for name in files}
    assert by_station == {f"S{k}": 60 for k in range(4)}
    # the lot report and a certificate come from the server's record as from a file
    report = tmp_path / "l1.html"
    made = subprocess.run([sys.executable, "-m", "hosttool", "record", "report", "L1", "--db",
                           postgres_uri, "-o", str(report)], capture_output=True, text=True,
                          timeout=300, check=False)
    assert made.returncode == 0, made.stderr
    assert "L1, 240 units, 240 passed" in made.stdout
    page = report.read_text()
    assert all(f"<td>S{k}</td><td class=\"num\">60</td>" in page for k in range(4))
    cert = tmp_path / "c.html"
    one = subprocess.run([sys.executable, "-m", "hosttool", "record", "certificate", "HV0100",
                          "--db", postgres_uri, "-o", str(cert)], capture_output=True,
                         text=True, timeout=300, check=False)
    assert one.returncode == 0, one.stderr
    assert "HV0100" in cert.read_text() and "<td>S1</td>" in cert.read_text()


def test_kill_minus_9_mid_lot_then_rerun_completes(tmp_path: Path, postgres_uri: str) -> None:
    """kill -9 of a station at random points of a 320-unit lot: after each kill the record
    and the folder are consistent (the server rolled the open group back); the re-run
    completes the lot exactly as a clean run."""
    readings = _lot(tmp_path / "lot.csv", _truths(320, failing=17))
    out = tmp_path / "out"
    out.mkdir()
    def check() -> None:
        assert len(_consistent(postgres_uri, {"K": out})) <= 320

    kills, while_publishing = _kill_rounds(readings, out, random.Random(20261202), 4, check,
                                           "--db", postgres_uri, "--station", "K")
    assert kills >= 3 and while_publishing >= 1
    final = _batch(readings, out, "--db", postgres_uri, "--station", "K")
    assert final.returncode == 1, final.stderr
    rows = _consistent(postgres_uri, {"K": out})
    assert len(rows) == 320 and _same(rows) == _clean(tmp_path, readings)
    assert [p.name for p in out.iterdir()
            if p.name.endswith(".tmp") or p.name.startswith(".hosttool-staging")] == []


def test_idempotent_rerun_recalibration_and_rework(tmp_path: Path, postgres_uri: str) -> None:
    """Re-run: no new row, images untouched. Other constants: refused for a passed unit
    without --recalibrate, a new revision with it; a failed unit measured again after
    rework gets a new revision without the option (history kept in every case)."""
    out = tmp_path / "out"
    out.mkdir()
    first = _lot(tmp_path / "a.csv", _truths(4, failing=2))
    db = ("--db", postgres_uri, "--station", "R")
    assert _batch(first, out, *db).returncode == 1
    rows = _consistent(postgres_uri, {"R": out})
    stamps = {p.name: p.stat().st_mtime_ns for p in out.glob("*.hex")}
    again = _batch(first, out, *db)
    assert again.returncode == 1
    assert "0 rows added to the record; 4 units were already recorded" in again.stdout
    assert _pg_rows(postgres_uri) == rows
    assert {p.name: p.stat().st_mtime_ns for p in out.glob("*.hex")} == stamps
    # the failed unit HV0002 reworked: measured again, now good
    reworked = _lot(tmp_path / "b.csv", _truths(4), seed=2)
    refused = _batch(reworked, out, *db)
    assert refused.returncode == 2
    rows = _consistent(postgres_uri, {"R": out})
    assert [(r["serial"], r["revision"], r["verdict"]) for r in rows if r["current"]] == [
        ("HV0000", 1, "pass"), ("HV0001", 1, "pass"), ("HV0002", 2, "pass"),
        ("HV0003", 1, "pass")]
    assert refused.stdout.count("already recorded as passed") == 3
    done = _batch(reworked, out, *db, "--recalibrate")
    assert done.returncode == 0, done.stdout
    rows = _consistent(postgres_uri, {"R": out})
    assert sorted((r["serial"], r["revision"], r["current"]) for r in rows) == [
        ("HV0000", 1, 0), ("HV0000", 2, 1), ("HV0001", 1, 0), ("HV0001", 2, 1),
        ("HV0002", 1, 0), ("HV0002", 2, 1), ("HV0003", 1, 0), ("HV0003", 2, 1)]
