"""The per-unit calibration block: a packed, little-endian, versioned, CRC-protected record.

``LAYOUT`` is the single source of truth: the C header template renders the struct, its
size and field-offset assertions from it, and ``encode``/``decode`` pack and unpack it with
``struct``. Every field lies at its natural alignment, so the C struct needs no packing
attribute. The CRC-32 (ISO-HDLC, as zlib.crc32) covers every byte before it.

Layout 2 binds a block to the design's *format identity* (design/identity.py plus this
layout's version): the first 8 bytes of a SHA-256 of exactly what gives the block's integers
their meaning. A description, limit or filter edit leaves it alone, so blocks made before such
an edit stay valid. Layout 1 (hosttool 0.2 and earlier) had the same bytes in the same places
but bound the block to the first 8 bytes of the whole spec's SHA-256; such a block is still
read and accepted while the spec is unchanged, and ``encode(..., layout_version=1)`` can still
make one (for tests of firmware in the field).
"""

from __future__ import annotations

import struct
import zlib
from dataclasses import dataclass
from typing import Any

from hosttool.design.identity import (
    ABSENT,
    FormatIdentity,
    IdentityItem,
    design_identity,
    differences,
)
from hosttool.design.resolve import Design, UnitConstants
from hosttool.errors import DesignError, InputError

MAGIC = 0x42435448            # the bytes "HTCB" read as a little-endian uint32
LAYOUT_VERSION = 2
#: Layout versions ``decode`` reads: 1 bound to the spec's hash, 2 to the format identity.
READABLE_VERSIONS = (1, 2)
SERIAL_BYTES = 16
LIN_SLOTS = 6
FLAG_LINEARISATION = 0x01
FLAG_TEMPERATURE = 0x02


@dataclass(frozen=True)
class Field:
    """One field: C name, struct code, count (arrays), C type, meaning."""

    name: str
    code: str
    count: int
    ctype: str
    doc: str

    @property
    def size(self) -> int:
        """Bytes the field occupies."""
        return struct.calcsize("<" + self.code) * self.count


LAYOUT: tuple[Field, ...] = (
    Field("magic", "I", 1, "uint32_t", "0x42435448, \"HTCB\" in memory"),
    Field("layout_version", "H", 1, "uint16_t",
          "layout of this struct, 2 (1: binding is the spec's hash)"),
    Field("length", "H", 1, "uint16_t", "bytes from magic to crc32 inclusive"),
    Field("serial", "c", SERIAL_BYTES, "char", "unit serial, ASCII, NUL padded"),
    Field("cal_time_utc", "q", 1, "int64_t", "calibration time, seconds since 1970 UTC"),
    Field("format_id", "B", 8, "uint8_t", "the design's format identity (8 bytes)"),
    Field("offset", "i", 1, "int32_t", "zero, ADC counts x 2^G"),
    Field("scale_mul", "i", 1, "int32_t", "span multiplier M"),
    Field("scale_shift", "B", 1, "uint8_t", "span shift S (must equal the design's)"),
    Field("guard_bits", "B", 1, "uint8_t", "G (must equal the design's)"),
    Field("lin_count", "B", 1, "uint8_t", "linearisation coefficients used (0 = none)"),
    Field("flags", "B", 1, "uint8_t", "bit 0 linearisation, bit 1 temperature"),
    Field("lin", "i", LIN_SLOTS, "int32_t", "C_0 .. C_n, Q1.30; unused slots 0"),
    Field("tc_zero", "i", 1, "int32_t", "zero temperature coefficient Kz"),
    Field("tc_span", "i", 1, "int32_t", "span temperature coefficient Ks"),
    Field("tc_zero_shift", "B", 1, "uint8_t", "Sz (must equal the design's)"),
    Field("tc_span_shift", "B", 1, "uint8_t", "Ss (must equal the design's)"),
    Field("reserved", "B", 2, "uint8_t", "0"),
    Field("ref_temp_centi", "i", 1, "int32_t", "reference temperature, 0.01 C"),
    Field("crc32", "I", 1, "uint32_t", "CRC-32/ISO-HDLC of every byte before it"),
)

