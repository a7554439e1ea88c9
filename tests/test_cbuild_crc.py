"""The C CRC-32 (firmware_stub/ht_crc32.c) through the build and run path of cbuild.

Reference values come from outside the project: zlib.crc32 (zlib) and the check value of
the CRC RevEng catalogue.
"""

from __future__ import annotations

import random
import re
import zlib
from collections.abc import Callable
from pathlib import Path

import pytest
from conftest import require_tools

from hosttool.firmware import build as cbuild
from hosttool.util.resources import firmware_sources

RUN_KINDS = [
    pytest.param("host"),
    pytest.param("host-san"),
    pytest.param("m4", marks=pytest.mark.slow),
    pytest.param("m3", marks=pytest.mark.slow),
]

TIMEOUT_S = 120.0

Runner = Callable[[bytes], cbuild.RunResult]


@pytest.fixture(scope="module", params=RUN_KINDS)
def crc_runner(request: pytest.FixtureRequest,
               tmp_path_factory: pytest.TempPathFactory) -> Runner:
    """crc_runner built for one kind; calling it runs the program on the given stdin."""
    kind: str = request.param
    require_tools(kind, run=True)
    exe = cbuild.build(cbuild.CRC_RUNNER, kind, tmp_path_factory.mktemp(kind))

    def run(stdin: bytes) -> cbuild.RunResult:
        return cbuild.run(exe, kind, stdin, timeout_s=TIMEOUT_S)

    return run


def _lines(result: cbuild.RunResult) -> list[int]:
    assert result.returncode == 0, result.stderr.decode(errors="replace")
    return [int(line, 16) for line in result.stdout.decode("ascii").splitlines()]


def test_check_value(crc_runner: Runner) -> None:
    # CRC RevEng catalogue, CRC-32/ISO-HDLC check value: CRC of ASCII "123456789".
    assert _lines(crc_runner(b"123456789".hex().encode() + b"\n")) == [0xCBF43926]


def test_matches_zlib_on_random_strings(crc_runner: Runner) -> None:
    # Reference: zlib.crc32. Lengths cross the runner's 256-byte pieces, so lines longer
    # than that also check that ht_crc32_update composes like zlib.crc32(data, crc).
    rng = random.Random(20240613)
    data = [b"", b"\x00", b"\xff" * 4]
    data += [rng.randbytes(rng.randrange(0, 1200)) for _ in range(150)]
    text = "".join(d.hex() + "\n" for d in data).encode()
    assert _lines(crc_runner(text)) == [zlib.crc32(d) for d in data]


def test_last_line_without_newline_and_upper_case(crc_runner: Runner) -> None:
    # Reference: zlib.crc32.
    assert _lines(crc_runner(b"DEADBEEF\nc0ffee")) == [
        zlib.crc32(bytes.fromhex("deadbeef")), zlib.crc32(bytes.fromhex("c0ffee"))]


def test_malformed_line_is_rejected(crc_runner: Runner) -> None:
    result = crc_runner(b"00\n0g\n")
    assert result.returncode == 2
    assert result.stdout == b"%08x\n" % zlib.crc32(b"\x00")  # Reference: zlib.crc32.
    assert b"crc_runner: line 2: not an even number of hex digits" in result.stderr


@pytest.mark.slow
def test_m0plus_builds(tmp_path: Path) -> None:
    require_tools("m0plus", run=False)
    elf = cbuild.build(cbuild.CRC_RUNNER, "m0plus", tmp_path)
    assert elf.read_bytes()[:4] == b"\x7fELF"  # ELF magic (System V ABI, ELF header).
    with pytest.raises(cbuild.CBuildError, match="m0plus: no emulated board"):
        cbuild.run(elf, "m0plus", b"", timeout_s=TIMEOUT_S)


@pytest.mark.slow
def test_target_reports_instruction_ticks(tmp_path: Path) -> None:
    # SysTick under qemu -icount shift=0 is a pure function of the instructions executed:
    # the same input gives the same tick count on every run.
    require_tools("m4", run=True)
    elf = cbuild.build(cbuild.CRC_RUNNER, "m4", tmp_path)
    text = (bytes(range(64)).hex() + "\n").encode() * 200
    first = cbuild.run(elf, "m4", text, timeout_s=TIMEOUT_S)
    second = cbuild.run(elf, "m4", text, timeout_s=TIMEOUT_S)
    found = re.search(rb"crc_runner: lines 200 bytes 12800 ticks (\d+)", first.stderr)
    assert found is not None, first.stderr
    assert int(found.group(1)) > 0
    assert first.stderr == second.stderr


def _makefile_vars() -> dict[str, str]:
    text = firmware_sources().joinpath("Makefile").read_text(encoding="utf-8")
    return {m[1]: m[2].strip() for m in re.finditer(r"^([\w-]+)\s*:=(.*)$", text, re.M)}


def test_makefile_flags_match_cbuild() -> None:
    # The Makefile is for people, cbuild for the package: both must build the same way.
    mk = _makefile_vars()
    assert mk["CFLAGS_COMMON"].split() == list(cbuild.COMMON_FLAGS)
    assert mk["crc_runner_SRCS"].split() == list(cbuild.CRC_RUNNER.sources)
    assert mk["TARGET_SRCS"].split() == list(cbuild.TARGET_SOURCES)
    for kind, spec in cbuild.KINDS.items():
        flags = mk[f"CFLAGS_{kind}"].split()
        if spec.target:
            flags += mk["CFLAGS_TARGET"].split()
            assert mk["TARGET_CC"] == spec.compiler
        else:
            assert mk["HOST_CC"] == spec.compiler
        assert flags == list(spec.flags), kind
