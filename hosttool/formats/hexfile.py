"""The calibration block as a flash image: Intel HEX or raw bytes.

The block (calblock.encode) sits at ``target.calblock_address`` and is padded to
``target.calblock_size`` with 0xFF, the value of erased flash, so flashing the image also
clears whatever an older block left in the rest of the area. Merging with a firmware image
(read and merged by the intelhex library) refuses any firmware byte inside the block's area.

Intel HEX text is written here (``intel_hex``), a few lines instead of the library's general
writer (a production line writes one image per unit): 16 data bytes per record from the
first address of each run of bytes, a record never crossing a 64 KiB boundary, a type 04
extended linear address record first and wherever the upper 16 bits change when any byte
lies above 0xFFFF (none otherwise), the start address record (type 03 or 05) first if the
image has one, the type 01 end record last, "\\n" line ends: byte for byte what intelhex's
``write_hex_file(byte_count=16)`` writes (tests/test_hexfile.py holds it to intelhex and
bincopy).
"""

from __future__ import annotations

import functools
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
    return _filled(block, block_area(design)[1])


def _filled(block: bytes, size: int) -> bytes:
    return block + bytes([ERASED]) * (size - len(block))


#: Data bytes per record.
RECORD_BYTES = 16
#: The end-of-file record (type 01).
END_RECORD = ":00000001FF"


def _record(address: int, kind: int, data: bytes) -> str:
    """One record ``:LLAAAATTDD..CC``, CC the two's complement of the sum of the other
    bytes (data records are written the same way, inline, in ``intel_hex``)."""
    check = -(len(data) + (address >> 8) + (address & 0xFF) + kind + sum(data)) & 0xFF
    return f":{len(data):02X}{address:04X}{kind:02X}{data.hex().upper()}{check:02X}"


def intel_hex(runs: list[tuple[int, bytes]], *, start: dict[str, int] | None = None) -> str:
    """Intel HEX text of ``runs`` ((address, bytes), not overlapping; runs that touch are
    one run) and the start address ``start`` ({"EIP": a}, or {"CS": c, "IP": i} as
    intelhex holds it), if any."""
    joined: list[tuple[int, bytes]] = []
    for address, data in sorted((a, d) for a, d in runs if d):
        if joined and joined[-1][0] + len(joined[-1][1]) == address:
            joined[-1] = (joined[-1][0], joined[-1][1] + data)
        else:
            joined.append((address, data))
    lines = []
    if start:
        if sorted(start) == ["CS", "IP"]:
            lines.append(_record(0, 3, start["CS"].to_bytes(2, "big")
                                 + start["IP"].to_bytes(2, "big")))
        elif sorted(start) == ["EIP"]:
            lines.append(_record(0, 5, start["EIP"].to_bytes(4, "big")))
        else:
            raise ValueError(f"start address {start}: neither CS and IP nor EIP")
    end = joined[-1][0] + len(joined[-1][1]) if joined else 0
    if end > 1 << 32:
        raise ValueError("Intel HEX addresses end at 0xFFFFFFFF")
    upper = -1
    for address, data in joined:
        digits = data.hex().upper()
        pos = 0
        while pos < len(data):
            at = address + pos
            if end > 0x10000 and at >> 16 != upper:
                upper = at >> 16
                lines.append(_record(0, 4, upper.to_bytes(2, "big")))
            low = at & 0xFFFF
            size = min(RECORD_BYTES, 0x10000 - low, len(data) - pos)
            check = -(size + (low >> 8) + (low & 0xFF) + sum(data[pos:pos + size])) & 0xFF
            lines.append(f":{size:02X}{low:04X}00{digits[2 * pos:2 * (pos + size)]}{check:02X}")
            pos += size
    lines.append(END_RECORD)
    return "\n".join(lines) + "\n"


def hex_text(image: IntelHex) -> str:
    """Intel HEX text of an image (``intel_hex`` of its runs and start address)."""
    return intel_hex([(low, image.tobinstr(start=low, end=high - 1))
                      for low, high in image.segments()], start=image.start_addr)


def block_hex(design: Design, block: bytes) -> bytes:
    """The Intel HEX image of the padded block alone, as ASCII bytes (one unit of a lot):
    ``intel_hex`` of the area, only its records holding the block's bytes written anew."""
    address, size = block_area(design)
    area = _filled(block, size)
    digits = area.hex().upper()
    lines = [item if isinstance(item, str) else
             f"{item[0]}{digits[2 * item[1]:2 * item[2]]}"
             f"{-(item[3] + sum(area[item[1]:item[2]])) & 0xFF:02X}"
             for item in _area_plan(address, size, len(block))]
    return ("\n".join(lines) + "\n").encode("ascii")


@functools.lru_cache(maxsize=16)
def _area_plan(address: int, size: int, block_size: int
               ) -> tuple[str | tuple[str, int, int, int], ...]:
    """The lines ``intel_hex`` writes for ``size`` bytes at ``address`` whose first
    ``block_size`` change from unit to unit: a data record holding some of them as (its
    start ``:LLAAAA00``, first and end offset in the area, its bytes' checksum part), any
    other line (address records, records of erased bytes alone, the end) as its text."""
    plan: list[str | tuple[str, int, int, int]] = []
    pos = 0
    for line in intel_hex([(address, bytes([ERASED]) * size)]).splitlines():
        if line[7:9] != "00":
            plan.append(line)
            continue
        count, low = int(line[1:3], 16), int(line[3:7], 16)
        plan.append((line[:9], pos, pos + count, count + (low >> 8) + (low & 0xFF))
                    if pos < block_size else line)
        pos += count
    return tuple(plan)


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
