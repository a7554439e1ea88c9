"""``hosttool calibrate``: one unit from a readings file to CAL.json; one call for the CLI."""

from __future__ import annotations

import json
from pathlib import Path

from hosttool.commands.calibrate_table import calibration_text
from hosttool.design.resolve import make_design
from hosttool.errors import InputError
from hosttool.formats.caljson import calibration_json
from hosttool.formats.readings import load_readings, parse_time_utc, unit_cal_time
from hosttool.production.fit import Context, UnitCalibration, calibrate_unit
from hosttool.spec.schema import load_spec
from hosttool.util.atomic import write_atomic


def cal_time_option(text: str | None) -> int | None:
    """The --cal-time option (ISO 8601 UTC) in seconds since 1970, or None."""
    return None if text is None else parse_time_utc(text, "--cal-time")


def run_calibrate(spec_path: Path, readings_path: Path, *, serial: str, out: Path,
                  cal_time: str | None) -> tuple[UnitCalibration, str]:
    """Calibrate ``serial`` from the readings, write CAL.json to ``out`` (also for a unit
    that fails its limits: the figures are the record); return the result and its text."""
    override = cal_time_option(cal_time)
    design = make_design(load_spec(spec_path))
    ctx = Context.of(design)
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
