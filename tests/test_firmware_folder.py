"""``hosttool firmware -o DIR [--spec SPEC]``: the written folder builds with make and CMake
for the host and Cortex-M, and its checks pass.

Outside references: GNU make, CMake/CTest, gcc, arm-none-eabi-gcc and qemu-system-arm do
the building and running; the outputs of the compiled firmware are compared byte for byte
(cmp, cmake -E compare_files) with the vectors hosttool wrote from its integer model, and
here once more with hosttool.design.model.run_integer. A wheel built by pip and installed
without the source tree must carry every file the folder needs.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from conftest import require_programs, require_tools

from hosttool.design.model import run_integer
from hosttool.design.resolve import make_design
from hosttool.firmware import build as cbuild
from hosttool.firmware.export import MANIFEST, write_firmware
from hosttool.spec.schema import load_spec

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"
TIMEOUT_S = 600


def _run(*cmd: str | Path, cwd: Path | None = None, env: dict[str, str] | None = None
         ) -> subprocess.CompletedProcess[str]:
    done = subprocess.run([str(c) for c in cmd], cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=TIMEOUT_S, check=False)
    assert done.returncode == 0, f"{cmd}:\n{done.stdout}\n{done.stderr}"
    return done


def _hosttool(*args: str | Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "hosttool", *map(str, args)],
                          capture_output=True, text=True, timeout=TIMEOUT_S, check=False)


@pytest.fixture(scope="module", params=["hive_scale", "fatigue_coupon"])
def folder(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A firmware folder written with a spec, under parents that did not exist."""
    out = tmp_path_factory.mktemp(request.param) / "project" / "fw"
    done = _hosttool("firmware", "-o", out, "--spec", EXAMPLES / f"{request.param}.toml")
    assert done.returncode == 0, done.stderr
    return out


def test_folder_contents(folder: Path) -> None:
    names = {p.relative_to(folder).as_posix() for p in folder.rglob("*") if p.is_file()}
    spec = folder.parent.parent.name.rstrip("0123456789")
    for name in ("Makefile", "CMakeLists.txt", "ht_check.cmake", "ht_pipeline.c",
                 "ht_runner.c", "ht_calblock.c", "ht_crc32.c", "target/startup.c",
                 "target/ht_cycles.c", "target/cortex_m.ld", "target/arm-none-eabi.cmake",
                 f"include/{spec}_design.h", f"include/{spec}_calblock.h",
                 f"vectors/{spec}.in", f"vectors/{spec}.expected", MANIFEST):
        assert name in names, name
    assert not any(n.endswith(".py") for n in names)


def test_vectors_are_the_model_outputs(folder: Path) -> None:
    # Reference: the Python integer model run here on the vectors' own input lines.
    spec = folder.parent.parent.name.rstrip("0123456789")
    design = make_design(load_spec(EXAMPLES / f"{spec}.toml"))
    rows = [line.split() for line in (folder / "vectors" / f"{spec}.in").read_text()
            .splitlines()]
    codes = np.array([int(r[0]) for r in rows])
    temps = np.array([int(r[1]) for r in rows]) if design.temperature else None
    lines = (folder / "vectors" / f"{spec}.expected").read_text().split("\n")
    model = run_integer(design, codes, temps)
    status = model.status(calibrated=False)   # the vectors run without a calibration block
    assert lines[:-1] == [f"{v} 0x{s:02x}" for v, s in zip(model.output, status, strict=True)]
    assert lines[-1] == ""
    lo, hi = -(1 << (design.spec.adc.bits - 1)), (1 << (design.spec.adc.bits - 1)) - 1
    assert codes.min() == lo and codes.max() == hi
    if temps is not None:   # both ends of the compensation range are crossed (clamp)
        assert temps.min() < design.temperature.min_centi
        assert temps.max() > design.temperature.max_centi


@pytest.mark.parametrize("kind", ["host", "host-san"])
def test_make_host_builds_and_checks(folder: Path, kind: str) -> None:
    require_tools(kind, run=True)
    require_programs("make")
    done = _run("make", "-C", folder, kind, f"check-{kind}")
    assert re.search(rf"check-{kind}: \w+: \d+ outputs equal hosttool's integer model",
                     done.stdout), done.stdout
    again = subprocess.run(["make", "-C", str(folder), "-q", kind], capture_output=True,
                           check=False)
    assert again.returncode == 0   # up to date: nothing rebuilt


@pytest.mark.slow
@pytest.mark.parametrize("kind", ["m4", "m3"])
def test_make_cortex_m_checks_under_qemu(folder: Path, kind: str) -> None:
    require_tools(kind, run=True)
    require_programs("make")
    done = _run("make", "-C", folder, kind, f"check-{kind}")
    assert f"check-{kind}: " in done.stdout


