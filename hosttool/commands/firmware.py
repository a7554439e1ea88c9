"""``hosttool firmware``: the reference firmware, its build files and (with a spec) its
headers and check vectors, written into a folder for the user's own build."""

from __future__ import annotations

from pathlib import Path

from hosttool.design.resolve import make_design
from hosttool.firmware.export import Written, write_firmware
from hosttool.spec.schema import load_spec


def run_firmware(folder: Path, *, spec: Path | None = None,
                 force: bool = False) -> list[Written]:
    """Write the firmware folder; with ``spec``, that spec's headers and vectors too."""
    design = make_design(load_spec(spec)) if spec is not None else None
    return write_firmware(folder, design, force=force)


def firmware_text(written: list[Written], folder: Path, *, with_spec: bool) -> str:
    """One line per file (wrote or unchanged), then the commands that build it."""
    lines = [f"{'wrote' if w.changed else 'unchanged'} {w.path}" for w in written]
    if with_spec:
        lines += ["", f"next: make -C {folder} host check-host   (GNU make, gcc)",
                  f"      make -C {folder} m4 check-m4       (arm-none-eabi-gcc, "
                  "qemu-system-arm)",
                  f"      or CMake: see the comments at the top of {folder / 'CMakeLists.txt'}"]
    else:
        lines += ["", f"next: hosttool render SPEC.toml -o {folder / 'include'}, then "
                  f"make -C {folder} host"]
    return "\n".join(lines) + "\n"