STRUCT_FORMAT = "<" + "".join(f"{f.count}{f.code}" if f.count > 1 else f.code
                              for f in LAYOUT)
BLOCK_SIZE = struct.calcsize(STRUCT_FORMAT)


def offsets() -> dict[str, int]:
    """Byte offset of every field (checked against the C compiler's offsetof)."""
    out, pos = {}, 0
    for f in LAYOUT:
        align = struct.calcsize("<" + f.code)
        if pos % align:
            raise AssertionError(f"field {f.name} is not naturally aligned")
        out[f.name] = pos
        pos += f.size
    return out


@dataclass(frozen=True)
class CalBlock:
    """A decoded calibration block."""

    layout_version: int
    serial: str
    cal_time_utc: int
    binding: bytes              # format identity (layout 2) or the spec's hash (layout 1)
    constants: UnitConstants
    scale_shift: int
    guard_bits: int
    flags: int
    tc_zero_shift: int
    tc_span_shift: int
    ref_temp_centi: int
    crc32: int


#: The name of each bit of ``flags``.
FLAG_NAMES = {FLAG_LINEARISATION: "linearisation", FLAG_TEMPERATURE: "temperature"}


def flag_names(flags: int) -> list[str]:
    """The names of the bits set in ``flags`` (an unknown bit as "bit N")."""
    return [FLAG_NAMES.get(1 << bit, f"bit {bit}") for bit in range(8) if flags >> bit & 1]


def design_flags(design: Design) -> int:
    """The block's flags for ``design``: which optional steps its constants feed."""
    return ((FLAG_LINEARISATION if design.linearisation else 0)
            | (FLAG_TEMPERATURE if design.temperature else 0))


def check_area_size(size: int, source: str) -> None:
    """Refuse (DesignError) a flash area of ``size`` bytes too small for the block."""
    if size < BLOCK_SIZE:
        raise DesignError(f"{source}: target.calblock_size: {size} bytes cannot hold the "
                          f"{BLOCK_SIZE}-byte calibration block")


def check_lin_slots(count: int, source: str) -> None:
    """Refuse (DesignError) more linearisation coefficients than the block's slots."""
    if count > LIN_SLOTS:
        raise DesignError(f"{source}: linearisation.order: {count} coefficients, the "
                          f"calibration block holds {LIN_SLOTS}")


def spec_hash8(design: Design) -> bytes:
    """The first 8 bytes of the spec's SHA-256 (what a layout-1 block is bound to)."""
    return bytes.fromhex(design.spec.sha256)[:8]


def format_identity(design: Design) -> FormatIdentity:
    """The design's format identity with this block layout's version as its last item."""
    return design_identity(design).extended(IdentityItem("block.layout_version",
                                                         str(LAYOUT_VERSION)))


def binding_of(design: Design, layout_version: int) -> bytes:
    """The 8 bytes a block of ``layout_version`` made for ``design`` carries."""
    return format_identity(design).digest if layout_version == 2 else spec_hash8(design)


_STRUCT = struct.Struct(STRUCT_FORMAT)
_SERIAL_CHARS = struct.Struct(f"{SERIAL_BYTES}c")      # the serial field's items
_CRC = struct.Struct("<I")
_NO_LIN = (0,) * LIN_SLOTS


