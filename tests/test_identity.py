"""Format identity: calibration blocks survive spec edits that leave their meaning alone.

What is checked, and against what:
- every item of the identity moves the digest (SHA-256, hashlib), and spec edits that change a
  constant's meaning name their item, while edits outside the list (description, limits,
  filters, calibration plan, noise, name, flash address) leave the identity as it was;
- a block and a CAL.json made before a description or limit edit are accepted by `inspect`,
  `image`, the C loader on the host (gcc) and on a Cortex-M4 under QEMU, and the firmware then
  runs bit-exact with the Python model carrying the unit's constants;
- a design change that alters the meaning is refused by `render` without --force (exit 2,
  the item named), by `inspect` and `image` (the item named) and by the C loader (status
  "made for another design", uncalibrated);
- blocks of layout 1 (hosttool 0.2, bound to the spec's SHA-256) still load while the spec is
  unchanged, as the firmware of that version did.
The outside references are the C compilers and QEMU (the firmware's own verdicts), zlib.crc32
inside the block encoder, and hashlib's SHA-256.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from conftest import require_tools
from intelhex import IntelHex

from hosttool.cli import main
from hosttool.codegen.render import render_headers, replaced_blocks
from hosttool.design.identity import FormatIdentity, IdentityItem, differences
from hosttool.design.model import run_integer
from hosttool.design.resolve import Design, make_design
from hosttool.errors import InputError
from hosttool.firmware.run import build_runner, run_runner
from hosttool.formats import calblock
from hosttool.production.synthetic_lot import UnitTruth, lot_csv
from hosttool.spec.schema import parse_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
GOLDEN = Path(__file__).resolve().parent / "golden"
START = 1_741_075_200

#: Edits that leave every item of the identity alone: (example, old text, new text).
KEEPING = [
    ("hive_scale", 'description = "Beehive scale, 4 x 50 kg shear beams, 10 g steps"',
     'description = "Beehive scale, south apiary"'),
    ("hive_scale", "max_error = 0.05 ", "max_error = 0.02 "),
    ("hive_scale", "max_hysteresis = 0.05", "max_hysteresis = 0.02"),
    ("hive_scale", "points = [0.0, 50.0, 100.0, 150.0, 200.0]", "points = [0.0, 100.0, 200.0]"),
    ("hive_scale", "noise_uv_rms = 0.03", "noise_uv_rms = 0.05"),
    ("hive_scale", 'name = "hive_scale"', 'name = "hive_two"'),
    ("hive_scale", "calblock_address = 0x0003F800", "calblock_address = 0x0003F000"),
    ("hive_scale", "zero_tc_ppm_fs_per_c = 0.0 ", "zero_tc_ppm_fs_per_c = 5.0 "),
    ("hive_scale", "rated_output_mv_per_v = 2.0", "rated_output_mv_per_v = 2.1"),
    ("hive_scale", "span_tolerance_pct = 10.0", "span_tolerance_pct = 15.0"),
    ("hive_scale", "bandwidth_hz = 0.5", "bandwidth_hz = 0.3"),
    ("hive_scale", 'length = 5 }', 'length = 4 }'),
    ("hive_scale", "order = 2, cutoff_hz = 0.5", "order = 4, cutoff_hz = 0.4"),
    ("hive_scale", "voltage_v = 3.3", "voltage_v = 5.0"),
    ("fatigue_coupon", "frequency_hz = 50.0", "frequency_hz = 55.0"),
    ("fatigue_coupon", "lead_resistance_ohm = 0.8", "lead_resistance_ohm = 1.5"),
    ("fatigue_coupon", "max_error = 5.0", "max_error = 2.0"),
]

#: Edits that change what a block's integers mean, and the item each must name.
CHANGING = [
    ("hive_scale", "bits = 24", "bits = 20", "adc.bits"),
    ("hive_scale", 'pga_gain = "auto"', "pga_gain = 64", "adc.input_scale"),
    ("hive_scale", "ratiometric = true", "ratiometric = false\nreference_v = 2.5",
     "adc.input_scale"),
    ("hive_scale", "resolution = 0.01", "resolution = 0.005", "output.resolution"),
    ("hive_scale", 'unit = "kg"', 'unit = "lb"', "output.unit"),
    ("hive_scale", "reference_c = 20.0", "reference_c = 25.0", "temperature.reference_centi"),
    ("hive_scale", "min_c = -20.0", "min_c = -30.0", "temperature.clamp_centi"),
    ("hive_scale", "max_zero_tc_ppm_fs_per_c = 50.0", "max_zero_tc_ppm_fs_per_c = 200.0",
     "temperature.zero_shift"),
    ("hive_scale", "max_span_tc_ppm_per_c = 50.0", "max_span_tc_ppm_per_c = 200.0",
     "temperature.span_shift"),
    ("hive_scale", "[calibration]", '[linearisation]\nmode = "polynomial"\norder = 2\n\n'
     "[calibration]", "linearisation.form"),
    ("fatigue_coupon", "\norder = 3", "\norder = 4", "linearisation.count"),
    ("fatigue_coupon", 'mode = "bridge_inverse"', 'mode = "polynomial"', "linearisation.form"),
    ("fatigue_coupon", "resolution = 0.1 ", "resolution = 0.02 ",
     "linearisation.norm_shift"),
    ("fatigue_coupon", "bits = 24", "bits = 22", "chain.guard_bits"),
    ("fatigue_coupon", "pga_gain = 128", "pga_gain = 64", "scale.shift"),
]


def _text(name: str) -> str:
    return (EXAMPLES / f"{name}.toml").read_text(encoding="utf-8")


def _edited(name: str, old: str, new: str) -> str:
    text = _text(name)
    assert text.count(old) >= 1, old
    return text.replace(old, new, 1)


def _design(text: str, source: str = "spec.toml") -> Design:
    return make_design(parse_spec(text, source))


BASE = {n: _design(_text(n)) for n in ("hive_scale", "fatigue_coupon")}


def _items(d: Design) -> dict[str, str]:
    return calblock.format_identity(d).as_dict()


# ----------------------------------------------------------------------------- the list


def test_every_item_moves_the_identity() -> None:
    # Source: SHA-256 (hashlib) of the item text; any changed value must change the digest.
    for d in BASE.values():
        ident = calblock.format_identity(d)
        assert len(ident.digest) == 8 and ident.hex == ident.digest.hex()
        for i, item in enumerate(ident.items):
            moved = list(ident.items)
            moved[i] = IdentityItem(item.key, item.value + "0")
            assert FormatIdentity(tuple(moved)).digest != ident.digest, item.key
        assert FormatIdentity(ident.items[:-1]).digest != ident.digest


def test_the_items_are_the_documented_list() -> None:
    # Source: DEVELOPERS.md, "Format identity" (one line per item, in this order).
    text = (Path(__file__).resolve().parent.parent / "DEVELOPERS.md").read_text()
    section = text.split("## Format identity", 1)[1].split("\n## ", 1)[0]
    documented = re.findall(r"^- `([a-z_.]+)`", section, re.M)
    assert documented == list(_items(BASE["hive_scale"]))
    assert documented == list(_items(BASE["fatigue_coupon"]))


@pytest.mark.parametrize("name, old, new, item", CHANGING,
                         ids=[f"{c[0]}-{c[3]}-{i}" for i, c in enumerate(CHANGING)])
def test_an_edit_of_meaning_names_its_item(name: str, old: str, new: str, item: str) -> None:
    changed = differences(_items(BASE[name]), _items(_design(_edited(name, old, new))))
    assert any(line.startswith(item + " ") for line in changed), changed


@pytest.mark.parametrize("name, old, new", KEEPING,
                         ids=[f"{c[0]}-{i}" for i, c in enumerate(KEEPING)])
def test_an_edit_outside_the_list_keeps_the_identity(name: str, old: str, new: str) -> None:
    edited = _design(_edited(name, old, new))
    assert edited.spec.sha256 != BASE[name].spec.sha256      # the spec did change
    assert calblock.format_identity(edited).digest == calblock.format_identity(BASE[name]).digest


# ----------------------------------------------------------------------------- the block


def _unit_block(d: Design, *, layout_version: int = calblock.LAYOUT_VERSION) -> bytes:
    c = d.nominal
    unit = type(c)(offset=c.offset + 4321, scale_mul=round(c.scale_mul * 1.02), lin=c.lin,
                   tc_zero=c.tc_zero, tc_span=c.tc_span)
    return calblock.encode(d, unit, serial="HX-0009", cal_time_utc=START,
                           layout_version=layout_version)


def test_block_made_before_a_description_or_limit_edit_is_accepted() -> None:
    d = BASE["hive_scale"]
    data = _unit_block(d)
    for _, old, new in (k for k in KEEPING if k[0] == "hive_scale"):
        edited = _design(_edited("hive_scale", old, new))
        calblock.check_against(calblock.decode(data), edited, "unit.bin")


def test_block_of_another_design_is_refused_naming_the_item() -> None:
    data = _unit_block(BASE["hive_scale"])
    finer = _design(_edited("hive_scale", "resolution = 0.01", "resolution = 0.005"))
    with pytest.raises(InputError, match=r"made for another design: format identity "
                       r"[0-9a-f]{16}, this design's is [0-9a-f]{16} \(block -> this design: "
                       r"scale\.shift 43 -> 42; temperature\.zero_shift 36 -> 35\)"):
        calblock.check_against(calblock.decode(data), finer, "unit.bin")
    pounds = _design(_edited("hive_scale", 'unit = "kg"', 'unit = "lb"'))
    with pytest.raises(InputError, match=r"the items the block carries agree, so one it holds "
                       r"only in the hash differs: adc\.bits, .*output\.unit"):
        calblock.check_against(calblock.decode(data), pounds, "unit.bin")


def test_layout_1_blocks_are_bound_to_the_spec_text() -> None:
    # hosttool 0.2 wrote the spec hash where layout 2 has the format identity.
    d = BASE["hive_scale"]
    old = _unit_block(d, layout_version=1)
    assert calblock.decode(old).layout_version == 1
    calblock.check_against(calblock.decode(old), d, "old.bin")
    edited = _design(_edited(*KEEPING[0]))
    with pytest.raises(InputError, match="layout-1 block bound to spec hash"):
        calblock.check_against(calblock.decode(old), edited, "old.bin")


# ----------------------------------------------------------------------------- commands


def _cli(*args: str) -> tuple[int, str, str]:
    result = CliRunner().invoke(main, list(args))
    return result.exit_code, result.stdout, result.stderr


@pytest.fixture(scope="module")
def unit(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """A unit calibrated and imaged with the example spec, and specs edited after it."""
    folder = tmp_path_factory.mktemp("identity")
    spec = folder / "hive_scale.toml"
    spec.write_text(_text("hive_scale"))
    (folder / "r.csv").write_text(lot_csv(BASE["hive_scale"], [UnitTruth(
        "HX-0011", zero_mv_per_v=0.03, span_error_pct=0.8, zero_tc_ppm_fs_per_c=4,
        span_tc_ppm_per_c=-6)], seed=5, start_utc=START))
    code, _, err = _cli("calibrate", str(spec), str(folder / "r.csv"), "--serial", "HX-0011",
                        "-o", str(folder / "cal.json"))
    assert code == 0, err
    code, _, err = _cli("image", str(spec), str(folder / "cal.json"), "-o",
                        str(folder / "unit.hex"))
    assert code == 0, err
    paths = {"folder": folder, "spec": spec, "cal": folder / "cal.json",
             "hex": folder / "unit.hex"}
    for key, (old, new) in {
            "described": KEEPING[0][1:3], "limited": KEEPING[1][1:3],
            "finer": ("resolution = 0.01", "resolution = 0.005"),
            "pounds": ('unit = "kg"', 'unit = "lb"')}.items():
        paths[key] = folder / f"{key}.toml"
        paths[key].write_text(_edited("hive_scale", old, new))
    return paths


def test_cal_json_carries_the_identity(unit: dict[str, Path]) -> None:
    data = json.loads(unit["cal"].read_text())
    ident = calblock.format_identity(BASE["hive_scale"])
    assert data["identity"] == {"format_id": ident.hex, "items": ident.as_dict()}


@pytest.mark.parametrize("edit", ["described", "limited"])
def test_inspect_and_image_accept_the_unit_after_the_edit(unit: dict[str, Path],
                                                          edit: str) -> None:
    code, out, err = _cli("inspect", str(unit[edit]), str(unit["hex"]))
    assert code == 0, err
    ident = calblock.format_identity(_design(unit[edit].read_text()))
    assert f"format identity  {ident.hex} (matches hive_scale)" in out
    again = unit["folder"] / f"again-{edit}.hex"
    code, _, err = _cli("image", str(unit[edit]), str(unit["cal"]), "-o", str(again))
    assert code == 0, err
    assert again.read_bytes() == unit["hex"].read_bytes()


def test_inspect_and_image_name_the_item_of_another_design(unit: dict[str, Path]) -> None:
    code, _, err = _cli("inspect", str(unit["finer"]), str(unit["hex"]))
    assert code == 2 and "made for another design" in err and "scale.shift 43 -> 42" in err
    code, _, err = _cli("image", str(unit["finer"]), str(unit["cal"]), "-o",
                        str(unit["folder"] / "x.hex"))
    assert code == 2 and "identity: made for spec 'hive_scale', another design" in err
    assert "output.resolution 0.01 -> 0.005" in err
    code, _, err = _cli("image", str(unit["pounds"]), str(unit["cal"]), "-o",
                        str(unit["folder"] / "x.hex"))
    assert code == 2 and "(output.unit kg -> lb)" in err
    assert not (unit["folder"] / "x.hex").exists()


def test_render_says_blocks_stay_valid_after_a_description_edit(unit: dict[str, Path],
                                                                tmp_path: Path) -> None:
    code, out, err = _cli("render", str(unit["spec"]), "-o", str(tmp_path))
    assert code == 0, err
    assert "calibration blocks" not in out               # nothing replaced yet
    code, out, err = _cli("render", str(unit["described"]), "-o", str(tmp_path))
    assert code == 0, err
    ident = calblock.format_identity(BASE["hive_scale"]).hex
    assert out.splitlines()[-1] == ("calibration blocks made for the replaced headers stay "
                                    f"valid (format identity {ident} unchanged)")


def test_render_refuses_a_change_of_meaning_without_force(unit: dict[str, Path],
                                                          tmp_path: Path) -> None:
    assert _cli("render", str(unit["spec"]), "-o", str(tmp_path))[0] == 0
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    code, out, err = _cli("render", str(unit["finer"]), "-o", str(tmp_path))
    assert code == 2, out
    assert err.count("\n") == 1 and "would be refused: their meaning changes" in err
    assert "output.resolution 0.01 -> 0.005" in err and "use --force" in err
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir()} == before   # nothing written
    code, out, err = _cli("render", str(unit["finer"]), "-o", str(tmp_path), "--force")
    assert code == 0, err
    assert "would be refused" in out.splitlines()[-1]


def test_render_over_headers_of_layout_1() -> None:
    # tests/golden/v0.1.0 holds headers that bind blocks to the spec's SHA-256.
    old = (GOLDEN / "v0.1.0" / "hive_scale_calblock.h").read_text()
    old_sha = re.search(r"sha256 ([0-9a-f]{64})", old)
    assert old_sha is not None
    d = BASE["hive_scale"]
    verdict = replaced_blocks(old, d)
    assert verdict is not None
    assert verdict.valid == (old_sha.group(1) == d.spec.sha256)
    same = old.replace(old_sha.group(1), d.spec.sha256)
    kept = replaced_blocks(same, d)
    assert kept is not None and kept.valid and "layout 1" in kept.line
    other = replaced_blocks(old.replace(old_sha.group(1), "0" * 64), d)
    assert other is not None and not other.valid and "spec changed" in other.line
    current = replaced_blocks(render_headers(d)[1].text, d)
    assert current is not None and current.valid and "unchanged" in current.line


# ----------------------------------------------------------------------------- firmware


def _firmware_cases(unit: dict[str, Path]) -> list[tuple[str, Design, bytes, str]]:
    """(label, design the firmware is built for, block, loader status expected)."""
    d = BASE["hive_scale"]
    # intelhex, an outside reader of the tool's image
    image = IntelHex(str(unit["hex"])).tobinstr(start=0x0003F800, size=calblock.BLOCK_SIZE)
    described = _design(unit["described"].read_text())
    limited = _design(unit["limited"].read_text())
    finer = _design(unit["finer"].read_text())
    pounds = _design(unit["pounds"].read_text())
    v1 = _unit_block(d, layout_version=1)
    return [
        ("description edit", described, image, "ok"),
        ("limit edit", limited, image, "ok"),
        ("finer output step", finer, image, "made for another design"),
        ("other unit", pounds, image, "made for another design"),
        ("layout 1, same spec", d, v1, "ok"),
        ("layout 1, description edit", described, v1, "made for another spec"),
    ]


@pytest.mark.parametrize("kind", ["host", pytest.param("m4", marks=pytest.mark.slow)])
def test_firmware_loads_old_blocks_after_an_edit(unit: dict[str, Path], tmp_path: Path,
                                                 kind: str) -> None:
    require_tools(kind, run=True)
    rng = np.random.default_rng(12)
    codes = rng.integers(-(1 << 22), 1 << 22, 200)
    temps = rng.integers(-1500, 4000, codes.size)
    built: dict[str, Path] = {}
    for label, d, data, status in _firmware_cases(unit):
        key = d.spec.sha256
        if key not in built:
            built[key] = build_runner(d, kind, tmp_path / f"b{len(built)}")
        got = run_runner(built[key], kind, codes, temps, calblock=data, timeout_s=300.0)
        calibrated = 1 if status == "ok" else 0
        assert f"calblock {status}, calibrated {calibrated}" in got.stderr, label
        constants = calblock.decode(data).constants if status == "ok" else d.nominal
        expected = run_integer(d.with_constants(constants), codes, temps)
        assert np.array_equal(got.output, expected.output), label
        # the status word of every output says whether the unit runs calibrated
        assert np.array_equal(got.status, expected.status(calibrated=status == "ok")), label
