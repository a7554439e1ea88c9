"""render -o DIR and batch --out DIR create their folder and its parents, as users expect;
a path that is a file, lies under a file, or cannot be created is refused in one line
(exit 2) and nothing is written. The outside reference is the operating system itself:
the folders are checked with os/pathlib after the commands ran in a child process.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np

from hosttool.design.resolve import make_design
from hosttool.production.synthetic_lot import lot_csv, random_truth
from hosttool.spec.schema import load_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
SPEC = EXAMPLES / "hive_scale.toml"


def _hosttool(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "hosttool", *args], capture_output=True,
                          text=True, timeout=300, check=False)


def _one_line_refusal(done: subprocess.CompletedProcess[str], *parts: str) -> None:
    assert done.returncode == 2, done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in done.stderr, done.stderr
    for part in parts:
        assert part in lines[0], lines[0]


def _readings(tmp_path: Path) -> Path:
    design = make_design(load_spec(SPEC))
    rng = np.random.default_rng(3)
    path = tmp_path / "lot.csv"
    path.write_text(lot_csv(design, [random_truth(f"HV{i:04d}", rng) for i in range(2)],
                            seed=1, start_utc=1_741_075_200))
    return path


def test_render_creates_folder_and_parents(tmp_path: Path) -> None:
    folder = tmp_path / "a" / "b" / "include"
    done = _hosttool("render", str(SPEC), "-o", str(folder))
    assert done.returncode == 0, done.stderr
    assert sorted(p.name for p in folder.iterdir()) == ["hive_scale_calblock.h",
                                                       "hive_scale_design.h"]


def test_render_into_a_file_is_refused(tmp_path: Path) -> None:
    file = tmp_path / "include"
    file.write_text("not a folder\n")
    _one_line_refusal(_hosttool("render", str(SPEC), "-o", str(file)),
                      f"{file}: exists and is not a folder")
    _one_line_refusal(_hosttool("render", str(SPEC), "-o", str(file / "sub")),
                      f"{file / 'sub'}: is inside {file}, which exists and is not a folder")
    assert file.read_text() == "not a folder\n"


def test_render_under_an_unwritable_folder_is_refused(tmp_path: Path) -> None:
    # Root ignores permission bits; sysfs refuses new folders even to root.
    locked = tmp_path / "locked" if os.geteuid() != 0 else Path("/sys")
    if not locked.is_dir():
        locked.mkdir()
        locked.chmod(0o555)
    before = set(os.listdir(locked))
    try:
        _one_line_refusal(_hosttool("render", str(SPEC), "-o", str(locked / "include")),
                          f"{locked / 'include'}: cannot create the folder: ")
        assert set(os.listdir(locked)) == before
    finally:
        if locked != Path("/sys"):
            locked.chmod(0o755)


def test_batch_creates_its_output_folder(tmp_path: Path) -> None:
    out = tmp_path / "line" / "2025-03" / "images"
    done = _hosttool("batch", str(SPEC), str(_readings(tmp_path)), "--out", str(out),
                     "--jobs", "1")
    assert done.returncode in (0, 1), done.stderr
    assert (out / "production.sqlite").is_file()
    assert len(list(out.glob("*.hex"))) >= 1


def test_batch_out_under_a_file_is_refused(tmp_path: Path) -> None:
    file = tmp_path / "images"
    file.write_text("x")
    out = file / "lot1"
    _one_line_refusal(_hosttool("batch", str(SPEC), str(_readings(tmp_path)), "--out",
                                str(out), "--jobs", "1"),
                      f"{out}: is inside {file}, which exists and is not a folder")


def test_batch_with_bad_readings_creates_nothing(tmp_path: Path) -> None:
    bad = tmp_path / "bad.csv"
    bad.write_text("serial,reference_kg\n")
    out = tmp_path / "new" / "images"
    done = _hosttool("batch", str(SPEC), str(bad), "--out", str(out), "--jobs", "1")
    assert done.returncode == 2
    assert not (tmp_path / "new").exists()
