"""hosttool batch: images and the SQLite production record for a lot of invented units.

Idempotent re-runs, recalibration with history, bad input, kill -9 at random points with
resume (compared with a clean run), and two stations writing into one record at once.
Checks use sqlite3 and intelhex directly, not the tool's own readers.
"""

from __future__ import annotations

import hashlib
import os
import random
import signal
import sqlite3
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
from intelhex import IntelHex

from hosttool.design.resolve import make_design
from hosttool.formats.calblock import decode
from hosttool.production.synthetic_lot import UnitTruth, lot_csv, random_truth
from hosttool.spec.schema import parse_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
SPEC = EXAMPLES / "hive_scale.toml"
HIVE = make_design(parse_spec(SPEC.read_text(), str(SPEC)))
START = 1_741_075_200
ADDRESS, AREA = 0x0003F800, 128
#: the columns that must agree between two runs (not the wall-clock time or the station)
SAME = ("serial", "revision", "current", "cal_time_utc", "spec_sha256", "constants",
        "verdict", "reasons", "hex_file", "hex_sha256")


def _truths(n: int, *, failing: int | None = None, prefix: str = "HV") -> list[UnitTruth]:
    rng = np.random.default_rng(n)
    truths = [random_truth(f"{prefix}{i:04d}", rng) for i in range(n)]
    if failing is not None:
        truths[failing] = UnitTruth(f"{prefix}{failing:04d}", hysteresis_pct_fs=0.05)
    return truths


def _lot(path: Path, truths: list[UnitTruth], seed: int = 1) -> Path:
    path.write_text(lot_csv(HIVE, truths, seed=seed, start_utc=START))
    return path


def _batch(readings: Path, out: Path, *extra: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "hosttool", "batch", str(SPEC), str(readings),
                           "--out", str(out), *extra], capture_output=True, text=True,
                          timeout=300, check=False)


