"""Build the C reference firmware programs and run them, on the host or under QEMU.

Build kinds (``KINDS``):

* ``host``: gcc for this machine.
* ``host-san``: gcc with the undefined-behaviour and address sanitizers, aborting on the
  first report.
* ``m4``, ``m3``: arm-none-eabi-gcc images for the QEMU boards mps2-an386 (Cortex-M4) and
  mps2-an385 (Cortex-M3), with our startup and linker script; stdin and stdout are
  semihosting calls, and qemu's exit status is the program's.
* ``m0plus``: Cortex-M0+ image, a build check only (QEMU has no such board for us).

The compilers are called directly, so building needs no ``make``; the flags here are the
ones of ``firmware_stub/Makefile`` (kept identical; a test compares them). Sources are
copied from the package into the build folder first, so a build works from a wheel and
never writes into the package.
"""

from __future__ import annotations

import shutil
import subprocess
from collections.abc import Sequence
from dataclasses import dataclass
from importlib.abc import Traversable
from pathlib import Path

from hosttool.errors import BuildFailed, CBuildError, RunTimedOut, ToolchainMissing
from hosttool.util.resources import firmware_sources

COMMON_FLAGS: tuple[str, ...] = ("-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic")
TARGET_FLAGS: tuple[str, ...] = (
    "-mthumb", "-O2", "-nostartfiles", "--specs=rdimon.specs", "-DHT_HAVE_CYCLES",
)
TARGET_SOURCES: tuple[str, ...] = ("target/startup.c", "target/ht_cycles.c")
LINKER_SCRIPT = "target/cortex_m.ld"

QEMU = "qemu-system-arm"
QEMU_INSNS_PER_TICK = 40
"""Instructions per SysTick tick under ``-icount shift=0`` on the mps2 boards (25 MHz)."""


@dataclass(frozen=True)
class Kind:
    """How to build (and where to run) one build kind."""

    compiler: str
    flags: tuple[str, ...]
    target: bool
    machine: str | None = None
    """QEMU board that runs the image; None for host programs and build-only targets."""


KINDS: dict[str, Kind] = {
    "host": Kind("gcc", ("-O2",), target=False),
    "host-san": Kind(
        "gcc",
        ("-O1", "-g", "-fno-omit-frame-pointer", "-fsanitize=undefined,address",
         "-fno-sanitize-recover=all"),
        target=False,
    ),
    "m4": Kind("arm-none-eabi-gcc", ("-mcpu=cortex-m4", *TARGET_FLAGS), True, "mps2-an386"),
    "m3": Kind("arm-none-eabi-gcc", ("-mcpu=cortex-m3", *TARGET_FLAGS), True, "mps2-an385"),
    "m0plus": Kind("arm-none-eabi-gcc", ("-mcpu=cortex-m0plus", *TARGET_FLAGS), True),
}


@dataclass(frozen=True)
class Program:
    """A firmware program: its name and its C sources in firmware_stub/."""

    name: str
    sources: tuple[str, ...]


CRC_RUNNER = Program("crc_runner", ("crc_runner.c", "ht_crc32.c"))
"""CRC-32 of hex-encoded lines on stdin (firmware_stub/crc_runner.c)."""


@dataclass(frozen=True)
class RunResult:
    """What a finished program gave back."""

    returncode: int
    stdout: bytes
    stderr: bytes


def _kind(kind: str) -> Kind:
    try:
        return KINDS[kind]
    except KeyError:
        raise CBuildError(f"unknown build kind {kind!r}; choose one of "
                          f"{', '.join(KINDS)}") from None


def tools_needed(kind: str, *, run: bool) -> tuple[str, ...]:
    """Programs that building (and, with ``run``, running) ``kind`` needs on PATH."""
    spec = _kind(kind)
    if run and spec.target:
        return (spec.compiler, QEMU)
    return (spec.compiler,)


def missing_tools(kind: str, *, run: bool) -> tuple[str, ...]:
    """The programs of :func:`tools_needed` that are not on PATH."""
    return tuple(t for t in tools_needed(kind, run=run) if shutil.which(t) is None)


def _find_tool(name: str, kind: str) -> str:
    path = shutil.which(name)
    if path is None:
        raise ToolchainMissing(f"{kind}: {name} not found on PATH (Debian: apt-get install "
                               "gcc-arm-none-eabi libnewlib-arm-none-eabi qemu-system-arm)")
    return path