@dataclass(frozen=True)
class BlockFormat:
    """What every block of one layout made for one design holds alike: the binding (format
    identity or spec hash), the shifts, the flags and the reference temperature. Built once
    per design (``of``: the identity's SHA-256 is the costly part); ``encode`` adds a unit's
    serial, time and constants."""

    layout_version: int
    binding: bytes
    scale_shift: int
    guard_bits: int
    flags: int
    tc_zero_shift: int
    tc_span_shift: int
    ref_temp_centi: int
    source: str                 # the spec, named by refusals

    @classmethod
    def of(cls, design: Design, layout_version: int = LAYOUT_VERSION) -> BlockFormat:
        """The blocks of ``layout_version`` for ``design`` (1: as hosttool 0.2 made them,
        bound to the spec's hash, for tests of the firmware already in the field)."""
        if layout_version not in READABLE_VERSIONS:
            raise InputError(f"layout version {layout_version}: this tool writes "
                             f"{READABLE_VERSIONS}")
        temp = design.temperature
        return cls(layout_version=layout_version, binding=binding_of(design, layout_version),
                   scale_shift=design.scale.shift, guard_bits=design.guard_bits,
                   flags=design_flags(design), tc_zero_shift=temp.zero_shift if temp else 0,
                   tc_span_shift=temp.span_shift if temp else 0,
                   ref_temp_centi=temp.reference_centi if temp else 0,
                   source=design.spec.source)

    def encode(self, constants: UnitConstants, *, serial: str, cal_time_utc: int) -> bytes:
        """The block's bytes for one unit (exactly BLOCK_SIZE; CRC last)."""
        raw_serial = serial.encode("ascii", errors="strict") if serial.isascii() else b""
        if not raw_serial or len(raw_serial) > SERIAL_BYTES or not serial.isprintable():
            raise InputError(f"serial {serial!r}: must be 1 to {SERIAL_BYTES} printable ASCII "
                             "characters")
        check_lin_slots(len(constants.lin), self.source)
        body = _STRUCT.pack(
            MAGIC, self.layout_version, BLOCK_SIZE,
            *_SERIAL_CHARS.unpack(raw_serial.ljust(SERIAL_BYTES, b"\0")), cal_time_utc,
            *self.binding, constants.offset, constants.scale_mul, self.scale_shift,
            self.guard_bits, len(constants.lin), self.flags, *constants.lin,
            *_NO_LIN[len(constants.lin):], constants.tc_zero, constants.tc_span,
            self.tc_zero_shift, self.tc_span_shift, 0, 0, self.ref_temp_centi, 0)[:-4]
        return body + _CRC.pack(zlib.crc32(body))


def encode(design: Design, constants: UnitConstants, *, serial: str, cal_time_utc: int,
           layout_version: int = LAYOUT_VERSION) -> bytes:
    """The block's bytes for one unit (exactly BLOCK_SIZE; CRC last).

    ``layout_version`` 1 makes a block as hosttool 0.2 did (bound to the spec's hash), for
    tests of the firmware already in the field. Many units of one design: build its
    ``BlockFormat`` once and call its ``encode``.
    """
    return BlockFormat.of(design, layout_version).encode(constants, serial=serial,
                                                          cal_time_utc=cal_time_utc)


def decode(data: bytes) -> CalBlock:
    """Unpack and check a block: magic, layout version, length, CRC (InputError otherwise)."""
    if len(data) < BLOCK_SIZE:
        raise InputError(f"calibration block: {len(data)} bytes, expected {BLOCK_SIZE}")
    data = bytes(data[:BLOCK_SIZE])
    fields = struct.unpack(STRUCT_FORMAT, data)
    named: dict[str, Any] = {}
    i = 0
    for f in LAYOUT:
        named[f.name] = fields[i] if f.count == 1 else fields[i:i + f.count]
        i += f.count
    if named["magic"] != MAGIC:
        raise InputError(f"calibration block: magic 0x{named['magic']:08X}, expected "
                         f"0x{MAGIC:08X} (no block here?)")
    if named["layout_version"] not in READABLE_VERSIONS:
        raise InputError(f"calibration block: layout version {named['layout_version']}, this "
                         f"tool reads {' and '.join(map(str, READABLE_VERSIONS))}")
    if named["length"] != BLOCK_SIZE:
        raise InputError(f"calibration block: length {named['length']}, expected {BLOCK_SIZE}")
    crc = zlib.crc32(data[:-4])
    if named["crc32"] != crc:
        raise InputError(f"calibration block: CRC-32 0x{named['crc32']:08X} does not match the "
                         f"contents (0x{crc:08X})")
    serial = b"".join(named["serial"]).rstrip(b"\0").decode("ascii", errors="replace")
    lin = tuple(int(v) for v in named["lin"][: named["lin_count"]])
    constants = UnitConstants(offset=named["offset"], scale_mul=named["scale_mul"], lin=lin,
                              tc_zero=named["tc_zero"], tc_span=named["tc_span"])
    return CalBlock(layout_version=named["layout_version"], serial=serial,
                    cal_time_utc=named["cal_time_utc"], binding=bytes(named["format_id"]),
                    constants=constants,
                    scale_shift=named["scale_shift"], guard_bits=named["guard_bits"],
                    flags=named["flags"], tc_zero_shift=named["tc_zero_shift"],
                    tc_span_shift=named["tc_span_shift"],
                    ref_temp_centi=named["ref_temp_centi"], crc32=named["crc32"])


