"""The README's "Firmware" section works as written.

Each fenced block marked ``<!-- tests/test_readme_firmware.py runs ... -->`` is taken from
README.md and run verbatim in a fresh temporary folder: the shell blocks with ``sh -e``, the
Makefile and CMakeLists.txt snippets written to files and driven by GNU make and CMake. The
outside references are those programs, gcc, arm-none-eabi-gcc and qemu-system-arm, and the
byte comparison (cmp, cmake -E compare_files) of the firmware's outputs with the model's.
For the stamp snippets: make and CMake themselves decide what is out of date; the test
checks that render runs once after a touch of the spec and that nothing recompiles.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import time
from pathlib import Path

import pytest
from conftest import require_programs, require_tools

ROOT = Path(__file__).resolve().parent.parent
MARK = "<!-- tests/test_readme_firmware.py runs"
TIMEOUT_S = 900


def readme_blocks() -> list[tuple[str, str, str]]:
    """(what the mark says, language, code) of every marked fenced block, in order."""
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    found = re.finditer(re.escape(MARK) + r"([^>]*)-->\n```(\w+)\n(.*?)\n```", text, re.S)
    return [(m[1].strip(), m[2], m[3] + "\n") for m in found]


def _env() -> dict[str, str]:
    """This interpreter's scripts folder first on PATH, so ``hosttool`` is the one under
    test (the package installed in this environment)."""
    bindir = str(Path(sys.executable).parent)
    return dict(os.environ, PATH=bindir + os.pathsep + os.environ.get("PATH", ""))


def _sh(code: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    done = subprocess.run(["sh", "-e", "-x", "-c", code], cwd=cwd, env=_env(),
                          capture_output=True, text=True, timeout=TIMEOUT_S, check=False)
    assert done.returncode == 0, f"{code}\n{done.stdout}\n{done.stderr}"
    return done


def _block(what: str, lang: str) -> str:
    (code,) = [c for w, la, c in readme_blocks() if w.startswith(what) and la == lang]
    return code


def test_readme_has_the_marked_blocks() -> None:
    assert [la for _, la, _ in readme_blocks()] == ["sh", "sh", "make", "cmake"]


@pytest.fixture(scope="module")
def host_done(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The host block of the README run verbatim in an empty folder (shared by the tests
    below, which add their own files and build folders beside it)."""
    tmp_path = tmp_path_factory.mktemp("readme")
    require_tools("host", run=True)
    require_programs("make", "cmake", "ctest")
    host = [c for _, la, c in readme_blocks() if la == "sh"][0]
    done = _sh(host, tmp_path)
    assert "check-host: hive_scale: " in done.stdout
    assert "100% tests passed" in done.stdout
    return tmp_path


def test_host_block(host_done: Path) -> None:
    assert (host_done / "build" / "host" / "ht_runner").is_file()


@pytest.mark.slow
def test_cortex_m4_block(host_done: Path) -> None:
    require_tools("m4", run=True)
    code = [c for _, la, c in readme_blocks() if la == "sh"][1]
    done = _sh(code, host_done)
    assert "check-m4: hive_scale: " in done.stdout
    assert "100% tests passed" in done.stdout


def _renders(output: str) -> int:
    return len(re.findall(r"^(?:wrote|unchanged) \S*hive_scale_design\.h$", output, re.M))


def _compiles(output: str) -> int:
    return len(re.findall(r"^gcc |Building C object", output, re.M))


def _touch_later(path: Path) -> None:
    """Make ``path`` newer than everything built so far (coarse file-system clocks too),
    then wait until that time has passed, so what the next build writes is newer still
    however fast it runs (a cached design renders in well under a second)."""
    later = time.time() + 2
    os.utime(path, (later, later))
    time.sleep(max(0.0, later - time.time()) + 0.1)


def test_make_stamp_snippet(host_done: Path) -> None:
    (host_done / "Makefile").write_text(_block("this Makefile", "make"))
    first = _sh("make", host_done)
    assert _renders(first.stdout) == 1 and _compiles(first.stdout) == 1
    second = _sh("make", host_done)
    assert _renders(second.stdout) == 0 and _compiles(second.stdout) == 0
    _touch_later(host_done / "hive_scale.toml")
    touched = _sh("make", host_done)
    assert "unchanged include/hive_scale_design.h" in touched.stdout
    assert _compiles(touched.stdout) == 0
    after = _sh("make", host_done)
    assert _renders(after.stdout) == 0 and _compiles(after.stdout) == 0


@pytest.mark.parametrize("generator", ["Unix Makefiles", "Ninja"])
def test_cmake_stamp_snippet(host_done: Path, generator: str) -> None:
    if generator == "Ninja":
        require_programs("ninja")
    (host_done / "CMakeLists.txt").write_text(_block("this CMakeLists.txt", "cmake"))
    build = host_done / "build" / f"project-{generator.split()[0].lower()}"
    _sh(f"cmake -S . -B {build} -G '{generator}'", host_done)
    first = _sh(f"cmake --build {build}", host_done)
    assert _renders(first.stdout) == 1 and _compiles(first.stdout) == 4
    second = _sh(f"cmake --build {build}", host_done)
    assert _renders(second.stdout) == 0 and _compiles(second.stdout) == 0
    _touch_later(host_done / "hive_scale.toml")
    touched = _sh(f"cmake --build {build}", host_done)
    assert _renders(touched.stdout) == 1 and "unchanged" in touched.stdout
    assert _compiles(touched.stdout) == 0
    after = _sh(f"cmake --build {build}", host_done)
    assert _renders(after.stdout) == 0 and _compiles(after.stdout) == 0
    done = _sh(f"ctest --test-dir {build / 'fw'}", host_done)
    assert "100% tests passed" in done.stdout
