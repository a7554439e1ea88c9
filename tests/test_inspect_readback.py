"""``inspect`` on a full-flash readback: the block found at the spec's address (HEX, or .bin
with --base) or at --address, and its flags decoded by name.

Sources: bincopy (an Intel HEX library independent of ours) builds the readbacks from the
unit's image, with invented firmware bytes around it; the block's bytes are read back with
bincopy too, and the flags byte's bits are named after the layout table of the block
(bit 0 linearisation, bit 1 temperature: docs of formats/calblock.py)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import bincopy
import numpy as np
import pytest
from test_production import ADDRESS, AREA, SPEC, _lot, _truths


def _tool(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "hosttool", *args], capture_output=True,
                          text=True, timeout=300, check=False)


@pytest.fixture(scope="module")
def image(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("readback")
    lot = _lot(folder / "lot.csv", _truths(1))
    assert _tool("calibrate", str(SPEC), str(lot), "--serial", "HV0000", "-o",
                 str(folder / "cal.json")).returncode == 0
    hex_path = folder / "unit.hex"
    assert _tool("image", str(SPEC), str(folder / "cal.json"), "-o",
                 str(hex_path)).returncode == 0
    return hex_path


def _flash(image: Path) -> bincopy.BinFile:
    """The unit's block with 8 KiB of invented firmware at 0 and a table at 0x30000."""
    flash = bincopy.BinFile(str(image))
    rng = np.random.default_rng(4)
    flash.add_binary(rng.integers(0, 256, 8192, dtype=np.uint8).tobytes(), address=0)
    flash.add_binary(b"\x5a" * 512, address=0x30000)
    return flash


def test_block_found_in_a_full_flash_hex_and_bin_readback(image: Path, tmp_path: Path) -> None:
    flash = _flash(image)
    whole = tmp_path / "readback.hex"
    whole.write_text(flash.as_ihex())
    from_hex = _tool("inspect", str(SPEC), str(whole), "--json")
    assert from_hex.returncode == 0, from_hex.stderr
    alone = json.loads(_tool("inspect", str(SPEC), str(image), "--json").stdout)
    data = json.loads(from_hex.stdout)
    assert data["constants"] == alone["constants"] and data["serial"] == "HV0000"
    flags = data["flags"]
    assert flags == alone["flags"]
    assert "temperature" in data["flag_names"]             # the spec has a [temperature] table
    assert data["flag_names"] == [name for bit, name in ((0, "linearisation"),
                                                          (1, "temperature"))
                                  if flags >> bit & 1]
    assert f"0x{flags:02X} ({', '.join(data['flag_names'])})" in _tool(
        "inspect", str(SPEC), str(whole)).stdout
    raw = tmp_path / "readback.bin"
    raw.write_bytes(flash.as_binary(minimum_address=0, padding=b"\xff"))
    from_bin = _tool("inspect", str(SPEC), str(raw), "--base", "0", "--json")
    assert from_bin.returncode == 0, from_bin.stderr
    assert json.loads(from_bin.stdout)["constants"] == alone["constants"]
    no_base = _tool("inspect", str(SPEC), str(raw))
    assert no_base.returncode == 2 and "--base" in no_base.stderr
    far = _tool("inspect", str(SPEC), str(raw), "--base", "0x08000000")
    assert far.returncode == 2 and "lies outside this readback" in far.stderr


def test_block_at_another_address(image: Path, tmp_path: Path) -> None:
    block = bincopy.BinFile(str(image))[ADDRESS:ADDRESS + AREA]
    moved = bincopy.BinFile()
    moved.add_binary(b"\x00" * 64, address=0)
    moved.add_binary(block, address=0x20000)
    path = tmp_path / "moved.hex"
    path.write_text(moved.as_ihex())
    missing = _tool("inspect", str(SPEC), str(path))
    assert missing.returncode == 2 and "0x0003F800" in missing.stderr
    found = _tool("inspect", str(SPEC), str(path), "--address", "0x20000", "--json")
    assert found.returncode == 0, found.stderr
    data = json.loads(found.stdout)
    assert data["address"] == "0x00020000" and data["serial"] == "HV0000"
    bad = _tool("inspect", str(SPEC), str(path), "--address", "0xZZ")
    assert bad.returncode == 2 and "--address: '0xZZ' is not an address" in bad.stderr
