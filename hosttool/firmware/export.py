"""``hosttool firmware``: the reference firmware written out for a user's own build.

The folder gets every file of the package's firmware_stub/ (C sources, the Cortex-M target
files, the Makefile, CMakeLists.txt and its helper scripts) and, with a design, that
design's headers in ``include/`` and check vectors in ``vectors/``: ``<name>.in`` (the
runner's input lines) and ``<name>.expected`` (the integer model's outputs and status
words, one line each, as ht_runner prints them). ``make check-host`` or ``ctest`` then
compare the compiled firmware with the model, bit for bit, on the user's own compiler.

Files are written atomically and only when their bytes change, so a build sees no change
when nothing changed. ``hosttool-firmware.sha256`` (the format of ``sha256sum``) lists what
was written; a file that is not listed, or whose bytes no longer match the list (edited by
hand), is not overwritten unless forced. Everything written is a function of the package's
files and the design's integers: the same bytes on every machine.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterator
from dataclasses import dataclass
from importlib.abc import Traversable
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from hosttool.codegen.render import (
    check_overwrite,
    check_replaced_blocks,
    render_headers,
    write_headers,
)
from hosttool.design.model import run_integer
from hosttool.design.resolve import Design
from hosttool.errors import OutputError
from hosttool.firmware.run import runner_input
from hosttool.util.atomic import make_folder, write_atomic
from hosttool.util.resources import firmware_sources

MANIFEST = "hosttool-firmware.sha256"
HEADER_FOLDER = "include"
VECTOR_FOLDER = "vectors"
#: Names of the package's firmware files that are written out (besides *.c, *.h, *.ld).
_BUILD_FILES = ("Makefile", "CMakeLists.txt")
_SUFFIXES = (".c", ".h", ".ld", ".cmake")
#: Input samples of the check vectors: long enough for every filter to settle on each step
#: level, short enough for a few seconds under QEMU.
CHECK_SAMPLES = 3000


@dataclass(frozen=True)
class Written:
    """One file of the firmware folder and whether this run changed it."""

    path: Path
    changed: bool


def _package_files(src: Traversable, prefix: str = "") -> Iterator[tuple[str, bytes]]:
    """(relative path, bytes) of every firmware file in the package, sorted by path."""
    for item in sorted(src.iterdir(), key=lambda t: t.name):
        if item.is_dir():
            if item.name != "__pycache__":
                yield from _package_files(item, f"{prefix}{item.name}/")
        elif item.name.endswith(_SUFFIXES) or item.name in _BUILD_FILES:
            yield prefix + item.name, item.read_bytes()


def _lcg(seed: int) -> Iterator[int]:
    """64-bit linear congruential generator (Knuth's MMIX constants, from memory): the same
    integers on every machine and numpy version, unlike a library's random stream."""
    state = seed
    while True:
        state = (6364136223846793005 * state + 1442695040888963407) % (1 << 64)
        yield state >> 32


def check_vectors(design: Design, samples: int = CHECK_SAMPLES
                  ) -> tuple[NDArray[np.int64], NDArray[np.int64] | None]:
    """Raw codes (and temperatures, 0.01 C) that exercise the whole pipeline.

    Nine levels from the lowest to the highest code, each held long enough to settle; both
    full-scale extremes alternating (the filters' overshoot); then pseudo-random codes over
    the whole range. Temperatures ramp from 5 C below the compensated range to 5 C above it,
    so the clamp is crossed at both ends.
    """
    bits = design.spec.adc.bits
    lo, hi = -(1 << (bits - 1)), (1 << (bits - 1)) - 1
    hold = samples // 20
    levels = [lo + k * (hi - lo) // 8 for k in range(9)]
    codes = [v for v in levels for _ in range(hold)]
    codes += [hi if (k // 3) % 2 else lo for k in range(2 * hold)]
    rand = _lcg(bits)
    codes += [lo + next(rand) % (hi - lo + 1) for _ in range(samples - len(codes))]
    temps = None
    t = design.temperature
    if t is not None:
        first, last = t.min_centi - 500, t.max_centi + 500
        temps = np.array([first + k * (last - first) // (samples - 1) for k in range(samples)],
                         dtype=np.int64)
    return np.array(codes, dtype=np.int64), temps


def _vector_files(design: Design) -> dict[str, bytes]:
    codes, temps = check_vectors(design)
    model = run_integer(design, codes, temps)
    lines = (f"{int(v)} 0x{int(s):02x}\n"
             for v, s in zip(model.output, model.status(calibrated=False), strict=True))
    name = design.spec.name
    return {f"{VECTOR_FOLDER}/{name}.in": runner_input(codes, temps),
            f"{VECTOR_FOLDER}/{name}.expected": "".join(lines).encode("ascii")}


def _read_manifest(folder: Path) -> dict[str, str]:
    """Relative path -> SHA-256 of what the last run wrote (empty if there is no list)."""
    path = folder / MANIFEST
    try:
        text = path.read_text(encoding="utf-8")
    except (FileNotFoundError, NotADirectoryError):
        return {}
    except (OSError, UnicodeDecodeError) as exc:
        raise OutputError(f"{path}: cannot read: {exc}") from None
    listed = {}
    for line in text.splitlines():
        digest, sep, name = line.partition("  ")
        if sep and len(digest) == 64:
            listed[name] = digest
    return listed


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _check_overwrite(folder: Path, files: dict[str, bytes], listed: dict[str, str]) -> None:
    """Refuse (OutputError) if any existing file would change and was not ours, unedited."""
    for name, data in files.items():
        path = folder / name
        if path.is_dir() or (path.exists() and not path.is_file()):
            raise OutputError(f"{path}: exists and is not a file")
        if not path.exists():
            continue
        current = path.read_bytes()
        if current == data:
            continue
        if name not in listed:
            raise OutputError(f"{path}: exists and was not written by hosttool firmware; "
                              "use --force to overwrite")
        if _sha256(current) != listed[name]:
            raise OutputError(f"{path}: edited since hosttool firmware wrote it (its SHA-256 "
                              f"differs from {MANIFEST}); use --force to overwrite")


def write_firmware(folder: Path, design: Design | None = None, *,
                   force: bool = False) -> list[Written]:
    """Write the reference firmware (and, with ``design``, its headers and check vectors)
    into ``folder``, created with its parents if missing; what was written, in order."""
    files = dict(_package_files(firmware_sources()))
    if design is not None:
        files |= _vector_files(design)
    headers = render_headers(design) if design is not None else ()
    listed = _read_manifest(folder)
    if design is not None:   # as render does: a change of the blocks' meaning is named
        check_replaced_blocks(folder / HEADER_FOLDER, design, force=force)
    if not force:
        _check_overwrite(folder, files, listed)
        for header in headers:
            path = folder / HEADER_FOLDER / header.name
            if path.exists() and path.read_bytes() != header.text.encode("utf-8"):
                check_overwrite(path)
    make_folder(folder)
    out: list[Written] = []
    for name, data in files.items():
        path = folder / name
        make_folder(path.parent)
        same = path.is_file() and path.read_bytes() == data
        if not same:
            write_atomic(path, data)
        out.append(Written(path, not same))
    if headers:
        out += [Written(path, changed) for path, changed
                 in write_headers(headers, folder / HEADER_FOLDER, force=force)]
    manifest = "".join(f"{_sha256(data)}  {name}\n" for name, data in sorted(files.items()))
    kept = {n: d for n, d in listed.items() if n not in files and (folder / n).exists()}
    manifest += "".join(f"{d}  {n}\n" for n, d in sorted(kept.items()))
    if (folder / MANIFEST).is_file() and (folder / MANIFEST).read_text() == manifest:
        return out
    write_atomic(folder / MANIFEST, manifest)
    return out
