"""``batch.prepare_units`` gives exactly the record the straightforward route gives.

prepare_units is the per-unit work of a lot, written for speed (templated JSON texts, its
own Intel HEX writer, the block's design part made once, the constants checked without
building a Design per unit, units calibrated side by side). Every field it returns is
compared here, byte for byte, with the route it replaced, on small invented lots of every
linearisation mode, with and without temperature compensation, with an OIML class, and with
units that fail their limits or whose constants leave their formats. Sources:
``json.dumps`` of the row's objects, intelhex's ``write_hex_file`` of the padded block,
``calblock.decode`` and a fresh format identity for the block, ``Design.with_constants``
and the static path of that Design for outputs and verdicts, numpy reductions for the
figures.
"""

from __future__ import annotations

import io
import json
import re
from pathlib import Path

import numpy as np
import pytest
from intelhex import IntelHex

from hosttool.design.model import static_integer
from hosttool.design.resolve import Design, UnitConstants, make_design
from hosttool.errors import DesignError
from hosttool.formats.calblock import decode, format_identity
from hosttool.formats.caljson import constants_json
from hosttool.formats.readings import parse_readings, unit_cal_time
from hosttool.physics.oiml import mpe_intervals
from hosttool.production.batch import prepare_units
from hosttool.production.fit import CalibrationContext, calibrate_unit, point_limits
from hosttool.production.synthetic_lot import UnitTruth, lot_csv, random_truth
from hosttool.spec.schema import parse_spec
from hosttool.util.utctime import format_time_utc

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
HIVE = (EXAMPLES / "hive_scale.toml").read_text()
COUPON = (EXAMPLES / "fatigue_coupon.toml").read_text()
POLYNOMIAL = '[linearisation]\nmode = "polynomial"\norder = 3\n\n'
START = 1_741_075_200

VARIANTS = {
    # none + temperature
    "hive_scale": HIVE,
    # bridge_inverse, no temperature
    "fatigue_coupon": COUPON,
    # polynomial + temperature + OIML class
    "hive_polynomial_oiml": HIVE.replace("[calibration]", POLYNOMIAL + "[calibration]")
    .replace("resolution = 0.01 ", "resolution = 0.02 ")
    .replace("max_error = 0.05", 'oiml_class = "III"'),
    # none, no temperature
    "hive_no_temperature": re.sub(r"\[temperature\].*?(?=\[calibration\])", "", HIVE,
                                  flags=re.S),
    # polynomial, no temperature (one unit's coefficients leave Q1.30)
    "coupon_polynomial": COUPON.replace('mode = "bridge_inverse"', 'mode = "polynomial"'),
}

#: Units that fail: span beyond its tolerance, a bow, hysteresis, temperature coefficients
#: beyond their format, noise, zero offset, a span multiplier beyond its format.
FAILING = [UnitTruth("F1", span_error_pct=30.0), UnitTruth("F2", bow_pct_fs=0.3),
           UnitTruth("F3", hysteresis_pct_fs=0.2),
           UnitTruth("F4", zero_tc_ppm_fs_per_c=200.0, span_tc_ppm_per_c=-300.0),
           UnitTruth("F5", noise_factor=3.0), UnitTruth("F6", zero_mv_per_v=0.5),
           UnitTruth("F8", span_error_pct=-9.9, bow_pct_fs=-0.1)]


def _old_route(ctx: CalibrationContext, design: Design, unit) -> dict[str, object]:
    """Every field of the unit's Prepared, made the way prepare made them before."""
    cal_time = unit_cal_time(unit, None)
    result = calibrate_unit(ctx, unit, cal_time_utc=cal_time)
    image = None
    if result.passed:
        block = ctx.block.encode(result.constants, serial=unit.serial, cal_time_utc=cal_time)
        address, size = design.spec.target.calblock_address, design.spec.target.calblock_size
        reference = IntelHex()
        reference.frombytes(block + b"\xff" * (size - len(block)), offset=address)
        text = io.StringIO()
        reference.write_hex_file(text, write_start_addr=True, byte_count=16)
        image = text.getvalue().encode("ascii")
    limits = point_limits(ctx, unit.reference)
    return {
        "serial": unit.serial, "refused": "", "verdict": result.verdict,
        "reasons": result.reasons, "cal_time_utc": format_time_utc(cal_time),
        "constants": json.dumps(constants_json(result.constants), sort_keys=True,
                                separators=(",", ":")),
        "figures": json.dumps(result.figures, sort_keys=True), "image": image,
        "criteria": json.dumps([{"key": c.key, "label": c.label, "value": c.value,
                                 "limit": c.limit, "unit": c.unit, "source": c.source,
                                 "pass": c.passed} for c in result.criteria]),
        "points": json.dumps([{"line": p.line, "reference": p.reference,
                               "temperature_c": p.temperature_c,
                               "direction": "up" if p.up else "down", "output": p.output,
                               "error": p.error,
                               "limit": None if limits[i] == float("inf")
                               else float(limits[i])}
                              for i, p in enumerate(result.points)]),
        "readings": json.dumps([{"line": int(unit.lines[i]),
                                 "reference": float(unit.reference[i]),
                                 "temperature_c": float(unit.temperature_c[i]),
                                 "raw_mean_counts": float(unit.raw_mean[i]),
                                 "raw_std_counts": float(unit.raw_std[i]),
                                 "samples": int(unit.samples[i]),
                                 "direction": "up" if unit.up[i] else "down"}
                                for i in range(unit.reference.size)]),
        "standards": "[]",
    }


