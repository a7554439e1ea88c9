"""The Intel HEX writer (formats/hexfile.intel_hex) against two independent libraries.

Sources: intelhex's ``write_hex_file(byte_count=16)`` (the writer the tool used before:
the same text, byte for byte) and bincopy reading the text back (the same bytes at the same
addresses); the Intel Hexadecimal Object File Format Specification rev. A for the record
layout and checksum. Blocks of several sizes at addresses on and across 64 KiB boundaries,
below and above 0xFFFF, up to the end of the 32-bit space.
"""

from __future__ import annotations

import io
import random

import bincopy
import pytest
from intelhex import IntelHex

from hosttool.formats import hexfile
from hosttool.formats.hexfile import hex_text, intel_hex

#: (address, size): the examples' areas, 16-byte aligned and not, a record ending exactly at
#: a 64 KiB boundary, runs crossing one, below 0x10000 (no type 04 record), the top of the
#: address space.
CASES = [
    (0x0003F800, 128), (0x0807F000, 128), (0x0003F800, 96), (0x8000, 128), (0x0, 1),
    (0x0, 16), (0x1, 17), (0xFFF0, 16), (0xFFF8, 40), (0xFFF9, 7), (0x1FFFF, 2),
    (0x2FFE5, 300), (0xFFFF00, 4096), (0xFFFFFF80, 128), (0x123457, 255),
]


def _intelhex_text(image: IntelHex) -> str:
    out = io.StringIO()
    image.write_hex_file(out, write_start_addr=True, byte_count=16)
    return out.getvalue()


def _data(size: int, seed: int) -> bytes:
    rng = random.Random(seed)
    return bytes(rng.randrange(256) for _ in range(size))


@pytest.mark.parametrize(("address", "size"), CASES)
def test_one_block_as_intelhex_writes_it_and_bincopy_reads_it(address: int, size: int) -> None:
    """Sources: intelhex (same text) and bincopy (same bytes back)."""
    data = _data(size, address ^ size)
    reference = IntelHex()
    reference.frombytes(data, offset=address)
    text = intel_hex([(address, data)])
    assert text == _intelhex_text(reference)
    assert hex_text(reference) == text
    binfile = bincopy.BinFile()
    binfile.add_ihex(text)
    assert binfile.minimum_address == address
    assert binfile.maximum_address == address + size
    assert binfile.as_binary() == data


@pytest.mark.parametrize(("address", "size"), CASES)
def test_a_units_block_image_is_intelhexs_image_of_the_padded_area(
        address: int, size: int, monkeypatch: pytest.MonkeyPatch) -> None:
    """Source: intelhex, the text of the area (the block, then erased bytes) for blocks
    filling none, part or all of it; block_hex writes anew only the records holding the
    block's bytes."""
    monkeypatch.setattr(hexfile, "block_area", lambda design: (address, size))
    for block_size in sorted({1, 15, 16, 17, size // 2, size - 1, size} - {0}):
        if block_size > size:
            continue
        for seed in range(3):
            block = _data(block_size, seed * 7919 + block_size)
            reference = IntelHex()
            reference.frombytes(block + b"\xff" * (size - block_size), offset=address)
            assert hexfile.block_hex(None, block).decode() == _intelhex_text(reference), \
                (address, size, block_size)


def test_records_follow_the_specification() -> None:
    """Source: Intel HEX specification rev. A: ':LLAAAATT<data>CC', upper-case hex, CC the
    two's complement of the sum of the other bytes, at most 16 data bytes here, a type 04
    record before data above 64 KiB, type 01 last."""
    lines = intel_hex([(0xFFF8, _data(40, 1))]).splitlines()
    assert lines == [
        ":020000040000FA",
        ":08FFF800" + _data(40, 1)[:8].hex().upper()
        + f"{-sum(bytes([8, 0xFF, 0xF8, 0]) + _data(40, 1)[:8]) & 0xFF:02X}",
        ":020000040001F9",
        *lines[3:5],
        ":00000001FF",
    ]
    for line in lines:
        raw = bytes.fromhex(line[1:])
        assert len(raw) == 5 + raw[0] and raw[0] <= 16
        assert sum(raw) & 0xFF == 0


def test_several_runs_and_start_addresses_as_intelhex() -> None:
    """Source: intelhex holding several runs (touching runs are one), with a start address
    of either kind (type 05 EIP, type 03 CS:IP), written by write_hex_file."""
    rng = random.Random(7)
    for trial in range(200):
        image = IntelHex()
        runs: list[tuple[int, bytes]] = []
        for _ in range(rng.randrange(1, 5)):
            address = rng.choice([rng.randrange(0, 0x20000), rng.randrange(0, 1 << 31)])
            data = _data(rng.randrange(1, 200), trial)
            if any(address < a + len(d) and a < address + len(data) + 1 for a, d in runs):
                continue
            runs.append((address, data))
            image.frombytes(data, offset=address)
        if runs and trial % 3 == 0:        # a run touching the first one
            address, data = runs[0]
            if not any(a == address + len(data) for a, _ in runs):
                runs.append((address + len(data), b"\x5a" * 20))
                image.frombytes(b"\x5a" * 20, offset=address + len(data))
        if trial % 4 == 1:
            image.start_addr = {"EIP": rng.randrange(1 << 32)}
        elif trial % 4 == 2:
            image.start_addr = {"CS": rng.randrange(1 << 16), "IP": rng.randrange(1 << 16)}
        expected = _intelhex_text(image)
        assert hex_text(image) == expected
        assert intel_hex(runs, start=image.start_addr) == expected


def test_addresses_beyond_32_bits_are_refused() -> None:
    """Source: Intel HEX specification (type 04 holds the upper 16 of 32 address bits)."""
    with pytest.raises(ValueError, match="0xFFFFFFFF"):
        intel_hex([(0xFFFFFFF0, bytes(17))])
    with pytest.raises(ValueError, match="start address"):
        intel_hex([(0, b"\0")], start={"PC": 1})