@pytest.mark.slow
def test_make_m0plus_builds(folder: Path) -> None:
    require_tools("m0plus", run=False)
    require_programs("make")
    _run("make", "-C", folder, "m0plus")
    elf = folder / "build" / "m0plus" / "ht_runner.elf"
    assert elf.read_bytes()[:4] == b"\x7fELF"  # ELF magic (System V ABI, ELF header).


def test_cmake_host_builds_and_checks(folder: Path, tmp_path: Path) -> None:
    require_tools("host", run=True)
    require_programs("cmake", "ctest")
    _run("cmake", "-S", folder, "-B", tmp_path / "b")
    _run("cmake", "--build", tmp_path / "b")
    done = _run("ctest", "--test-dir", tmp_path / "b", "--output-on-failure")
    assert "100% tests passed" in done.stdout


@pytest.mark.slow
@pytest.mark.parametrize("cpu", ["cortex-m4", "cortex-m0plus"])
def test_cmake_cortex_m(folder: Path, tmp_path: Path, cpu: str) -> None:
    require_tools("m4", run=True)
    require_programs("cmake", "ctest")
    _run("cmake", "-S", folder, "-B", tmp_path / "b", f"-DHT_CPU={cpu}")
    _run("cmake", "--build", tmp_path / "b")
    assert (tmp_path / "b" / "ht_runner.elf").read_bytes()[:4] == b"\x7fELF"
    done = subprocess.run(["ctest", "--test-dir", str(tmp_path / "b")], capture_output=True,
                          text=True, check=False)
    if cpu == "cortex-m4":
        assert done.returncode == 0 and "100% tests passed" in done.stdout, done.stdout
    else:   # no emulated board: a build check, no test
        assert "No tests were found" in done.stdout + done.stderr


def test_make_without_headers_says_what_to_do(tmp_path: Path) -> None:
    require_programs("make")
    write_firmware(tmp_path / "fw")
    done = subprocess.run(["make", "-C", str(tmp_path / "fw"), "host"], capture_output=True,
                          text=True, check=False)
    assert done.returncode != 0
    assert "no NAME_design.h in" in done.stderr and "hosttool render" in done.stderr


def test_rerun_changes_nothing_and_edits_are_kept(tmp_path: Path) -> None:
    design = make_design(load_spec(EXAMPLES / "hive_scale.toml"))
    fw = tmp_path / "fw"
    first = write_firmware(fw, design)
    assert all(w.changed for w in first)
    stamps = {w.path: w.path.stat().st_mtime_ns for w in first}
    again = write_firmware(fw, design)
    assert not any(w.changed for w in again)
    assert {w.path: w.path.stat().st_mtime_ns for w in again} == stamps
    pipeline = fw / "ht_pipeline.c"
    pipeline.write_text(pipeline.read_text() + "/* local change */\n")
    done = _hosttool("firmware", "-o", fw)
    assert done.returncode == 2
    assert done.stderr.strip() == (f"hosttool: error: {pipeline}: edited since hosttool "
                                   f"firmware wrote it (its SHA-256 differs from {MANIFEST}); "
                                   "use --force to overwrite")
    assert "/* local change */" in pipeline.read_text()
    assert _hosttool("firmware", "-o", fw, "--force").returncode == 0
    assert "/* local change */" not in pipeline.read_text()


def test_foreign_file_is_not_overwritten(tmp_path: Path) -> None:
    fw = tmp_path / "fw"
    fw.mkdir()
    (fw / "Makefile").write_text("all:\n\techo mine\n")
    done = _hosttool("firmware", "-o", fw)
    assert done.returncode == 2
    assert "Makefile: exists and was not written by hosttool firmware" in done.stderr
    assert (fw / "Makefile").read_text() == "all:\n\techo mine\n"
    assert not (fw / "ht_pipeline.c").exists()    # all or nothing


def test_output_under_a_file_is_refused(tmp_path: Path) -> None:
    (tmp_path / "f").write_text("x")
    done = _hosttool("firmware", "-o", tmp_path / "f" / "fw")
    assert done.returncode == 2 and len(done.stderr.strip().splitlines()) == 1
    assert "which exists and is not a folder" in done.stderr


def _assignments(text: str, pattern: str) -> dict[str, list[str]]:
    return {m[1]: m[2].split() for m in re.finditer(pattern, text, re.M)}


