"""``hosttool image``: a passed unit's CAL.json to a flash image (Intel HEX or raw bytes)."""

from __future__ import annotations

from pathlib import Path

from hosttool.design.cached import cached_design
from hosttool.design.resolve import Design
from hosttool.errors import InputError
from hosttool.formats.calblock import (
    BLOCK_SIZE,
    encode,
)
from hosttool.formats.caljson import read_passed
from hosttool.formats.hexfile import (
    block_area,
    block_image,
    check_block,
    hex_text,
    padded,
    read_hex,
)
from hosttool.spec.schema import load_spec
from hosttool.util.atomic import write_atomic


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
    design = cached_design(load_spec(spec_path))
    record = read_passed(cal_path, design)
    block = encode(design, record.constants, serial=record.serial,
                   cal_time_utc=record.cal_time_utc)
    check_block(padded(design, block), design, str(cal_path))   # what inspect checks
    write_atomic(out, image_bytes(design, block, as_bin=as_bin, merge=merge))
    address, size = block_area(design)
    merged = f", merged with {merge}" if merge is not None else ""
    return (f"wrote {out}: calibration block of unit {record.serial} at 0x{address:08X} "
            f"({BLOCK_SIZE} bytes + {size - BLOCK_SIZE} erased, CRC-32 "
            f"0x{int.from_bytes(block[-4:], 'little'):08X}){merged}\n")
