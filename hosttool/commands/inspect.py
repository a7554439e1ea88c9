"""``hosttool inspect``: decode and check the calibration block in an image."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from hosttool.commands.calibrate import columns, unit_constant_rows
from hosttool.design.cached import cached_design
from hosttool.design.resolve import Design, UnitConstants
from hosttool.errors import InputError
from hosttool.formats.calblock import BLOCK_SIZE, CalBlock, flag_names
from hosttool.formats.caljson import constants_json
from hosttool.formats.hexfile import ERASED, block_area, read_block
from hosttool.spec.schema import load_spec
from hosttool.util.utctime import format_time_utc


def inspect_json(path: Path, design: Design, block: CalBlock, area: bytes,
                 address: int) -> dict[str, Any]:
    """The JSON object of ``inspect --json``."""
    _, size = block_area(design)
    return {
        "file": path.name, "address": f"0x{address:08X}", "area_bytes": size,
        "block_bytes": BLOCK_SIZE, "layout_version": block.layout_version,
        "crc32": f"0x{block.crc32:08X}", "crc_ok": True,
        "format_id": block.binding.hex() if block.layout_version >= 2 else None,
        "spec_hash": block.binding.hex() if block.layout_version == 1 else None,
        "identity_matches": True, "serial": block.serial,
        "cal_time_utc": format_time_utc(block.cal_time_utc), "flags": block.flags,
        "flag_names": flag_names(block.flags),
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
            ("flags", f"0x{data['flags']:02X} ({', '.join(data['flag_names']) or 'none'})"),
            ("padding", "erased (0xFF)" if data["padding_erased"] else "NOT erased")]
    lines = [f"{design.spec.name}: calibration block", ""]
    lines += columns(rows, (False, False))
    lines += ["", "Constants"]
    lines += columns([("constant", "integer", "real value")]
                     + [(n, str(v), r) for n, v, r in unit_constant_rows(design, constants)],
                     (False, True, False))
    return "\n".join(lines) + "\n"


def address_option(text: str | None, name: str) -> int | None:
    """An address option (0x... hexadecimal, or decimal) as an integer, or None."""
    if text is None:
        return None
    try:
        value = int(text, 0)
    except ValueError:
        raise InputError(f"{name}: {text!r} is not an address (0x0003F800 or 260096)") \
            from None
    if not 0 <= value < 1 << 32:
        raise InputError(f"{name}: {text!r} lies outside the 32-bit address space")
    return value


def run_inspect(spec_path: Path, path: Path, *, as_json: bool, address: str | None = None,
                base: str | None = None) -> tuple[dict[str, Any], str]:
    """Inspect an image (``address``, ``base``: the options, as typed); return its JSON
    object and the text to print."""
    design = cached_design(load_spec(spec_path))
    at = address_option(address, "--address")
    block, area = read_block(path, design, address=at, base=address_option(base, "--base"))
    data = inspect_json(path, design, block, area,
                        block_area(design)[0] if at is None else at)
    return data, inspect_text(data, design, block.constants)
