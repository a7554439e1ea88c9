"""Calibration block images: Intel HEX checked by two independent parsers and the format's
specification, CRC-32 against zlib and the catalogue check value, exact round trip, merge
refusing overlap, and every single-bit flip refused (Python decoder and C loader).
"""

from __future__ import annotations

import json
import re
import struct
import zlib
from pathlib import Path

import bincopy
import numpy as np
import pytest
from click.testing import CliRunner
from conftest import require_tools
from intelhex import IntelHex

from hosttool.cli import main
from hosttool.design.model import run_integer
from hosttool.design.resolve import UnitConstants, make_design
from hosttool.errors import InputError
from hosttool.firmware import build as cbuild
from hosttool.formats import calblock
from hosttool.formats.calblock import BLOCK_SIZE, decode, encode
from hosttool.production.synthetic_lot import UnitTruth, lot_csv
from hosttool.spec.schema import parse_spec
from hosttool.util.utctime import parse_time_utc

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
SPEC = EXAMPLES / "hive_scale.toml"
HIVE = make_design(parse_spec(SPEC.read_text(), str(SPEC)))
ADDRESS = 0x0003F800            # target.calblock_address of the example
AREA = 128                      # target.calblock_size
START = 1_741_075_200


def _cli(*args: str) -> tuple[int, str, str]:
    result = CliRunner().invoke(main, list(args))
    return result.exit_code, result.stdout, result.stderr


