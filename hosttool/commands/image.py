"""``hosttool image`` and ``hosttool inspect``: CAL.json to a flash image and back."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from hosttool.commands.calibrate import columns, constant_rows
from hosttool.design.resolve import Design, UnitConstants, check_constants, make_design
from hosttool.errors import InputError
from hosttool.formats.calblock import (
    BLOCK_SIZE,
    LAYOUT_VERSION,
    CalBlock,
    check_against,
    decode,
    encode,
)
from hosttool.formats.caljson import constants_json, read_passed
from hosttool.formats.hexfile import (
    ERASED,
    block_area,
    block_image,
    hex_text,
    padded,
    read_area,
    read_hex,
)
from hosttool.spec.schema import load_spec
from hosttool.util.atomic import write_atomic
from hosttool.util.utctime import format_time_utc


def image_bytes(design: Design, block: bytes, *, as_bin: bool, merge: Path | None) -> bytes:
    """What ``image`` writes: Intel HEX text (merged if asked) or the raw area."""
    if as_bin:
        if merge is not None:
            raise InputError("--bin: writes the block's area alone; it cannot be combined "
                             "with --merge (merge into HEX instead)")
        return padded(design, block)
    firmware = read_hex(merge) if merge is not None else None
    image = block_image(design, block, firmware=firmware, firmware_name=str(merge))
    return hex_text(image).encode("ascii")


def run_image(spec_path: Path, cal_path: Path, *, out: Path, merge: Path | None,
              as_bin: bool) -> str:
    """Write the unit's image; return the line to print."""
    design = make_design(load_spec(spec_path))
    record = read_passed(cal_path, design)
    block = encode(design, record.constants, serial=record.serial,
                   cal_time_utc=record.cal_time_utc)
    write_atomic(out, image_bytes(design, block, as_bin=as_bin, merge=merge))
    address, size = block_area(design)
    merged = f", merged with {merge}" if merge is not None else ""
    return (f"wrote {out}: calibration block of unit {record.serial} at 0x{address:08X} "
            f"({BLOCK_SIZE} bytes + {size - BLOCK_SIZE} erased, CRC-32 "
            f"0x{int.from_bytes(block[-4:], 'little'):08X}){merged}\n")


def read_block(path: Path, design: Design) -> tuple[CalBlock, bytes]:
    """Decode and check the block in an image: CRC, layout, spec hash, formats, and that
    encoding the decoded block gives back exactly the same bytes."""
    area = read_area(path, design)
    try:
        block = decode(area)
    except InputError as exc:
        raise InputError(f"{path}: {exc}") from None
    check_against(block, design, str(path))
    check_constants(block.constants, bits=design.spec.adc.bits, g=design.guard_bits,
                    scale=design.scale, lin=design.linearisation, temp=design.temperature,
                    source=str(path))
    again = encode(design, block.constants, serial=block.serial,
                   cal_time_utc=block.cal_time_utc)
    if again != area[:BLOCK_SIZE]:
        raise InputError(f"{path}: the block decodes but differs from what this design "
                         "encodes for its contents (flags, reference temperature or reserved "
                         "bytes)")
    return block, area


def inspect_json(path: Path, design: Design, block: CalBlock, area: bytes) -> dict[str, Any]:
    """The JSON object of ``inspect --json``."""
    address, size = block_area(design)
    return {
        "file": path.name, "address": f"0x{address:08X}", "area_bytes": size,
        "block_bytes": BLOCK_SIZE, "layout_version": LAYOUT_VERSION,
        "crc32": f"0x{block.crc32:08X}", "crc_ok": True, "spec_hash": block.spec_hash.hex(),
        "spec_matches": True, "serial": block.serial,
        "cal_time_utc": format_time_utc(block.cal_time_utc), "flags": block.flags,
        "constants": constants_json(block.constants),
        "values": {name: real for name, _, real in constant_rows(design, block.constants)},
        "padding_erased": all(b == ERASED for b in area[BLOCK_SIZE:]),
    }


def inspect_text(data: dict[str, Any], design: Design, constants: UnitConstants) -> str:
    """The readable form of the same object."""
    rows = [("file", data["file"]), ("address", f"{data['address']} ({data['area_bytes']} "
                                                f"bytes, block {data['block_bytes']})"),
            ("layout version", str(data["layout_version"])),
            ("CRC-32", f"{data['crc32']} (matches the contents)"),
            ("spec hash", f"{data['spec_hash']} (matches {design.spec.name})"),
            ("serial", data["serial"]), ("calibrated", data["cal_time_utc"]),
            ("flags", f"0x{data['flags']:02X}"),
            ("padding", "erased (0xFF)" if data["padding_erased"] else "NOT erased")]
    lines = [f"{design.spec.name}: calibration block", ""]
    lines += columns(rows, (False, False))
    lines += ["", "Constants"]
    lines += columns([("constant", "integer", "real value")]
                     + [(n, str(v), r) for n, v, r in constant_rows(design, constants)],
                     (False, True, False))
    return "\n".join(lines) + "\n"


def run_inspect(spec_path: Path, path: Path, *, as_json: bool) -> tuple[dict[str, Any], str]:
    """Inspect an image; return its JSON object and the text to print."""
    design = make_design(load_spec(spec_path))
    block, area = read_block(path, design)
    data = inspect_json(path, design, block, area)
    return data, inspect_text(data, design, block.constants)