def test_cmake_flags_match_cbuild() -> None:
    # The Makefile's flags are compared in tests/test_cbuild_crc.py; CMake's here.
    text = (ROOT / "firmware_stub" / "CMakeLists.txt").read_text()
    sets = _assignments(text, r"^set\((HT_[\w-]+) ([^)\"]*)\)$")
    assert sets["HT_FLAGS_COMMON"] == list(cbuild.COMMON_FLAGS)
    assert sets["HT_FLAGS_HOST"] == list(cbuild.KINDS["host"].flags)
    assert ["-mcpu=cortex-m4", *sets["HT_FLAGS_TARGET"]] == list(cbuild.KINDS["m4"].flags)
    assert sets["HT_TARGET_SRCS"] == list(cbuild.TARGET_SOURCES)
    assert sets["HT_crc_runner_SRCS"] == list(cbuild.CRC_RUNNER.sources)
    from hosttool.firmware.run import HT_RUNNER
    assert sets["HT_ht_runner_SRCS"] == list(HT_RUNNER.sources)
    assert sets["HT_BOARD_cortex-m4"] == [cbuild.KINDS["m4"].machine]
    assert sets["HT_BOARD_cortex-m3"] == [cbuild.KINDS["m3"].machine]


def test_wheel_carries_the_firmware(tmp_path: Path) -> None:
    # pip builds a wheel and installs it (no dependencies: they are this venv's) into a
    # folder apart from the source tree, as `pip install .` does; run from another folder.
    target, work = tmp_path / "site", tmp_path / "work"
    work.mkdir()
    _run(sys.executable, "-m", "pip", "install", "-q", "--no-deps", "--target", target, ROOT)
    env = dict(os.environ, PYTHONPATH=str(target))
    shown = _run(sys.executable, "-c", "import hosttool; print(hosttool.__file__)", cwd=work,
                 env=env)
    assert shown.stdout.startswith(str(target))
    _run(sys.executable, "-m", "hosttool", "firmware", "-o", "fw", "--spec",
         EXAMPLES / "hive_scale.toml", cwd=work, env=env)
    tracked = _run("git", "ls-files", "firmware_stub", cwd=ROOT).stdout.split() \
        if shutil.which("git") and (ROOT / ".git").exists() else []
    for name in tracked:
        rel = Path(name).relative_to("firmware_stub")
        if rel.suffix != ".py":
            assert (work / "fw" / rel).is_file(), f"{rel} is missing from the wheel"
    if shutil.which("make") and shutil.which("gcc"):
        _run("make", "-C", work / "fw", "host", "check-host")


def test_change_of_block_meaning_is_refused_as_by_render(tmp_path: Path) -> None:
    # The same rule as hosttool render (format identity): a new output step changes what a
    # calibration block's integers mean, so blocks in the field would be refused.
    spec = tmp_path / "hive_scale.toml"
    spec.write_text((EXAMPLES / "hive_scale.toml").read_text())
    assert _hosttool("firmware", "-o", tmp_path / "fw", "--spec", spec).returncode == 0
    spec.write_text(re.sub(r"^resolution = 0\.01 ", "resolution = 0.02 ", spec.read_text(),
                           flags=re.M))
    before = (tmp_path / "fw" / "vectors" / "hive_scale.expected").read_bytes()
    done = _hosttool("firmware", "-o", tmp_path / "fw", "--spec", spec)
    assert done.returncode == 2 and "would be refused" in done.stderr, done.stderr
    assert (tmp_path / "fw" / "vectors" / "hive_scale.expected").read_bytes() == before
    assert _hosttool("firmware", "-o", tmp_path / "fw", "--spec", spec, "--force"
                     ).returncode == 0


def test_checks_fail_when_the_firmware_differs_from_the_model(tmp_path: Path) -> None:
    # The checks are real: one output changed by one LSB in the expected file makes both
    # make's check (cmp) and CTest's (cmake -E compare_files) fail.
    require_tools("host", run=True)
    require_programs("make", "cmake", "ctest")
    fw = tmp_path / "fw"
    write_firmware(fw, make_design(load_spec(EXAMPLES / "fatigue_coupon.toml")))
    expected = fw / "vectors" / "fatigue_coupon.expected"
    lines = expected.read_text().split("\n")
    value, status = lines[100].split()
    lines[100] = f"{int(value) + 1} {status}"
    expected.write_text("\n".join(lines))
    done = subprocess.run(["make", "-C", str(fw), "check-host"], capture_output=True,
                          text=True, check=False)
    assert done.returncode != 0 and "differ" in done.stdout + done.stderr
    _run("cmake", "-S", fw, "-B", tmp_path / "b")
    _run("cmake", "--build", tmp_path / "b")
    done = subprocess.run(["ctest", "--test-dir", str(tmp_path / "b"), "--output-on-failure"],
                          capture_output=True, text=True, check=False)
    assert done.returncode != 0 and "differs from" in done.stdout
