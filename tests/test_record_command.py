"""``hosttool record list|show|export`` and ``batch --json`` over both back ends.

Sources: the standard library's csv and json readers parsing what the commands print, and
the record read directly (sqlite3, psycopg) for the same rows.
"""

from __future__ import annotations

import csv
import io
import json
import subprocess
import sys
from pathlib import Path

import pytest
from test_production import _batch, _lot, _truths

BACKENDS = ["sqlite", pytest.param("postgres", marks=pytest.mark.slow)]


def _tool(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "hosttool", *args], capture_output=True,
                          text=True, timeout=300, check=False)


def _db(backend: str, tmp_path: Path, request: pytest.FixtureRequest) -> str:
    if backend == "postgres":
        return str(request.getfixturevalue("postgres_uri"))
    return str(tmp_path / "line.sqlite")


@pytest.mark.parametrize("backend", BACKENDS)
def test_batch_json_then_list_show_export(backend: str, tmp_path: Path,
                                          request: pytest.FixtureRequest) -> None:
    db = _db(backend, tmp_path, request)
    out = tmp_path / "out"
    out.mkdir()
    lot = _lot(tmp_path / "lot.csv", _truths(6, failing=3))
    done = _batch(lot, out, "--db", db, "--station", "st-1", "--operator", "ana",
                  "--lot", "L7", "--json")
    assert done.returncode == 1, done.stderr
    summary = json.loads(done.stdout)
    assert summary["counts"] == {"units": 6, "passed": 5, "failed": 1, "refused": 0,
                                 "recorded_now": 6}
    units = {u["serial"]: u for u in summary["units"]}
    assert units["HV0003"]["verdict"] == "fail" and units["HV0003"]["image"] is None
    assert any("calibration.max_hysteresis" in r for r in units["HV0003"]["reasons"])
    assert units["HV0000"] == {"serial": "HV0000", "verdict": "pass",
                               "image": "HV0000.r1.hex", "revision": 1, "reasons": [],
                               "recorded_now": True, "certificate": None}
    assert all((out / u["image"]).is_file() for u in units.values() if u["image"])

    listed = json.loads(_tool("record", "list", "--db", db, "--json").stdout)
    assert [(r["serial"], r["verdict"], r["image"], r["revision"]) for r in listed] == [
        (s, u["verdict"], u["image"], u["revision"]) for s, u in sorted(units.items())]
    assert {(r["lot"], r["station"], r["operator"]) for r in listed} == {("L7", "st-1", "ana")}
    failed = json.loads(_tool("record", "list", "--db", db, "--verdict", "fail",
                              "--json").stdout)
    assert [r["serial"] for r in failed] == ["HV0003"]
    assert json.loads(_tool("record", "list", "--db", db, "--lot", "other",
                            "--json").stdout) == []
    early = json.loads(_tool("record", "list", "--db", db, "--until", "2000-01-01T00:00:00Z",
                             "--json").stdout)
    assert early == []
    text = _tool("record", "list", "--db", db).stdout
    assert "6 rows (5 passed, 1 failed)" in text and "HV0003" in text

    # a second revision, then show and export every revision
    again = _lot(tmp_path / "lot2.csv", _truths(6), seed=2)
    assert _batch(again, out, "--db", db, "--recalibrate", "--lot", "L7").returncode == 0
    shown = _tool("record", "show", "HV0003", "--db", db)
    assert shown.returncode == 0, shown.stderr
    assert "2 revision(s)" in shown.stdout and "revision 1 (superseded)" in shown.stdout
    missing = _tool("record", "show", "NOPE", "--db", db)
    assert missing.returncode == 2 and "NOPE: not in the record" in missing.stderr

    exported = _tool("record", "export", "--db", db, "--format", "csv", "--all-revisions")
    rows = list(csv.DictReader(io.StringIO(exported.stdout)))
    assert len(rows) == 12
    assert {(r["serial"], r["revision"], r["current"]) for r in rows} == {
        (f"HV{i:04d}", str(rev), str(rev - 1)) for i in range(6) for rev in (1, 2)}
    assert all(json.loads(r["readings"]) for r in rows)
    path = tmp_path / "export.json"
    wrote = _tool("record", "export", "--db", db, "--format", "json", "-o", str(path))
    assert wrote.stdout.startswith(f"wrote {path}: 6 rows")
    as_json = json.loads(path.read_text())
    assert [r["revision"] for r in as_json] == [2] * 6
    assert {r["serial"]: r["constants"] for r in as_json} == {
        r["serial"]: json.loads(r["constants"]) for r in rows if r["current"] == "1"}


def test_calibrate_json(tmp_path: Path) -> None:
    lot = _lot(tmp_path / "lot.csv", _truths(2))
    done = _tool("calibrate", str(Path(__file__).resolve().parent.parent / "examples" /
                                  "hive_scale.toml"), str(lot), "--serial", "HV0001",
                 "-o", str(tmp_path / "cal.json"), "--json")
    assert done.returncode == 0, done.stderr
    assert json.loads(done.stdout) == {"serial": "HV0001", "verdict": "pass", "image": None,
                                       "revision": None, "reasons": [],
                                       "calibration": str(tmp_path / "cal.json")}
