"""The register of reference standards and the refusal of a reading taken with an expired
standard. Sources: the record read directly (sqlite3); the due dates and reading times of
the invented register and lot below (a reading on 2025-03-04 with a standard due
2025-03-03 is past its due date)."""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

from test_production import _batch, _lot, _truths

REGISTER = """
[[standard]]
id = "M50-A"
kind = "mass"
nominal = 50.0
unit = "kg"
uncertainty = 0.0008
certificate = "CAL-2025-0101"
due = 2026-01-31

[[standard]]
id = "TH-2"
kind = "thermometer"
nominal = 20.0
unit = "C"
uncertainty = 0.05
certificate = "CAL-2024-0777"
due = 2025-03-03
"""


def _with_column(lot: Path, named: dict[str, str]) -> Path:
    lines = lot.read_text().splitlines()
    out = [lines[0], lines[1] + ",standards"]
    out += [ln + "," + named.get(ln.split(",")[0], "M50-A") for ln in lines[2:]]
    lot.write_text("\n".join(out) + "\n")
    return lot


def test_readings_name_standards_and_an_expired_one_refuses_its_unit(tmp_path: Path) -> None:
    register = tmp_path / "standards.toml"
    register.write_text(REGISTER)
    lot = _with_column(_lot(tmp_path / "lot.csv", _truths(3)), {"HV0001": "M50-A TH-2"})
    out = tmp_path / "out"
    done = _batch(lot, out, "--register", str(register))
    assert done.returncode == 2, done.stderr
    line = next(ln for ln in done.stdout.splitlines() if "HV0001: REFUSED" in ln)
    assert "standards: TH-2 (certificate CAL-2024-0777) was due for recalibration on " \
           "2025-03-03" in line and "lot.csv:" in line
    db = sqlite3.connect(out / "production.sqlite")
    rows = db.execute("SELECT serial, standards FROM calibrations ORDER BY serial").fetchall()
    db.close()
    assert [s for s, _ in rows] == ["HV0000", "HV0002"]
    used = json.loads(rows[0][1])
    assert used == [{"id": "M50-A", "kind": "mass", "nominal": 50.0, "unit": "kg",
                     "uncertainty": 0.0008, "certificate": "CAL-2025-0101",
                     "due": "2026-01-31"}]


def test_lot_standards_and_register_errors_are_one_line(tmp_path: Path) -> None:
    register = tmp_path / "standards.toml"
    register.write_text(REGISTER)
    lot = _lot(tmp_path / "lot.csv", _truths(2))
    unknown = _batch(lot, tmp_path / "a", "--register", str(register), "--standard", "W-9")
    assert unknown.returncode == 2
    assert unknown.stderr.strip().splitlines()[-1].endswith(
        "--standard: 'W-9' is not in the register " + str(register))
    expired = _batch(lot, tmp_path / "b", "--register", str(register), "--standard", "TH-2")
    assert expired.returncode == 2 and expired.stdout.count("REFUSED") == 2
    no_register = _batch(lot, tmp_path / "c", "--standard", "M50-A")
    assert no_register.returncode == 2 and "--register" in no_register.stderr
    bad = tmp_path / "bad.toml"
    bad.write_text(REGISTER.replace('certificate = "CAL-2025-0101"', 'certficate = "x"'))
    refused = _batch(lot, tmp_path / "d", "--register", str(bad), "--standard", "M50-A")
    assert refused.returncode == 2
    assert refused.stderr.strip().splitlines()[-1].endswith(
        "bad.toml: standard[0]: certficate: unknown key (keys: id, kind, nominal, unit, "
        "uncertainty, certificate, due)")
    assert not (tmp_path / "d").exists()