def _start(readings: Path, out: Path, *extra: str) -> subprocess.Popen[bytes]:
    return subprocess.Popen([sys.executable, "-m", "hosttool", "batch", str(SPEC),
                             str(readings), "--out", str(out), *extra],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def _rows(out: Path) -> list[dict[str, object]]:
    db = sqlite3.connect(out / "production.sqlite")
    db.row_factory = sqlite3.Row
    try:
        return [dict(r) for r in db.execute("SELECT * FROM calibrations ORDER BY serial, "
                                            "revision")]
    finally:
        db.close()


def _essence(out: Path) -> tuple[set[tuple[object, ...]], dict[str, bytes]]:
    rows = {tuple(r[c] for c in SAME) for r in _rows(out)}
    files = {p.name: p.read_bytes() for p in out.iterdir() if p.suffix == ".hex"}
    return rows, files


def _made(out: Path, since: float) -> int:
    """Images a batch started at ``since`` (time.time()) has made so far: published into
    ``out`` (by any run), or on disk in a worker's subfolder of a staging folder
    (util/staging.py: ``<staging>/<pid>/<serial>.hex``) since then (a killed run's staging
    folder stays until the next batch clears it)."""
    return sum(1 for _ in out.glob("*.hex")) + sum(
        _staged_since(sub, since) for staging in out.glob(".hosttool-staging-*")
        for sub in _entries(staging) if sub.is_dir(follow_symlinks=False))


def _published_since(out: Path, since: float) -> int:
    """Images in ``out`` made at or after ``since`` (a rename keeps a file's mtime)."""
    count = 0
    for path in out.glob("*.hex"):
        try:
            count += path.stat().st_mtime >= since
        except FileNotFoundError:
            pass
    return count


def _kill_rounds(readings: Path, out: Path, rng: random.Random, rounds: int,
                 check: Callable[[], object], *extra: str) -> tuple[int, int]:
    """Start a batch ``rounds`` times and kill -9 it at a random point, ``check()`` after
    each. Even rounds: once it has made a random number of images (in the first half of
    what is left, so that it cannot finish first), most of them still staged. Odd rounds:
    once it has published 1 to 31 images of its own into ``out`` (a group's renames under
    way, its rows not yet or just committed); a run that finishes first (too few images
    left for it to publish) is not killed. Returns the kills and the kills of odd rounds."""
    kills = while_publishing = 0
    for round_ in range(rounds):
        existing = sum(1 for _ in out.glob("*.hex"))     # published (recorded or not)
        target = (existing + rng.randrange(1, max(2, (319 - existing) // 2)) if round_ % 2 == 0
                  else rng.randrange(1, 32))
        started = time.time()
        proc = _start(readings, out, *extra)
        while proc.poll() is None and (_made(out, started) if round_ % 2 == 0 else
                                       _published_since(out, started)) < target:
            time.sleep(0.001)
        if round_ % 2 == 0:
            time.sleep(rng.uniform(0.0, 0.01))
        if proc.poll() is None:
            os.kill(proc.pid, signal.SIGKILL)
            kills += 1
            while_publishing += round_ % 2
        proc.wait(timeout=60)
        check()
    return kills, while_publishing


def _entries(folder: str | Path) -> list[os.DirEntry[str]]:
    """The entries of a folder, none if it is gone (published, or removed, meanwhile)."""
    try:
        with os.scandir(folder) as entries:
            return list(entries)
    except FileNotFoundError:
        return []


def _staged_since(folder: os.DirEntry[str], since: float) -> int:
    """Images staged in a worker's subfolder at or after ``since``."""
    count = 0
    for entry in _entries(folder.path):
        try:
            count += entry.name.endswith(".hex") and entry.stat().st_mtime >= since
        except FileNotFoundError:       # renamed into the output folder meanwhile
            pass
    return count


def _consistent(out: Path) -> int:
    """Invariants at any moment: every image parses and decodes (no partial HEX), every row
    names an existing image with its SHA-256, one current row per serial. Returns rows."""
    for path in out.glob("*.hex"):
        block = IntelHex(str(path)).tobinstr(start=ADDRESS, size=AREA)
        assert decode(block).serial == path.name.split(".r")[0]
    if not (out / "production.sqlite").exists():
        return 0
    rows = _rows(out)
    current = [r["serial"] for r in rows if r["current"]]
    assert len(current) == len(set(current))
    assert len({(r["serial"], r["revision"]) for r in rows}) == len(rows)
    for r in rows:
        if r["verdict"] == "pass":
            data = (out / str(r["hex_file"])).read_bytes()
            assert hashlib.sha256(data).hexdigest() == r["hex_sha256"]
        else:
            assert r["hex_file"] is None and r["reasons"] != "[]"
    return len(rows)


# ----------------------------------------------------------------------------- basics


def test_lot_images_record_and_idempotent_rerun(tmp_path: Path) -> None:
    """Sources: sqlite3 and intelhex reading what the batch wrote; the invented lot
    (one unit with 0.05 % FS hysteresis, beyond calibration.max_hysteresis)."""
    readings = _lot(tmp_path / "lot.csv", _truths(12, failing=4))
    out = tmp_path / "out"
    out.mkdir()
    first = _batch(readings, out, "--station", "bench-1")
    assert first.returncode == 1, first.stderr
    assert "HV0004: FAIL: " in first.stdout and "calibration.max_hysteresis" in first.stdout
    assert "legal-metrology authority" in first.stdout
    rows = _rows(out)
    assert len(rows) == 12 and {r["station"] for r in rows} == {"bench-1"}
    assert sorted(p.name for p in out.glob("*.hex")) == \
        [f"HV{i:04d}.r1.hex" for i in range(12) if i != 4]
    assert _consistent(out) == 12
    db = sqlite3.connect(out / "production.sqlite")
    assert db.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    db.close()
    stamps = {p.name: (p.stat().st_ino, p.stat().st_mtime_ns) for p in out.glob("*.hex")}
    again = _batch(readings, out, "--station", "bench-2")
    assert again.returncode == 1
    assert "0 rows added to the record; 12 units were already recorded" in again.stdout
    assert _rows(out) == rows
    assert {p.name: (p.stat().st_ino, p.stat().st_mtime_ns) for p in out.glob("*.hex")} \
        == stamps


def test_images_on_disk_are_put_back_refused_when_changed_adopted_or_replaced(
        tmp_path: Path) -> None:
    """Source: a clean run of the same lot (its images' bytes). A recorded image that went
    missing is put back; one changed outside the tool refuses its unit and stays as it is;
    an unrecorded file already under a new image's name (a killed run's) is kept when its
    bytes are the image's (same inode) and replaced otherwise."""
    readings = _lot(tmp_path / "lot.csv", _truths(4))
    clean = tmp_path / "clean"
    clean.mkdir()
    assert _batch(readings, clean).returncode == 0
    image = {p.name: p.read_bytes() for p in clean.glob("*.hex")}
    assert len(image) == 4
    (clean / "HV0000.r1.hex").unlink()
    (clean / "HV0001.r1.hex").write_bytes(b":00000001FF\n")
    again = _batch(readings, clean)
    assert again.returncode == 2
    assert "HV0001: REFUSED: HV0001.r1.hex: differs from the image its record names" \
        in again.stdout
    assert (clean / "HV0000.r1.hex").read_bytes() == image["HV0000.r1.hex"]
    assert (clean / "HV0001.r1.hex").read_bytes() == b":00000001FF\n"
    out = tmp_path / "out"
    out.mkdir()
    (out / "HV0002.r1.hex").write_bytes(image["HV0002.r1.hex"])
    (out / "HV0003.r1.hex").write_bytes(b"left by a killed run\n")
    inode = (out / "HV0002.r1.hex").stat().st_ino
    assert _batch(readings, out).returncode == 0
    assert {p.name: p.read_bytes() for p in out.glob("*.hex")} == image
    assert (out / "HV0002.r1.hex").stat().st_ino == inode


def test_other_constants_need_recalibrate_and_keep_history(tmp_path: Path) -> None:
    """Source: the record's rows (sqlite3): a refused re-measurement changes nothing; with
    --recalibrate the old row stays, no longer current, and the old image is kept."""
    out = tmp_path / "out"
    out.mkdir()
    assert _batch(_lot(tmp_path / "a.csv", _truths(3)), out).returncode == 0
    remeasured = _lot(tmp_path / "b.csv", _truths(3), seed=2)
    refused = _batch(remeasured, out)
    assert refused.returncode == 2
    assert "already recorded as passed (revision 1" in refused.stdout
    assert "--recalibrate" in refused.stdout
    assert len(_rows(out)) == 3
    done = _batch(remeasured, out, "--recalibrate")
    assert done.returncode == 0, done.stdout
    rows = _rows(out)
    assert [(r["serial"], r["revision"], r["current"]) for r in rows] == [
        (f"HV{i:04d}", rev, rev - 1) for i in range(3) for rev in (1, 2)]
    assert rows[0]["constants"] != rows[1]["constants"]
    assert {p.name for p in out.glob("*.hex")} == {f"HV{i:04d}.r{r}.hex" for i in range(3)
                                                  for r in (1, 2)}
    assert _consistent(out) == 6


def test_all_passing_lot_exits_0_and_bad_input_writes_nothing(tmp_path: Path) -> None:
    """Source: the issue's exit statuses (0 all passed, 2 bad input): a file that cannot be
    read as readings (here a bad serial) writes nothing, not even the record or the lock;
    a bad cell of one unit refuses that unit alone."""
    out = tmp_path / "out"
    out.mkdir()
    readings = _lot(tmp_path / "lot.csv", _truths(4))
    assert _batch(readings, out).returncode == 0
    lines = readings.read_text().splitlines()
    bad = tmp_path / "bad.csv"
    bad.write_text("\n".join(lines[:5] + [lines[5].replace("HV0000,", "HV 0000,")]
                             + lines[6:]) + "\n")
    empty = tmp_path / "empty"
    empty.mkdir()
    result = _batch(bad, empty)
    assert result.returncode == 2
    assert result.stderr.strip().splitlines() == [
        "hosttool: error: " + str(bad) + ":6: serial: 'HV 0000' must be 1 to 16 letters, "
        "digits, '.', '_' or '-', starting with a letter or digit"]
    assert list(empty.iterdir()) == []
    cell = tmp_path / "cell.csv"
    cell.write_text("\n".join(lines[:5] + [lines[5].replace(",32,", ",-3,")] + lines[6:])
                    + "\n")
    result = _batch(cell, empty)
    assert result.returncode == 2, result.stderr
    assert f"  HV0000: REFUSED: {cell}:6: samples: '-3' is not a whole number from 1 to " \
        "1000000000" in result.stdout.splitlines()
    assert sorted(r["serial"] for r in _rows(empty)) == ["HV0001", "HV0002", "HV0003"]


# ----------------------------------------------------------------------------- crashes


def test_kill_minus_9_at_random_points_then_resume(tmp_path: Path) -> None:
    """Source: a clean run of the same lot. Each kill -9 lands when a random number of new
    images exist (plus a random few milliseconds), so kills fall between a group's images
    and its rows, inside the rows, or in the next group's writes; after every kill the
    folder and the record must be consistent, and a last run must give exactly the clean
    run's result."""
    readings = _lot(tmp_path / "lot.csv", _truths(320, failing=17))
    clean = tmp_path / "clean"
    clean.mkdir()
    assert _batch(readings, clean).returncode == 1
    expected = _essence(clean)
    out = tmp_path / "out"
    out.mkdir()
    kills, while_publishing = _kill_rounds(readings, out, random.Random(20250304), 5,
                                           lambda: _consistent(out))
    assert kills >= 4 and while_publishing >= 1
    final = _batch(readings, out)
    assert final.returncode == 1, final.stderr
    assert _essence(out) == expected
    assert _consistent(out) == 320
    assert [p.name for p in out.iterdir()
            if p.name.endswith(".tmp") or p.name.startswith(".hosttool-staging")] == []


def test_two_stations_at_once_lose_nothing(tmp_path: Path) -> None:
    """Source: a clean single-station run of the union of both lots. The two readings
    files overlap (units 80 to 159 are in both, with the same readings)."""
    truths = _truths(240)
    whole = _lot(tmp_path / "whole.csv", truths)
    lines = whole.read_text().splitlines()
    header, body = lines[:2], lines[2:]
    first = [ln for ln in body if int(ln[2:6]) < 160]
    second = [ln for ln in body if int(ln[2:6]) >= 80]
    (tmp_path / "a.csv").write_text("\n".join(header + first) + "\n")
    (tmp_path / "b.csv").write_text("\n".join(header + second) + "\n")
    clean = tmp_path / "clean"
    clean.mkdir()
    assert _batch(whole, clean).returncode == 0
    out = tmp_path / "out"
    out.mkdir()
    a = _start(tmp_path / "a.csv", out, "--station", "A")
    b = _start(tmp_path / "b.csv", out, "--station", "B")
    assert a.wait(timeout=300) == 0 and b.wait(timeout=300) == 0
    assert _essence(out) == _essence(clean)
    assert _consistent(out) == 240
    stations = {r["station"] for r in _rows(out)}
    assert stations <= {"A", "B"} and "A" in stations and "B" in stations


@pytest.mark.parametrize("jobs", ["2"])
def test_worker_processes_give_the_same_record(tmp_path: Path, jobs: str) -> None:
    """Source: the single-process run of the same lot (worker processes only compute)."""
    readings = _lot(tmp_path / "lot.csv", _truths(300, failing=3))
    one, two = tmp_path / "one", tmp_path / "two"
    one.mkdir()
    two.mkdir()
    assert _batch(readings, one).returncode == 1
    assert _batch(readings, two, "--jobs", jobs).returncode == 1
    assert _essence(one) == _essence(two)