@pytest.fixture(scope="module")
def unit(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """A calibrated unit of the example: its CAL.json and its HEX image."""
    folder = tmp_path_factory.mktemp("unit")
    readings = folder / "r.csv"
    readings.write_text(lot_csv(HIVE, [UnitTruth("HX-0007", zero_mv_per_v=0.04,
                                                 span_error_pct=-1.2, zero_tc_ppm_fs_per_c=6,
                                                 span_tc_ppm_per_c=9)],
                                seed=3, start_utc=START))
    code, _, err = _cli("calibrate", str(SPEC), str(readings), "--serial", "HX-0007", "-o",
                        str(folder / "cal.json"))
    assert code == 0, err
    code, _, err = _cli("image", str(SPEC), str(folder / "cal.json"), "-o",
                        str(folder / "unit.hex"))
    assert code == 0, err
    return {"cal": folder / "cal.json", "hex": folder / "unit.hex", "folder": folder}


def _block_of(cal: Path) -> tuple[bytes, UnitConstants]:
    data = json.loads(cal.read_text())
    c = data["constants"]
    constants = UnitConstants(c["offset"], c["scale_mul"], tuple(c["lin"]), c["tc_zero"],
                              c["tc_span"])
    stamp = parse_time_utc(data["cal_time_utc"], "cal.json")
    return encode(HIVE, constants, serial=data["serial"], cal_time_utc=stamp), constants


def test_image_parsed_by_bincopy_and_intelhex(unit: dict[str, Path]) -> None:
    """Sources: bincopy and intelhex, two independent Intel HEX parsers."""
    block, _ = _block_of(unit["cal"])
    expected = block + b"\xff" * (AREA - BLOCK_SIZE)
    text = unit["hex"].read_text()
    binfile = bincopy.BinFile()
    binfile.add_ihex(text)
    assert binfile.minimum_address == ADDRESS
    assert binfile.maximum_address == ADDRESS + AREA
    assert binfile.as_binary() == expected
    parsed = IntelHex(str(unit["hex"]))
    assert parsed.minaddr() == ADDRESS and parsed.maxaddr() == ADDRESS + AREA - 1
    assert parsed.tobinstr(start=ADDRESS, size=AREA) == expected


def test_records_follow_the_intel_hex_specification(unit: dict[str, Path]) -> None:
    """Source: Intel Hexadecimal Object File Format Specification rev. A: records
    ':LLAAAATT<data>CC', checksum the two's complement of the sum of the other bytes,
    type 04 giving the upper 16 bits of the linear address, type 01 end of file."""
    lines = unit["hex"].read_text().splitlines()
    upper = None
    seen = bytearray()
    for line in lines:
        assert re.fullmatch(r":[0-9A-F]{10,}", line), line
        raw = bytes.fromhex(line[1:])
        count, address, kind = raw[0], int.from_bytes(raw[1:3], "big"), raw[3]
        assert len(raw) == 5 + count
        assert raw[-1] == (-sum(raw[:-1])) & 0xFF
        if kind == 0x04:
            upper = int.from_bytes(raw[4:6], "big")
        elif kind == 0x00:
            assert upper is not None, "a data record above 64 KiB before any type 04 record"
            assert (upper << 16) + address == ADDRESS + len(seen)
            seen += raw[4:-1]
    assert upper == ADDRESS >> 16 == 0x0003
    assert lines[-1] == ":00000001FF"
    assert len(seen) == AREA


def test_crc32_matches_zlib_and_the_catalogue() -> None:
    """Sources: zlib.crc32 and the CRC catalogue check value of CRC-32/ISO-HDLC,
    0xCBF43926 for the ASCII bytes "123456789"."""
    assert zlib.crc32(b"123456789") == 0xCBF43926
    block = encode(HIVE, HIVE.nominal, serial="S1", cal_time_utc=START)
    assert struct.unpack_from("<I", block, BLOCK_SIZE - 4)[0] == zlib.crc32(block[:-4])
    assert block[:4] == b"HTCB"


def test_inspect_round_trips_the_image(unit: dict[str, Path]) -> None:
    """Source: the CAL.json the image was made from (decoding inverts encoding)."""
    code, out, err = _cli("inspect", str(SPEC), str(unit["hex"]), "--json")
    assert code == 0, err
    data = json.loads(out)
    cal = json.loads(unit["cal"].read_text())
    assert data["constants"] == cal["constants"]
    assert data["serial"] == "HX-0007" and data["cal_time_utc"] == cal["cal_time_utc"]
    assert data["address"] == "0x0003F800" and data["padding_erased"] is True
    code, out, _ = _cli("inspect", str(SPEC), str(unit["hex"]))
    assert code == 0 and "CRC-32" in out and "HX-0007" in out and "ppm FS/C" in out


def test_encoding_and_decoding_are_exact_inverses() -> None:
    """Source: struct's little-endian packing; random constants over the int32 formats."""
    rng = np.random.default_rng(11)
    for _ in range(300):
        c = UnitConstants(int(rng.integers(-2 ** 29, 2 ** 29)), int(rng.integers(1, 2 ** 31)),
                          (), int(rng.integers(-2 ** 31, 2 ** 31)),
                          int(rng.integers(-2 ** 31, 2 ** 31)))
        stamp = int(rng.integers(0, 2 ** 40))
        raw = encode(HIVE, c, serial="S-" + str(int(rng.integers(0, 10 ** 9))),
                     cal_time_utc=stamp)
        back = decode(raw)
        assert back.constants == c and back.cal_time_utc == stamp
        assert encode(HIVE, back.constants, serial=back.serial,
                      cal_time_utc=back.cal_time_utc) == raw


def test_merge_keeps_the_firmware_and_refuses_overlap(unit: dict[str, Path]) -> None:
    """Source: bincopy reading the merged image; an invented 4 KiB firmware image."""
    folder = unit["folder"]
    firmware = IntelHex()
    firmware.frombytes(bytes(range(256)) * 16, offset=0)
    firmware.start_addr = {"EIP": 0x00000101}
    firmware.write_hex_file(str(folder / "fw.hex"))
    code, _, err = _cli("image", str(SPEC), str(unit["cal"]), "-o", str(folder / "m.hex"),
                        "--merge", str(folder / "fw.hex"))
    assert code == 0, err
    merged = bincopy.BinFile(str(folder / "m.hex"))
    assert [(s.minimum_address, s.maximum_address) for s in merged.segments] == \
        [(0, 4096), (ADDRESS, ADDRESS + AREA)]
    assert merged.execution_start_address == 0x101
    assert bytes(merged[0:4096]) == bytes(range(256)) * 16
    clash = IntelHex()
    clash.frombytes(b"\x00" * 8, offset=ADDRESS + 0x70)
    clash.write_hex_file(str(folder / "clash.hex"))
    code, _, err = _cli("image", str(SPEC), str(unit["cal"]), "-o", str(folder / "c.hex"),
                        "--merge", str(folder / "clash.hex"))
    assert code == 2 and not (folder / "c.hex").exists()
    assert "data at 0x0003F870..0x0003F877 overlaps the calibration block's area" in err


def test_bin_output_is_the_area_and_inspects(unit: dict[str, Path]) -> None:
    """Source: the HEX image of the same unit (both must hold the same bytes)."""
    folder = unit["folder"]
    code, _, err = _cli("image", str(SPEC), str(unit["cal"]), "-o", str(folder / "u.bin"),
                        "--bin")
    assert code == 0, err
    assert (folder / "u.bin").read_bytes() == IntelHex(str(unit["hex"])).tobinstr(
        start=ADDRESS, size=AREA)
    code, out, _ = _cli("inspect", str(SPEC), str(folder / "u.bin"), "--json")
    assert code == 0 and json.loads(out)["serial"] == "HX-0007"


def test_block_below_64_kib_needs_no_extended_address() -> None:
    """Source: Intel HEX specification (16-bit addresses need no type 04 record) and
    bincopy reading the result."""
    text = SPEC.read_text().replace("calblock_address = 0x0003F800", "calblock_address = 0x8000")
    design = make_design(parse_spec(text, "low.toml"))
    from hosttool.formats.hexfile import block_image, hex_text

    image = hex_text(block_image(design, encode(design, design.nominal, serial="L",
                                                cal_time_utc=0)))
    assert ":02000004" not in image
    binfile = bincopy.BinFile()
    binfile.add_ihex(image)
    assert binfile.minimum_address == 0x8000


def test_inspect_refuses_an_image_without_a_block(unit: dict[str, Path]) -> None:
    """Source: the invented firmware image of the merge test holds no block."""
    folder = unit["folder"]
    code, _, err = _cli("inspect", str(SPEC), str(folder / "fw.hex"))
    assert code == 2 and "no data at 0x0003F800" in err
    (folder / "junk.hex").write_text(":10000000ZZ\n")
    code, _, err = _cli("inspect", str(SPEC), str(folder / "junk.hex"))
    assert code == 2 and "not a valid Intel HEX file" in err


# ----------------------------------------------------------------------------- damage


def _damaged(block: bytes) -> list[tuple[str, bytes]]:
    """Every single-bit flip, a truncated block, and a wrong layout version (CRC fixed)."""
    out = []
    for i in range(len(block) * 8):
        flipped = bytearray(block)
        flipped[i // 8] ^= 1 << (i % 8)
        out.append((f"bit {i}", bytes(flipped)))
    out.append(("truncated", block[:-1]))
    version = bytearray(block)
    struct.pack_into("<H", version, calblock.offsets()["layout_version"], 3)
    struct.pack_into("<I", version, BLOCK_SIZE - 4, zlib.crc32(bytes(version[:-4])))
    out.append(("version 3", bytes(version)))
    return out


def test_every_single_bit_flip_is_refused_by_the_decoder(unit: dict[str, Path]) -> None:
    """Source: CRC-32 detects every single-bit error (any CRC with more than one term);
    magic, version and length are checked before it. All 96 x 8 flips, exhaustively."""
    block, _ = _block_of(unit["cal"])
    cases = _damaged(block)
    assert len(cases) == BLOCK_SIZE * 8 + 2
    for label, data in cases:
        with pytest.raises(InputError, match="calibration block"):
            decode(data)
        assert label
    assert decode(block).serial == "HX-0007"


@pytest.mark.parametrize("kind", ["host", pytest.param("m4", marks=pytest.mark.slow)])
def test_c_loader_refuses_every_flip_and_runs_the_image_bit_exact(
        unit: dict[str, Path], tmp_path: Path, kind: str) -> None:
    """Sources: the C reference loader (firmware_stub/ht_calblock.c) on the host and on a
    Cortex-M4 under QEMU, fed the bytes intelhex reads from the tool's image; the Python
    integer model with the unit's constants. One runner invocation: every damaged block,
    then the good one, then codes."""
    require_tools(kind, run=True)
    from hosttool.firmware.run import build_runner, parse_run, runner_input

    image = IntelHex(str(unit["hex"])).tobinstr(start=ADDRESS, size=AREA)
    block, constants = _block_of(unit["cal"])
    assert image[:BLOCK_SIZE] == block
    cases = _damaged(block)
    rng = np.random.default_rng(5)
    codes = rng.integers(-(2 ** 23), 2 ** 23, 3000)
    temps = rng.integers(-2500, 5000, codes.size)
    samples = runner_input(codes, temps, calblock=image).decode()
    stdin = "".join(f"cal {data.hex()}\n" for _, data in cases) + samples
    exe = build_runner(HIVE, kind, tmp_path / "build")
    got = parse_run(cbuild.run(exe, kind, stdin.encode(), timeout_s=300.0))
    statuses = re.findall(r"calblock ([^,]+), calibrated (\d)", got.stderr)
    assert len(statuses) == len(cases) + 1
    for (label, _), (status, calibrated) in zip(cases, statuses[:-1], strict=True):
        assert calibrated == "0", f"{label} was accepted ({status})"
    assert statuses[-1] == ("ok", "1")
    expected = run_integer(HIVE.with_constants(constants), codes, temps).output
    assert np.array_equal(got.output, expected)