def _copy_tree(src: Traversable, dst: Path) -> None:
    """Copy the C sources, headers and linker scripts under ``src`` to ``dst``."""
    dst.mkdir(parents=True, exist_ok=True)
    for item in src.iterdir():
        if item.is_dir():
            if item.name != "__pycache__":
                _copy_tree(item, dst / item.name)
        elif item.name.endswith((".c", ".h", ".ld")):
            data = item.read_bytes()
            out = dst / item.name
            if not out.exists() or out.read_bytes() != data:
                out.write_bytes(data)


def build(program: Program, kind: str, build_dir: Path, *,
          include_dirs: Sequence[Path] = (), defines: Sequence[str] = (),
          shared: bool = False, extra_sources: Sequence[Path] = ()) -> Path:
    """Build ``program`` for ``kind`` under ``build_dir`` and return the executable's path.

    ``shared`` (host kinds): a shared library ``lib<name>.so`` instead, for ctypes.

    ``include_dirs`` (generated headers, for instance) go on the include path after the
    firmware folder; ``defines`` (``NAME=VALUE``) become ``-D`` options; ``extra_sources``
    are copied beside the firmware sources (a program's own file from outside the package).
    The executable is ``build_dir/<kind>/<name>`` (``.elf`` for targets).
    """
    spec = _kind(kind)
    compiler = _find_tool(spec.compiler, kind)
    src = build_dir / "src"
    _copy_tree(firmware_sources(), src)
    for extra in extra_sources:
        shutil.copy(extra, src / extra.name)
    out_dir = build_dir / kind
    out_dir.mkdir(parents=True, exist_ok=True)
    out = out_dir / (program.name + (".elf" if spec.target else ""))
    sources = [src / s for s in program.sources]
    flags = [*COMMON_FLAGS, *spec.flags]
    if shared:
        if spec.target:
            raise CBuildError(f"{kind}: a shared library is built for the host only")
        out = out_dir / f"lib{program.name}.so"
        flags += ["-fPIC", "-shared"]
    includes = [f"-I{src}", *(f"-I{Path(d)}" for d in include_dirs)]
    if spec.target:
        flags += ["-T", str(src / LINKER_SCRIPT)]
        includes.append(f"-I{src / 'target'}")
        sources += [src / s for s in TARGET_SOURCES]
    cmd = [compiler, *flags, *(f"-D{d}" for d in defines), *includes, *map(str, sources),
           "-o", str(out)]
    done = subprocess.run(cmd, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise BuildFailed(f"{kind}: building {program.name} failed (status {done.returncode}):"
                          f"\n{' '.join(cmd)}\n{done.stdout}{done.stderr}")
    return out


def run(executable: Path, kind: str, stdin: bytes, *, timeout_s: float,
        icount: bool = True) -> RunResult:
    """Run a built program with ``stdin`` and return its exit status and output.

    Host kinds run directly; ``m4`` and ``m3`` images run under qemu-system-arm with
    semihosting. ``icount`` (targets only) adds ``-icount shift=0``: one instruction per
    nanosecond of virtual time, so SysTick tick counts are the same on every run
    (:data:`QEMU_INSNS_PER_TICK` instructions per tick). Raises :class:`RunTimedOut` after
    ``timeout_s`` seconds; a non-zero exit status is returned, not raised.
    """
    spec = _kind(kind)
    if not spec.target:
        cmd = [str(executable)]
    elif spec.machine is None:
        raise CBuildError(f"{kind}: no emulated board runs this target; it is a build check")
    else:
        cmd = [_find_tool(QEMU, kind), "-M", spec.machine, "-nographic", "-monitor", "none",
               "-serial", "none", "-semihosting-config", "enable=on,target=native",
               *(["-icount", "shift=0"] if icount else []), "-kernel", str(executable)]
    try:
        done = subprocess.run(cmd, input=stdin, capture_output=True, timeout=timeout_s,
                              check=False)
    except subprocess.TimeoutExpired:
        raise RunTimedOut(f"{kind}: {executable.name} did not finish within "
                          f"{timeout_s:g} s") from None
    return RunResult(done.returncode, done.stdout, done.stderr)