def carried_items(block: CalBlock) -> dict[str, str]:
    """The identity items a block carries in its own fields, as identity text."""
    lin = bool(block.flags & FLAG_LINEARISATION)
    temp = bool(block.flags & FLAG_TEMPERATURE)
    absent = ABSENT
    return {
        "chain.guard_bits": str(block.guard_bits),
        "scale.shift": str(block.scale_shift),
        "linearisation.count": str(len(block.constants.lin)) if lin else "0",
        "temperature.zero_shift": str(block.tc_zero_shift) if temp else absent,
        "temperature.span_shift": str(block.tc_span_shift) if temp else absent,
        "temperature.reference_centi": str(block.ref_temp_centi) if temp else absent,
        "block.layout_version": str(block.layout_version),
    }


def identity_mismatch(block: CalBlock, design: Design) -> str | None:
    """Why ``block`` is not for ``design`` (None when its binding matches), naming the item.

    The items the block carries (shifts, guard bits, coefficient count, temperature
    reference) are compared one by one; when they all agree the differing item is one the
    block holds only through its hash, and the message lists those.
    """
    if block.binding == binding_of(design, block.layout_version):
        return None
    if block.layout_version == 1:
        return (f"layout-1 block bound to spec hash {block.binding.hex()}, this spec's is "
                f"{spec_hash8(design).hex()}: made for another spec text (layout-1 blocks stay "
                "valid only while the spec is unchanged; issue a new block from the unit's "
                "CAL.json with hosttool image)")
    ident = format_identity(design)
    expected = ident.as_dict()
    carried = carried_items(block)
    named = differences(carried, {k: expected[k] for k in carried})
    head = (f"made for another design: format identity {block.binding.hex()}, this "
            f"design's is {ident.hex}")
    if named:
        return f"{head} (block -> this design: {'; '.join(named)})"
    hidden = [k for k in expected if k not in carried]
    return (f"{head}; the items the block carries agree, so one it holds only in the hash "
            f"differs: {', '.join(hidden)}")


def check_against(block: CalBlock, design: Design, source: str) -> None:
    """Refuse a block made for another design (format identity, naming the item), or another
    spec (layout 1), or whose fields disagree with the design."""
    why = identity_mismatch(block, design)
    if why is not None:
        raise InputError(f"{source}: {why}")
    temp = design.temperature
    expected = (design.scale.shift, design.guard_bits,
                temp.zero_shift if temp else 0, temp.span_shift if temp else 0)
    found = (block.scale_shift, block.guard_bits, block.tc_zero_shift, block.tc_span_shift)
    if expected != found:
        raise InputError(f"{source}: the block's shifts {found} differ from the design's "
                         f"{expected}")
    lin = design.linearisation
    layout = (len(lin.coeffs) if lin else 0, design_flags(design),
              temp.reference_centi if temp else 0)
    found_layout = (len(block.constants.lin), block.flags, block.ref_temp_centi)
    if layout != found_layout:
        raise InputError(f"{source}: the block's (coefficients, flags, reference temperature) "
                         f"{found_layout} differ from the design's {layout}")
    try:
        design.check_unit(block.constants, source)
    except DesignError as exc:
        raise InputError(f"{source}: the block's constants are outside the design's formats: "
                         f"{exc}") from None
