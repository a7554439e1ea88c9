"""``hosttool inspect``: decode and check the calibration block in an image."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from hosttool.commands.calibrate import columns, unit_constant_rows
from hosttool.design.cached import cached_design
from hosttool.design.resolve import Design, UnitConstants
from hosttool.formats.calblock import BLOCK_SIZE, CalBlock
from hosttool.formats.caljson import constants_json
from hosttool.formats.hexfile import ERASED, block_area, read_block
from hosttool.spec.schema import load_spec
from hosttool.util.utctime import format_time_utc


def inspect_json(path: Path, design: Design, block: CalBlock, area: bytes) -> dict[str, Any]:
    """The JSON object of ``inspect --json``."""
    address, size = block_area(design)
    return {
        "file": path.name, "address": f"0x{address:08X}", "area_bytes": size,
        "block_bytes": BLOCK_SIZE, "layout_version": block.layout_version,
        "crc32": f"0x{block.crc32:08X}", "crc_ok": True,
        "format_id": block.binding.hex() if block.layout_version >= 2 else None,
        "spec_hash": block.binding.hex() if block.layout_version == 1 else None,
        "identity_matches": True, "serial": block.serial,
        "cal_time_utc": format_time_utc(block.cal_time_utc), "flags": block.flags,
        "constants": constants_json(block.constants),
        "values": {name: real for name, _, real in unit_constant_rows(design, block.constants)},
        "padding_erased": all(b == ERASED for b in area[BLOCK_SIZE:]),
    }


def inspect_text(data: dict[str, Any], design: Design, constants: UnitConstants) -> str:
    """The readable form of the same object."""
    rows = [("file", data["file"]), ("address", f"{data['address']} ({data['area_bytes']} "
                                                f"bytes, block {data['block_bytes']})"),
            ("layout version", str(data["layout_version"])),
            ("CRC-32", f"{data['crc32']} (matches the contents)"),
            (("format identity", f"{data['format_id']} (matches {design.spec.name})")
             if data["format_id"] else
             ("spec hash", f"{data['spec_hash']} (layout 1: matches {design.spec.name} while "
                           "its text is unchanged)")),
            ("serial", data["serial"]), ("calibrated", data["cal_time_utc"]),
            ("flags", f"0x{data['flags']:02X}"),
            ("padding", "erased (0xFF)" if data["padding_erased"] else "NOT erased")]
    lines = [f"{design.spec.name}: calibration block", ""]
    lines += columns(rows, (False, False))
    lines += ["", "Constants"]
    lines += columns([("constant", "integer", "real value")]
                     + [(n, str(v), r) for n, v, r in unit_constant_rows(design, constants)],
                     (False, True, False))
    return "\n".join(lines) + "\n"


def run_inspect(spec_path: Path, path: Path, *, as_json: bool) -> tuple[dict[str, Any], str]:
    """Inspect an image; return its JSON object and the text to print."""
    design = cached_design(load_spec(spec_path))
    block, area = read_block(path, design)
    data = inspect_json(path, design, block, area)
    return data, inspect_text(data, design, block.constants)
