"""The calibration block as a flash image: Intel HEX (intelhex library) or raw bytes.

The block (calblock.encode) sits at ``target.calblock_address`` and is padded to
``target.calblock_size`` with 0xFF, the value of erased flash, so flashing the image also
clears whatever an older block left in the rest of the area. intelhex writes a type 04
extended linear address record wherever the address passes a 64 KiB boundary. Merging
with a firmware image refuses any firmware byte inside the block's area.
"""

from __future__ import annotations

import io
from pathlib import Path

from intelhex import IntelHex, IntelHexError

from hosttool.design.resolve import Design
from hosttool.errors import DesignError, InputError
from hosttool.formats.calblock import (
    BLOCK_SIZE,
    CalBlock,
    check_against,
    check_area_size,
    decode,
    encode,
)
from hosttool.formats.readings import SERIAL_RE
from hosttool.util.text import shown
from hosttool.util.utctime import check_time_range

ERASED = 0xFF


def block_area(design: Design) -> tuple[int, int]:
    """(address, size) of the block's flash area; refuses a spec without room for it."""
    spec = design.spec
    if spec.target is None:
        raise InputError(f"{spec.source}: target: the spec has no [target] section "
                         "(calblock_address, calblock_size)")
    try:
        check_area_size(spec.target.calblock_size, spec.source)
    except DesignError as exc:
        raise InputError(str(exc)) from None
    return spec.target.calblock_address, spec.target.calblock_size


def padded(design: Design, block: bytes) -> bytes:
    """The block followed by erased bytes up to the area's size."""
    _, size = block_area(design)
    return block + bytes([ERASED]) * (size - len(block))


def hex_text(image: IntelHex) -> str:
    """Intel HEX text, 16 data bytes per record, "\\n" line ends, start address if any."""
    out = io.StringIO()
    image.write_hex_file(out, write_start_addr=True, byte_count=16)
    return out.getvalue()


def read_hex(path: Path) -> IntelHex:
    """Parse an Intel HEX file; any problem is a one-line ``InputError``."""
    if not path.is_file():
        raise InputError(f"{path}: no such file")
    try:
        return IntelHex(str(path))
    except IntelHexError as exc:
        raise InputError(f"{path}: not a valid Intel HEX file: {exc}") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read: {exc}") from None


def _overlap(firmware: IntelHex, start: int, stop: int) -> tuple[int, int] | None:
    for seg_start, seg_stop in firmware.segments():
        low, high = max(seg_start, start), min(seg_stop, stop)
        if low < high:
            return low, high
    return None


def block_image(design: Design, block: bytes, *, firmware: IntelHex | None = None,
                firmware_name: str = "firmware") -> IntelHex:
    """The padded block at its address, merged into ``firmware`` if given (no overlap)."""
    address, size = block_area(design)
    image = IntelHex()
    image.frombytes(padded(design, block), offset=address)
    if firmware is None:
        return image
    clash = _overlap(firmware, address, address + size)
    if clash is not None:
        raise InputError(f"{firmware_name}: data at 0x{clash[0]:08X}..0x{clash[1] - 1:08X} "
                         f"overlaps the calibration block's area 0x{address:08X}, {size} bytes "
                         "(target.calblock_address, target.calblock_size): refusing to merge")
    merged = IntelHex()
    merged.merge(firmware, overlap="error")
    merged.merge(image, overlap="error")
    return merged


def read_area(path: Path, design: Design, *, address: int | None = None,
              base: int | None = None) -> bytes:
    """The bytes of the block's area at ``address`` (default: the spec's block address)
    from a HEX image, whole firmware or full-flash readback alike; or from a .bin file:
    without ``base``, the raw area ``image --bin`` writes; with ``base``, a flash readback
    whose first byte sits at that address (bytes past its end count as erased). The
    block's bytes must all be present."""
    spec_address, size = block_area(design)
    if address is None:
        address = spec_address
    if path.suffix.lower() == ".bin":
        try:
            data = path.read_bytes()
        except OSError as exc:
            raise InputError(f"{path}: cannot read: {exc.strerror}") from None
        if base is None:
            if len(data) != size:
                raise InputError(f"{path}: {len(data)} bytes; a .bin image is the block's "
                                 f"whole area, {size} bytes (target.calblock_size), or a "
                                 "flash readback: give its start address with --base")
            return data
        offset = address - base
        if offset < 0 or offset + BLOCK_SIZE > len(data):
            raise InputError(f"{path}: the calibration block (0x{address:08X}, {BLOCK_SIZE} "
                             f"bytes) lies outside this readback (0x{base:08X} .. "
                             f"0x{base + len(data):08X})")
        return data[offset:offset + size].ljust(size, bytes([ERASED]))
    if base is not None:
        raise InputError(f"{path}: --base is for a .bin readback; Intel HEX carries its "
                         "addresses")
    image = read_hex(path)
    present = image.todict()
    missing = next((a for a in range(address, address + BLOCK_SIZE) if a not in present), None)
    if missing is not None:
        raise InputError(f"{path}: no data at 0x{missing:08X}: the calibration block "
                         f"(0x{address:08X}, {BLOCK_SIZE} bytes) is not in this image")
    return bytes(present.get(a, ERASED) for a in range(address, address + size))


def check_block(area: bytes, design: Design, source: str) -> CalBlock:
    """Every check a block must pass, the same for ``inspect`` (reading) and ``image``
    (before writing): magic, layout version, length and CRC (what the C loader checks),
    format identity (or the spec hash of a layout-1 block), shifts, coefficient count,
    flags and reference temperature against the design, constants inside the design's
    formats, a valid serial, a calibration time in range, and that encoding the decoded
    block gives back exactly the same bytes. Every refusal names ``source``."""
    try:
        block = decode(area)
    except InputError as exc:
        raise InputError(f"{source}: {exc}") from None
    check_against(block, design, source)     # layout, formats and constants
    if not SERIAL_RE.fullmatch(block.serial):
        raise InputError(f"{source}: serial: {shown(block.serial)} is not a valid serial "
                         "(1 to 16 letters, digits, '.', '_' or '-')")
    check_time_range(block.cal_time_utc, f"{source}: cal_time_utc")
    again = encode(design, block.constants, serial=block.serial,
                   cal_time_utc=block.cal_time_utc, layout_version=block.layout_version)
    if again != area[:BLOCK_SIZE]:
        raise InputError(f"{source}: the block decodes but differs from what this design "
                         "encodes for its contents (flags, reference temperature or reserved "
                         "bytes)")
    return block


def read_block(path: Path, design: Design, *, address: int | None = None,
               base: int | None = None) -> tuple[CalBlock, bytes]:
    """Read the block's area from an image (``read_area``) and check it (``check_block``)."""
    area = read_area(path, design, address=address, base=base)
    return check_block(area, design, str(path)), area
