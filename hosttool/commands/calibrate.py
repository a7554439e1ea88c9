"""``hosttool calibrate``: one unit from a readings file to CAL.json; one call for the CLI."""


from __future__ import annotations

import json
from collections.abc import Sequence
from pathlib import Path

from hosttool.design.cached import cached_design
from hosttool.design.resolve import LIN_FRAC, Design, UnitConstants
from hosttool.errors import InputError
from hosttool.formats.readings import load_readings, unit_cal_time
from hosttool.production.fit import (
    CalibrationContext,
    UnitCalibration,
    calibrate_unit,
    calibration_json,
)
from hosttool.spec.schema import load_spec
from hosttool.util.atomic import write_atomic
from hosttool.util.cautions import SAFETY
from hosttool.util.utctime import format_time_utc, parse_time_utc


def columns(rows: Sequence[Sequence[str]], right: Sequence[bool]) -> list[str]:
    """Rows of cells aligned in columns (``right``: right-align that column)."""
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    return ["  " + "  ".join(cell.rjust(w) if r else cell.ljust(w)
                             for cell, w, r in zip(row, widths, right, strict=True)).rstrip()
            for row in rows]


def _g(value: float | None, digits: int = 4) -> str:
    return "-" if value is None else f"{value:.{digits}g}"


def unit_constant_rows(design: Design, c: UnitConstants) -> list[tuple[str, int, str]]:
    """(name, integer, real value with unit) of every per-unit constant."""
    spec = design.spec
    unit = spec.sensor.unit
    g = design.guard_bits
    lsb_v = design.budget.converter(spec.adc.bits).lsb_v
    zero = c.offset / 2 ** g
    realised = design.scale.realised(c.scale_mul)
    rows = [("offset", c.offset, f"{zero:.3f} counts = "
                                 f"{zero * lsb_v / spec.excitation.voltage_v * 1e3:.6f} mV/V"),
            ("scale_mul", c.scale_mul, f"M / 2^{design.scale.shift} = {realised:.9g} output "
                                       "LSB per chain word"
             + (f" = {1 / (realised * 2 ** g * spec.output.resolution):.6g} counts/{unit}"
                if c.scale_mul else ""))]
    for k, value in enumerate(c.lin):
        rows.append((f"lin[{k}]", value, f"{value / 2 ** LIN_FRAC:.10g} (Q1.{LIN_FRAC})"))
    tc = design.temperature
    if tc is not None:
        fs_lsb = spec.sensor.full_scale / spec.output.resolution
        alpha = tc.realised_zero(c.tc_zero)
        gamma = tc.realised_span(c.tc_span)
        rows.append(("tc_zero", c.tc_zero, f"{alpha:.6g} LSB per 0.01 C = "
                                           f"{alpha * 100 / fs_lsb * 1e6:.4g} ppm FS/C removed"))
        rows.append(("tc_span", c.tc_span, f"{gamma:.6g} per 0.01 C = "
                                           f"{-gamma * 100 * 1e6:.4g} ppm/C of span removed"))
    return rows


def calibration_text(result: UnitCalibration, design: Design, *, readings: str) -> str:
    """The pass/fail table, the constants and the readings of one unit."""
    spec = design.spec
    unit = spec.sensor.unit
    lines = [f"{spec.name}: calibration of unit {result.serial} ({readings}, "
             f"{len(result.points)} readings, calibrated {format_time_utc(result.cal_time_utc)})",
             "", "Criteria", "--------"]
    rows: list[tuple[str, ...]] = [("criterion", "measured", "limit", "", "limit from")]
    for c in result.criteria:
        mark = "info" if c.limit is None else ("pass" if c.passed else "FAIL")
        rows.append((c.label, "-" if c.value is None else f"{_g(c.value)} {c.unit}".rstrip(),
                     "-" if c.limit is None else f"{c.limit:.4g} {c.unit}".rstrip(), mark,
                     c.source))
    lines += columns(rows, (False, True, True, False, False))
    if not result.formats_ok:
        lines.append(f"  FAIL  {result.formats_reason}")
    rounding = {r.constant: r for r in result.rounding}
    lines += ["", "Constants (integers in the design's formats)", "-" * 44]
    rows = [("constant", "integer", "real value", "rounding adds")]
    for name, value, real in unit_constant_rows(design, result.constants):
        adds = rounding[name].adds if name in rounding else None
        rows.append((name, str(value), real, f"{_g(adds, 3)} {unit}"))
    lines += columns(rows, (False, True, False, True))
    lines += ["", f"Readings through the firmware's integer path ({unit})", "-" * 48]
    rows = [("line", "reference", "temp C", "dir", "output", "error", "linearity")]
    for p in result.points:
        rows.append((str(p.line), f"{p.reference:g}", f"{p.temperature_c:.2f}",
                     "up" if p.up else "down", _g(p.output, 8), _g(p.error, 3),
                     f"{p.linearity:.3g}"))
    lines += columns(rows, (True, True, True, False, True, True, True))
    lines.append("")
    if result.passed:
        lines.append(f"verdict: PASS (unit {result.serial})")
    else:
        lines.append(f"verdict: FAIL (unit {result.serial})")
        lines += [f"  - {reason}" for reason in result.reasons]
    lines += [""] + [f"caution: {text}" for text in SAFETY]
    return "\n".join(lines) + "\n"


def result_json(result: UnitCalibration, out: Path) -> dict[str, object]:
    """The object ``calibrate --json`` prints: the shape of one unit of ``batch --json``
    (no image or revision: calibrate records nothing), and the CAL.json written."""
    return {"serial": result.serial, "verdict": result.verdict, "image": None,
            "revision": None, "reasons": list(result.reasons), "calibration": str(out)}


def cal_time_option(text: str | None) -> int | None:
    """The --cal-time option (ISO 8601 UTC) in seconds since 1970, or None."""
    return None if text is None else parse_time_utc(text, "--cal-time")


def run_calibrate(spec_path: Path, readings_path: Path, *, serial: str, out: Path,
                  cal_time: str | None) -> tuple[UnitCalibration, str]:
    """Calibrate ``serial`` from the readings, write CAL.json to ``out`` (also for a unit
    that fails its limits: the figures are the record); return the result and its text."""
    override = cal_time_option(cal_time)
    design = cached_design(load_spec(spec_path))
    ctx = CalibrationContext.of(design)
    readings = load_readings(readings_path, design.spec)
    unit = readings.units.get(serial.strip())
    if unit is None:
        known = list(readings.units)
        shown = ", ".join(known[:5]) + (" ..." if len(known) > 5 else "")
        raise InputError(f"{readings_path}: serial: no readings for {serial!r} (the file has "
                         f"{len(known)} serials: {shown})")
    result = calibrate_unit(ctx, unit, cal_time_utc=unit_cal_time(unit, override))
    data = calibration_json(result, design, readings_file=readings_path.name,
                            readings_sha256=readings.sha256)
    write_atomic(out, json.dumps(data, indent=2) + "\n")
    text = calibration_text(result, design, readings=readings_path.name)
    return result, text + f"wrote {out}\n"