def _check_result(ctx: CalibrationContext, design: Design, unit) -> bool:
    """The unit's verdict inputs against the unit's own Design and numpy's reductions;
    True when its constants are inside their formats."""
    result = calibrate_unit(ctx, unit, cal_time_utc=START)
    try:
        unit_design = design.with_constants(result.constants)
    except DesignError as exc:
        assert not result.formats_ok
        assert result.formats_reason == str(exc).split(": ", 1)[-1]
        assert result.output is None
        return False
    assert result.formats_ok
    codes = np.rint(unit.raw_mean).astype(np.int64)
    temps = np.rint(unit.temperature_c * 100).astype(np.int64)
    output = static_integer(unit_design, codes, temps).output * ctx.resolution
    assert np.array_equal(result.output, output)
    error = output - unit.reference
    f = result.figures
    assert f["max_error"] == float(np.max(np.abs(error)))
    # division by |b| is monotonic: the largest residual over |b| is the largest linearity
    assert f["nonlinearity"] == float(np.max(np.abs(result.linearity)))
    assert f["noise_ratio"] == float(unit.raw_std.max()) / ctx.noise_counts
    oiml = design.spec.calibration.oiml_class
    if oiml is not None:
        mpe = np.array([mpe_intervals(oiml, r / ctx.resolution) for r in unit.reference])
        row = next(c for c in result.criteria if c.key == "oiml_mpe_ratio")
        assert row.value == float(np.max(np.abs(error) / (mpe * ctx.resolution)))
    return True


@pytest.mark.parametrize("variant", list(VARIANTS))
def test_prepare_gives_the_record_of_the_straightforward_route(variant: str) -> None:
    """Sources: json.dumps, intelhex, calblock.decode, Design.with_constants, numpy."""
    design = make_design(parse_spec(VARIANTS[variant], f"{variant}.toml"))
    ctx = CalibrationContext.of(design)
    rng = np.random.default_rng(11)
    truths = [random_truth(f"U{i}", rng) for i in range(4)] + FAILING
    readings = parse_readings(lot_csv(design, truths, seed=5, start_utc=START), design.spec,
                              "lot.csv")
    verdicts, outside = set(), 0
    for serial, unit in readings.units.items():
        prepared = prepare_units(ctx, [unit], None)[0]
        assert prepared._asdict() == {**_old_route(ctx, design, unit), "staged": None}, serial
        outside += not _check_result(ctx, design, unit)
        verdicts.add(prepared.verdict)
        if prepared.image is not None:
            block = decode(IntelHex(io.StringIO(prepared.image.decode())).tobinstr(
                start=design.spec.target.calblock_address, size=96))
            assert block.binding == format_identity(design).digest
            assert (block.serial, block.cal_time_utc) == (serial, unit_cal_time(unit, None))
            assert block.constants == calibrate_unit(ctx, unit, cal_time_utc=START).constants
    assert verdicts == {"pass", "fail"}
    assert outside >= 1, "no unit exercised constants outside their formats"


def _edits(design: Design) -> list[tuple[str, UnitConstants]]:
    c = design.constants
    return [
        ("nominal", c),
        ("offset beyond the ADC", UnitConstants(1 << 40, c.scale_mul, c.lin, c.tc_zero,
                                                c.tc_span)),
        ("span multiplier beyond its limit",
         UnitConstants(c.offset, design.scale.multiplier_limit + 1, c.lin, c.tc_zero,
                       c.tc_span)),
        ("span multiplier at its limit",
         UnitConstants(c.offset, -design.scale.multiplier_limit, c.lin, c.tc_zero,
                       c.tc_span)),
        ("one coefficient too many", UnitConstants(c.offset, c.scale_mul, (*c.lin, 0),
                                                   c.tc_zero, c.tc_span)),
        ("temperature coefficients at the int32 edge",
         UnitConstants(c.offset, c.scale_mul, c.lin, 2 ** 31 - 1, -(2 ** 31 - 1))),
        ("a temperature coefficient beyond int32",
         UnitConstants(c.offset, c.scale_mul, c.lin, 2 ** 31, 0)),
    ]


@pytest.mark.parametrize("variant", ["hive_scale", "fatigue_coupon", "hive_polynomial_oiml"])
def test_check_in_force_refuses_what_with_constants_refuses(variant: str) -> None:
    """Source: Design.with_constants, the check prepare no longer runs per unit: the same
    constants accepted, the same refused with the same message."""
    design = make_design(parse_spec(VARIANTS[variant], f"{variant}.toml"))
    for label, constants in _edits(design):
        try:
            design.with_constants(constants)
        except DesignError as exc:
            with pytest.raises(DesignError) as caught:
                design.check_in_force(constants)
            assert str(caught.value) == str(exc), label
        else:
            design.check_in_force(constants)
